//! Hand-written SVG charts: plain strings, every text escaped, every axis labelled with its
//! unit. No scripts, no external fonts or images: the output is inlined into report.html.
//!
//! Colours are constants so tests can find the drawn strokes in a screenshot.

use std::fmt::Write as _;

/// Level lines of the energy diagram (electronic energies).
pub const LEVEL_COLOUR: &str = "#1d5fa8";
/// Gibbs-energy levels in the energy diagram.
pub const GIBBS_COLOUR: &str = "#c2410c";
/// The IRC profile.
pub const IRC_COLOUR: &str = "#0f8a6c";
/// The band's last iteration (earlier iterations are lighter shades of it).
pub const BAND_COLOUR: &str = "#7c3aed";
/// Bars of the barrier chart.
pub const BAR_COLOUR: &str = "#2f7fc1";
/// Axes and tick labels.
pub const AXIS_COLOUR: &str = "#4b5563";
/// Label text.
pub const INK: &str = "#1f2937";

/// Escape text for XML/HTML (element content and attribute values).
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

/// A number for a label: up to `digits` decimals, no trailing zeros, "−" for minus.
pub fn num(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "n/a".into();
    }
    let mut s = format!("{x:.digits$}");
    if s.contains('.') {
        while s.ends_with('0') {
            s.pop();
        }
        if s.ends_with('.') {
            s.pop();
        }
    }
    if s == "-0" {
        s = "0".into();
    }
    s.replace('-', "−")
}

/// "Nice" tick values covering [lo, hi] (about `n` of them).
pub fn ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite()) {
        return vec![];
    }
    let (lo, hi) = if hi > lo {
        (lo, hi)
    } else {
        (lo - 1.0, lo + 1.0)
    };
    let raw = (hi - lo) / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let mut v = Vec::new();
    let mut t = (lo / step).ceil() * step;
    while t <= hi + step * 1e-9 && v.len() < 50 {
        v.push(if t.abs() < step * 1e-9 { 0.0 } else { t });
        t += step;
    }
    v
}

fn decimals_for(ticks: &[f64]) -> usize {
    if ticks.len() < 2 {
        return 2;
    }
    let step = (ticks[1] - ticks[0]).abs();
    if step >= 1.0 {
        0
    } else {
        (-step.log10()).ceil() as usize + 1
    }
}

/// A plot area with linear axes.
struct Frame {
    w: f64,
    h: f64,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
}

impl Frame {
    fn px(&self, x: f64) -> f64 {
        self.left + (x - self.x0) / (self.x1 - self.x0) * (self.w - self.left - self.right)
    }
    fn py(&self, y: f64) -> f64 {
        self.h
            - self.bottom
            - (y - self.y0) / (self.y1 - self.y0) * (self.h - self.top - self.bottom)
    }
}

fn padded(lo: f64, hi: f64, frac: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    if (hi - lo).abs() < 1e-12 {
        return (lo - 1.0, hi + 1.0);
    }
    let p = (hi - lo) * frac;
    (lo - p, hi + p)
}

fn open(s: &mut String, w: f64, h: f64, title: &str, class: &str) {
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="{}" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="{}"><title>{}</title>"#,
        esc(class),
        esc(title),
        esc(title)
    );
}

