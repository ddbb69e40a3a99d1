//! The safety of a run folder: what `--force` may replace (only a folder this tool made, never
//! the current folder, an ancestor of it or an input of the command, and only the files the
//! tool writes), the exclusive lock a writer holds for its life, the hashes of every input
//! that shapes a cell, and reading the rows of a folder back as bytes, a torn last line cut.

use crate::matrix::Cell;
use crate::runner::{CELLS_FILE, MANIFEST_FILE, RunError, TIMING_FILE};
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use std::collections::BTreeSet;
use std::fs::{File, OpenOptions, TryLockError};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

/// The lock file inside a run folder; it holds the PID of the last process that locked it.
pub const LOCK_FILE: &str = "run.lock";

/// Every file this tool writes at the top of a run folder (besides `plots/`); `--force`
/// removes these and nothing else.
fn tool_files() -> Vec<String> {
    let mut names: Vec<String> = [
        CELLS_FILE,
        TIMING_FILE,
        MANIFEST_FILE,
        crate::onset::ONSET_FILE,
        crate::tuning::GAINS_FILE,
        crate::report::SUMMARY_MD,
        crate::report::SUMMARY_CSV,
        crate::report::REPORT_HTML,
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let tmp: Vec<String> = names.iter().map(|n| format!("{n}.tmp")).collect();
    names.extend(tmp);
    names
}

pub fn sha256_hex(text: &str) -> String {
    Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// What is at an output path.
#[derive(Debug)]
pub enum FolderState {
    Missing,
    /// A folder with nothing in it (or only a lock file).
    Empty,
    /// A folder whose `manifest.json` says this tool made it.
    RunFolder(Value),
    /// Anything else: a file, a folder of other files, an unreadable manifest.
    Foreign(String),
}

pub fn folder_state(dir: &Path) -> FolderState {
    let meta = match std::fs::symlink_metadata(dir) {
        Err(_) => return FolderState::Missing,
        Ok(m) => m,
    };
    if !meta.is_dir() {
        return FolderState::Foreign("not a folder".into());
    }
    let Ok(entries) = std::fs::read_dir(dir) else {
        return FolderState::Foreign("cannot be listed".into());
    };
    let names: Vec<String> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    if names.iter().all(|n| n == LOCK_FILE) {
        return FolderState::Empty;
    }
    if !names.iter().any(|n| n == MANIFEST_FILE) {
        return FolderState::Foreign(format!("no {MANIFEST_FILE} of this tool in it"));
    }
    match read_manifest(dir) {
        Ok(m) if m["tool"] == "gripsweep" => FolderState::RunFolder(m),
        Ok(_) => FolderState::Foreign(format!("its {MANIFEST_FILE} is not one of this tool")),
        Err(e) => FolderState::Foreign(e),
    }
}

/// Largest manifest read (the scenario text is inside; scenarios are at most 1 MiB).
const MAX_MANIFEST_BYTES: u64 = 4 << 20;

pub fn read_manifest(dir: &Path) -> Result<Value, String> {
    let p = dir.join(MANIFEST_FILE);
    let text = crate::limits::read_text_bounded(&p, MAX_MANIFEST_BYTES, "the manifest")?;
    serde_json::from_str(&text).map_err(|e| format!("{}: not valid JSON: {e}", p.display()))
}

/// Refuse to replace `out` unless it is a run folder of this tool (or empty) that is neither
/// the current folder nor an ancestor of it, and holds none of `inputs`. Nothing is touched.
pub fn check_replaceable(out: &Path, inputs: &[PathBuf]) -> Result<(), RunError> {
    let shown = out.display();
    let canon = std::fs::canonicalize(out).map_err(|e| {
        RunError::input(format!("{shown}: --force: cannot resolve the folder: {e}"))
    })?;
    if let Ok(cwd) = std::env::current_dir().and_then(std::fs::canonicalize)
        && cwd.starts_with(&canon)
    {
        return Err(RunError::input(format!(
            "{shown}: --force: refusing to replace the current folder or one that contains it"
        )));
    }
    for input in inputs {
        if let Ok(p) = std::fs::canonicalize(input)
            && p.starts_with(&canon)
        {
            return Err(RunError::input(format!(
                "{shown}: --force: refusing to replace a folder that holds an input of this command ({})",
                input.display()
            )));
        }
    }
    match folder_state(out) {
        FolderState::Missing | FolderState::Empty | FolderState::RunFolder(_) => Ok(()),
        FolderState::Foreign(why) => Err(RunError::input(format!(
            "{shown}: --force: not a run folder of gripsweep ({why}); refusing to replace it: choose another --out, or empty it yourself"
        ))),
    }
}

/// Remove the files this tool writes in a run folder (not the lock, not anything else: a
/// user's own files in it stay).
pub fn remove_tool_files(dir: &Path) -> Result<(), RunError> {
    let gone = |p: &Path, e: std::io::Error| {
        RunError::other(format!("{}: cannot remove: {e}", p.display()))
    };
    for name in tool_files() {
        let p = dir.join(&name);
        if p.is_file() {
            std::fs::remove_file(&p).map_err(|e| gone(&p, e))?;
        }
    }
    let plots = dir.join(crate::report::PLOTS_DIR);
    if plots.is_dir() {
        let entries = std::fs::read_dir(&plots).map_err(|e| gone(&plots, e))?;
        for e in entries.filter_map(|e| e.ok()) {
            let p = e.path();
            let ours = p.extension().is_some_and(|x| x == "svg" || x == "png");
            if ours && p.is_file() {
                std::fs::remove_file(&p).map_err(|e| gone(&p, e))?;
            }
        }
        // Left in place when it holds anything else.
        let _ = std::fs::remove_dir(&plots);
    }
    Ok(())
}

/// An exclusive OS lock (`flock` on Unix) on the run folder's lock file, held while this value
/// lives; the OS drops it when the process ends in any way, so a killed run leaves no stale
/// lock.
#[derive(Debug)]
pub struct RunLock {
    _file: File,
}

/// Lock `dir` (which exists) for writing, or refuse at once naming the holder's PID.
pub fn lock(dir: &Path) -> Result<RunLock, RunError> {
    let p = dir.join(LOCK_FILE);
    let mut file = OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(false)
        .open(&p)
        .map_err(|e| RunError::other(format!("{}: cannot open the lock file: {e}", p.display())))?;
    match file.try_lock() {
        Ok(()) => {}
        Err(TryLockError::WouldBlock) => return Err(busy(dir, &mut file)),
        Err(TryLockError::Error(e)) => {
            return Err(RunError::other(format!(
                "{}: cannot lock (does this file system support locks?): {e}",
                p.display()
            )));
        }
    }
    file.set_len(0)
        .and_then(|()| writeln!(file, "{}", std::process::id()))
        .and_then(|()| file.sync_data())
        .map_err(|e| RunError::other(format!("{}: {e}", p.display())))?;
    Ok(RunLock { _file: file })
}

fn busy(dir: &Path, file: &mut File) -> RunError {
    let mut text = String::new();
    let _ = file.take(64).read_to_string(&mut text);
    let pid = text.trim();
    RunError::input(format!(
        "{}: another gripsweep process (PID {}) is writing this run folder; wait for it to end, or end it, and try again",
        dir.display(),
        if pid.is_empty() { "unknown" } else { pid }
    ))
}

/// Refuse to read a folder another process is writing (a shard still running), by taking and
/// at once dropping a shared lock on its lock file. A folder without one is not being written.
pub fn check_not_written(dir: &Path) -> Result<(), RunError> {
    let p = dir.join(LOCK_FILE);
    let Ok(mut file) = File::open(&p) else {
        return Ok(());
    };
    match file.try_lock_shared() {
        Ok(()) => Ok(()),
        Err(TryLockError::WouldBlock) => Err(busy(dir, &mut file)),
        Err(TryLockError::Error(_)) => Ok(()),
    }
}

/// One input file in the manifest: where it was read, and the SHA-256 of its text.
pub fn input_entry(path: &str, text: &str) -> Value {
    json!({ "path": path, "sha256": sha256_hex(text) })
}

/// Compare the inputs recorded in a manifest (`then`) with those of this command (`now`):
/// every role in either must have the same hash. The message names the file that differs.
pub fn compare_inputs(what: &str, then: &Value, now: &Value) -> Result<(), String> {
    let (Some(a), Some(b)) = (then.as_object(), now.as_object()) else {
        return Err(format!(
            "{what}: its manifest records no input hashes (`inputs`); it was made by an older version and cannot be checked: start a new run folder"
        ));
    };
    let roles: BTreeSet<&String> = a.keys().chain(b.keys()).collect();
    for role in roles {
        let (x, y) = (&a.get(role), &b.get(role));
        let hash = |v: &Option<&Value>| v.and_then(|v| v["sha256"].as_str()).map(String::from);
        let path = |v: &Option<&Value>| {
            v.and_then(|v| v["path"].as_str())
                .unwrap_or("(none)")
                .to_string()
        };
        if hash(x) != hash(y) {
            return Err(format!(
                "{what}: input `{role}` differs: now {} (sha256 {}), the folder was made with {} (sha256 {}); refusing to mix results",
                path(y),
                hash(y).as_deref().map_or("none", |h| &h[..h.len().min(12)]),
                path(x),
                hash(x).as_deref().map_or("none", |h| &h[..h.len().min(12)]),
            ));
        }
    }
    Ok(())
}

/// The complete lines of a CSV file read as bytes: everything up to and including the last
/// newline. A torn last line (a kill mid-write) is left out whatever bytes it holds, even half
/// of a multi-byte character. Returns the kept bytes and whether anything was left out.
pub fn complete_lines(path: &Path) -> Result<(Vec<u8>, bool), String> {
    let meta =
        std::fs::metadata(path).map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    if !meta.is_file() {
        return Err(format!("{}: not a regular file", path.display()));
    }
    let mut bytes =
        std::fs::read(path).map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    let keep = bytes.iter().rposition(|b| *b == b'\n').map_or(0, |i| i + 1);
    let torn = keep < bytes.len();
    bytes.truncate(keep);
    Ok((bytes, torn))
}

/// Check the rows of a run-folder CSV (its complete lines, `bytes`): the header must be
/// `header` (by names), every record must be UTF-8 with all its fields, and `check` must
/// accept it. Errors name the file and line. Returns the records.
pub fn check_rows(
    path: &Path,
    bytes: &[u8],
    header: &[String],
    mut check: impl FnMut(&csv::StringRecord) -> Result<(), String>,
) -> Result<Vec<csv::StringRecord>, String> {
    let shown = path.display();
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(bytes);
    let found = rdr
        .headers()
        .map_err(|e| format!("{shown}: line 1: {e}"))?
        .clone();
    if found.iter().ne(header.iter().map(String::as_str)) {
        return Err(format!(
            "{shown}: line 1: the columns are not this version's ({}); it cannot be continued or merged",
            header.join(",")
        ));
    }
    let mut rows = Vec::new();
    let mut rec = csv::StringRecord::new();
    loop {
        let line = rdr.position().line();
        match rdr.read_record(&mut rec) {
            Ok(false) => break,
            Ok(true) => {
                let line = rec.position().map_or(line, |p| p.line());
                check(&rec).map_err(|e| format!("{shown}: line {line}: {e}"))?;
                rows.push(rec.clone());
            }
            Err(e) => {
                let line = e.position().map_or(line, |p| p.line());
                return Err(format!("{shown}: line {line}: not a complete row: {e}"));
            }
        }
    }
    Ok(rows)
}

/// The matrix a manifest records (its `axes` and `seeds`), expanded into cells, so rows can be
/// checked without the scenario's files.
pub fn cells_of_manifest(m: &crate::run_format::Manifest) -> Result<Vec<Cell>, String> {
    // The names are checked against what this build knows (a manifest is a file).
    let laws = gripsweep_controllers::laws::law_names();
    let actuators: Vec<&str> = crate::plant::actuator::ActuatorKind::ALL
        .iter()
        .map(|k| k.name())
        .collect();
    let values = m.axis_values()?;
    for (a, vs) in crate::run_format::AXES.iter().zip(&values) {
        for v in vs {
            if let (crate::run_format::AxisKind::Name, Some(n)) = (a.kind, v.name()) {
                let known: &[&str] = match a.name {
                    "controller" => &laws,
                    "actuator" => &actuators,
                    _ => &[],
                };
                if !known.is_empty() && !known.contains(&n) {
                    return Err(format!("field `axes.{}`: unknown {} '{n}'", a.name, a.name));
                }
            }
        }
    }
    let axes = crate::scenario::Axes { values };
    let seeds = Some(m.seeds)
        .filter(|s| (1..=crate::limits::MAX_SEEDS).contains(s))
        .ok_or("field `seeds` out of range")?;
    let count = axes.len_product(seeds);
    if count.is_none_or(|n| n > crate::limits::MAX_CELLS) {
        return Err(format!(
            "the matrix is larger than {} cells",
            crate::limits::MAX_CELLS
        ));
    }
    Ok(crate::matrix::expand_axes(&axes, seeds))
}
