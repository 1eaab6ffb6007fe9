//! report.html: one self-contained page. Inline CSS, inline SVG charts, one small inline script
//! that only marks the page as rendered (`data-rendered` on `<html>`: the number of charts), for
//! the headless-browser test. No network, no external fonts or images.

use super::svg::{self, esc, Series};
use super::text::{duration, fixed, imaginary, reason, sci, status_word};
use super::{ReactionData, RunData, CAUTION};
use crate::study::record::Verdict;
use crate::units::{CALORIE_J, KCALMOL_PER_HARTREE};
use std::fmt::Write as _;

const CSS: &str = r#"
:root{--ink:#1f2937;--muted:#6b7280;--line:#e5e7eb;--bg:#f6f7f9;--card:#ffffff;--ok:#15803d;--warn:#b45309;--bad:#b91c1c;--accent:#1d5fa8}
*{box-sizing:border-box}
body{margin:0;background:var(--bg);color:var(--ink);font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
header{background:#14213d;color:#fff;padding:28px 40px 22px}
header h1{margin:0 0 4px;font-size:24px;font-weight:650;letter-spacing:.2px}
header p{margin:0;color:#cbd5e1;font-size:13px}
main{max-width:1120px;margin:0 auto;padding:24px 28px 60px}
.caution{border-left:5px solid var(--warn);background:#fff7ed;padding:12px 16px;margin:0 0 24px;border-radius:4px}
.caution strong{color:var(--warn)}
section.card{background:var(--card);border:1px solid var(--line);border-radius:8px;padding:20px 24px;margin:0 0 22px;box-shadow:0 1px 2px rgba(0,0,0,.04)}
h2{font-size:19px;margin:0 0 12px}
h3{font-size:14px;margin:18px 0 6px;color:var(--muted);font-weight:600;text-transform:uppercase;letter-spacing:.6px}
table{border-collapse:collapse;width:100%;font-size:13.5px;margin:6px 0 10px}
th,td{padding:6px 9px;border-bottom:1px solid var(--line);text-align:right;white-space:nowrap}
th{background:#f9fafb;font-weight:600;color:#374151;white-space:normal;vertical-align:bottom}
.scroll{overflow-x:auto}
th:first-child,td:first-child{text-align:left}
td.reason,th.reason{text-align:left;white-space:normal}
.badge{display:inline-block;padding:2px 9px;border-radius:999px;font-size:12px;font-weight:600;color:#fff;vertical-align:middle}
.verified{background:var(--ok)}.unverified{background:var(--warn)}.failed,.missing{background:var(--bad)}
.grid{display:grid;grid-template-columns:repeat(auto-fit,minmax(480px,1fr));gap:14px 22px}
figure{margin:0}figcaption{font-size:12.5px;color:var(--muted);margin-top:2px}
svg{max-width:100%;height:auto;background:#fff}
.absent{border:1px dashed #cbd5e1;border-radius:6px;padding:18px;color:var(--muted);font-style:italic;background:#fafafa}
.notes{font-size:13px;color:#374151}
.why{margin:4px 0 10px}
nav a{color:var(--accent);text-decoration:none;margin-right:14px;font-size:13.5px}
footer{color:var(--muted);font-size:12px;text-align:center;margin-top:30px}
"#;

fn badge(d: &ReactionData) -> String {
    let w = status_word(d);
    let class = match d.status() {
        Some(Verdict::Verified) => "verified",
        Some(Verdict::Unverified) => "unverified",
        Some(Verdict::Failed) => "failed",
        None => "missing",
    };
    format!(r#"<span class="badge {class}">{}</span>"#, esc(w))
}

fn absent(what: &str) -> String {
    format!(r#"<div class="absent">{}</div>"#, esc(what))
}

/// Anchor id for a reaction (names are [A-Za-z0-9._-], so they are safe; escaped anyway).
fn anchor(name: &str) -> String {
    format!("r-{}", esc(name))
}

/// The whole page.
pub fn render(data: &RunData) -> String {
    let mut o = String::new();
    let _ = write!(
        o,
        r#"<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width,initial-scale=1"><title>Cairn report: {}</title><style>{CSS}</style></head><body>"#,
        esc(&data.study)
    );
    let _ = write!(
        o,
        r#"<header><h1>Cairn report</h1><p>Study {} · run directory {} · {} reaction{}</p></header><main>"#,
        esc(&data.study),
        esc(&data.dir.display().to_string()),
        data.reactions.len(),
        if data.reactions.len() == 1 { "" } else { "s" }
    );
    let _ = write!(
        o,
        r#"<div class="caution" id="caution"><strong>Caution.</strong> {}</div>"#,
        esc(CAUTION)
    );
    o.push_str(&overview(data));
    for d in &data.reactions {
        o.push_str(&reaction(d));
    }
    o.push_str(r#"<footer>Written by <code>cairn report</code>. Energies relative to the reactant; kcal/mol are thermochemical (4.184 kJ). Model-surface reactions are in the surface's own units.</footer></main>"#);
    // The only script: marks the page as rendered, for tests. No network access.
    o.push_str(r#"<script>document.documentElement.setAttribute("data-rendered",String(document.querySelectorAll("svg.chart").length));</script>"#);
    o.push_str("</body></html>\n");
    o
}

fn overview(data: &RunData) -> String {
    let mut o = String::new();
    o.push_str(r#"<section class="card" id="overview"><h2>Reactions by forward barrier</h2>"#);
    if data.reactions.is_empty() {
        o.push_str(&absent("The run has no reactions."));
        o.push_str("</section>");
        return o;
    }
    o.push_str(r#"<div class="scroll"><table class="overview"><thead><tr><th>reaction</th><th>status</th><th>forward barrier (kcal/mol)</th><th>forward barrier (kJ/mol)</th><th>reverse barrier (kcal/mol)</th><th>reaction energy (kcal/mol)</th><th>imaginary frequency (cm⁻¹)</th><th>ΔG‡ forward (kcal/mol)</th><th>k forward (s⁻¹)</th><th>half-life forward</th></tr></thead><tbody>"#);
    let sorted = data.sorted();
    for d in &sorted {
        let s = d.summary.as_ref();
        let surf = if d.model_surface { " ᵘ" } else { "" };
        let rate0 = s
            .and_then(|s| s.rate_constants.as_ref())
            .and_then(|r| r.first());
        let _ = write!(
            o,
            r##"<tr><td><a href="#{}">{}</a></td><td>{}</td><td>{}{surf}</td><td>{}</td><td>{}{surf}</td><td>{}{surf}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>"##,
            anchor(&d.name),
            esc(&d.name),
            badge(d),
            fixed(d.shown(s.and_then(|s| s.barrier_forward_kcal_mol)), 2),
            fixed(d.kj(s.and_then(|s| s.barrier_forward_kcal_mol)), 1),
            fixed(d.shown(s.and_then(|s| s.barrier_reverse_kcal_mol)), 2),
            fixed(d.shown(s.and_then(|s| s.reaction_energy_kcal_mol)), 2),
            fixed(imaginary(d), 0) + surf,
            fixed(s.and_then(|s| s.barrier_forward_gibbs_kcal_mol), 2),
            esc(&sci(rate0.map(|r| r.forward_per_s))),
            esc(&duration(rate0.map(|r| r.half_life_forward_s))),
        );
    }
    o.push_str("</tbody></table></div>");
    if sorted.iter().any(|d| d.model_surface) {
        o.push_str(r#"<p class="notes">ᵘ model surface: energies in the surface's own units, not kcal/mol; frequencies from the surface's curvature with unit masses.</p>"#);
    }
    let molecules: Vec<&&ReactionData> = sorted.iter().filter(|d| !d.model_surface).collect();
    let surfaces: Vec<&&ReactionData> = sorted.iter().filter(|d| d.model_surface).collect();
    for (set, unit) in [(molecules, "kcal/mol"), (surfaces, "surface units")] {
        if set.is_empty() {
            continue;
        }
        let bars: Vec<(String, Option<f64>)> = set
            .iter()
            .map(|d| (d.name.clone(), d.shown(d.forward_barrier())))
            .collect();
        let _ = write!(
            o,
            r#"<figure>{}<figcaption>Forward barriers ΔE‡ (electronic energy, saddle minus reactant), lowest first, {unit}.</figcaption></figure>"#,
            svg::bar_chart(
                &bars,
                &format!("forward barrier ΔE‡ ({unit})"),
                "forward barriers"
            )
        );
    }
    o.push_str("</section>");
    o
}

fn reaction(d: &ReactionData) -> String {
    let mut o = String::new();
    let unit = d.unit();
    let _ = write!(
        o,
        r#"<section class="card reaction" id="{}"><h2>{} {}</h2><p class="why">{}</p>"#,
        anchor(&d.name),
        esc(&d.name),
        badge(d),
        esc(&reason(d))
    );
    // Numbers.
    match &d.summary {
        Some(s) => {
            let _ = write!(
                o,
                r#"<table class="numbers"><thead><tr><th>quantity</th><th>value ({})</th><th>value (kJ/mol)</th></tr></thead><tbody>"#,
                esc(unit)
            );
            for (label, v) in super::text::energy_rows(s) {
                let _ = write!(
                    o,
                    "<tr><td>{label}</td><td>{}</td><td>{}</td></tr>",
                    fixed(d.shown(v), 2),
                    fixed(d.kj(v), 1)
                );
            }
            let _ = write!(
                o,
                "</tbody></table><p class=\"notes\">Imaginary frequency at the saddle: <b>{} cm⁻¹</b>{} ({} imaginary mode{}). IRC connects the ends: {}. Engine runs {}, store hits {}, wall time {:.1} s.</p>",
                fixed(imaginary(d), 1),
                if d.model_surface {
                    " (model surface: from the surface's curvature with unit masses, not a molecular vibration)"
                } else {
                    ""
                },
                s.n_imaginary.map(|n| n.to_string()).unwrap_or_else(|| "—".into()),
                if s.n_imaginary == Some(1) { "" } else { "s" },
                match s.irc_connects {
                    Some(true) => "yes",
                    Some(false) => "no",
                    None => "not checked",
                },
                s.engine_runs,
                s.store_hits,
                s.wall_seconds
            );
        }
        None => o.push_str(&absent(
            "No summary.json for this reaction: the run did not finish it.",
        )),
    }
    o.push_str(r#"<div class="grid">"#);
    o.push_str(&diagram(d));
    o.push_str(&irc_chart(d));
    o.push_str(&band_chart(d));
    o.push_str("</div>");
    o.push_str(&kinetics(d));
    o.push_str("</section>");
    o
}

fn diagram(d: &ReactionData) -> String {
    let s = match &d.summary {
        Some(s) => s,
        None => return figure_absent("Energy diagram", "no summary"),
    };
    let (f, p) =
        match (s.barrier_forward_kcal_mol, s.reaction_energy_kcal_mol) {
            (Some(f), Some(p)) => (f, p),
            _ => return figure_absent(
                "Energy diagram",
                "no barrier: the reaction has no verdict (a stage failed or verify did not run)",
            ),
        };
    let mut series = vec![(
        "electronic energy ΔE".to_string(),
        svg::LEVEL_COLOUR,
        [
            0.0,
            d.shown(Some(f)).unwrap_or(f),
            d.shown(Some(p)).unwrap_or(p),
        ],
    )];
    let mut caption = format!(
        "Reactant, saddle and product, relative to the reactant, {}.",
        d.unit()
    );
    if let Some(k) = &d.kinetics {
        if let Some(t) = k.temperatures.first() {
            series.push((
                format!("Gibbs energy ΔG, {} K", t.temperature_k),
                svg::GIBBS_COLOUR,
                [
                    0.0,
                    t.barrier_forward_gibbs_kcal_mol,
                    t.reaction_gibbs_kcal_mol,
                ],
            ));
            caption.push_str(&format!(
                " Gibbs energies at {} K, standard state {}.",
                t.temperature_k, k.standard_state
            ));
        }
    }
    format!(
        "<figure>{}<figcaption>{}</figcaption></figure>",
        svg::energy_diagram(&series, d.unit(), &format!("energy diagram of {}", d.name)),
        esc(&caption)
    )
}

fn figure_absent(what: &str, why: &str) -> String {
    format!(
        "<figure>{}<figcaption>{}</figcaption></figure>",
        absent(&format!("{what}: {why}.")),
        esc(what)
    )
}

fn irc_chart(d: &ReactionData) -> String {
    let pts = match &d.irc {
        Some(p) if p.len() >= 2 => p,
        _ => {
            return figure_absent(
                "IRC energy profile",
                "no irc.xyz (no IRC stage, or it did not run)",
            )
        }
    };
    let base = d
        .summary
        .as_ref()
        .and_then(|s| s.barrier_forward_kcal_mol)
        .and_then(|f| {
            // Reactant energy = saddle − forward barrier.
            let e_ts = pts.iter().find(|(s, _)| *s == 0.0).map(|p| p.1)?;
            // Summaries hold every energy as Eh × 627.5… (surface energies too).
            Some(e_ts - f / KCALMOL_PER_HARTREE)
        })
        .unwrap_or_else(|| pts.iter().map(|p| p.1).fold(f64::INFINITY, f64::min));
    let series = [Series {
        label: String::new(),
        colour: svg::IRC_COLOUR.into(),
        width: 3.0,
        points: pts
            .iter()
            .map(|(s, e)| (*s, d.relative(*e, base)))
            .collect(),
        dots: false,
    }];
    let x_label = if d.model_surface {
        "reaction coordinate s (surface units; saddle at 0)"
    } else {
        "reaction coordinate s (√amu·bohr; saddle at 0)"
    };
    format!(
        "<figure>{}<figcaption>Energy along the IRC ({} points), relative to the reactant, {}. Negative s: reverse branch.</figcaption></figure>",
        svg::line_chart(&series, x_label, &format!("energy ({})", d.unit()), &format!("IRC of {}", d.name), false),
        pts.len(),
        esc(d.unit())
    )
}

fn band_chart(d: &ReactionData) -> String {
    let h = match &d.band_history {
        Some(h) if !h.energies.is_empty() => h,
        _ => {
            return figure_absent(
                "Band energy profile over iterations",
                if d.band_final.is_some() {
                    "no band-history.json (written by newer runs)"
                } else {
                    "no band for this reaction (it did not start from two ends, or the band stage did not run)"
                },
            )
        }
    };
    let base = h
        .energies
        .first()
        .and_then(|p| p.first().copied().flatten())
        .unwrap_or(0.0);
    // At most 8 curves: evenly spaced iterations, the last one always, darker as they go.
    let n = h.energies.len();
    let mut picks: Vec<usize> = (0..8).map(|k| k * (n - 1) / 7).collect();
    picks.dedup();
    let mut series = Vec::new();
    for (j, &i) in picks.iter().enumerate() {
        let last = i == n - 1;
        let t = if last {
            0.0
        } else {
            0.8 - 0.6 * j as f64 / picks.len() as f64
        };
        series.push(Series {
            label: if last {
                format!("iteration {}", i + 1)
            } else if j == 0 {
                "start".into()
            } else {
                String::new()
            },
            colour: svg::tint(svg::BAND_COLOUR, t),
            width: if last { 3.0 } else { 1.5 },
            points: h.energies[i]
                .iter()
                .enumerate()
                .filter_map(|(k, e)| e.map(|e| (k as f64, d.relative(e, base))))
                .collect(),
            dots: last,
        });
    }
    // Early bands can pass far above the final one (atoms too close in the start path); keep
    // the final profile readable: the axis ends at 2× the final band's span above its top.
    let fin: Vec<f64> = series
        .last()
        .map(|s| s.points.iter().map(|p| p.1).collect())
        .unwrap_or_default();
    let (lo, hi) = fin
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    let cap = hi + 2.0 * (hi - lo).max(1e-9);
    let capped = series.iter().any(|s| s.points.iter().any(|p| p.1 > cap));
    format!(
        "<figure>{}<figcaption>Band energies over {} iterations (light: early, dark: last), relative to the reactant end, {}.{}</figcaption></figure>",
        svg::line_chart_capped(&series, "image (0 = reactant end)", &format!("energy ({})", d.unit()), &format!("band of {}", d.name), true, Some(cap)),
        n,
        esc(d.unit()),
        if capped { " Early iterations above the top of the axis are cut off." } else { "" }
    )
}

fn kinetics(d: &ReactionData) -> String {
    let mut o = String::from("<h3>Rates</h3>");
    let k = match &d.kinetics {
        Some(k) => k,
        None => {
            let why = d
                .summary
                .as_ref()
                .and_then(|s| s.kinetics_error.clone())
                .map(|e| format!("Not computed: the rates stage failed: {e}"))
                .unwrap_or_else(|| {
                    if d.model_surface {
                        "Not computed: a model surface has no masses or moments of inertia.".into()
                    } else {
                        "Not computed: the run has no rates stage for this reaction.".into()
                    }
                });
            o.push_str(&absent(&why));
            return o;
        }
    };
    let _ = write!(
        o,
        r#"<p class="notes">{} Low-frequency treatment: <b>{}</b>. Standard state: <b>{}</b>. Tunnelling: <b>{}</b>. Level: {}. Imaginary frequency {} cm⁻¹. ΔE‡ with zero-point energy: {} kcal/mol forward, {} kcal/mol reverse.</p>"#,
        esc(&k.model),
        esc(&k.low_frequency_treatment),
        esc(&k.standard_state),
        esc(&k.tunnelling),
        esc(&k.level),
        fixed(Some(k.imaginary_frequency_cm1), 1),
        fixed(Some(k.barrier_forward_zpe_kcal_mol), 2),
        fixed(Some(k.barrier_reverse_zpe_kcal_mol), 2),
    );
    o.push_str(r#"<div class="scroll"><table class="rates"><thead><tr><th>T (K)</th><th>ΔH‡ forward (kcal/mol)</th><th>ΔG‡ forward (kcal/mol)</th><th>ΔG‡ forward (kJ/mol)</th><th>ΔG‡ reverse (kcal/mol)</th><th>ΔG reaction (kcal/mol)</th><th>κ</th><th>k forward (s⁻¹)</th><th>half-life forward</th><th>k reverse (s⁻¹)</th><th>half-life reverse</th></tr></thead><tbody>"#);
    for t in &k.temperatures {
        let _ = write!(
            o,
            "<tr><td>{}</td><td>{:.2}</td><td>{:.2}</td><td>{:.1}</td><td>{:.2}</td><td>{:.2}</td><td>{:.3}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            t.temperature_k,
            t.barrier_forward_enthalpy_kcal_mol,
            t.barrier_forward_gibbs_kcal_mol,
            t.barrier_forward_gibbs_kcal_mol * CALORIE_J,
            t.barrier_reverse_gibbs_kcal_mol,
            t.reaction_gibbs_kcal_mol,
            t.tunnelling_kappa,
            esc(&sci(Some(t.rate_constant_forward_per_s))),
            esc(&duration(Some(t.half_life_forward_s))),
            esc(&sci(Some(t.rate_constant_reverse_per_s))),
            esc(&duration(Some(t.half_life_reverse_s))),
        );
    }
    o.push_str("</tbody></table></div>");
    if !k.notes.is_empty() {
        o.push_str(r#"<ul class="notes">"#);
        for n in &k.notes {
            let _ = write!(o, "<li>{}</li>", esc(n));
        }
        o.push_str("</ul>");
    }
    o
}
