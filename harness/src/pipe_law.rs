//! Piped laws: a control law served by a user's program, in any language, over its stdin and
//! stdout with the binary protocol of `docs/pipe-protocol.md` (version [`PROTOCOL_VERSION`]).
//!
//! The scenario declares one under its own name (`[external.<name>]`, see [`parse_external`]);
//! the name then works in `axes.controller`. Each declared law owns a **pool of child
//! processes** ([`ExternalLaw`]): a cell takes an idle child (or starts one), sends it a `CELL`
//! message that resets it, drives it one `STEP` per control step, and gives it back when the
//! cell ends. So a child serves many cells one after another, at most one cell at a time, and a
//! run holds at most as many children as cells run at once (the rayon workers). Results do not
//! depend on which child serves which cell as long as the program starts every cell from the
//! `CELL` message alone (the protocol requires it), so they are the same whatever the thread
//! count.
//!
//! A child that does not answer within the time-out, exits, or answers with a malformed frame
//! ends its cell with status `error` (the message names the law, what went wrong, the instant
//! and the child's last stderr lines); it is killed and waited for at once and never reused.
//! Idle children are told `BYE` and waited for when the law is dropped (the end of the run),
//! and killed if they do not leave within [`BYE_GRACE`]. No child outlives its owner and none
//! is left a zombie.

use gripsweep_controllers::Model;
use gripsweep_controllers::laws::{ControlLaw, LawSettings, LawStatus, Observation, Target};
use gripsweep_controllers::model::{JointKind, RootKind};
use gripsweep_controllers::spatial::Vec3;
use std::collections::VecDeque;
use std::io::Read;
use std::os::fd::AsRawFd;
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdin, ChildStdout, Command, Stdio};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

/// The protocol version this harness speaks (sent in `HELLO`; a child must answer with it).
pub const PROTOCOL_VERSION: u16 = 1;
/// First bytes of a `HELLO` payload.
pub const MAGIC: [u8; 4] = *b"GSWP";

/// Message kinds, harness → program.
pub const MSG_HELLO: u8 = 0x01;
pub const MSG_CELL: u8 = 0x02;
pub const MSG_STEP: u8 = 0x03;
pub const MSG_BYE: u8 = 0x04;
/// Message kinds, program → harness.
pub const MSG_READY: u8 = 0x81;
pub const MSG_CELL_READY: u8 = 0x82;
pub const MSG_TORQUES: u8 = 0x83;
pub const MSG_REFUSE: u8 = 0xEE;

/// Largest frame accepted from a program (a reply is a few hundred bytes; a length beyond this
/// is garbage, refused before anything is read or allocated).
pub const MAX_FRAME_BYTES: usize = 1 << 20;
/// Stderr lines kept per child, and bytes kept per line.
pub const STDERR_LINES: usize = 12;
pub const STDERR_LINE_BYTES: usize = 300;
/// How long an idle child may take to leave after `BYE` before it is killed.
pub const BYE_GRACE: Duration = Duration::from_secs(2);
/// Defaults of `[external.<name>]`.
pub const DEFAULT_STEP_TIMEOUT_MS: f64 = 1000.0;
pub const DEFAULT_START_TIMEOUT_MS: f64 = 20000.0;
/// Bounds of the time-outs, ms.
pub const MAX_TIMEOUT_MS: f64 = 600_000.0;
pub const MAX_ARGS: usize = 256;

/// A value of an `[external.<name>.settings]` table (sent in `HELLO`).
#[derive(Clone, Debug, PartialEq)]
pub enum SettingValue {
    Number(f64),
    Text(String),
    Flag(bool),
    Numbers(Vec<f64>),
}

/// A declared piped law (`[external.<name>]`) and its pool of idle children.
pub struct ExternalLaw {
    /// The name it is registered under (leaked once per declaration: `ControlLaw::name`
    /// returns `&'static str`).
    pub name: &'static str,
    /// The program, resolved against the scenario file's folder.
    pub program: PathBuf,
    /// The same, absolute (the child runs in the scenario's folder).
    program_abs: PathBuf,
    pub args: Vec<String>,
    /// The scenario file's folder: the child's working directory.
    pub dir: PathBuf,
    pub step_timeout: Duration,
    pub start_timeout: Duration,
    pub settings: Vec<(String, SettingValue)>,
    /// SHA-256 of the program file's bytes (manifest `inputs`).
    pub sha256: String,
    /// Idle children, each with the `HELLO` it was started with.
    pool: Mutex<Vec<(Vec<u8>, PipeChild)>>,
}

impl std::fmt::Debug for ExternalLaw {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ExternalLaw")
            .field("name", &self.name)
            .field("program", &self.program)
            .field("args", &self.args)
            .field("step_timeout", &self.step_timeout)
            .field("settings", &self.settings)
            .finish_non_exhaustive()
    }
}