/// Axes with ticks and labels (units in the labels).
fn axes(s: &mut String, f: &Frame, x_label: &str, y_label: &str, x_ticks: bool) {
    let (l, r, t, b) = (f.left, f.w - f.right, f.top, f.h - f.bottom);
    let _ = write!(
        s,
        r#"<g stroke="{AXIS_COLOUR}" stroke-width="1" fill="none"><line x1="{l}" y1="{b}" x2="{r}" y2="{b}"/><line x1="{l}" y1="{t}" x2="{l}" y2="{b}"/></g>"#
    );
    let yt = ticks(f.y0, f.y1, 5);
    let yd = decimals_for(&yt);
    for v in &yt {
        let y = f.py(*v);
        let _ = write!(
            s,
            r##"<line x1="{l}" y1="{y:.1}" x2="{r}" y2="{y:.1}" stroke="#e5e7eb" stroke-width="1"/><text x="{:.1}" y="{:.1}" text-anchor="end" font-size="11" fill="{AXIS_COLOUR}">{}</text>"##,
            l - 6.0,
            y + 4.0,
            esc(&num(*v, yd))
        );
    }
    if x_ticks {
        let xt = ticks(f.x0, f.x1, 6);
        let xd = decimals_for(&xt);
        for v in &xt {
            let x = f.px(*v);
            let _ = write!(
                s,
                r#"<line x1="{x:.1}" y1="{b}" x2="{x:.1}" y2="{:.1}" stroke="{AXIS_COLOUR}"/><text x="{x:.1}" y="{:.1}" text-anchor="middle" font-size="11" fill="{AXIS_COLOUR}">{}</text>"#,
                b + 4.0,
                b + 17.0,
                esc(&num(*v, xd))
            );
        }
    }
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="12" fill="{INK}">{}</text>"#,
        (l + r) / 2.0,
        f.h - 6.0,
        esc(x_label)
    );
    let _ = write!(
        s,
        r#"<text transform="translate(14 {:.1}) rotate(-90)" text-anchor="middle" font-size="12" fill="{INK}">{}</text>"#,
        (t + b) / 2.0,
        esc(y_label)
    );
}

/// One level of the energy diagram.
#[derive(Debug, Clone)]
pub struct Level {
    pub label: String,
    pub value: f64,
}

/// Energy diagram: reactant, saddle and product as short horizontal lines joined by dashed
/// lines, for one or two series (e.g. electronic energy and Gibbs energy), values written on the
/// levels. `series`: (name, colour, [reactant, saddle, product]).
pub fn energy_diagram(series: &[(String, &str, [f64; 3])], unit: &str, title: &str) -> String {
    let (w, h) = (520.0, 300.0);
    let all: Vec<f64> = series
        .iter()
        .flat_map(|(_, _, v)| v.iter().copied())
        .filter(|v| v.is_finite())
        .collect();
    let lo = all.iter().copied().fold(0.0_f64, f64::min);
    let hi = all.iter().copied().fold(0.0_f64, f64::max);
    let (y0, y1) = padded(lo, hi, 0.15);
    let f = Frame {
        w,
        h,
        left: 62.0,
        right: 16.0,
        top: 16.0,
        bottom: 44.0,
        x0: 0.0,
        x1: 3.0,
        y0,
        y1,
    };
    let mut s = String::new();
    open(&mut s, w, h, title, "chart energy-diagram");
    axes(&mut s, &f, "", &format!("relative energy ({unit})"), false);
    let names = ["reactant", "saddle", "product"];
    for (k, n) in names.iter().enumerate() {
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="12" fill="{INK}">{}</text>"#,
            f.px(k as f64 + 0.5),
            h - 26.0,
            n
        );
    }
    let ns = series.len().max(1) as f64;
    for (j, (name, colour, v)) in series.iter().enumerate() {
        // Offset each series a little so labels do not overlap.
        let shift = (j as f64 - (ns - 1.0) / 2.0) * 0.08;
        let mut prev: Option<(f64, f64)> = None;
        for (k, e) in v.iter().enumerate() {
            if !e.is_finite() {
                prev = None;
                continue;
            }
            let xa = f.px(k as f64 + 0.2 + shift);
            let xb = f.px(k as f64 + 0.8 + shift);
            let y = f.py(*e).round();
            if let Some((px, py)) = prev {
                let _ = write!(
                    s,
                    r#"<line x1="{px:.1}" y1="{py:.1}" x2="{xa:.1}" y2="{y:.1}" stroke="{colour}" stroke-width="1.5" stroke-dasharray="5 4"/>"#
                );
            }
            let _ = write!(
                s,
                r#"<line class="level" x1="{xa:.1}" y1="{y:.1}" x2="{xb:.1}" y2="{y:.1}" stroke="{colour}" stroke-width="4"/>"#
            );
            let ly = if j % 2 == 0 { y - 8.0 } else { y + 17.0 };
            let _ = write!(
                s,
                r#"<text x="{:.1}" y="{ly:.1}" text-anchor="middle" font-size="11" fill="{colour}">{}</text>"#,
                (xa + xb) / 2.0,
                esc(&num(*e, 1))
            );
            prev = Some((xb, y));
        }
        // Legend.
        let lx = f.left + 12.0 + 150.0 * j as f64;
        let _ = write!(
            s,
            r#"<line x1="{lx:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="4"/><text x="{:.1}" y="{:.1}" font-size="11" fill="{INK}">{}</text>"#,
            h - 10.0,
            lx + 18.0,
            h - 10.0,
            lx + 22.0,
            h - 6.0,
            esc(name)
        );
    }
    s.push_str("</svg>");
    s
}

