//! Content-addressed evaluation store.
//!
//! Every engine evaluation is filed under a key: SHA-256 over a canonical byte encoding of
//! everything that determines the result (see [`Key::new`] and DEVELOPERS.md, "Store,
//! executor, driver"). An entry is a JSON file `DIR/evals/ab/abcdef….json` (the first two hex
//! digits of the key name the shard directory) holding the answer in atomic units at full
//! precision, with the engine's raw output next to it in `abcdef….out`.
//!
//! Writes are atomic: a temporary file in the same directory, fsync, rename over the final name,
//! fsync of the directory. A reader therefore sees a whole entry or none; leftover temporary
//! files (from a killed writer) are never read. An entry that cannot be read anyway (damaged on
//! disk, edited by hand) is reported as [`Lookup::Unusable`] and treated as missing, never a
//! panic. An entry written by a newer Cairn (a `format` above [`FORMAT`]) is neither used nor
//! overwritten.
//!
//! [`Store::put`] writes one entry durably before returning; [`Store::put_later`] (used by the
//! driver) queues it for a background writer that writes batches with the same steps, so disk
//! syncs overlap engine runs; [`Store::flush`] waits for the queue.

use crate::elements::Element;
use crate::error::{Error, Result};
use crate::eval::{Answer, Quantity};
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::collections::HashMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, Weak};

/// The entry format this Cairn writes and understands.
pub const FORMAT: u32 = 1;

/// Tag at the start of the hashed byte stream; changes only with the key encoding.
const KEY_TAG: &[u8] = b"cairn-evaluation-key-v1\0";

/// The content address of one evaluation (SHA-256, 32 bytes).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Key([u8; 32]);

impl Key {
    /// Key of one evaluation. The hashed bytes are, in order (integers little-endian):
    /// the tag `cairn-evaluation-key-v1\0`; the engine identity (u64 byte length, UTF-8 bytes);
    /// charge (i32); multiplicity (u32); atom count (u64) and each atomic number (u8, 0 for the
    /// pseudo-atom X); coordinate count (u64) and each coordinate's IEEE-754 bits
    /// (`f64::to_bits`, u64); the quantity name (u64 byte length, `energy` / `gradient` /
    /// `hessian`).
    pub fn new(
        identity: &str,
        charge: i32,
        multiplicity: u32,
        elements: &[Element],
        coords: &DVector<f64>,
        quantity: Quantity,
    ) -> Key {
        let mut h = Sha256::new();
        h.update(KEY_TAG);
        h.update((identity.len() as u64).to_le_bytes());
        h.update(identity.as_bytes());
        h.update(charge.to_le_bytes());
        h.update(multiplicity.to_le_bytes());
        h.update((elements.len() as u64).to_le_bytes());
        for e in elements {
            h.update([e.0]);
        }
        h.update((coords.len() as u64).to_le_bytes());
        for c in coords.iter() {
            h.update(c.to_bits().to_le_bytes());
        }
        let q = quantity.as_str();
        h.update((q.len() as u64).to_le_bytes());
        h.update(q.as_bytes());
        Key(h.finalize().into())
    }

    /// Lower-case hex (64 characters).
    pub fn hex(&self) -> String {
        hex::encode(self.0)
    }
}

impl std::fmt::Display for Key {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.hex())
    }
}

/// One stored evaluation (the JSON written to `….json`). Numbers are atomic units (surface units
/// for model surfaces), written with enough digits to read back to the same bits.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Entry {
    /// Entry format; [`FORMAT`] for entries this Cairn writes.
    pub format: u32,
    /// The key, hex (repeats the file name; checked on read).
    pub key: String,
    /// Engine identity string (adapter name, version, settings).
    pub engine: String,
    /// Engine short name (e.g. `xtb`).
    pub engine_name: String,
    pub quantity: Quantity,
    pub charge: i32,
    pub multiplicity: u32,
    /// Atomic numbers (0 = pseudo-atom X).
    pub elements: Vec<u8>,
    /// Flat coordinates, 3N, bohr (surface units for model surfaces).
    pub coords_bohr: Vec<f64>,
    pub energy_hartree: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gradient_hartree_per_bohr: Option<Vec<f64>>,
    /// 3N rows of 3N, atom-major.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hessian_hartree_per_bohr2: Option<Vec<Vec<f64>>>,
    /// Remedies the engine applied before this result (empty on a first-try success).
    #[serde(default)]
    pub remedies: Vec<String>,
    /// Failed attempts before this result, as `kind: message` lines.
    #[serde(default)]
    pub failures: Vec<String>,
    /// Wall seconds of the successful engine run.
    pub engine_seconds: f64,
    /// When the entry was written, UTC, RFC 3339.
    pub created: String,
}