impl Drop for ExternalLaw {
    fn drop(&mut self) {
        let idle = std::mem::take(self.pool.get_mut().unwrap_or_else(|e| e.into_inner()));
        for (_, mut c) in idle {
            c.goodbye();
        }
    }
}

/// Parse and check `[external]` (a table of `[external.<name>]` tables). `dir`: the scenario
/// file's folder. Errors are (field, message). `builtin`: names already taken.
pub fn parse_external(
    table: &toml::Table,
    dir: &Path,
    builtin: &[&str],
) -> Result<Vec<Arc<ExternalLaw>>, (String, String)> {
    let mut out = Vec::new();
    for (name, value) in table {
        let field = format!("external.{name}");
        let valid = !name.is_empty()
            && name.len() <= 64
            && name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_');
        if !valid {
            return Err((
                field,
                "a law name is 1 to 64 characters of A-Z, a-z, 0-9, '-' and '_'".into(),
            ));
        }
        if builtin.contains(&name.as_str()) {
            return Err((
                field,
                format!("'{name}' is the name of a built-in law; choose another"),
            ));
        }
        let toml::Value::Table(t) = value else {
            return Err((field, "must be a table ([external.<name>])".into()));
        };
        const ALLOWED: &str = "program, args, step_timeout_ms, start_timeout_ms, settings";
        for k in t.keys() {
            if !ALLOWED.split(", ").any(|a| a == k) {
                return Err((
                    format!("{field}.{k}"),
                    format!("unknown field; allowed: {ALLOWED}"),
                ));
            }
        }
        let pfield = format!("{field}.program");
        let program = match t.get("program") {
            Some(toml::Value::String(p)) if !p.is_empty() => dir.join(p),
            Some(_) => return Err((pfield, "must be a non-empty string (a path)".into())),
            None => {
                return Err((
                    pfield,
                    "missing: the program to run, a path relative to the scenario file".into(),
                ));
            }
        };
        if !program.is_file() {
            return Err((
                pfield,
                format!(
                    "{} does not exist or is not a file (a path relative to the scenario file)",
                    program.display()
                ),
            ));
        }
        let bytes = std::fs::read(&program)
            .map_err(|e| (pfield.clone(), format!("{}: {e}", program.display())))?;
        let sha256 = sha256_bytes(&bytes);
        let program_abs = std::fs::canonicalize(&program)
            .map_err(|e| (pfield.clone(), format!("{}: {e}", program.display())))?;
        let afield = format!("{field}.args");
        let args = match t.get("args") {
            None => Vec::new(),
            Some(toml::Value::Array(a)) if a.len() <= MAX_ARGS => a
                .iter()
                .map(|v| match v {
                    toml::Value::String(s) => Ok(s.clone()),
                    _ => Err((afield.clone(), format!("{v}: allowed: strings"))),
                })
                .collect::<Result<_, _>>()?,
            Some(_) => {
                return Err((
                    afield,
                    format!("must be an array of at most {MAX_ARGS} strings"),
                ));
            }
        };
        let timeout = |key: &str, default: f64| -> Result<Duration, (String, String)> {
            let f = format!("{field}.{key}");
            let ms = match t.get(key) {
                None => default,
                Some(toml::Value::Integer(i)) => *i as f64,
                Some(toml::Value::Float(x)) => *x,
                Some(v) => return Err((f, format!("{v}: allowed: a number of milliseconds"))),
            };
            if !(ms.is_finite() && ms > 0.0 && ms <= MAX_TIMEOUT_MS) {
                return Err((f, format!("{ms}: allowed: 0 < ms ≤ {MAX_TIMEOUT_MS}")));
            }
            Ok(Duration::from_secs_f64(ms * 1e-3))
        };
        let step_timeout = timeout("step_timeout_ms", DEFAULT_STEP_TIMEOUT_MS)?;
        let start_timeout = timeout("start_timeout_ms", DEFAULT_START_TIMEOUT_MS)?;
        let mut settings = Vec::new();
        match t.get("settings") {
            None => {}
            Some(toml::Value::Table(st)) => {
                for (k, v) in st {
                    let f = format!("{field}.settings.{k}");
                    let value = match v {
                        toml::Value::Integer(i) => SettingValue::Number(*i as f64),
                        toml::Value::Float(x) => SettingValue::Number(*x),
                        toml::Value::Boolean(b) => SettingValue::Flag(*b),
                        toml::Value::String(s) => SettingValue::Text(s.clone()),
                        toml::Value::Array(a) => SettingValue::Numbers(
                            a.iter()
                                .map(|x| match x {
                                    toml::Value::Integer(i) => Ok(*i as f64),
                                    toml::Value::Float(x) => Ok(*x),
                                    _ => Err((
                                        f.clone(),
                                        format!("{x}: allowed in an array: numbers"),
                                    )),
                                })
                                .collect::<Result<_, _>>()?,
                        ),
                        _ => {
                            return Err((
                                f,
                                "allowed: a number, a string, true/false or an array of numbers"
                                    .into(),
                            ));
                        }
                    };
                    settings.push((k.clone(), value));
                }
            }
            Some(_) => {
                return Err((
                    format!("{field}.settings"),
                    "must be a table ([external.<name>.settings])".into(),
                ));
            }
        }
        out.push(Arc::new(ExternalLaw {
            name: Box::leak(name.clone().into_boxed_str()),
            program,
            program_abs,
            args,
            dir: if dir.as_os_str().is_empty() {
                PathBuf::from(".")
            } else {
                dir.to_path_buf()
            },
            step_timeout,
            start_timeout,
            settings,
            sha256,
            pool: Mutex::new(Vec::new()),
        }));
    }
    Ok(out)
}

