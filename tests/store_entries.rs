//! Store entries: exact round trip, the key encoding, damaged and foreign entries.

use cairn::driver::{block_on, Evaluator, System};
use cairn::elements::Element;
use cairn::engine::MullerBrown;
use cairn::eval::{Answer, Point, Quantity};
use cairn::executor::LocalExecutor;
use cairn::store::{EntryRequest, Key, Lookup, Provenance, Store, FORMAT};
use nalgebra::{DMatrix, DVector};
use rand::{Rng, SeedableRng};
use std::sync::Arc;

/// Finite doubles of every kind: random bit patterns (all exponents, subnormals included) plus
/// the awkward ones.
fn awkward_doubles(n: usize, seed: u64) -> Vec<f64> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut v = vec![
        0.0,
        -0.0,
        0.1,
        1.0 / 3.0,
        f64::MIN_POSITIVE,
        f64::MIN_POSITIVE / 3.0, // subnormal
        f64::from_bits(1),       // smallest subnormal
        f64::MAX,
        f64::MIN,
        f64::EPSILON,
        -146.699_517_209_954,
        1e-300,
        123_456_789.123_456_78,
    ];
    while v.len() < n {
        let x = f64::from_bits(rng.gen::<u64>());
        if x.is_finite() {
            v.push(x);
        }
        // Also ordinary magnitudes, where most real numbers live.
        v.push(rng.gen_range(-1.0..1.0) * 10f64.powi(rng.gen_range(-8..4)));
    }
    v.truncate(n);
    v
}

fn req<'a>(
    elements: &'a [Element],
    coords: &'a DVector<f64>,
    quantity: Quantity,
) -> EntryRequest<'a> {
    EntryRequest {
        identity: "test:identity v1 method=gfn2",
        charge: -1,
        multiplicity: 2,
        elements,
        coords,
        quantity,
    }
}

#[test]
fn round_trip_is_exact_to_the_bit() {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(dir.path()).unwrap();
    let elements = vec![Element(6), Element(1), Element(1), Element(1)];
    for seed in 0..20 {
        let nums = awkward_doubles(12 + 12 + 144 + 1, seed);
        let coords = DVector::from_column_slice(&nums[..12]);
        let answer = Answer {
            energy: nums[12],
            gradient: Some(DVector::from_column_slice(&nums[13..25])),
            hessian: Some(DMatrix::from_column_slice(12, 12, &nums[25..169])),
        };
        let r = req(&elements, &coords, Quantity::Hessian);
        let key = r.key();
        let prov = Provenance {
            engine_name: "test".into(),
            remedies: vec!["tighter-scf".into()],
            failures: vec!["crashed: once".into()],
            engine_seconds: 1.25,
        };
        assert!(store.put(&key, &r, &answer, &prov, "raw output\n").unwrap());
        let Lookup::Hit(entry) = store.get(&key) else {
            panic!("seed {seed}: entry not found")
        };
        let back = entry.answer().unwrap();
        assert_eq!(
            back.energy.to_bits(),
            answer.energy.to_bits(),
            "seed {seed}"
        );
        let g0 = answer.gradient.as_ref().unwrap().iter();
        let g1 = back.gradient.as_ref().unwrap().iter();
        assert!(
            g0.zip(g1).all(|(a, b)| a.to_bits() == b.to_bits()),
            "seed {seed}"
        );
        let h0 = answer.hessian.as_ref().unwrap();
        let h1 = back.hessian.as_ref().unwrap();
        assert_eq!(h1.shape(), (12, 12));
        // Same element at the same (row, column): layout and bits.
        for i in 0..12 {
            for j in 0..12 {
                assert_eq!(
                    h0[(i, j)].to_bits(),
                    h1[(i, j)].to_bits(),
                    "seed {seed} ({i},{j})"
                );
            }
        }
        let c1: Vec<u64> = entry.coords_bohr.iter().map(|x| x.to_bits()).collect();
        let c0: Vec<u64> = coords.iter().map(|x| x.to_bits()).collect();
        assert_eq!(c0, c1);
        assert_eq!(entry.format, FORMAT);
        assert_eq!(entry.elements, vec![6, 1, 1, 1]);
        assert_eq!((entry.charge, entry.multiplicity), (-1, 2));
        assert_eq!(entry.remedies, vec!["tighter-scf".to_string()]);
        assert_eq!(entry.engine_seconds, 1.25);
        assert_eq!(
            std::fs::read_to_string(store.output_path(&key)).unwrap(),
            "raw output\n"
        );
    }
}

