//! report.html in a real browser: headless Chromium renders the page of a Müller–Brown run
//! with no console errors, the page's inline marker script runs (and counts every chart), and a
//! screenshot shows the charts drawn: each chart colour is on the page in quantity, the overview's
//! barrier bars above the first reaction's diagrams, energy diagrams in the left column.
//!
//! CI installs Debian's `chromium` (.ci/setup). Without it this test prints why and passes only
//! outside CI; with `CI` set it fails.

use cairn::report::svg;
use cairn::study::{self, run};
use std::path::{Path, PathBuf};
use std::process::Command;

fn chromium() -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    for dir in std::env::split_paths(&path) {
        for name in ["chromium", "chromium-browser"] {
            let p = dir.join(name);
            if p.is_file() {
                return Some(p);
            }
        }
    }
    None
}

fn browser(exe: &Path, args: &[&str], url: &str) -> std::process::Output {
    Command::new(exe)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--force-device-scale-factor=1",
            "--no-first-run",
            "--disable-extensions",
            "--allow-file-access-from-files",
        ])
        .args(args)
        .arg(url)
        .output()
        .unwrap()
}

fn rgb(hex: &str) -> [u8; 3] {
    let c = |i: usize| u8::from_str_radix(&hex[i..i + 2], 16).unwrap();
    [c(1), c(3), c(5)]
}

#[test]
fn report_renders_in_headless_chromium_with_its_charts_drawn() {
    let Some(exe) = chromium() else {
        if std::env::var_os("CI").is_some() {
            panic!("chromium is not installed; CI installs it with .ci/setup (apt-get install chromium)");
        }
        println!("SKIPPED: chromium not found on PATH (install it: apt-get install chromium)");
        return;
    };
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    let s =
        study::load(&PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/studies/mb.yaml"))
            .unwrap();
    let mut opts = run::RunOptions::new(dir.clone(), 2);
    opts.progress = cairn::study::progress::ProgressMode::Quiet;
    cairn::driver::block_on(run::run(&s, &opts)).unwrap();
    cairn::report::write(&dir).unwrap();
    let page = dir.join("report.html");
    let html = std::fs::read_to_string(&page).unwrap();
    let charts = html.matches("class=\"chart ").count();
    assert!(charts >= 11, "{charts} charts in the page");
    let url = format!("file://{}", page.display());
    // Keep Chromium's profile and crash files out of $HOME.
    let profile = top.path().join("profile");
    let profile_arg = format!("--user-data-dir={}", profile.display());

    // 1. The DOM after scripts ran: the marker says how many charts the browser found.
    let out = browser(
        &exe,
        &[
            &profile_arg,
            "--dump-dom",
            "--enable-logging=stderr",
            "--v=0",
        ],
        &url,
    );
    let dom = String::from_utf8_lossy(&out.stdout);
    let log = String::from_utf8_lossy(&out.stderr);
    assert!(
        dom.contains(&format!("data-rendered=\"{charts}\"")),
        "marker missing: the inline script did not run or counted differently\n{}",
        &dom[..dom.len().min(400)]
    );
    // Console messages are logged as `CONSOLE(line)] "message"`; the page logs nothing, so
    // any console line is an error (uncaught exception, failed resource).
    let console: Vec<&str> = log.lines().filter(|l| l.contains("CONSOLE")).collect();
    assert!(console.is_empty(), "console output: {console:?}");
    assert!(!log.contains("Uncaught"), "{log}");

    // 2. A screenshot of the whole page.
    let shot = top.path().join("shot.png");
    let (w, h) = (1200usize, 7000usize);
    let out = browser(
        &exe,
        &[
            &profile_arg,
            &format!("--screenshot={}", shot.display()),
            &format!("--window-size={w},{h}"),
        ],
        &url,
    );
    assert!(
        shot.is_file(),
        "no screenshot: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let bytes = std::fs::read(&shot).unwrap();
    let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let channels = match info.color_type {
        png::ColorType::Rgba => 4,
        png::ColorType::Rgb => 3,
        other => panic!("unexpected PNG colour type {other:?}"),
    };
    assert_eq!(info.bit_depth, png::BitDepth::Eight);
    let (pw, ph) = (info.width as usize, info.height as usize);
    assert_eq!((pw, ph), (w, h));
    let px = |x: usize, y: usize| {
        let i = (y * pw + x) * channels;
        [buf[i], buf[i + 1], buf[i + 2]]
    };
    // Pixels of one colour (±3 per channel for colour management), with their positions.
    let find = |hex: &str| -> Vec<(usize, usize)> {
        let c = rgb(hex);
        let mut v = Vec::new();
        for y in 0..ph {
            for x in 0..pw {
                let p = px(x, y);
                if (0..3).all(|k| (i32::from(p[k]) - i32::from(c[k])).abs() <= 3) {
                    v.push((x, y));
                }
            }
        }
        v
    };
    let levels = find(svg::LEVEL_COLOUR);
    let irc = find(svg::IRC_COLOUR);
    let band = find(svg::BAND_COLOUR);
    let bars = find(svg::BAR_COLOUR);
    eprintln!(
        "pixels: levels {}, irc {}, band {}, bars {}",
        levels.len(),
        irc.len(),
        band.len(),
        bars.len()
    );
    // Four energy diagrams × three 4-px levels ≈ 60 px wide; four IRC curves of 3 px; two bands'
    // last iteration (3 px and dots); four bars ≥ 18 px tall.
    assert!(
        levels.len() > 1500,
        "energy-diagram levels: {} pixels",
        levels.len()
    );
    assert!(irc.len() > 1500, "IRC curves: {} pixels", irc.len());
    assert!(band.len() > 600, "band curves: {} pixels", band.len());
    assert!(bars.len() > 3000, "barrier bars: {} pixels", bars.len());
    // Layout: the overview's bars come before every reaction chart; energy diagrams are in the
    // left column of each reaction's grid, IRC profiles in the right one.
    let max_y = |v: &[(usize, usize)]| v.iter().map(|p| p.1).max().unwrap();
    let min_y = |v: &[(usize, usize)]| v.iter().map(|p| p.1).min().unwrap();
    assert!(max_y(&bars) < min_y(&levels), "bars below a diagram");
    assert!(max_y(&bars) < min_y(&irc));
    assert!(
        levels.iter().all(|p| p.0 < w / 2),
        "an energy level in the right half"
    );
    assert!(
        irc.iter().all(|p| p.0 > w / 2),
        "an IRC pixel in the left half"
    );
    // The page background is the stylesheet's (not a blank or error page).
    let bg = rgb("#f6f7f9");
    assert_eq!(px(3, h - 3), bg);
}