fn sha256_bytes(b: &[u8]) -> String {
    use sha2::{Digest, Sha256};
    let d = Sha256::digest(b);
    d.iter().map(|x| format!("{x:02x}")).collect()
}

// ---------------------------------------------------------------------------------------------
// Encoding (little-endian, see docs/pipe-protocol.md)

/// A frame under construction: `u32 length` (of kind + payload), `u8 kind`, payload.
struct Frame(Vec<u8>);

impl Frame {
    fn new(kind: u8) -> Frame {
        Frame(vec![0, 0, 0, 0, kind])
    }
    fn reuse(buf: &mut Vec<u8>, kind: u8) {
        buf.clear();
        buf.extend_from_slice(&[0, 0, 0, 0, kind]);
    }
    fn finish(buf: &mut [u8]) {
        let n = (buf.len() - 4) as u32;
        buf[..4].copy_from_slice(&n.to_le_bytes());
    }
}

fn put_u8(b: &mut Vec<u8>, x: u8) {
    b.push(x);
}
fn put_u16(b: &mut Vec<u8>, x: u16) {
    b.extend_from_slice(&x.to_le_bytes());
}
fn put_u32(b: &mut Vec<u8>, x: u32) {
    b.extend_from_slice(&x.to_le_bytes());
}
fn put_u64(b: &mut Vec<u8>, x: u64) {
    b.extend_from_slice(&x.to_le_bytes());
}
fn put_f64(b: &mut Vec<u8>, x: f64) {
    b.extend_from_slice(&x.to_le_bytes());
}
fn put_f64s(b: &mut Vec<u8>, xs: &[f64]) {
    for x in xs {
        b.extend_from_slice(&x.to_le_bytes());
    }
}
fn put_str(b: &mut Vec<u8>, s: &str) {
    put_u32(b, s.len() as u32);
    b.extend_from_slice(s.as_bytes());
}
fn put_pose(b: &mut Vec<u8>, p: &gripsweep_controllers::spatial::Pose) {
    // Rotation row-major, then translation.
    for r in 0..3 {
        for c in 0..3 {
            put_f64(b, p.rot[(r, c)]);
        }
    }
    put_f64s(b, p.trans.as_slice());
}

/// The robot-level part of a session (`HELLO`), the same for every cell of a scenario.
pub struct Session<'a> {
    pub model: &'a Model,
    pub feet: &'a [usize],
    pub foot_radius: f64,
    pub dt: f64,
}

/// The `HELLO` frame.
fn hello_frame(law: &ExternalLaw, s: &Session) -> Vec<u8> {
    let m = s.model;
    let mut f = Frame::new(MSG_HELLO).0;
    f.extend_from_slice(&MAGIC);
    put_u16(&mut f, PROTOCOL_VERSION);
    put_str(&mut f, law.name);
    put_f64(&mut f, s.dt);
    put_u8(&mut f, matches!(m.root, RootKind::Floating) as u8);
    put_u32(&mut f, m.nq() as u32);
    put_u32(&mut f, m.nv() as u32);
    put_f64s(&mut f, m.gravity.as_slice());
    put_str(&mut f, &m.body_names[0]);
    put_u32(&mut f, m.n_joints() as u32);
    for j in &m.joints {
        put_str(&mut f, &j.name);
        put_u8(&mut f, matches!(j.kind, JointKind::Prismatic) as u8);
        put_u32(&mut f, j.parent as u32);
        put_f64s(&mut f, j.axis.as_slice());
        put_pose(&mut f, &j.x_tree);
        put_f64s(
            &mut f,
            &[j.lower, j.upper, j.velocity_limit, j.effort_limit],
        );
    }
    put_u32(&mut f, s.feet.len() as u32);
    for &fi in s.feet {
        let fr = &m.frames[fi];
        put_str(&mut f, &fr.name);
        put_u32(&mut f, fr.body as u32);
        put_pose(&mut f, &fr.placement);
    }
    put_f64(&mut f, s.foot_radius);
    put_u32(&mut f, law.settings.len() as u32);
    for (k, v) in &law.settings {
        put_str(&mut f, k);
        match v {
            SettingValue::Number(x) => {
                put_u8(&mut f, 0);
                put_f64(&mut f, *x);
            }
            SettingValue::Text(t) => {
                put_u8(&mut f, 1);
                put_str(&mut f, t);
            }
            SettingValue::Flag(b) => {
                put_u8(&mut f, 2);
                put_u8(&mut f, *b as u8);
            }
            SettingValue::Numbers(xs) => {
                put_u8(&mut f, 3);
                put_u32(&mut f, xs.len() as u32);
                put_f64s(&mut f, xs);
            }
        }
    }
    Frame::finish(&mut f);
    f
}