/// A line series for [`line_chart`].
#[derive(Debug, Clone)]
pub struct Series {
    pub label: String,
    pub colour: String,
    pub width: f64,
    pub points: Vec<(f64, f64)>,
    /// Draw a dot on each point.
    pub dots: bool,
}

/// Line chart of several series with labelled axes. `legend`: show the series labels.
pub fn line_chart(
    series: &[Series],
    x_label: &str,
    y_label: &str,
    title: &str,
    legend: bool,
) -> String {
    line_chart_capped(series, x_label, y_label, title, legend, None)
}

/// [`line_chart`] with the y axis ending at `y_cap` when given (lines above it are clipped at
/// the plot's top edge).
pub fn line_chart_capped(
    series: &[Series],
    x_label: &str,
    y_label: &str,
    title: &str,
    legend: bool,
    y_cap: Option<f64>,
) -> String {
    let (w, h) = (520.0, 300.0);
    let pts: Vec<(f64, f64)> = series
        .iter()
        .flat_map(|s| s.points.iter().copied())
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .collect();
    let (xl, xh) = pts
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.0), b.max(p.0))
        });
    let (yl, yh) = pts
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.1), b.max(p.1))
        });
    let (x0, x1) = if pts.is_empty() {
        (0.0, 1.0)
    } else if (xh - xl).abs() < 1e-12 {
        (xl - 1.0, xh + 1.0)
    } else {
        (xl, xh)
    };
    let yh = match y_cap {
        Some(c) if c.is_finite() && c > yl => yh.min(c),
        _ => yh,
    };
    let (y0, y1) = padded(
        if pts.is_empty() { 0.0 } else { yl },
        if pts.is_empty() { 1.0 } else { yh },
        0.08,
    );
    let f = Frame {
        w,
        h,
        left: 62.0,
        right: 16.0,
        top: if legend { 30.0 } else { 16.0 },
        bottom: 44.0,
        x0,
        x1,
        y0,
        y1,
    };
    let mut s = String::new();
    open(&mut s, w, h, title, "chart line-chart");
    axes(&mut s, &f, x_label, y_label, true);
    // Clip the lines to the plot area (the id is unique per chart title within a page).
    let clip = format!(
        "clip-{:x}",
        title
            .bytes()
            .fold(0xcbf2_9ce4_8422_2325_u64, |h, b| (h ^ u64::from(b))
                .wrapping_mul(0x100_0000_01b3))
    );
    let _ = write!(
        s,
        r#"<clipPath id="{clip}"><rect x="{}" y="{}" width="{}" height="{}"/></clipPath><g clip-path="url(#{clip})">"#,
        f.left,
        f.top - 4.0,
        w - f.left - f.right + 4.0,
        h - f.top - f.bottom + 4.0
    );
    for se in series {
        let mut d = String::new();
        for (k, (x, y)) in se
            .points
            .iter()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .enumerate()
        {
            let _ = write!(
                d,
                "{}{:.1} {:.1}",
                if k == 0 { "M" } else { " L" },
                f.px(*x),
                f.py(*y)
            );
        }
        if !d.is_empty() {
            let _ = write!(
                s,
                r#"<path d="{d}" fill="none" stroke="{}" stroke-width="{}" stroke-linejoin="round"/>"#,
                esc(&se.colour),
                se.width
            );
        }
        if se.dots {
            for (x, y) in se
                .points
                .iter()
                .filter(|(x, y)| x.is_finite() && y.is_finite())
            {
                let _ = write!(
                    s,
                    r#"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{}"/>"#,
                    f.px(*x),
                    f.py(*y),
                    esc(&se.colour)
                );
            }
        }
    }
    s.push_str("</g>");
    if legend {
        let mut lx = f.left + 4.0;
        for se in series.iter().filter(|s| !s.label.is_empty()) {
            let _ = write!(
                s,
                r#"<line x1="{lx:.1}" y1="12" x2="{:.1}" y2="12" stroke="{}" stroke-width="3"/><text x="{:.1}" y="16" font-size="11" fill="{INK}">{}</text>"#,
                lx + 16.0,
                esc(&se.colour),
                lx + 20.0,
                esc(&se.label)
            );
            lx += 28.0 + 6.5 * se.label.chars().count() as f64;
        }
    }
    s.push_str("</svg>");
    s
}