impl Entry {
    /// The entry for `answer` to `request`, stamped now.
    pub fn new(
        key: &Key,
        request: &EntryRequest<'_>,
        answer: &Answer,
        provenance: &Provenance,
    ) -> Entry {
        Entry {
            format: FORMAT,
            key: key.hex(),
            engine: request.identity.to_string(),
            engine_name: provenance.engine_name.clone(),
            quantity: request.quantity,
            charge: request.charge,
            multiplicity: request.multiplicity,
            elements: request.elements.iter().map(|e| e.0).collect(),
            coords_bohr: request.coords.iter().copied().collect(),
            energy_hartree: answer.energy,
            gradient_hartree_per_bohr: answer
                .gradient
                .as_ref()
                .map(|g| g.iter().copied().collect()),
            hessian_hartree_per_bohr2: answer.hessian.as_ref().map(|h| {
                (0..h.nrows())
                    .map(|i| h.row(i).iter().copied().collect())
                    .collect()
            }),
            remedies: provenance.remedies.clone(),
            failures: provenance.failures.clone(),
            engine_seconds: provenance.engine_seconds,
            created: now_rfc3339(),
        }
    }

    /// The stored answer as an [`Answer`]. Fails (with a reason) on inconsistent sizes.
    pub fn answer(&self) -> std::result::Result<Answer, String> {
        let gradient = self
            .gradient_hartree_per_bohr
            .as_ref()
            .map(|g| DVector::from_column_slice(g));
        let hessian = match &self.hessian_hartree_per_bohr2 {
            None => None,
            Some(rows) => {
                let n = rows.len();
                if let Some(r) = rows.iter().find(|r| r.len() != n) {
                    return Err(format!(
                        "Hessian row of length {} in a {n}-row Hessian",
                        r.len()
                    ));
                }
                Some(DMatrix::from_fn(n, n, |i, j| rows[i][j]))
            }
        };
        Ok(Answer {
            energy: self.energy_hartree,
            gradient,
            hessian,
        })
    }
}

/// What the engine call that produced an entry looked like (besides the answer).
#[derive(Debug, Clone, Default)]
pub struct Provenance {
    pub engine_name: String,
    pub remedies: Vec<String>,
    pub failures: Vec<String>,
    pub engine_seconds: f64,
}

/// What a lookup found.
#[derive(Debug, Clone)]
pub enum Lookup {
    /// A usable entry.
    Hit(Box<Entry>),
    /// No entry.
    Miss,
    /// An entry file exists but cannot be used (damaged, wrong key, newer format): the reason,
    /// naming the file. Treat it as missing.
    Unusable(String),
}

/// An evaluation store in one directory.
///
/// Writes come two ways: [`Store::put`] writes one entry durably before returning;
/// [`Store::put_later`] queues it for a background writer thread that files queued entries in
/// batches (same atomic steps, fsyncs shared by the batch), so disk syncs overlap engine runs.
/// Queued entries are visible to [`Store::get`] at once; [`Store::flush`] waits until they are
/// on disk. Dropping the store flushes.
pub struct Store {
    root: PathBuf,
    evals: PathBuf,
    /// Keys being evaluated right now in this process (see [`Store::lock_keys`]).
    inflight: Mutex<HashMap<Key, Weak<tokio::sync::Mutex<()>>>>,
    writer: Arc<WriterShared>,
    thread: Mutex<Option<std::thread::JoinHandle<()>>>,
}

impl std::fmt::Debug for Store {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Store").field("root", &self.root).finish()
    }
}