/// What a cell tells its child in `CELL` (everything that may differ between cells).
pub struct CellInfo<'a> {
    pub cell_id: &'a str,
    pub seed: u64,
    pub rate_hz: f64,
    pub duration: f64,
    /// The law's model of the robot for this cell (masses and centres of mass differ on the
    /// model-error axes).
    pub model: &'a Model,
    pub settings: &'a LawSettings,
}

fn cell_frame(c: &CellInfo) -> Vec<u8> {
    let mut f = Frame::new(MSG_CELL).0;
    put_str(&mut f, c.cell_id);
    put_u64(&mut f, c.seed);
    put_f64(&mut f, c.rate_hz);
    put_f64(&mut f, c.duration);
    put_f64(&mut f, c.settings.mu_estimate);
    put_f64s(&mut f, c.settings.ground_normal.as_slice());
    put_u32(&mut f, c.model.inertias.len() as u32);
    for i in &c.model.inertias {
        put_f64(&mut f, i.mass);
        put_f64s(&mut f, i.com().as_slice());
        let ic = i.inertia_at_com();
        for r in 0..3 {
            for k in 0..3 {
                put_f64(&mut f, ic[(r, k)]);
            }
        }
    }
    Frame::finish(&mut f);
    f
}

// ---------------------------------------------------------------------------------------------
// One child process

/// The last stderr lines of a child, bounded in count and length.
#[derive(Default)]
struct Tail {
    lines: VecDeque<String>,
    current: Vec<u8>,
}

impl Tail {
    fn push_bytes(&mut self, bytes: &[u8]) {
        for &b in bytes {
            if b == b'\n' {
                self.end_line();
            } else if self.current.len() < STDERR_LINE_BYTES {
                self.current.push(b);
            }
        }
    }
    fn end_line(&mut self) {
        let line = String::from_utf8_lossy(&self.current)
            .trim_end()
            .to_string();
        self.current.clear();
        if self.lines.len() == STDERR_LINES {
            self.lines.pop_front();
        }
        self.lines.push_back(line);
    }
    fn text(&self) -> String {
        let mut lines: Vec<String> = self.lines.iter().cloned().collect();
        if !self.current.is_empty() {
            lines.push(
                String::from_utf8_lossy(&self.current)
                    .trim_end()
                    .to_string(),
            );
        }
        lines.retain(|l| !l.is_empty());
        if lines.is_empty() {
            "its stderr was empty".into()
        } else {
            format!("its last stderr lines: {}", lines.join(" | "))
        }
    }
}

struct PipeChild {
    child: Child,
    stdin: Option<ChildStdin>,
    stdout: ChildStdout,
    tail: Arc<Mutex<Tail>>,
    tail_thread: Option<JoinHandle<()>>,
    inbuf: Vec<u8>,
    /// Bytes of `inbuf` already consumed.
    start: usize,
}

/// Why a child failed; the cell's message is built from it.
enum Fault {
    Timeout(Duration),
    Closed,
    Io(std::io::Error),
    Malformed(String),
    Refused(String),
}

fn set_nonblocking(fd: i32) -> std::io::Result<()> {
    // SAFETY: fcntl on a file descriptor this process owns (a child's pipe end); no memory is
    // passed.
    let flags = unsafe { libc::fcntl(fd, libc::F_GETFL) };
    if flags < 0 {
        return Err(std::io::Error::last_os_error());
    }
    // SAFETY: as above.
    if unsafe { libc::fcntl(fd, libc::F_SETFL, flags | libc::O_NONBLOCK) } < 0 {
        return Err(std::io::Error::last_os_error());
    }
    Ok(())
}

/// Wait until `fd` is ready for `events` or the deadline passes (`Ok(false)`).
fn wait_fd(fd: i32, events: i16, deadline: Instant) -> std::io::Result<bool> {
    loop {
        let left = deadline.saturating_duration_since(Instant::now());
        // Round up so that a wait never ends early; poll counts milliseconds.
        let ms = left.as_micros().div_ceil(1000).min(i32::MAX as u128) as i32;
        let mut p = libc::pollfd {
            fd,
            events,
            revents: 0,
        };
        // SAFETY: one valid pollfd on the stack, count 1.
        let r = unsafe { libc::poll(&mut p, 1, ms) };
        if r < 0 {
            let e = std::io::Error::last_os_error();
            if e.kind() == std::io::ErrorKind::Interrupted {
                continue;
            }
            return Err(e);
        }
        if r > 0 {
            // Readable, writable, hung up or in error: the read/write that follows tells.
            return Ok(true);
        }
        if Instant::now() >= deadline {
            return Ok(false);
        }
    }
}