/// Horizontal bar chart, one bar per (label, value), in the given order; values written at
/// the bars' ends. Bars for missing values are left out, their labels kept with "no value".
pub fn bar_chart(bars: &[(String, Option<f64>)], x_label: &str, title: &str) -> String {
    let row = 26.0;
    let w = 640.0;
    let h = 60.0 + row * bars.len().max(1) as f64;
    let vals: Vec<f64> = bars
        .iter()
        .filter_map(|b| b.1)
        .filter(|v| v.is_finite())
        .collect();
    let lo = vals.iter().copied().fold(0.0_f64, f64::min);
    let hi = vals.iter().copied().fold(0.0_f64, f64::max);
    let (x0, x1) = if hi - lo < 1e-12 {
        (lo, lo + 1.0)
    } else {
        (lo, hi * 1.12 - lo * 0.12)
    };
    let f = Frame {
        w,
        h,
        left: 170.0,
        right: 20.0,
        top: 10.0,
        bottom: 44.0,
        x0,
        x1,
        y0: 0.0,
        y1: 1.0,
    };
    let mut s = String::new();
    open(&mut s, w, h, title, "chart bar-chart");
    let (l, r, b) = (f.left, w - f.right, h - f.bottom);
    for v in ticks(x0, x1, 6) {
        let x = f.px(v);
        let _ = write!(
            s,
            r##"<line x1="{x:.1}" y1="{:.1}" x2="{x:.1}" y2="{b}" stroke="#e5e7eb"/><text x="{x:.1}" y="{:.1}" text-anchor="middle" font-size="11" fill="{AXIS_COLOUR}">{}</text>"##,
            f.top,
            b + 16.0,
            esc(&num(v, 1))
        );
    }
    let _ = write!(
        s,
        r#"<line x1="{l}" y1="{b}" x2="{r}" y2="{b}" stroke="{AXIS_COLOUR}"/><line x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{b}" stroke="{AXIS_COLOUR}"/>"#,
        f.px(0.0),
        f.top,
        f.px(0.0)
    );
    for (k, (label, v)) in bars.iter().enumerate() {
        let y = f.top + 6.0 + row * k as f64;
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="end" font-size="12" fill="{INK}">{}</text>"#,
            l - 8.0,
            y + 13.0,
            esc(label)
        );
        match v.filter(|v| v.is_finite()) {
            Some(v) => {
                let (xa, xb) = (f.px(0.0_f64.min(v)), f.px(0.0_f64.max(v)));
                let _ = write!(
                    s,
                    r#"<rect class="bar" x="{xa:.1}" y="{y:.1}" width="{:.1}" height="18" rx="2" fill="{BAR_COLOUR}"/><text x="{:.1}" y="{:.1}" font-size="11" fill="{INK}">{}</text>"#,
                    (xb - xa).max(1.0),
                    xb + 4.0,
                    y + 13.0,
                    esc(&num(v, 1))
                );
            }
            None => {
                let _ = write!(
                    s,
                    r#"<text x="{:.1}" y="{:.1}" font-size="11" font-style="italic" fill="{AXIS_COLOUR}">no value</text>"#,
                    f.px(0.0) + 4.0,
                    y + 13.0
                );
            }
        }
    }
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="12" fill="{INK}">{}</text>"#,
        (l + r) / 2.0,
        h - 6.0,
        esc(x_label)
    );
    s.push_str("</svg>");
    s
}