/// Most entries waiting for the background writer before `put_later` waits for room.
const MAX_QUEUED: usize = 4096;

/// One entry waiting to be written.
struct Pending {
    key: Key,
    /// The store's journal (`<store>/journal.log`), appended once the entry is on disk.
    journal: PathBuf,
    entry_path: PathBuf,
    output_path: PathBuf,
    entry: Arc<Entry>,
    raw_output: String,
}

#[derive(Default)]
struct WriterState {
    queue: Vec<Pending>,
    /// Entries queued or being written, by key (answers lookups before they reach the disk).
    pending: HashMap<Key, Arc<Entry>>,
    busy: bool,
    /// First write error of the background writer, reported by `flush` and `put_later`.
    error: Option<String>,
    shutdown: bool,
}

#[derive(Default)]
struct WriterShared {
    state: Mutex<WriterState>,
    cv: std::sync::Condvar,
}

impl WriterShared {
    fn lock(&self) -> std::sync::MutexGuard<'_, WriterState> {
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }
    fn wait<'a>(
        &self,
        g: std::sync::MutexGuard<'a, WriterState>,
    ) -> std::sync::MutexGuard<'a, WriterState> {
        self.cv.wait(g).unwrap_or_else(|e| e.into_inner())
    }
}

fn writer_loop(shared: Arc<WriterShared>) {
    loop {
        let batch = {
            let mut st = shared.lock();
            while st.queue.is_empty() && !st.shutdown {
                st = shared.wait(st);
            }
            if st.queue.is_empty() {
                return;
            }
            st.busy = true;
            std::mem::take(&mut st.queue)
        };
        shared.cv.notify_all();
        let written: Vec<(Key, Arc<Entry>)> =
            batch.iter().map(|p| (p.key, p.entry.clone())).collect();
        let result = write_batch(batch);
        let mut st = shared.lock();
        st.busy = false;
        for (k, e) in written {
            if st.pending.get(&k).is_some_and(|p| Arc::ptr_eq(p, &e)) {
                st.pending.remove(&k);
            }
        }
        if let Err(e) = result {
            tracing::error!("{e}");
            st.error.get_or_insert_with(|| e.to_string());
        }
        drop(st);
        shared.cv.notify_all();
    }
}

/// Write entries (and their raw outputs) atomically: all temp files written, all fsynced, all
/// renamed (each output before its entry), then every directory touched fsynced once.
/// Entries whose file on disk has a newer format are skipped. Returns how many were written.
fn write_batch(batch: Vec<Pending>) -> Result<usize> {
    let mut temps: Vec<(tempfile::NamedTempFile, PathBuf)> = Vec::new();
    let mut dirs: Vec<PathBuf> = Vec::new();
    let mut written = 0;
    for p in &batch {
        if let Some(f) = newer_format_on_disk(&p.entry_path) {
            tracing::warn!(
                "store entry {} has format {f}, newer than this Cairn understands ({FORMAT}); leaving it as it is",
                p.entry_path.display()
            );
            continue;
        }
        let json = serde_json::to_vec_pretty(&*p.entry).map_err(|e| {
            Error::invalid(format!(
                "cannot encode store entry {}: {e}",
                p.entry_path.display()
            ))
        })?;
        let dir = p
            .entry_path
            .parent()
            .unwrap_or(Path::new("."))
            .to_path_buf();
        if !dirs.contains(&dir) {
            ensure_dir(&dir)?;
            dirs.push(dir);
        }
        if !p.raw_output.is_empty() {
            temps.push((
                temp_with(&p.output_path, p.raw_output.as_bytes())?,
                p.output_path.clone(),
            ));
        }
        temps.push((temp_with(&p.entry_path, &json)?, p.entry_path.clone()));
        written += 1;
    }
    for (t, path) in &temps {
        t.as_file()
            .sync_all()
            .map_err(|e| Error::io(format!("cannot write {}", path.display()), e))?;
    }
    fault_kill_in_write();
    for (t, path) in temps {
        t.persist(&path)
            .map_err(|e| Error::io(format!("cannot rename into {}", path.display()), e.error))?;
    }
    for d in &dirs {
        sync_dir(d)?;
    }
    append_journal(&batch)?;
    Ok(written)
}