impl PipeChild {
    fn spawn(law: &ExternalLaw) -> std::io::Result<PipeChild> {
        let mut child = Command::new(&law.program_abs)
            .args(&law.args)
            .current_dir(&law.dir)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()?;
        let (Some(stdin), Some(stdout), Some(mut stderr)) =
            (child.stdin.take(), child.stdout.take(), child.stderr.take())
        else {
            let _ = child.kill();
            let _ = child.wait();
            return Err(std::io::Error::other("the child's pipes were not opened"));
        };
        let prepared =
            set_nonblocking(stdin.as_raw_fd()).and_then(|()| set_nonblocking(stdout.as_raw_fd()));
        if let Err(e) = prepared {
            let _ = child.kill();
            let _ = child.wait();
            return Err(e);
        }
        let tail = Arc::new(Mutex::new(Tail::default()));
        let t2 = tail.clone();
        // The stderr reader: a thread per child, ending when the pipe closes (the child's
        // exit). It keeps only the last lines, so a chatty program cannot grow memory.
        let tail_thread = std::thread::Builder::new()
            .name("pipe-law-stderr".into())
            .spawn(move || {
                let mut buf = [0u8; 4096];
                loop {
                    match stderr.read(&mut buf) {
                        Ok(0) | Err(_) => break,
                        Ok(n) => t2
                            .lock()
                            .unwrap_or_else(|e| e.into_inner())
                            .push_bytes(&buf[..n]),
                    }
                }
            })
            .ok();
        Ok(PipeChild {
            child,
            stdin: Some(stdin),
            stdout,
            tail,
            tail_thread,
            inbuf: Vec::with_capacity(4096),
            start: 0,
        })
    }

    fn send(&mut self, frame: &[u8], deadline: Instant) -> Result<(), Fault> {
        let Some(stdin) = self.stdin.as_mut() else {
            return Err(Fault::Closed);
        };
        let fd = stdin.as_raw_fd();
        let mut off = 0;
        while off < frame.len() {
            match std::io::Write::write(stdin, &frame[off..]) {
                Ok(0) => return Err(Fault::Closed),
                Ok(n) => off += n,
                Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                    if !wait_fd(fd, libc::POLLOUT, deadline).map_err(Fault::Io)? {
                        return Err(Fault::Timeout(Duration::ZERO));
                    }
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => {
                    return Err(Fault::Closed);
                }
                Err(e) => return Err(Fault::Io(e)),
            }
        }
        Ok(())
    }

    /// Read until `inbuf[start..]` holds at least `n` bytes.
    fn fill(&mut self, n: usize, deadline: Instant) -> Result<(), Fault> {
        if self.start > 0 && self.inbuf.len() - self.start < n {
            self.inbuf.drain(..self.start);
            self.start = 0;
        }
        let fd = self.stdout.as_raw_fd();
        let mut chunk = [0u8; 8192];
        while self.inbuf.len() - self.start < n {
            match self.stdout.read(&mut chunk) {
                Ok(0) => return Err(Fault::Closed),
                Ok(k) => self.inbuf.extend_from_slice(&chunk[..k]),
                Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                    if !wait_fd(fd, libc::POLLIN, deadline).map_err(Fault::Io)? {
                        return Err(Fault::Timeout(Duration::ZERO));
                    }
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(Fault::Io(e)),
            }
        }
        Ok(())
    }

    /// Receive one frame: its kind and payload (a copy into `out`). A `REFUSE` frame is
    /// turned into [`Fault::Refused`].
    fn receive(&mut self, out: &mut Vec<u8>, limit: usize, timeout: Duration) -> Result<u8, Fault> {
        let deadline = Instant::now() + timeout;
        let with_timeout = |f: Fault| match f {
            Fault::Timeout(_) => Fault::Timeout(timeout),
            other => other,
        };
        self.fill(4, deadline).map_err(with_timeout)?;
        let s = self.start;
        let len = u32::from_le_bytes([
            self.inbuf[s],
            self.inbuf[s + 1],
            self.inbuf[s + 2],
            self.inbuf[s + 3],
        ]) as usize;
        if len == 0 || len > limit.max(1024) {
            return Err(Fault::Malformed(format!(
                "a frame length of {len} bytes (first bytes {:02x?}; a frame is a u32 length, 1 to {} bytes here, then the message)",
                &self.inbuf[s..(s + 4)],
                limit.max(1024)
            )));
        }
        self.fill(4 + len, deadline).map_err(with_timeout)?;
        let s = self.start + 4;
        let kind = self.inbuf[s];
        out.clear();
        out.extend_from_slice(&self.inbuf[s + 1..s + len]);
        self.start = s + len;
        if self.start == self.inbuf.len() {
            self.inbuf.clear();
            self.start = 0;
        }
        if kind == MSG_REFUSE {
            let mut r = Reader::new(out);
            let why = r.string().unwrap_or_else(|_| "(no reason given)".into());
            return Err(Fault::Refused(why));
        }
        Ok(kind)
    }

