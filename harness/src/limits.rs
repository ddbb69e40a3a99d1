//! Bounds that keep every input finite in memory and time: file sizes read before parsing, the
//! size of a matrix, the steps of a cell, delays. Each is stated here once, checked where the
//! input is read, and quoted in the message that refuses it (README, "Limits").

use std::io::Read;
use std::path::Path;

/// Largest scenario file read, bytes (the default scenario is about 2 kB).
pub const MAX_SCENARIO_BYTES: u64 = 1 << 20;
/// Largest robot facts file read, bytes.
pub const MAX_FACTS_BYTES: u64 = 1 << 20;
/// Largest URDF read, bytes (a detailed 40-joint robot without meshes inlined is < 1 MB).
pub const MAX_URDF_BYTES: u64 = 16 << 20;
/// Deepest element nesting accepted in a URDF (a URDF is flat: robot → link → inertial →
/// origin is 4 deep), checked by a streaming scan before the recursive parser sees it.
pub const MAX_XML_DEPTH: usize = controllers_depth();
/// Deepest array/table nesting accepted in a TOML file, checked before the parser sees it.
pub const MAX_TOML_DEPTH: usize = 32;

/// Most cells one matrix may have (at about 1 s of compute per cell, 10 core-days).
pub const MAX_CELLS: usize = 1_000_000;
/// Most values one axis may list.
pub const MAX_AXIS_VALUES: usize = 1000;
/// Most plant steps one cell may take (duration / dt): bounds per-cell memory (one timing
/// sample per control step) and time.
pub const MAX_STEPS_PER_CELL: f64 = 2.0e6;
/// Smallest plant step, s.
pub const MIN_DT: f64 = 1e-5;
/// Shortest cell, s: at least this, and at least ten control periods of the slowest rate, so
/// every cell has control steps and closed stance phases to average.
pub const MIN_DURATION_S: f64 = 0.5;
/// Longest observation or actuator delay, s, and in plant steps (each delayed step keeps one
/// state in a ring buffer).
pub const MAX_DELAY_S: f64 = 0.5;
pub const MAX_DELAY_STEPS: f64 = 10_000.0;
/// Largest seed count.
pub const MAX_SEEDS: u32 = 1000;
/// Plant steps simulated per controller by `check` to estimate run time (bounded whatever dt).
pub const CHECK_PROBE_STEPS: usize = 500;
/// Two axis values closer than this (relative to the larger magnitude, or absolute below 1)
/// are the same value: |a − b| ≤ AXIS_TOLERANCE · max(1, |a|, |b|).
pub const AXIS_TOLERANCE: f64 = 1e-9;

const fn controllers_depth() -> usize {
    gripsweep_controllers::model::MAX_URDF_DEPTH
}

/// Whether two axis values count as one (see [`AXIS_TOLERANCE`]).
pub fn same_axis_value(a: f64, b: f64) -> bool {
    (a - b).abs() <= AXIS_TOLERANCE * 1f64.max(a.abs()).max(b.abs())
}

/// Read a text file of at most `limit` bytes: a regular file only (a device or pipe could be
/// endless), read through `take(limit + 1)` so even a file that grows while read stops there.
/// `what` names the file's role in messages ("the scenario file").
pub fn read_text_bounded(path: &Path, limit: u64, what: &str) -> Result<String, String> {
    let shown = path.display();
    let meta = std::fs::metadata(path).map_err(|e| format!("{shown}: cannot read {what}: {e}"))?;
    if !meta.is_file() {
        return Err(format!(
            "{shown}: cannot read {what}: not a regular file (a device, pipe or folder)"
        ));
    }
    if meta.len() > limit {
        return Err(format!(
            "{shown}: {what} is {} bytes: allowed: at most {limit} bytes",
            meta.len()
        ));
    }
    let file =
        std::fs::File::open(path).map_err(|e| format!("{shown}: cannot read {what}: {e}"))?;
    let mut bytes = Vec::new();
    file.take(limit + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| format!("{shown}: cannot read {what}: {e}"))?;
    if bytes.len() as u64 > limit {
        return Err(format!(
            "{shown}: {what} is larger than {limit} bytes (it grew while read): allowed: at most {limit} bytes"
        ));
    }
    String::from_utf8(bytes).map_err(|e| {
        format!(
            "{shown}: {what} is not UTF-8 text (invalid byte at offset {})",
            e.utf8_error().valid_up_to()
        )
    })
}

/// Refuse TOML nested deeper than [`MAX_TOML_DEPTH`] before a recursive parser sees it: a
/// one-pass scan that follows strings and comments and counts open `[`/`{` (arrays and inline
/// tables; table headers `[a.b]` open and close on one line and count one).
pub fn check_toml_depth(text: &str) -> Result<(), String> {
    let b = text.as_bytes();
    let (mut i, mut depth, mut line) = (0usize, 0usize, 1usize);
    while i < b.len() {
        match b[i] {
            b'\n' => line += 1,
            b'#' => {
                while i < b.len() && b[i] != b'\n' {
                    i += 1;
                }
                continue;
            }
            q @ (b'"' | b'\'') => {
                let triple = b[i..].starts_with(if q == b'"' { b"\"\"\"" } else { b"'''" });
                let step = if triple { 3 } else { 1 };
                i += step;
                while i < b.len() {
                    if q == b'"' && b[i] == b'\\' {
                        i += 2;
                        continue;
                    }
                    if b[i] == b'\n' {
                        line += 1;
                        if !triple {
                            break;
                        }
                    }
                    if b[i] == q && (!triple || b[i..].starts_with(&[q, q, q])) {
                        i += step;
                        break;
                    }
                    i += 1;
                }
                continue;
            }
            b'[' | b'{' => {
                depth += 1;
                if depth > MAX_TOML_DEPTH {
                    return Err(format!(
                        "line {line}: arrays or tables nested more than {MAX_TOML_DEPTH} deep: allowed: at most {MAX_TOML_DEPTH}"
                    ));
                }
            }
            b']' | b'}' => depth = depth.saturating_sub(1),
            _ => {}
        }
        i += 1;
    }
    Ok(())
}

/// Threads a run may use: 1 to what the machine offers (`available_parallelism`, which
/// honours CPU quotas of containers and schedulers). Above it the command is refused (exit 2)
/// rather than clamped, so a job script that asks for more than its allocation finds out.
pub fn check_threads(flag: Option<usize>) -> Result<Option<usize>, String> {
    let Some(n) = flag else { return Ok(None) };
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    if n == 0 || n > cores {
        return Err(format!(
            "--threads {n}: allowed: 1 to {cores} (the cores this machine offers)"
        ));
    }
    Ok(Some(n))
}