#[test]
fn entry_layout_is_sharded_json_with_format_1() {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(dir.path()).unwrap();
    let el = [Element(1), Element(1)];
    let c = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4]);
    let r = req(&el, &c, Quantity::Energy);
    let key = r.key();
    let a = Answer {
        energy: -1.17,
        gradient: None,
        hessian: None,
    };
    store.put(&key, &r, &a, &Provenance::default(), "").unwrap();
    let hex = key.hex();
    let path = dir
        .path()
        .join("evals")
        .join(&hex[..2])
        .join(format!("{hex}.json"));
    assert_eq!(store.entry_path(&key), path);
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    assert_eq!(v["format"], 1);
    assert_eq!(v["key"], hex.as_str());
    assert_eq!(v["quantity"], "energy");
    assert_eq!(v["energy_hartree"], -1.17);
    assert!(v.get("gradient_hartree_per_bohr").is_none());
    // RFC 3339 UTC timestamp, e.g. 2026-12-02T07:30:00Z.
    let created = v["created"].as_str().unwrap();
    assert!(
        regex::Regex::new(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$")
            .unwrap()
            .is_match(created),
        "{created}"
    );
    // No output file when the engine wrote nothing.
    assert!(!store.output_path(&key).exists());
}

/// The key is SHA-256 of the byte encoding documented on `Key::new` and in DEVELOPERS.md.
/// Checked against Python's hashlib (an independent SHA-256 implementation) fed the same bytes.
#[test]
fn key_matches_the_documented_encoding() {
    let identity = "xtb 6.5.1 method=gfn2 acc=1.0";
    let elements = [Element(8), Element(1), Element(1)];
    let coords = DVector::from_vec(vec![
        0.0, -0.0, 0.119_262, 0.0, 0.763_239, -0.477_047, 0.0, -0.763_239, -0.477_047,
    ]);
    let key = Key::new(identity, -1, 2, &elements, &coords, Quantity::Gradient);
    let bits: Vec<String> = coords.iter().map(|c| c.to_bits().to_string()).collect();
    let script = format!(
        r#"
import hashlib, struct
h = hashlib.sha256()
h.update(b"cairn-evaluation-key-v1\0")
ident = "{identity}".encode()
h.update(struct.pack("<Q", len(ident))); h.update(ident)
h.update(struct.pack("<i", -1)); h.update(struct.pack("<I", 2))
els = [8, 1, 1]
h.update(struct.pack("<Q", len(els))); h.update(bytes(els))
bits = [{bits}]
h.update(struct.pack("<Q", len(bits)))
for b in bits: h.update(struct.pack("<Q", b))
q = b"gradient"
h.update(struct.pack("<Q", len(q))); h.update(q)
print(h.hexdigest())
"#,
        bits = bits.join(", ")
    );
    let out = std::process::Command::new("python3")
        .arg("-c")
        .arg(&script)
        .output()
        .expect("python3 is needed for this test (installed by .ci/setup)");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), key.hex());
    // −0.0 and 0.0 are different bits, so different keys (no rounding of coordinates).
    let mut flipped = coords.clone();
    flipped[1] = 0.0;
    assert_ne!(
        Key::new(identity, -1, 2, &elements, &flipped, Quantity::Gradient),
        key
    );
}

fn mb_evaluator(dir: &std::path::Path) -> (Evaluator, Arc<Store>) {
    let store = Arc::new(Store::open(dir).unwrap());
    let ev = Evaluator::new(
        Arc::new(MullerBrown),
        store.clone(),
        Arc::new(LocalExecutor::new(1)),
    );
    (ev, store)
}

fn mb_key(x: f64, y: f64, q: Quantity) -> (Key, Point) {
    let c = DVector::from_vec(vec![x, y, 0.0]);
    let k = Key::new("model:muller-brown:v1", 0, 1, &[Element::X], &c, q);
    (k, Point::new(c, q))
}