    /// Stop the child now (kill, then wait: never a zombie) and return its stderr tail and
    /// exit status text.
    fn kill_and_collect(mut self) -> String {
        drop(self.stdin.take());
        // A child that closed its output may be exiting on its own: give it a moment so its
        // exit status is its own, not our kill.
        let grace = Instant::now() + Duration::from_millis(100);
        let mut status = None;
        while Instant::now() < grace {
            match self.child.try_wait() {
                Ok(Some(s)) => {
                    status = Some(s);
                    break;
                }
                Ok(None) => std::thread::sleep(Duration::from_millis(2)),
                Err(_) => break,
            }
        }
        let status_text = match status {
            Some(s) => format!("it exited ({s})"),
            None => {
                let _ = self.child.kill();
                let _ = self.child.wait();
                "it was killed".into()
            }
        };
        // The stderr reader ends when the pipe closes; wait a little for its last lines.
        if let Some(h) = self.tail_thread.take() {
            let until = Instant::now() + Duration::from_millis(500);
            while !h.is_finished() && Instant::now() < until {
                std::thread::sleep(Duration::from_millis(2));
            }
            if h.is_finished() {
                let _ = h.join();
            }
        }
        let tail = self.tail.lock().unwrap_or_else(|e| e.into_inner()).text();
        format!("{status_text}; {tail}")
    }

    /// Leave politely: `BYE`, close stdin, wait up to [`BYE_GRACE`], then kill and wait.
    fn goodbye(&mut self) {
        let mut f = Frame::new(MSG_BYE).0;
        Frame::finish(&mut f);
        let _ = self.send(&f, Instant::now() + Duration::from_millis(100));
        drop(self.stdin.take());
        let until = Instant::now() + BYE_GRACE;
        loop {
            match self.child.try_wait() {
                Ok(Some(_)) => break,
                Ok(None) if Instant::now() < until => std::thread::sleep(Duration::from_millis(2)),
                _ => {
                    let _ = self.child.kill();
                    let _ = self.child.wait();
                    break;
                }
            }
        }
        if let Some(h) = self.tail_thread.take()
            && h.is_finished()
        {
            let _ = h.join();
        }
    }
}

impl Drop for PipeChild {
    fn drop(&mut self) {
        // Every path that gives a child up goes through `kill_and_collect` or `goodbye`; this
        // is the last line of defence (a panic unwinding through a cell).
        if let Ok(None) = self.child.try_wait() {
            let _ = self.child.kill();
            let _ = self.child.wait();
        }
    }
}

/// A little-endian reader over a payload.
struct Reader<'a> {
    b: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    fn new(b: &'a [u8]) -> Self {
        Reader { b, at: 0 }
    }
    fn take(&mut self, n: usize) -> Result<&'a [u8], String> {
        if self.b.len() - self.at < n {
            return Err(format!(
                "the message ends after {} bytes, {} more expected",
                self.b.len(),
                n
            ));
        }
        let s = &self.b[self.at..self.at + n];
        self.at += n;
        Ok(s)
    }
    fn u8(&mut self) -> Result<u8, String> {
        Ok(self.take(1)?[0])
    }
    fn u16(&mut self) -> Result<u16, String> {
        let s = self.take(2)?;
        Ok(u16::from_le_bytes([s[0], s[1]]))
    }
    fn u32(&mut self) -> Result<u32, String> {
        let s = self.take(4)?;
        Ok(u32::from_le_bytes([s[0], s[1], s[2], s[3]]))
    }
    fn f64(&mut self) -> Result<f64, String> {
        let s = self.take(8)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(s);
        Ok(f64::from_le_bytes(a))
    }
    fn string(&mut self) -> Result<String, String> {
        let n = self.u32()? as usize;
        Ok(String::from_utf8_lossy(self.take(n)?).into_owned())
    }
}

// ---------------------------------------------------------------------------------------------
// The law

/// Measurements of a piped law over a cell, shared with the cell loop.
#[derive(Debug, Default)]
pub struct PipeReport {
    /// The child's own compute time per control step (its `TORQUES` reply), µs.
    pub child_us: crate::quantiles::TimeHistogram,
    /// Set when the child failed; the cell ends with status `error` and this message.
    pub error: Option<String>,
}

/// A handle on a piped law's [`PipeReport`].
pub type PipeProbe = Arc<Mutex<PipeReport>>;

