//! `cairn report` on a Müller–Brown study run (built-in model surface; no external engine):
//! the three files, the study table sorted by barrier, the band over iterations, the IRC
//! profile, missing pieces shown as missing, and bad run directories refused with one error
//! naming the file.
//!
//! Check values: reference-values.md §1.1 (S1 − MA = 106.034674, S2 − MC = 8.518878, S1 at
//! V = −40.664843509 [C]) and §1.2 (IRC arc lengths from S1: 1.03419 to MA, 0.80208 to MC, unit
//! masses [C]).

use cairn::study::{self, run};
use std::path::{Path, PathBuf};
use std::process::Command;

fn data(f: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/studies")
        .join(f)
}

fn report(dir: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("report")
        .arg(dir)
        .output()
        .unwrap()
}

fn run_mb(dir: &Path) {
    let s = study::load(&data("mb.yaml")).unwrap();
    let mut opts = run::RunOptions::new(dir.to_path_buf(), 2);
    opts.progress = cairn::study::progress::ProgressMode::Quiet;
    cairn::driver::block_on(run::run(&s, &opts)).unwrap();
}

#[test]
fn report_of_a_muller_brown_run() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    run_mb(&dir);

    // The band stage saved its profile at every iteration; the last one is band.xyz's.
    let hist = std::fs::read_to_string(dir.join("a-to-c/band-history.json")).unwrap();
    let hist = cairn::study::history::BandHistory::from_json(&hist, "band-history.json").unwrap();
    assert_eq!(hist.energy_unit, "surface");
    assert_eq!(hist.images, 9, "7 movable images and two ends");
    assert!(
        hist.energies.len() > 10,
        "{} iterations",
        hist.energies.len()
    );
    assert!(hist
        .energies
        .iter()
        .all(|p| p.len() == 9 && p.iter().all(Option::is_some)));
    let band = cairn::xyz::read_frames(&dir.join("a-to-c/band.xyz")).unwrap();
    let last = hist.energies.last().unwrap();
    for (m, e) in band.iter().zip(last) {
        let want: f64 = m
            .comment
            .split("E = ")
            .nth(1)
            .unwrap()
            .split_whitespace()
            .next()
            .unwrap()
            .parse()
            .unwrap();
        assert!((e.unwrap() - want).abs() < 1e-9, "{} vs {want}", e.unwrap());
    }
    // Its highest image is the climbing image at S1 (§1.1: V = −40.664843509).
    let top_e = last
        .iter()
        .map(|e| e.unwrap())
        .fold(f64::NEG_INFINITY, f64::max);
    assert!((top_e + 40.664_843_509).abs() < 0.05, "{top_e}");

    let out = report(&dir);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for f in ["report.html", "report.md", "summary.csv"] {
        assert!(dir.join(f).is_file(), "{f}");
    }

    // summary.csv: sorted by forward barrier, lowest first; surface units stated.
    let csv = std::fs::read_to_string(dir.join("summary.csv")).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    let head: Vec<&str> = lines[0].split(',').collect();
    let at = |name: &str| head.iter().position(|h| *h == name).unwrap();
    let rows: Vec<Vec<&str>> = lines[1..].iter().map(|l| l.split(',').collect()).collect();
    assert_eq!(rows.len(), 4);
    let barriers: Vec<f64> = rows
        .iter()
        .map(|r| r[at("barrier_forward")].parse().unwrap())
        .collect();
    assert!(barriers.windows(2).all(|w| w[0] <= w[1]), "{barriers:?}");
    assert_eq!(rows[0][at("reaction")], "c-uphill");
    assert!(
        (barriers[0] - 8.518_878).abs() < 1e-3,
        "S2 − MC: {}",
        barriers[0]
    );
    assert!(
        (barriers[3] - 106.034_674).abs() < 1e-3,
        "S1 − MA: {}",
        barriers[3]
    );
    assert!(rows.iter().all(|r| r[at("energy_unit")] == "surface units"));
    assert!(
        rows.iter()
            .all(|r| r[at("barrier_forward_kj_mol")].is_empty()),
        "no kJ/mol on a model surface"
    );

    // report.md: the caution, and a table row per reaction in the same order.
    let md = std::fs::read_to_string(dir.join("report.md")).unwrap();
    assert!(
        md.contains("validate them against experiment")
            || md.contains("Validate them against experiment")
    );
    assert!(md.contains("process-safety decisions"));
    let pos: Vec<usize> = ["| c-uphill |", "| a-to-b |", "| a-to-c |"]
        .iter()
        .map(|n| md.find(n).unwrap_or_else(|| panic!("{n}")))
        .collect();
    assert!(pos[0] < pos[1].min(pos[2]));

    // report.html: self-contained (no external resources), every section drawn or marked absent.
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    // The only URL is the SVG namespace (never fetched); url() only points inside the page.
    let urls: Vec<&str> = html
        .match_indices("http")
        .map(|(i, _)| &html[i..])
        .filter(|rest| rest.starts_with("http://") || rest.starts_with("https://"))
        .filter(|rest| !rest.starts_with("http://www.w3.org/2000/svg\""))
        .collect();
    assert!(
        urls.is_empty(),
        "{:?}",
        urls.iter()
            .map(|u| u.chars().take(60).collect::<String>())
            .collect::<Vec<_>>()
    );
    assert!(html
        .match_indices("url(")
        .all(|(i, _)| html[i + 4..].starts_with('#')));
    for bad in ["src=", "@import", "<link", "@font-face"] {
        assert!(!html.contains(bad), "{bad}");
    }
    assert!(html.contains("process-safety decisions"));
    assert_eq!(html.matches("class=\"card reaction\"").count(), 4);
    assert_eq!(html.matches("class=\"chart energy-diagram\"").count(), 4);
    assert_eq!(html.matches("class=\"chart bar-chart\"").count(), 1);
    // IRC for all four, a band for the two reactions started from their ends.
    assert_eq!(html.matches("aria-label=\"IRC of").count(), 4);
    assert_eq!(html.matches("aria-label=\"band of").count(), 2);
    assert!(html.contains("no band for this reaction"));
    assert!(html.contains("a model surface has no masses"));
    assert!(html.contains("energy (surface units)"));

    // The IRC profile's arc lengths from S1 (§1.2, unit masses): 1.03419 to MA, 0.80208 to MC.
    let irc = cairn::xyz::read_frames(&dir.join("a-to-c/irc.xyz")).unwrap();
    let prof = cairn::report::irc_profile(&irc, Path::new("irc.xyz")).unwrap();
    let (lo, hi) = (prof.first().unwrap().0, prof.last().unwrap().0);
    let mut ends = [-lo, hi];
    ends.sort_by(f64::total_cmp);
    assert!(
        (ends[0] - 0.80208).abs() < 0.03 && (ends[1] - 1.03419).abs() < 0.03,
        "{ends:?}"
    );
    assert!(prof.iter().any(|(s, _)| *s == 0.0));

    // Missing pieces are shown, not fatal.
    std::fs::remove_file(dir.join("s1-guess/summary.json")).unwrap();
    std::fs::remove_file(dir.join("a-to-b/band-history.json")).unwrap();
    let out = report(&dir);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(html.contains("No summary.json for this reaction"));
    assert!(html.contains("no band-history.json"));
    let csv = std::fs::read_to_string(dir.join("summary.csv")).unwrap();
    assert!(
        csv.lines()
            .last()
            .unwrap()
            .starts_with("s1-guess,no summary,"),
        "{csv}"
    );

    // A damaged summary: one error naming the file.
    std::fs::write(
        dir.join("a-to-c/summary.json"),
        "{\"format\": 1, \"name\": ",
    )
    .unwrap();
    let out = report(&dir);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(err.contains("a-to-c/summary.json"), "{err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
}

#[test]
fn a_directory_without_a_run_is_one_clear_error() {
    let top = tempfile::tempdir().unwrap();
    let out = report(top.path());
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(
        err.contains("state.json not found") && err.contains("holds no run"),
        "{err}"
    );
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert!(
        std::fs::read_dir(top.path()).unwrap().next().is_none(),
        "nothing written"
    );
    // A state.json that is not one.
    std::fs::write(top.path().join("state.json"), "[1, 2").unwrap();
    let out = report(top.path());
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(err.contains("state.json"), "{err}");
}
