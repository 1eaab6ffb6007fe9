//! `cairn evaluate`: energy and gradient (and optionally the Hessian) of one geometry with one
//! engine, through the evaluation store.
//!
//! Exit status: 0 success, 1 error (file, input, engine), 2 usage error.

use crate::driver::{block_on, Evaluator, Source, System};
use crate::engine::{find_engine, Settings};
use crate::error::{Error, Result};
use crate::eval::{Point, Quantity};
use crate::molecule::Molecule;
use std::path::{Path, PathBuf};

/// Default store directory when neither `--store` nor `CAIRN_STORE` is given.
pub const DEFAULT_STORE: &str = ".cairn-store";

/// Evaluate the energy and gradient (and with --hessian the Hessian) of one geometry.
///
/// Results are filed in the evaluation store; asking again for the same geometry, engine and
/// settings answers from the store without running the engine. The store is the directory
/// given with --store, else $CAIRN_STORE, else ./.cairn-store.
/// Exit status: 0 success, 1 error, 2 usage error.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Geometry file (XYZ, Å; a pseudo-atom X line for model surfaces such as muller-brown).
    pub molecule: PathBuf,
    #[command(flatten)]
    pub choice: EngineChoice,
    /// Also compute the Cartesian Hessian.
    #[arg(long)]
    pub hessian: bool,
    /// Print one JSON object instead of text.
    #[arg(long)]
    pub json: bool,
    /// Engine jobs run at once (the gradient and the Hessian run side by side with 2).
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u64).range(1..))]
    pub jobs: u64,
}

/// The engine options every single-geometry and path command shares: which engine, its
/// settings, the electronic state, and where the store is.
#[derive(clap::Args, Debug, Clone)]
pub struct EngineChoice {
    /// Engine name: an adapter (e.g. xtb) or a built-in model surface (muller-brown).
    #[arg(long)]
    pub engine: String,
    /// Engine setting, repeatable (e.g. --set method=gfn2).
    #[arg(long = "set", value_name = "KEY=VALUE", value_parser = parse_setting)]
    pub set: Vec<(String, String)>,
    /// Total charge.
    #[arg(long, default_value_t = 0, allow_negative_numbers = true)]
    pub charge: i32,
    /// Spin multiplicity 2S+1 (1 singlet, 2 doublet, ...).
    #[arg(long, default_value_t = 1)]
    pub multiplicity: u32,
    /// Evaluation store directory (default: $CAIRN_STORE, else ./.cairn-store).
    #[arg(long, value_name = "DIR")]
    pub store: Option<PathBuf>,
}

impl EngineChoice {
    /// Put this charge and multiplicity on `m` (read from `file`) and check they fit it.
    pub fn system_of(&self, m: &mut Molecule, file: &Path) -> Result<System> {
        m.charge = self.charge;
        m.multiplicity = self.multiplicity;
        System::of(m).map_err(|e| {
            Error::invalid(format!(
                "{}: {e} (set them with --charge and --multiplicity)",
                file.display()
            ))
        })
    }

    /// The engine with its settings.
    pub fn find(&self) -> Result<std::sync::Arc<dyn crate::engine::Engine>> {
        let settings: Settings = self.set.iter().cloned().collect();
        find_engine(&self.engine, &settings)
    }

    /// The store directory: --store, else $CAIRN_STORE, else ./.cairn-store.
    pub fn store_dir(&self) -> PathBuf {
        store_dir(self.store.as_deref())
    }
}

