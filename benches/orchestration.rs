//! Orchestration overhead: what Cairn itself costs per evaluation, apart from the engine.
//!
//! The external engine is a stand-in adapter whose program is `cat`: Cairn renders the input
//! templates, writes the input file into a fresh scratch directory, spawns `cat` on it (no
//! shell), reads the energy and gradient back from its stdout with the adapter's rules, files
//! the result in the store (temp file, fsync, rename, fsync of the directory — done by the
//! store's background writer, so the disk syncs overlap the next engine run). The engine does
//! no work, so the time is Cairn's (plus the operating system's process start and the disk's
//! sync time, shown on their own rows for comparison).
//!
//! `cargo bench --bench orchestration` prints the table (medians and 90th percentiles over many
//! evaluations, targets, pass/fail). Under `cargo test` (no `--bench` argument) it runs a few
//! iterations as a smoke test and prints the same table without verdicts.

use cairn::driver::{Evaluator, System};
use cairn::elements::Element;
use cairn::engine::adapter::{Adapter, AdapterEngine};
use cairn::engine::{Engine, Job, MullerBrown, Settings};
use cairn::eval::{Point, Quantity};
use cairn::executor::LocalExecutor;
use cairn::store::{Key, Store};
use nalgebra::DVector;
use std::sync::Arc;
use std::time::{Duration, Instant};

/// The stand-in adapter: `cat reply.txt`, where reply.txt is rendered from the job (energy 0,
/// the coordinates as "gradient"), so every number goes through the real extraction rules.
const STAND_IN: &str = r#"
name: stand-in
version: "1"
description: cat as an engine, for measuring Cairn's own overhead
executable: cat
input_files:
  reply.txt: |
    E = -1.0
    gradient
    {% for a in coords_bohr %}{{ a[0] }} {{ a[1] }} {{ a[2] }}
    {% endfor %}
arguments: [reply.txt]
quantities:
  gradient:
    energy: {from: stdout, regex: 'E = (\S+)', unit: hartree}
    gradient:
      from: stdout
      numbers: {after: '^gradient'}
      unit: hartree/bohr
"#;

struct Row {
    name: &'static str,
    samples: Vec<Duration>,
    target: Option<Duration>,
}

fn quantile(sorted: &[Duration], q: f64) -> Duration {
    if sorted.is_empty() {
        return Duration::ZERO;
    }
    let i = ((sorted.len() - 1) as f64 * q).round() as usize;
    sorted[i.min(sorted.len() - 1)]
}

fn fmt(d: Duration) -> String {
    let us = d.as_secs_f64() * 1e6;
    if us >= 1000.0 {
        format!("{:.2} ms", us / 1000.0)
    } else {
        format!("{us:.1} µs")
    }
}