#[test]
fn garbage_and_truncated_entries_are_reported_and_replaced() {
    let dir = tempfile::tempdir().unwrap();
    let (ev, store) = mb_evaluator(dir.path());
    let sys = System::new(vec![Element::X], 0, 1).unwrap();
    let (k1, p1) = mb_key(0.2, 0.4, Quantity::Gradient);
    let (k2, p2) = mb_key(0.3, 0.4, Quantity::Gradient);
    block_on(ev.evaluate(&sys, &[p1.clone(), p2.clone()])).unwrap();
    store.flush().unwrap();
    let good = std::fs::read(store.entry_path(&k1)).unwrap();
    // k1: garbage; k2: a valid entry cut in half.
    std::fs::write(store.entry_path(&k1), b"\x00\xffnot json at all").unwrap();
    std::fs::write(store.entry_path(&k2), &good[..good.len() / 2]).unwrap();
    for k in [&k1, &k2] {
        match store.get(k) {
            Lookup::Unusable(why) => {
                assert!(why.contains("damaged"), "{why}");
                assert!(
                    why.contains(&store.entry_path(k).display().to_string()),
                    "{why}"
                );
            }
            other => panic!("expected Unusable, got {other:?}"),
        }
    }
    let check = store.check().unwrap();
    assert_eq!((check.usable, check.unusable.len()), (0, 2), "{check:?}");
    // The driver treats them as missing, counts them, evaluates anew and repairs the entries.
    let scoped = ev.scoped();
    let out = block_on(scoped.evaluate(&sys, &[p1, p2])).unwrap();
    let s = scoped.stats();
    assert_eq!((s.store_unusable, s.engine_runs, s.store_hits), (2, 2, 0));
    let (e, _, _) = cairn::engine::model::muller_brown(0.2, 0.4);
    assert_eq!(out[0].energy.to_bits(), e.to_bits());
    assert!(matches!(store.get(&k1), Lookup::Hit(_)));
    assert!(matches!(store.get(&k2), Lookup::Hit(_)));
}

#[test]
fn leftover_temporary_file_is_ignored() {
    let dir = tempfile::tempdir().unwrap();
    let (ev, store) = mb_evaluator(dir.path());
    let sys = System::new(vec![Element::X], 0, 1).unwrap();
    let (k, p) = mb_key(-0.1, 0.5, Quantity::Energy);
    // What a writer killed before its rename leaves: a partial temp file beside the entry name.
    let shard = store.entry_path(&k).parent().unwrap().to_path_buf();
    std::fs::create_dir_all(&shard).unwrap();
    std::fs::write(shard.join(".tmp-abc123"), b"{\"format\": 1, \"key\": \"").unwrap();
    assert!(matches!(store.get(&k), Lookup::Miss));
    let check = store.check().unwrap();
    assert_eq!(
        (check.usable, check.unusable.len(), check.temporary),
        (0, 0, 1)
    );
    block_on(ev.evaluate(&sys, &[p])).unwrap();
    let s = ev.stats();
    assert_eq!((s.store_unusable, s.engine_runs), (0, 1));
    assert!(matches!(store.get(&k), Lookup::Hit(_)));
}

#[test]
fn newer_format_entries_are_not_used_and_never_rewritten() {
    let dir = tempfile::tempdir().unwrap();
    let (ev, store) = mb_evaluator(dir.path());
    let sys = System::new(vec![Element::X], 0, 1).unwrap();
    let (k1, p1) = mb_key(0.5, 0.5, Quantity::Gradient);
    let (k2, p2) = mb_key(0.6, 0.5, Quantity::Gradient);
    block_on(ev.evaluate(&sys, std::slice::from_ref(&p1))).unwrap();
    store.flush().unwrap();
    // k1: same fields, format 2. k2: a format-2 entry we cannot parse at all.
    let mut v: serde_json::Value =
        serde_json::from_slice(&std::fs::read(store.entry_path(&k1)).unwrap()).unwrap();
    v["format"] = serde_json::json!(2);
    let newer1 = serde_json::to_vec(&v).unwrap();
    std::fs::write(store.entry_path(&k1), &newer1).unwrap();
    let newer2 = br#"{"format": 2, "answer": {"blob": "zzz"}}"#.to_vec();
    std::fs::create_dir_all(store.entry_path(&k2).parent().unwrap()).unwrap();
    std::fs::write(store.entry_path(&k2), &newer2).unwrap();
    for k in [&k1, &k2] {
        let Lookup::Unusable(why) = store.get(k) else {
            panic!("newer format used")
        };
        assert!(why.contains("format 2, newer"), "{why}");
    }
    let scoped = ev.scoped();
    block_on(scoped.evaluate(&sys, &[p1, p2])).unwrap();
    store.flush().unwrap();
    assert_eq!(scoped.stats().engine_runs, 2);
    assert_eq!(std::fs::read(store.entry_path(&k1)).unwrap(), newer1);
    assert_eq!(std::fs::read(store.entry_path(&k2)).unwrap(), newer2);
}