/// A cell's piped law: one child, taken from the law's pool for the cell.
pub struct PipeLaw {
    law: Arc<ExternalLaw>,
    hello: Vec<u8>,
    child: Option<PipeChild>,
    nj: usize,
    n_feet: usize,
    /// Control period in plant steps and the plant step: the time of control step k is
    /// k · every · dt, as in the cell loop.
    every: usize,
    dt: f64,
    step: u64,
    frame: Vec<u8>,
    reply: Vec<u8>,
    forces: Vec<Vec3>,
    probe: PipeProbe,
}

impl ExternalLaw {
    /// Start a cell: an idle child started with the same `HELLO` (or a new one, greeted),
    /// reset with `CELL`. Errors are the cell's message.
    pub fn start_cell(
        self: &Arc<Self>,
        session: &Session,
        cell: &CellInfo,
    ) -> Result<(PipeLaw, PipeProbe), String> {
        let hello = hello_frame(self, session);
        let pooled = {
            let mut pool = self.pool.lock().unwrap_or_else(|e| e.into_inner());
            pool.iter()
                .position(|(h, _)| *h == hello)
                .map(|i| pool.swap_remove(i).1)
        };
        let mut reply = Vec::new();
        let mut child = match pooled {
            Some(c) => c,
            None => {
                let mut c = PipeChild::spawn(self).map_err(|e| {
                    format!(
                        "external law '{}': cannot start {}: {e}",
                        self.name,
                        self.program.display()
                    )
                })?;
                let deadline = Instant::now() + self.start_timeout;
                let greeted = c.send(&hello, deadline).and_then(|()| {
                    let kind = c.receive(&mut reply, MAX_FRAME_BYTES, self.start_timeout)?;
                    if kind != MSG_READY {
                        return Err(Fault::Malformed(format!(
                            "message kind 0x{kind:02x} where READY (0x{MSG_READY:02x}) was expected"
                        )));
                    }
                    let v = Reader::new(&reply).u16().map_err(Fault::Malformed)?;
                    if v != PROTOCOL_VERSION {
                        return Err(Fault::Refused(format!(
                            "it speaks protocol version {v}, this harness {PROTOCOL_VERSION}"
                        )));
                    }
                    Ok(())
                });
                if let Err(f) = greeted {
                    return Err(self.fault_message(f, "the handshake (HELLO)", c));
                }
                c
            }
        };
        let deadline = Instant::now() + self.start_timeout;
        let reset = child.send(&cell_frame(cell), deadline).and_then(|()| {
            let kind = child.receive(&mut reply, MAX_FRAME_BYTES, self.start_timeout)?;
            if kind != MSG_CELL_READY {
                return Err(Fault::Malformed(format!(
                    "message kind 0x{kind:02x} where CELL_READY (0x{MSG_CELL_READY:02x}) was expected"
                )));
            }
            Ok(())
        });
        if let Err(f) = reset {
            return Err(self.fault_message(f, "the cell's start (CELL)", child));
        }
        let every = (1.0 / (cell.rate_hz * session.dt)).round().max(1.0) as usize;
        let probe: PipeProbe = Arc::new(Mutex::new(PipeReport::default()));
        Ok((
            PipeLaw {
                law: self.clone(),
                hello,
                child: Some(child),
                nj: session.model.n_joints(),
                n_feet: session.feet.len(),
                every,
                dt: session.dt,
                step: 0,
                frame: Vec::with_capacity(4096),
                reply,
                forces: vec![Vec3::zeros(); session.feet.len()],
                probe: probe.clone(),
            },
            probe,
        ))
    }

    fn fault_message(&self, f: Fault, when: &str, child: PipeChild) -> String {
        let what = match f {
            Fault::Timeout(d) => format!("no reply within {} ms", d.as_secs_f64() * 1e3),
            Fault::Closed => "the program closed its pipe (it exited?)".into(),
            Fault::Io(e) => format!("pipe error: {e}"),
            Fault::Malformed(m) => format!("malformed reply: {m}"),
            Fault::Refused(m) => format!("the program refused: {m}"),
        };
        let tail = child.kill_and_collect();
        format!("external law '{}': {what} at {when}; {tail}", self.name)
    }
}