/// Run `execute`-style work and turn an error into a message on stderr and exit status 1.
pub fn exit_status(r: Result<i32>) -> i32 {
    match r {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}

fn parse_setting(s: &str) -> std::result::Result<(String, String), String> {
    match s.split_once('=') {
        Some((k, v)) if !k.trim().is_empty() => Ok((k.trim().to_string(), v.trim().to_string())),
        _ => Err(format!("expected KEY=VALUE, got '{s}'")),
    }
}

/// Run the command; returns the exit status.
pub fn run(args: Args) -> i32 {
    match execute(&args) {
        Ok(text) => {
            print!("{text}");
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}

/// Where the store is: --store, else $CAIRN_STORE, else ./.cairn-store.
pub fn store_dir(arg: Option<&Path>) -> PathBuf {
    if let Some(p) = arg {
        return p.to_path_buf();
    }
    match std::env::var_os("CAIRN_STORE") {
        Some(v) if !v.is_empty() => PathBuf::from(v),
        _ => PathBuf::from(DEFAULT_STORE),
    }
}

fn execute(args: &Args) -> Result<String> {
    let mut molecule: Molecule = crate::xyz::read(&args.molecule)?;
    let system = args.choice.system_of(&mut molecule, &args.molecule)?;
    let engine = args.choice.find()?;
    let is_model = engine.is_model();
    let store = args.choice.store_dir();
    let jobs = usize::try_from(args.jobs).unwrap_or(1);
    let ev = Evaluator::local(engine.clone(), &store, jobs)?;
    let x = molecule.flat();
    let mut points = vec![Point::new(x.clone(), Quantity::Gradient)];
    if args.hessian {
        points.push(Point::new(x, Quantity::Hessian));
    }
    let results = block_on(async {
        let r = ev.evaluate_detailed(&system, &points).await;
        // File what was computed even when another point failed.
        let flushed = ev.flush().await;
        let r = r?;
        flushed?;
        Ok(r)
    })?;
    let grad_ev = results
        .first()
        .ok_or_else(|| Error::invalid("the engine returned no answer"))?;
    let energy = grad_ev.answer.energy;
    let gradient = grad_ev
        .answer
        .gradient
        .clone()
        .ok_or_else(|| Error::invalid("the engine returned no gradient"))?;
    let hessian = results.get(1).and_then(|e| e.answer.hessian.clone());
    let cached = results.iter().all(|e| e.source == Source::Store);
    let n = molecule.len();
    let symbols: Vec<&str> = molecule.elements.iter().map(|e| e.symbol()).collect();
    let grad_rows: Vec<[f64; 3]> = (0..n)
        .map(|i| [gradient[3 * i], gradient[3 * i + 1], gradient[3 * i + 2]])
        .collect();
    let (e_unit, g_unit, h_unit) = if is_model {
        ("surface units", "surface units", "surface units")
    } else {
        ("hartree", "hartree/bohr", "hartree/bohr^2")
    };
    if args.json {
        let mut obj = serde_json::json!({
            "engine": engine.name(),
            "engine_identity": engine.identity(),
            "molecule": args.molecule.display().to_string(),
            "symbols": symbols,
            "charge": system.charge(),
            "multiplicity": system.multiplicity(),
            "units": {"energy": e_unit, "gradient": g_unit, "hessian": h_unit},
            "energy_hartree": energy,
            "gradient_hartree_per_bohr": grad_rows,
            "cached": cached,
            "store": store.display().to_string(),
            "store_entries": results.iter().map(|e| e.entry.display().to_string()).collect::<Vec<_>>(),
            "engine_seconds": results.iter().map(|e| e.engine_seconds).sum::<f64>(),
        });
        if let (Some(h), Some(map)) = (&hessian, obj.as_object_mut()) {
            let rows: Vec<Vec<f64>> = (0..h.nrows())
                .map(|i| h.row(i).iter().copied().collect())
                .collect();
            map.insert("hessian_hartree_per_bohr2".into(), serde_json::json!(rows));
        }
        let mut s = serde_json::to_string_pretty(&obj)
            .map_err(|e| Error::invalid(format!("cannot encode the result as JSON: {e}")))?;
        s.push('\n');
        return Ok(s);
    }
    let (e_lab, g_lab, h_lab) = if is_model {
        ("(surface units)", "(surface units)", "(surface units)")
    } else {
        ("Eh", "Eh/bohr", "Eh/bohr²")
    };
    let mut s = String::new();
    s.push_str(&format!(
        "engine        {} ({})\n",
        engine.name(),
        engine.identity()
    ));
    s.push_str(&format!(
        "molecule      {}: {}, {} atom{}, charge {}, multiplicity {}\n",
        args.molecule.display(),
        molecule.formula(),
        n,
        if n == 1 { "" } else { "s" },
        system.charge(),
        system.multiplicity()
    ));
    if cached {
        s.push_str(&format!(
            "source        evaluation store {} (no engine run)\n",
            store.display()
        ));
    } else {
        let secs: f64 = results
            .iter()
            .filter(|e| e.source == Source::Engine)
            .map(|e| e.engine_seconds)
            .sum();
        s.push_str(&format!(
            "source        engine, {secs:.3} s; filed in {}\n",
            store.display()
        ));
    }
    s.push_str(&format!("energy        {energy:.12} {e_lab}\n"));
    s.push_str(&format!("gradient      {g_lab}, dE/dx per atom\n"));
    s.push_str(&format!(
        "   {:>4} {:<3} {:>20} {:>20} {:>20}\n",
        "atom", "", "x", "y", "z"
    ));
    for (i, (sym, r)) in symbols.iter().zip(&grad_rows).enumerate() {
        s.push_str(&format!(
            "   {:>4} {:<3} {:>20.12} {:>20.12} {:>20.12}\n",
            i + 1,
            sym,
            r[0],
            r[1],
            r[2]
        ));
    }
    if let Some(h) = &hessian {
        s.push_str(&format!(
            "Hessian       {h_lab}, {0} x {0}, Cartesian, atom-major (x1 y1 z1 x2 ...)\n",
            h.nrows()
        ));
        for i in 0..h.nrows() {
            let row: Vec<String> = h.row(i).iter().map(|v| format!("{v:>16.8e}")).collect();
            s.push_str(&format!("   {}\n", row.join(" ")));
        }
    }
    Ok(s)
}