#[test]
fn entry_under_the_wrong_name_is_not_used() {
    let dir = tempfile::tempdir().unwrap();
    let (ev, store) = mb_evaluator(dir.path());
    let sys = System::new(vec![Element::X], 0, 1).unwrap();
    let (k1, p1) = mb_key(0.1, 0.1, Quantity::Energy);
    let (k2, _) = mb_key(0.2, 0.2, Quantity::Energy);
    block_on(ev.evaluate(&sys, &[p1])).unwrap();
    store.flush().unwrap();
    std::fs::create_dir_all(store.entry_path(&k2).parent().unwrap()).unwrap();
    std::fs::copy(store.entry_path(&k1), store.entry_path(&k2)).unwrap();
    let Lookup::Unusable(why) = store.get(&k2) else {
        panic!("copied entry used under another key")
    };
    assert!(why.contains("not its file name"), "{why}");
}

#[test]
fn queued_entries_answer_at_once_and_reach_the_disk() {
    let dir = tempfile::tempdir().unwrap();
    let el = [Element(1), Element(1)];
    let answer = Answer {
        energy: -1.1,
        gradient: Some(DVector::from_vec(vec![0.0, 0.0, -0.01, 0.0, 0.0, 0.01])),
        hessian: None,
    };
    let mut keys = Vec::new();
    {
        let store = Store::open(dir.path()).unwrap();
        for i in 0..50 {
            let c = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4 + 1e-3 * i as f64]);
            let r = req(&el, &c, Quantity::Gradient);
            let k = r.key();
            store
                .put_later(
                    &k,
                    &r,
                    &answer,
                    &Provenance::default(),
                    format!("out {i}\n"),
                )
                .unwrap();
            // Visible at once, whether or not the writer got to it yet.
            assert!(matches!(store.get(&k), Lookup::Hit(_)));
            keys.push(k);
        }
        store.flush().unwrap();
        for (i, k) in keys.iter().enumerate() {
            assert!(store.entry_path(k).is_file());
            assert_eq!(
                std::fs::read_to_string(store.output_path(k)).unwrap(),
                format!("out {i}\n")
            );
        }
        // More queued, then the store is dropped without an explicit flush.
        for i in 50..60 {
            let c = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4 + 1e-3 * i as f64]);
            let r = req(&el, &c, Quantity::Gradient);
            let k = r.key();
            store
                .put_later(&k, &r, &answer, &Provenance::default(), String::new())
                .unwrap();
            keys.push(k);
        }
    }
    let store = Store::open(dir.path()).unwrap();
    let check = store.check().unwrap();
    assert_eq!(
        (check.usable, check.unusable.len(), check.temporary),
        (60, 0, 0)
    );
    for k in &keys {
        assert!(matches!(store.get(k), Lookup::Hit(_)));
    }
}

#[test]
fn a_failed_background_write_is_reported() {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(dir.path()).unwrap();
    let el = [Element(1), Element(1)];
    let c = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4]);
    let r = req(&el, &c, Quantity::Energy);
    let k = r.key();
    // A plain file where the shard directory should be: the write cannot succeed.
    let shard = store.entry_path(&k).parent().unwrap().to_path_buf();
    std::fs::write(&shard, b"in the way").unwrap();
    let a = Answer {
        energy: -1.0,
        gradient: None,
        hessian: None,
    };
    store
        .put_later(&k, &r, &a, &Provenance::default(), String::new())
        .unwrap();
    let err = store.flush().unwrap_err().to_string();
    assert!(err.contains("could not be written"), "{err}");
    assert!(err.contains(&dir.path().display().to_string()), "{err}");
    // Later writes are refused with the same report, and the lost entry is not served.
    assert!(store
        .put_later(&k, &r, &a, &Provenance::default(), String::new())
        .is_err());
    assert!(matches!(store.get(&k), Lookup::Miss | Lookup::Unusable(_)));
}