impl PipeLaw {
    fn step_once(
        &mut self,
        obs: &Observation,
        target: &Target,
        tau: &mut [f64],
    ) -> Result<LawStatus, Fault> {
        let Some(child) = self.child.as_mut() else {
            return Err(Fault::Closed);
        };
        let t = self.step as f64 * self.every as f64 * self.dt;
        let f = &mut self.frame;
        Frame::reuse(f, MSG_STEP);
        put_u64(f, self.step);
        put_f64(f, t);
        put_f64s(f, obs.q.as_slice());
        put_f64s(f, obs.v.as_slice());
        // Measured joint torques: none in this harness's observation yet (flag 0).
        put_u8(f, 0);
        put_f64s(f, target.q.as_slice());
        put_f64s(f, target.v.as_slice());
        put_f64s(f, target.a.as_slice());
        for &s in target.stance {
            put_u8(f, s as u8);
        }
        Frame::finish(f);
        let deadline = Instant::now() + self.law.step_timeout;
        child.send(&self.frame, deadline)?;
        let kind = child.receive(&mut self.reply, MAX_FRAME_BYTES, self.law.step_timeout)?;
        if kind != MSG_TORQUES {
            return Err(Fault::Malformed(format!(
                "message kind 0x{kind:02x} where TORQUES (0x{MSG_TORQUES:02x}) was expected"
            )));
        }
        let mut r = Reader::new(&self.reply);
        let echo = r.take(8).map_err(Fault::Malformed)?;
        let mut e = [0u8; 8];
        e.copy_from_slice(echo);
        if u64::from_le_bytes(e) != self.step {
            return Err(Fault::Malformed(format!(
                "TORQUES for step {} where step {} was asked",
                u64::from_le_bytes(e),
                self.step
            )));
        }
        let status = match r.u8().map_err(Fault::Malformed)? {
            0 => LawStatus::Solved,
            1 => LawStatus::Infeasible,
            2 => LawStatus::Underactuated,
            3 => LawStatus::Failed,
            s => {
                return Err(Fault::Malformed(format!(
                    "status {s} (allowed: 0 solved, 1 infeasible, 2 underactuated, 3 failed)"
                )));
            }
        };
        let own_us = r.f64().map_err(Fault::Malformed)?;
        let n = r.u32().map_err(Fault::Malformed)? as usize;
        if n != self.nj {
            return Err(Fault::Malformed(format!(
                "{n} torques where the robot has {} joints",
                self.nj
            )));
        }
        for x in tau.iter_mut() {
            *x = r.f64().map_err(Fault::Malformed)?;
        }
        let nf = r.u32().map_err(Fault::Malformed)? as usize;
        if nf != 0 && nf != self.n_feet {
            return Err(Fault::Malformed(format!(
                "{nf} predicted foot forces where the robot has {} feet (allowed: 0 or {})",
                self.n_feet, self.n_feet
            )));
        }
        for i in 0..self.n_feet {
            self.forces[i] = if nf == 0 {
                Vec3::zeros()
            } else {
                Vec3::new(
                    r.f64().map_err(Fault::Malformed)?,
                    r.f64().map_err(Fault::Malformed)?,
                    r.f64().map_err(Fault::Malformed)?,
                )
            };
        }
        if r.at != self.reply.len() {
            return Err(Fault::Malformed(format!(
                "{} bytes after the end of TORQUES",
                self.reply.len() - r.at
            )));
        }
        self.probe
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .child_us
            .add(own_us);
        Ok(status)
    }
}

impl ControlLaw for PipeLaw {
    fn name(&self) -> &'static str {
        self.law.name
    }

    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        if self.child.is_none() {
            tau.fill(0.0);
            return LawStatus::Failed;
        }
        let t = self.step as f64 * self.every as f64 * self.dt;
        let out = self.step_once(obs, target, tau);
        self.step += 1;
        match out {
            Ok(s) => s,
            Err(f) => {
                tau.fill(0.0);
                let child = self.child.take();
                let msg = match child {
                    Some(c) => self
                        .law
                        .fault_message(f, &format!("control step t = {t:.3} s"), c),
                    None => format!("external law '{}': no child", self.law.name),
                };
                self.probe.lock().unwrap_or_else(|e| e.into_inner()).error = Some(msg);
                LawStatus::Failed
            }
        }
    }

    fn predicted_forces(&self) -> &[Vec3] {
        &self.forces
    }
}

impl Drop for PipeLaw {
    fn drop(&mut self) {
        // A healthy child goes back to the pool for the next cell (the next `CELL` resets it).
        if let Some(c) = self.child.take() {
            self.law
                .pool
                .lock()
                .unwrap_or_else(|e| e.into_inner())
                .push((std::mem::take(&mut self.hello), c));
        }
    }
}

/// Median and 99th percentile of a piped law's own compute times (NaN when none).
pub fn child_time_stats(probe: Option<&PipeProbe>) -> (f64, f64) {
    let Some(p) = probe else {
        return (f64::NAN, f64::NAN);
    };
    let g = p.lock().unwrap_or_else(|e| e.into_inner());
    (g.child_us.quantile(0.5), g.child_us.quantile(0.99))
}

/// The manifest `inputs` entries of the declared piped laws: `external.<name>` → path and
/// SHA-256 of the program file, so a resume refuses a changed controller.
pub fn manifest_entries(laws: &[Arc<ExternalLaw>]) -> Vec<(String, serde_json::Value)> {
    laws.iter()
        .map(|l| {
            (
                format!("external.{}", l.name),
                serde_json::json!({
                    "path": l.program.display().to_string(),
                    "sha256": l.sha256,
                }),
            )
        })
        .collect()
}
