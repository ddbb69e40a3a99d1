//! Round-trip cost of one control step of a piped law (harness/src/pipe_law.rs): the harness
//! encodes the STEP message (the brindle quadruped, 18 joints: q, v, the plan's q, v, a and the
//! stance flags, 514 bytes), writes it to the child's stdin, waits for the TORQUES reply
//! (173 bytes) and decodes it. Two minimal children, both returning zero torques at once:
//!
//! * `pipe_round_trip/rust-echo`: this bench binary itself, started with `--pipe-echo` (a few
//!   lines of Rust below): the protocol's own cost, the figure the target (median ≤ 20 µs on
//!   2 cores) is about;
//! * `pipe_round_trip/python-echo`: tests/pipe/echo_zero.py (plain `struct`, no numpy): what a
//!   Python program adds for reading and writing its messages.
//!
//! After criterion's report a tail loop times 20 000 round trips one by one (p50/p90/p99/max).
//!
//!     nice cargo bench --bench pipe_law
//!
//! Under `cargo test --benches` criterion runs each once and the tail loop 200 round trips.

use criterion::Criterion;
use gripsweep::controllers::laws::{ControlLaw, LawSettings, Observation, Target};
use gripsweep::pipe_law::{CellInfo, PipeLaw, PipeProbe, Session, parse_external};
use gripsweep::robot::LoadedRobot;
use std::hint::black_box;
use std::io::{Read, Write};
use std::path::Path;
use std::time::Instant;

/// The echo child: answers HELLO, CELL and STEP with the least work, until BYE or end of input.
fn echo_child() {
    let mut inp = std::io::stdin().lock();
    let mut out = std::io::stdout().lock();
    let mut nj = 0usize;
    let mut head = [0u8; 4];
    let mut body = Vec::new();
    let mut reply = Vec::new();
    while inp.read_exact(&mut head).is_ok() {
        let n = u32::from_le_bytes(head) as usize;
        body.resize(n, 0);
        if inp.read_exact(&mut body).is_err() || n == 0 {
            return;
        }
        reply.clear();
        reply.extend_from_slice(&[0, 0, 0, 0]);
        match body[0] {
            0x01 => {
                // HELLO: skip magic, version, name, dt, root, nq, nv, gravity, base name.
                let str_len = |at: usize| {
                    u32::from_le_bytes([body[at], body[at + 1], body[at + 2], body[at + 3]])
                        as usize
                };
                let mut p = 1 + 4 + 2;
                p += 4 + str_len(p);
                p += 8 + 1 + 4 + 4 + 24;
                p += 4 + str_len(p);
                nj = str_len(p);
                reply.push(0x81);
                reply.extend_from_slice(&1u16.to_le_bytes());
                reply.extend_from_slice(&0u32.to_le_bytes());
            }
            0x02 => reply.push(0x82),
            0x03 => {
                reply.push(0x83);
                reply.extend_from_slice(&body[1..9]); // the step index
                reply.push(0);
                reply.extend_from_slice(&0f64.to_le_bytes());
                reply.extend_from_slice(&(nj as u32).to_le_bytes());
                reply.resize(reply.len() + 8 * nj, 0);
                reply.extend_from_slice(&0u32.to_le_bytes());
            }
            _ => return,
        }
        let len = (reply.len() - 4) as u32;
        reply[..4].copy_from_slice(&len.to_le_bytes());
        if out.write_all(&reply).and_then(|()| out.flush()).is_err() {
            return;
        }
    }
}

struct Rig {
    law: PipeLaw,
    probe: PipeProbe,
    q: nalgebra::DVector<f64>,
    v: nalgebra::DVector<f64>,
    stance: Vec<bool>,
    tau: Vec<f64>,
}

impl Rig {
    fn new(program: &Path, args: &[&str]) -> Rig {
        let table: toml::Table = toml::from_str(&format!(
            "[echo]\nprogram = \"{}\"\nargs = {:?}\n",
            program.display(),
            args
        ))
        .expect("table");
        let laws = parse_external(&table, Path::new("."), &[]).expect("program");
        let robot = LoadedRobot::demo().expect("demo robot");
        let feet = robot.foot_frames();
        let settings = LawSettings::default();
        let (law, probe) = laws[0]
            .start_cell(
                &Session {
                    model: &robot.model,
                    feet: &feet,
                    foot_radius: robot.facts.feet.radius,
                    dt: 1e-3,
                },
                &CellInfo {
                    cell_id: "bench",
                    seed: 0,
                    rate_hz: 1000.0,
                    duration: 1e6,
                    model: &robot.model,
                    settings: &settings,
                },
            )
            .expect("start");
        let q = robot.model.neutral();
        let v = nalgebra::DVector::from_element(robot.model.nv(), 0.01);
        Rig {
            law,
            probe,
            q,
            v,
            stance: vec![true; feet.len()],
            tau: vec![0.0; robot.model.n_joints()],
        }
    }

    fn step(&mut self) {
        let s = self.law.compute(
            &Observation {
                q: &self.q,
                v: &self.v,
            },
            &Target {
                q: &self.q,
                v: &self.v,
                a: &self.v,
                stance: &self.stance,
            },
            &mut self.tau,
        );
        black_box(s);
    }

    /// A bench of a failed child would time nothing: every step must have been answered.
    fn check(&self, name: &str) {
        let p = self.probe.lock().expect("probe");
        assert!(p.error.is_none(), "{name}: {:?}", p.error);
        println!("{name}: {} steps answered", p.child_us.len());
    }
}

fn main() {
    if std::env::args().any(|a| a == "--pipe-echo") {
        echo_child();
        return;
    }
    let smoke = !std::env::args().any(|a| a == "--bench");
    let me = std::env::current_exe().expect("own path");
    let python = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/pipe/echo_zero.py");
    let mut rigs = vec![("rust-echo", Rig::new(&me, &["--pipe-echo"]))];
    rigs.push(("python-echo", Rig::new(&python, &[])));
    let mut c = Criterion::default().configure_from_args();
    {
        let mut g = c.benchmark_group("pipe_round_trip");
        for (name, rig) in rigs.iter_mut() {
            g.bench_function(*name, |b| b.iter(|| rig.step()));
        }
        g.finish();
    }
    c.final_summary();
    let n = if smoke { 200 } else { 20_000 };
    for (name, rig) in rigs.iter_mut() {
        for _ in 0..n / 10 {
            rig.step();
        }
        let mut t: Vec<f64> = (0..n)
            .map(|_| {
                let t0 = Instant::now();
                rig.step();
                t0.elapsed().as_secs_f64() * 1e6
            })
            .collect();
        t.sort_by(|a, b| a.total_cmp(b));
        let p = |x: f64| t[((t.len() - 1) as f64 * x).round() as usize];
        println!(
            "pipe_round_trip/{name}: {n} round trips, p50 {:.1} µs, p90 {:.1} µs, p99 {:.1} µs, max {:.1} µs",
            p(0.5),
            p(0.9),
            p(0.99),
            p(1.0)
        );
        rig.check(name);
    }
}