/// A lighter shade of a `#rrggbb` colour: `t` = 0 the colour, 1 white.
pub fn tint(hex: &str, t: f64) -> String {
    let c = |i: usize| u8::from_str_radix(hex.get(i..i + 2).unwrap_or("00"), 16).unwrap_or(0);
    let mix = |v: u8| (f64::from(v) + (255.0 - f64::from(v)) * t.clamp(0.0, 1.0)).round() as u8;
    format!("#{:02x}{:02x}{:02x}", mix(c(1)), mix(c(3)), mix(c(5)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_everywhere() {
        assert_eq!(esc(r#"a<b>&"c'"#), "a&lt;b&gt;&amp;&quot;c&#39;");
        let svg = bar_chart(
            &[("<script>x</script>".into(), Some(3.0))],
            "barrier (kcal/mol) & more",
            "t<",
        );
        assert!(!svg.contains("<script>"), "{svg}");
        assert!(svg.contains("&lt;script&gt;x&lt;/script&gt;"));
        assert!(svg.contains("barrier (kcal/mol) &amp; more"));
    }

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        assert_eq!(ticks(0.0, 10.0, 5), vec![0.0, 2.0, 4.0, 6.0, 8.0, 10.0]);
        let t = ticks(-3.2, 47.9, 5);
        assert_eq!(t.first(), Some(&0.0));
        assert_eq!(t.last(), Some(&40.0));
        assert!(ticks(f64::NAN, 1.0, 5).is_empty());
    }

    #[test]
    fn numbers_use_a_true_minus_sign() {
        assert_eq!(num(-1.25, 1), "−1.2");
        assert_eq!(num(40.0, 2), "40");
        assert_eq!(num(-0.0001, 2), "0");
        assert_eq!(num(f64::NAN, 2), "n/a");
    }

    #[test]
    fn energy_diagram_draws_three_levels_per_series_with_values_and_unit() {
        let svg = energy_diagram(
            &[
                ("electronic".into(), LEVEL_COLOUR, [0.0, 47.25, 15.5]),
                ("Gibbs, 298.15 K".into(), GIBBS_COLOUR, [0.0, 45.0, 14.0]),
            ],
            "kcal/mol",
            "hcn",
        );
        assert_eq!(svg.matches(r#"class="level""#).count(), 6);
        for want in [
            "47.2",
            "15.5",
            "45",
            "relative energy (kcal/mol)",
            "saddle",
            "Gibbs, 298.15 K",
        ] {
            assert!(svg.contains(want), "{want}");
        }
        // The saddle is drawn above the ends (smaller y in SVG coordinates).
        let ys: Vec<f64> = svg
            .split(r#"class="level""#)
            .skip(1)
            .take(3)
            .map(|p| {
                let a = p.find("y1=\"").unwrap() + 4;
                p[a..a + p[a..].find('"').unwrap()].parse().unwrap()
            })
            .collect();
        assert!(ys[1] < ys[0] && ys[1] < ys[2], "{ys:?}");
    }

    #[test]
    fn line_chart_has_a_path_per_series_and_axis_labels() {
        let svg = line_chart(
            &[Series {
                label: "IRC".into(),
                colour: IRC_COLOUR.into(),
                width: 3.0,
                points: vec![(-1.0, 0.0), (0.0, 10.0), (1.0, 4.0)],
                dots: true,
            }],
            "s (√amu·bohr)",
            "energy (kcal/mol)",
            "irc",
            true,
        );
        assert_eq!(svg.matches("<path").count(), 1);
        assert_eq!(svg.matches("<circle").count(), 3);
        assert!(svg.contains("s (√amu·bohr)") && svg.contains("energy (kcal/mol)"));
    }

    #[test]
    fn bar_chart_keeps_order_and_marks_missing_values() {
        let svg = bar_chart(
            &[
                ("low".into(), Some(5.0)),
                ("high".into(), Some(30.0)),
                ("none".into(), None),
            ],
            "forward barrier (kcal/mol)",
            "barriers",
        );
        assert_eq!(svg.matches(r#"class="bar""#).count(), 2);
        let (a, b, c) = (
            svg.find(">low<").unwrap(),
            svg.find(">high<").unwrap(),
            svg.find(">none<").unwrap(),
        );
        assert!(a < b && b < c);
        assert!(svg.contains("no value"));
    }

    #[test]
    fn tints_go_towards_white() {
        assert_eq!(tint("#000000", 0.5), "#808080");
        assert_eq!(tint("#7c3aed", 0.0), "#7c3aed");
        assert_eq!(tint("#7c3aed", 1.0), "#ffffff");
    }
}