/// The store's journal file name: one line per entry written (its key in hex), appended after
/// the entry is durably on disk. Lets a user (and the resume tests) see what was computed
/// when, and that no finished evaluation was computed twice.
pub const JOURNAL: &str = "journal.log";

/// Append the batch's keys to the journal in one write (lines are short, so concurrent
/// appenders never interleave within a line).
fn append_journal(batch: &[Pending]) -> Result<()> {
    let Some(first) = batch.first() else {
        return Ok(());
    };
    let mut text = String::with_capacity(batch.len() * 65);
    for p in batch {
        text.push_str(&p.key.hex());
        text.push('\n');
    }
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(&first.journal)
        .map_err(|e| Error::io(format!("cannot open {}", first.journal.display()), e))?;
    f.write_all(text.as_bytes())
        .map_err(|e| Error::io(format!("cannot append to {}", first.journal.display()), e))
}

/// Test hook (fault injection): with `CAIRN_FAULT_KILL_IN_WRITE=N`, the process sends itself
/// SIGKILL in the middle of its N-th store batch (temporary files written and synced, nothing
/// renamed yet), the worst moment for a crash. Used by the resume tests; unset in normal use.
fn fault_kill_in_write() {
    use std::sync::atomic::{AtomicU64, Ordering};
    static SEEN: AtomicU64 = AtomicU64::new(0);
    let Some(n) = std::env::var("CAIRN_FAULT_KILL_IN_WRITE")
        .ok()
        .and_then(|v| v.parse::<u64>().ok())
    else {
        return;
    };
    if SEEN.fetch_add(1, Ordering::SeqCst) + 1 == n {
        // SAFETY: kill(2) on our own pid with a valid signal number has no memory effects.
        unsafe {
            libc::kill(libc::getpid(), libc::SIGKILL);
        }
    }
}

/// A temp file beside `path` holding `bytes` (not yet synced).
fn temp_with(path: &Path, bytes: &[u8]) -> Result<tempfile::NamedTempFile> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let mut tmp = tempfile::Builder::new()
        .prefix(".tmp-")
        .tempfile_in(dir)
        .map_err(|e| {
            Error::io(
                format!("cannot create a temporary file in {}", dir.display()),
                e,
            )
        })?;
    crate::xyz::share_readable(tmp.as_file());
    tmp.write_all(bytes)
        .map_err(|e| Error::io(format!("cannot write {}", path.display()), e))?;
    Ok(tmp)
}

impl Drop for Store {
    fn drop(&mut self) {
        self.writer.lock().shutdown = true;
        self.writer.cv.notify_all();
        let handle = self.thread.lock().unwrap_or_else(|e| e.into_inner()).take();
        if let Some(h) = handle {
            let _ = h.join();
        }
    }
}

/// Held while the keys it was made for are being evaluated; see [`Store::lock_keys`].
pub struct KeyLocks {
    _guards: Vec<tokio::sync::OwnedMutexGuard<()>>,
}

impl Store {
    /// Open (creating if needed) the store in directory `dir`.
    pub fn open(dir: impl AsRef<Path>) -> Result<Store> {
        let root = dir.as_ref().to_path_buf();
        let evals = root.join("evals");
        std::fs::create_dir_all(&evals).map_err(|e| {
            Error::io(
                format!(
                    "cannot create the evaluation store in {} (choose another place with --store DIR)",
                    evals.display()
                ),
                e,
            )
        })?;
        Ok(Store {
            root,
            evals,
            inflight: Mutex::new(HashMap::new()),
            writer: Arc::new(WriterShared::default()),
            thread: Mutex::new(None),
        })
    }

    /// The store directory.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// Path of the entry for `key`.
    pub fn entry_path(&self, key: &Key) -> PathBuf {
        let h = key.hex();
        self.evals.join(&h[..2]).join(format!("{h}.json"))
    }

    /// Path of the raw engine output kept with the entry for `key` (absent when the engine
    /// produced no output, e.g. built-in model surfaces).
    pub fn output_path(&self, key: &Key) -> PathBuf {
        let h = key.hex();
        self.evals.join(&h[..2]).join(format!("{h}.out"))
    }