fn water() -> (Vec<Element>, DVector<f64>) {
    // H2O, bohr (a bent geometry of our own).
    (
        vec![Element(8), Element(1), Element(1)],
        DVector::from_vec(vec![
            0.0, 0.0, 0.2254, 0.0, 1.4304, -0.8996, 0.0, -1.4304, -0.8996,
        ]),
    )
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let n = if full { 300 } else { 5 };
    let n_hit = if full { 3000 } else { 20 };
    let work = tempfile::tempdir().expect("temporary directory");
    let adapter_path = work.path().join("stand-in.yaml");
    let adapter = Adapter::from_text(STAND_IN, &adapter_path).expect("stand-in adapter loads");
    // Scratch directories: $CAIRN_SCRATCH if set (e.g. a tmpfs), else beside the store.
    let scratch = std::env::var_os("CAIRN_SCRATCH")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|| work.path().join("scratch"));
    std::fs::create_dir_all(&scratch).expect("scratch directory");
    let engine: Arc<dyn Engine> = Arc::new(
        AdapterEngine::new(Arc::new(adapter), &Settings::new())
            .expect("stand-in adapter settings")
            .with_scratch_root(&scratch),
    );
    let (elements, x0) = water();
    let system = System::new(elements.clone(), 0, 1).expect("water is a valid system");
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .expect("runtime");
    let displaced = |i: usize| {
        let mut x = x0.clone();
        x[0] += 1e-6 * (i as f64 + 1.0);
        x
    };
    let mut rows = Vec::new();

    // 1. The operating system's part: spawn `cat` on a small file and wait (no Cairn code).
    let plain = work.path().join("plain.txt");
    std::fs::write(&plain, "E = -1.0\n").expect("write");
    let mut s = Vec::new();
    for _ in 0..n {
        let t = Instant::now();
        let out = std::process::Command::new("cat")
            .arg(&plain)
            .output()
            .expect("cat runs");
        assert!(out.status.success());
        s.push(t.elapsed());
    }
    rows.push(Row {
        name: "process start alone (cat, std::process)",
        samples: s,
        target: None,
    });

    // 2. The adapter engine alone: scratch dir, templates, input file, spawn, extraction.
    let mut s = Vec::new();
    for i in 0..n {
        let job = Job {
            elements: elements.clone(),
            coords: displaced(i),
            charge: 0,
            multiplicity: 1,
            quantity: Quantity::Gradient,
            threads: 1,
        };
        let t = Instant::now();
        let o = engine.evaluate(&job, 0).expect("stand-in engine runs");
        s.push(t.elapsed());
        assert_eq!(o.answer.gradient.map(|g| g[0]), Some(job.coords[0]));
    }
    rows.push(Row {
        name: "adapter run (input, spawn, parse)",
        samples: s,
        target: None,
    });

    // 3. Full orchestration of one new evaluation: store lookup (miss), executor slot,
    //    adapter run, validation, atomic store write.
    let store = Arc::new(Store::open(work.path().join("store")).expect("store"));
    let ev = Evaluator::new(
        engine.clone(),
        store.clone(),
        Arc::new(LocalExecutor::new(1)),
    );
    let mut s = Vec::new();
    let all = Instant::now();
    for i in 0..n {
        let p = [Point::new(displaced(n + i), Quantity::Gradient)];
        let t = Instant::now();
        rt.block_on(ev.evaluate(&system, &p)).expect("evaluation");
        s.push(t.elapsed());
    }
    rt.block_on(ev.flush()).expect("store flush");
    let amortized = all.elapsed() / n as u32;
    assert_eq!(ev.stats().engine_runs as usize, n);
    rows.push(Row {
        name: "evaluation through the driver (miss)",
        samples: s,
        target: Some(Duration::from_millis(5)),
    });
    // Wall time of the whole sequence including the final flush, per evaluation: what the
    // background writer's disk syncs add when they cannot all hide behind engine runs.
    rows.push(Row {
        name: "  same, sequence + final flush, per evaluation",
        samples: vec![amortized],
        target: None,
    });

    // The durable write alone, one entry at a time (temp files, fsync, rename, fsync dir).
    let mut s = Vec::new();
    let raw = "stand-in output\n".repeat(20);
    for i in 0..n.min(100) {
        let c = displaced(10 * n + i);
        let r = cairn::store::EntryRequest {
            identity: "bench:put",
            charge: 0,
            multiplicity: 1,
            elements: &elements,
            coords: &c,
            quantity: Quantity::Gradient,
        };
        let a = cairn::eval::Answer {
            energy: -1.0,
            gradient: Some(c.clone()),
            hessian: None,
        };
        let t = Instant::now();
        store
            .put(&r.key(), &r, &a, &cairn::store::Provenance::default(), &raw)
            .expect("store write");
        s.push(t.elapsed());
    }
    rows.push(Row {
        name: "Store::put alone (durable, with output file)",
        samples: s,
        target: None,
    });

    // 4. The same without a process: the built-in Müller–Brown surface through the driver
    //    (lookup, slot, in-process evaluation, atomic store write).
    let mb = Evaluator::new(
        Arc::new(MullerBrown),
        store.clone(),
        Arc::new(LocalExecutor::new(1)),
    );
    let mb_system = System::new(vec![Element::X], 0, 1).expect("surface system");
    let mut s = Vec::new();
    for i in 0..n {
        let p = [Point::new(
            DVector::from_vec(vec![0.1 + 1e-6 * i as f64, 0.2, 0.0]),
            Quantity::Gradient,
        )];
        let t = Instant::now();
        rt.block_on(mb.evaluate(&mb_system, &p))
            .expect("evaluation");
        s.push(t.elapsed());
    }
    rows.push(Row {
        name: "in-process surface through the driver (miss)",
        samples: s,
        target: None,
    });

    // 5. A repeated request: answered from the store through the driver.
    let p = [Point::new(displaced(n), Quantity::Gradient)];
    let before = ev.stats().engine_runs;
    let mut s = Vec::new();
    for _ in 0..n_hit {
        let t = Instant::now();
        rt.block_on(ev.evaluate(&system, &p)).expect("evaluation");
        s.push(t.elapsed());
    }
    assert_eq!(ev.stats().engine_runs, before, "store hits ran the engine");
    rows.push(Row {
        name: "store hit through the driver (water)",
        samples: s,
        target: Some(Duration::from_micros(50)),
    });

    // 6. The lookup alone (key, read, parse, validate).
    let key = Key::new(
        &engine.identity(),
        0,
        1,
        &elements,
        &p[0].coords,
        Quantity::Gradient,
    );
    let mut s = Vec::new();
    for _ in 0..n_hit {
        let t = Instant::now();
        let hit = matches!(store.get(&key), cairn::store::Lookup::Hit(_));
        s.push(t.elapsed());
        assert!(hit);
    }
    rows.push(Row {
        name: "Store::get alone (water)",
        samples: s,
        target: None,
    });

    println!();
    println!(
        "Orchestration overhead per evaluation ({n} evaluations, {n_hit} store hits; engine = `cat`; scratch in {})",
        scratch.display()
    );
    println!();
    println!(
        "| {:<46} | {:>10} | {:>10} | {:>8} | {:<6} |",
        "what", "median", "p90", "target", "result"
    );
    println!(
        "|{:-<48}|{:-<12}|{:-<12}|{:-<10}|{:-<8}|",
        "", "", "", "", ""
    );
    for mut r in rows {
        r.samples.sort();
        let med = quantile(&r.samples, 0.5);
        let p90 = quantile(&r.samples, 0.9);
        let (target, verdict) = match r.target {
            None => ("-".to_string(), "-"),
            Some(t) if !full => (format!("≤ {}", fmt(t)), "smoke"),
            Some(t) => (
                format!("≤ {}", fmt(t)),
                if med <= t { "pass" } else { "FAIL" },
            ),
        };
        println!(
            "| {:<46} | {:>10} | {:>10} | {:>8} | {:<6} |",
            r.name,
            fmt(med),
            fmt(p90),
            target,
            verdict
        );
    }
    println!();
}