    /// Where the raw output of a run that gave no usable answer is kept.
    pub fn failed_output_path(&self, key: &Key) -> PathBuf {
        self.root.join("failed").join(format!("{}.out", key.hex()))
    }

    /// Look an entry up. Never fails: problems come back as [`Lookup::Unusable`].
    pub fn get(&self, key: &Key) -> Lookup {
        if let Some(e) = self.writer.lock().pending.get(key).cloned() {
            return Lookup::Hit(Box::new((*e).clone()));
        }
        let path = self.entry_path(key);
        let bytes = match std::fs::read(&path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Lookup::Miss,
            Err(e) => {
                return Lookup::Unusable(format!(
                    "store entry {} cannot be read: {e}",
                    path.display()
                ))
            }
        };
        parse_entry(&bytes, key, &path)
    }

    /// File an entry with its raw engine output now, durably (atomically; see the module
    /// documentation).
    ///
    /// An existing entry of a newer format is left alone (returns `Ok(false)`); otherwise the
    /// entry is written and `Ok(true)` returned.
    pub fn put(
        &self,
        key: &Key,
        request: &EntryRequest<'_>,
        answer: &Answer,
        provenance: &Provenance,
        raw_output: &str,
    ) -> Result<bool> {
        let entry = Arc::new(Entry::new(key, request, answer, provenance));
        let n = write_batch(vec![self.pending(key, entry, raw_output.to_string())])?;
        Ok(n == 1)
    }

    /// Queue an entry for the background writer and return at once. The entry answers
    /// [`Store::get`] immediately; it is on disk after [`Store::flush`] (or when the store is
    /// dropped). Fails if an earlier background write failed. Waits only when very many
    /// entries are queued already.
    pub fn put_later(
        &self,
        key: &Key,
        request: &EntryRequest<'_>,
        answer: &Answer,
        provenance: &Provenance,
        raw_output: String,
    ) -> Result<()> {
        let entry = Arc::new(Entry::new(key, request, answer, provenance));
        let item = self.pending(key, entry.clone(), raw_output);
        {
            let mut st = self.writer.lock();
            if let Some(e) = &st.error {
                return Err(Error::invalid(format!(
                    "the evaluation store in {} could not be written: {e}",
                    self.root.display()
                )));
            }
            while st.queue.len() >= MAX_QUEUED {
                st = self.writer.wait(st);
            }
            st.pending.insert(*key, entry);
            st.queue.push(item);
        }
        {
            let mut t = self.thread.lock().unwrap_or_else(|e| e.into_inner());
            if t.is_none() {
                let shared = self.writer.clone();
                let handle = std::thread::Builder::new()
                    .name("cairn-store-writer".into())
                    .spawn(move || writer_loop(shared))
                    .map_err(|e| Error::io("cannot start the store writer thread", e))?;
                *t = Some(handle);
            }
        }
        self.writer.cv.notify_all();
        Ok(())
    }

    /// Wait until every entry queued with [`Store::put_later`] is on disk. Reports the first
    /// background write error, if any.
    pub fn flush(&self) -> Result<()> {
        let mut st = self.writer.lock();
        while !st.queue.is_empty() || st.busy {
            st = self.writer.wait(st);
        }
        match &st.error {
            Some(e) => Err(Error::invalid(format!(
                "the evaluation store in {} could not be written: {e}",
                self.root.display()
            ))),
            None => Ok(()),
        }
    }

    fn pending(&self, key: &Key, entry: Arc<Entry>, raw_output: String) -> Pending {
        Pending {
            key: *key,
            journal: self.root.join(JOURNAL),
            entry_path: self.entry_path(key),
            output_path: self.output_path(key),
            entry,
            raw_output,
        }
    }

    /// Keep the raw output of a run that gave no usable answer; returns where it went.
    pub fn keep_failed_output(&self, key: &Key, raw_output: &str) -> Result<PathBuf> {
        let path = self.failed_output_path(key);
        let dir = self.root.join("failed");
        ensure_dir(&dir)?;
        write_atomic_nosync_dir(&path, raw_output.as_bytes())?;
        sync_dir(&dir)?;
        Ok(path)
    }

    /// Take the in-process locks of `keys` (sorted and deduplicated here, so two callers never
    /// deadlock). While held, no other caller in this process holding the same store evaluates
    /// those keys; the holder should look the keys up again before running them, so concurrent
    /// identical requests run the engine once.
    pub async fn lock_keys(&self, keys: &[Key]) -> KeyLocks {
        let mut keys = keys.to_vec();
        keys.sort();
        keys.dedup();
        let mutexes: Vec<Arc<tokio::sync::Mutex<()>>> = {
            let mut map = self.inflight.lock().unwrap_or_else(|e| e.into_inner());
            map.retain(|_, w| w.strong_count() > 0);
            keys.iter()
                .map(|k| {
                    if let Some(m) = map.get(k).and_then(Weak::upgrade) {
                        m
                    } else {
                        let m = Arc::new(tokio::sync::Mutex::new(()));
                        map.insert(*k, Arc::downgrade(&m));
                        m
                    }
                })
                .collect()
        };
        let mut guards = Vec::with_capacity(mutexes.len());
        for m in mutexes {
            guards.push(m.lock_owned().await);
        }
        KeyLocks { _guards: guards }
    }

    /// Check every entry file: how many are usable, which are not (with reasons), and how many
    /// leftover temporary files there are (from writers killed before their rename).
    pub fn check(&self) -> Result<CheckReport> {
        let mut report = CheckReport::default();
        let shards = std::fs::read_dir(&self.evals)
            .map_err(|e| Error::io(format!("cannot list {}", self.evals.display()), e))?;
        for shard in shards.flatten() {
            let Ok(files) = std::fs::read_dir(shard.path()) else {
                continue;
            };
            for f in files.flatten() {
                let p = f.path();
                let name = f.file_name().to_string_lossy().into_owned();
                if let Some(hex) = name.strip_suffix(".json") {
                    let key = hex::decode(hex)
                        .ok()
                        .and_then(|b| <[u8; 32]>::try_from(b.as_slice()).ok())
                        .map(Key);
                    let Some(key) = key else {
                        report
                            .unusable
                            .push(format!("{}: not a store entry name", p.display()));
                        continue;
                    };
                    match self.get(&key) {
                        Lookup::Hit(_) => report.usable += 1,
                        Lookup::Miss => {}
                        Lookup::Unusable(why) => report.unusable.push(why),
                    }
                } else if name.ends_with(".out") {
                    report.outputs += 1;
                } else {
                    report.temporary += 1;
                }
            }
        }
        Ok(report)
    }
}

/// What a [`Store::check`] found.
#[derive(Debug, Clone, Default)]
pub struct CheckReport {
    pub usable: usize,
    /// Entry files that cannot be used, each with its reason.
    pub unusable: Vec<String>,
    /// Raw output files.
    pub outputs: usize,
    /// Other files (leftover temporary files of killed writers; ignored by lookups).
    pub temporary: usize,
}

/// The request half of an entry: what the key was made from.
#[derive(Debug, Clone, Copy)]
pub struct EntryRequest<'a> {
    pub identity: &'a str,
    pub charge: i32,
    pub multiplicity: u32,
    pub elements: &'a [Element],
    pub coords: &'a DVector<f64>,
    pub quantity: Quantity,
}

impl EntryRequest<'_> {
    pub fn key(&self) -> Key {
        Key::new(
            self.identity,
            self.charge,
            self.multiplicity,
            self.elements,
            self.coords,
            self.quantity,
        )
    }
}

#[derive(Deserialize)]
struct FormatProbe {
    format: u32,
}

fn parse_entry(bytes: &[u8], key: &Key, path: &Path) -> Lookup {
    let entry: Entry = match serde_json::from_slice(bytes) {
        Ok(e) => e,
        Err(err) => {
            return match serde_json::from_slice::<FormatProbe>(bytes) {
                Ok(p) if p.format > FORMAT => Lookup::Unusable(format!(
                    "store entry {} has format {}, newer than this Cairn understands ({FORMAT}); evaluating anew without overwriting it",
                    path.display(),
                    p.format
                )),
                _ => Lookup::Unusable(format!(
                    "store entry {} is damaged ({err}); evaluating anew",
                    path.display()
                )),
            }
        }
    };
    if entry.format > FORMAT {
        return Lookup::Unusable(format!(
            "store entry {} has format {}, newer than this Cairn understands ({FORMAT}); evaluating anew without overwriting it",
            path.display(),
            entry.format
        ));
    }
    if entry.key != key.hex() {
        return Lookup::Unusable(format!(
            "store entry {} records key {}, not its file name; evaluating anew",
            path.display(),
            entry.key
        ));
    }
    if let Err(why) = entry
        .answer()
        .and_then(|a| a.validate(entry.quantity, entry.coords_bohr.len()))
    {
        return Lookup::Unusable(format!(
            "store entry {} holds an invalid answer ({why}); evaluating anew",
            path.display()
        ));
    }
    Lookup::Hit(Box::new(entry))
}

/// The format of the entry at `path` if it is readable and newer than [`FORMAT`].
fn newer_format_on_disk(path: &Path) -> Option<u32> {
    let bytes = std::fs::read(path).ok()?;
    let p: FormatProbe = serde_json::from_slice(&bytes).ok()?;
    (p.format > FORMAT).then_some(p.format)
}

fn ensure_dir(dir: &Path) -> Result<()> {
    match std::fs::create_dir(dir) {
        Ok(()) => {
            // Make the new directory itself durable.
            if let Some(parent) = dir.parent() {
                sync_dir(parent)?;
            }
            Ok(())
        }
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => Ok(()),
        Err(_) => std::fs::create_dir_all(dir)
            .map_err(|e| Error::io(format!("cannot create directory {}", dir.display()), e)),
    }
}

/// Temp file in the same directory, write, fsync, rename. The caller fsyncs the directory.
fn write_atomic_nosync_dir(path: &Path, bytes: &[u8]) -> Result<()> {
    let tmp = temp_with(path, bytes)?;
    tmp.as_file()
        .sync_all()
        .map_err(|e| Error::io(format!("cannot write {}", path.display()), e))?;
    tmp.persist(path)
        .map_err(|e| Error::io(format!("cannot rename into {}", path.display()), e.error))?;
    Ok(())
}

fn sync_dir(dir: &Path) -> Result<()> {
    std::fs::File::open(dir)
        .and_then(|f| f.sync_all())
        .map_err(|e| Error::io(format!("cannot sync directory {}", dir.display()), e))
}

/// Current UTC time as RFC 3339 (seconds).
pub(crate) fn now_rfc3339() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0);
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    // Civil date from days since 1970-01-01 (H. Hinnant's algorithm, common practice).
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        (rem % 3600) / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc3339_is_well_formed() {
        let s = now_rfc3339();
        assert_eq!(s.len(), 20, "{s}");
        assert!(s.starts_with("20"), "{s}");
        assert!(s.ends_with('Z'));
    }

    #[test]
    fn key_changes_with_every_input() {
        let c = DVector::from_vec(vec![0.1, 0.2, 0.3]);
        let base = Key::new("e", 0, 1, &[Element(1)], &c, Quantity::Gradient);
        let mut c2 = c.clone();
        c2[2] = f64::from_bits(c[2].to_bits() + 1);
        let variants = [
            Key::new("f", 0, 1, &[Element(1)], &c, Quantity::Gradient),
            Key::new("e", 1, 1, &[Element(1)], &c, Quantity::Gradient),
            Key::new("e", 0, 2, &[Element(1)], &c, Quantity::Gradient),
            Key::new("e", 0, 1, &[Element(2)], &c, Quantity::Gradient),
            Key::new("e", 0, 1, &[Element(1)], &c2, Quantity::Gradient),
            Key::new("e", 0, 1, &[Element(1)], &c, Quantity::Hessian),
        ];
        for v in variants {
            assert_ne!(v, base);
        }
        assert_eq!(
            base,
            Key::new("e", 0, 1, &[Element(1)], &c.clone(), Quantity::Gradient)
        );
    }
}
