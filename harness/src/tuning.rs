//! Tuning: one documented procedure that gives every law its feedback gains for the scenario's
//! robot, per (law, control rate, actuator model), before any cell runs.
//!
//! Each law exposes its feedback gains through one scalar gain scale s: every stiffness × s,
//! every damping × √s (the damping ratio of a joint or task axis, ζ = kd / (2 √(kp I)), is kept;
//! mass–spring–damper algebra). At s = 1 the gains are the law's settings before tuning
//! ([`Scenario::law_base`]). The procedure, on a short tuning motion of the scenario's robot on
//! flat ground at μ = 1 with the exact model and no noise — the first step of a paced crawl:
//! a base shift on every foot, then one foot's swing and touchdown, then [`TUNE_SETTLE`]
//! (a swing leg carries only its own inertia, so it is where a stiff explicit PD first goes
//! unstable; a motion with every foot on the ground, such as a weight shift, misses it):
//!
//! 1. **Critical scale s_c** by bisection in log-space between [`law_bounds`]: first the upper
//!    bound (stable there: s_c ≥ upper), then the lower bound (unstable there: s_c < lower),
//!    then [`CRITICAL_STEPS`] halvings of the log-interval. A trial is unstable
//!    ([`Trial::unstable`]) when the cell diverges or falls, when the actuators sit at their
//!    torque limit more than [`SATURATION_SHARE`] of the time, or when an oscillation grows:
//!    joint-rate error RMS in the last third of the motion above [`GROWTH_RATIO`] × the first
//!    third (and above
//!    [`GROWTH_FLOOR`]).
//! 2. **Operating point.** Stiff PD (model-free): s = s_c / 2, a 6 dB gain margin (common
//!    practice in loop shaping). Model-based laws: the lowest s meeting the tracking target
//!    (joint RMS error ≤ [`TRACK_SHARE`] rad, no instability) on the tuning
//!    motion, never above s_c / 2: one trial at s_c / 2 (target not met there: that scale, and
//!    the table says so), one at the lower bound, then [`TARGET_STEPS`] log-bisection steps.
//!
//! Cost: at most 2 + [`CRITICAL_STEPS`] + 1 trials for stiff PD and
//! 2 + [`CRITICAL_STEPS`] + 2 + [`TARGET_STEPS`] for the others, each one tuning step
//! (about 2 simulated seconds for the demo robot). Every trial is the real cell simulation ([`run_spec`]), so the
//! result is deterministic; combinations run in parallel and are collected in matrix order.

use crate::cell::{CellSpec, TraceRow, run_spec};
use crate::matrix::Cell;
use crate::metrics::CellStatus;
use crate::planner::{Gait, Plan};
use crate::plant::actuator::ActuatorKind;
use crate::robot::LoadedRobot;
use crate::scenario::{Scenario, gain_key};
use gripsweep_controllers::laws::LawSettings;
use rayon::prelude::*;
use sha2::{Digest, Sha256};
use std::path::Path;

/// Largest tuning table read back, bytes (a row is about 400 bytes; 4 MiB is ten thousand
/// combinations).
pub const MAX_TABLE_BYTES: u64 = 4 << 20;
/// The tuning table's file name in a run folder.
pub const GAINS_FILE: &str = "gains.csv";
/// Settling time after the tuning step's swing foot touches down, s.
pub const TUNE_SETTLE: f64 = 0.5;
/// Span of the tuning crawl's plan, s (long enough for one cycle of any robot's paced crawl;
/// only its first step is simulated).
pub const TUNE_PLAN_SPAN: f64 = 30.0;
/// Gait geometry of the tuning step as shares of the body height h: step h/5, swing height
/// h/6 (the robot-derived defaults of `[gait]`), and the even slot grid of the default crawl.
pub const TUNE_STEP_SHARE: f64 = 0.2;
pub const TUNE_SWING_SHARE: f64 = 1.0 / 6.0;
pub const TUNE_CYCLE_PERIOD: f64 = 3.2;
/// Bisection steps for the critical scale.
pub const CRITICAL_STEPS: u32 = 6;
/// Bisection steps for the model-based laws' tracking target.
pub const TARGET_STEPS: u32 = 4;
/// Instability: torque limit held on more than this share of the steps.
pub const SATURATION_SHARE: f64 = 0.05;
/// Instability: joint-rate error RMS in the last third above this × the first third …
pub const GROWTH_RATIO: f64 = 3.0;
/// … and above this, rad/s (below it the motion is too small to call an oscillation).
pub const GROWTH_FLOOR: f64 = 0.1;
/// Tracking target of the model-based laws: joint RMS error ≤ this share of the body height
/// divided by the leg length, taken equal to the body height (an error the feet feel as
/// ≈ 0.2 % of the stance height: 0.6 mm for a 0.30 m stance). The base position RMS is
/// reported but not targeted: on the exact model it carries a gain-independent offset of the
/// contact (foot penetration), about 1.4 mm for the demo robot.
pub const TRACK_SHARE: f64 = 0.002;

/// The columns of the tuning table.
pub const GAINS_COLUMNS: [&str; 19] = [
    "law",
    "rate_hz",
    "actuator",
    "s_critical",
    "s_critical_bound",
    "s_chosen",
    "stiff_kp",
    "stiff_kd",
    "task_kp",
    "task_kd",
    "joint_kp",
    "joint_kd",
    "base_rms_mm",
    "joint_rms_deg",
    "torque_limit_share",
    "target_joint_rms_deg",
    "trials",
    "reason",
    "inputs_sha256",
];

/// Search bounds of the gain scale (relative to the law's settings before tuning).
pub fn law_bounds(law: &str) -> (f64, f64) {
    if law == "stiff-pd" {
        (1.0 / 64.0, 4.0)
    } else {
        (1.0 / 64.0, 16.0)
    }
}

/// A law's settings with its feedback gains scaled by s (stiffness × s, damping × √s).
pub fn scaled(law: &str, base: &LawSettings, s: f64) -> LawSettings {
    let r = s.sqrt();
    let mut out = base.clone();
    if law == "stiff-pd" {
        out.stiff_kp = base.stiff_kp * s;
        out.stiff_kd = base.stiff_kd * r;
    } else {
        out.base_kp = base.base_kp * s;
        out.orient_kp = base.orient_kp * s;
        out.posture_kp = base.posture_kp * s;
        out.base_kd = base.base_kd * r;
        out.orient_kd = base.orient_kd * r;
        out.posture_kd = base.posture_kd * r;
        out.joint_kp = base.joint_kp * s;
        out.joint_kd = base.joint_kd * r;
    }
    out
}

/// One (law, rate, actuator) combination.
#[derive(Clone, Debug, PartialEq)]
pub struct Combo {
    pub law: String,
    pub rate_hz: f64,
    pub actuator: ActuatorKind,
}

/// The combinations a scenario's cells need, in matrix order (rate, actuator, law).
pub fn combos(s: &Scenario) -> Vec<Combo> {
    let mut out = Vec::new();
    for rate_hz in s.axes.numbers("rate_hz") {
        for actuator in s.axes.actuators() {
            for law in s.axes.names("controller") {
                out.push(Combo {
                    law: law.clone(),
                    rate_hz,
                    actuator,
                });
            }
        }
    }
    out
}

/// One tuning run's verdict.
#[derive(Clone, Debug, PartialEq)]
pub struct Trial {
    pub s: f64,
    pub unstable: bool,
    /// Why it is unstable (empty when stable).
    pub why: String,
    pub base_rms_mm: f64,
    pub joint_rms_deg: f64,
    pub torque_limit_share: f64,
}

/// One row of the tuning table.
#[derive(Clone, Debug, PartialEq)]
pub struct GainRow {
    pub combo: Combo,
    /// NaN when pinned.
    pub s_critical: f64,
    /// `inside`, `at-upper` (stable over the whole range), `below-lower`, or `pinned`.
    pub bound: String,
    pub s_chosen: f64,
    pub settings: LawSettings,
    pub base_rms_mm: f64,
    pub joint_rms_deg: f64,
    pub torque_limit_share: f64,
    pub target_joint_rms_deg: f64,
    pub trials: usize,
    pub reason: String,
}

/// Everything the tuning result depends on besides the law bounds and the procedure's
/// constants: the robot files, the plant settings, the tuning motion and the laws' settings
/// before tuning. A table is reusable only where this matches.
pub fn tuning_inputs(s: &Scenario, robot: &LoadedRobot) -> Vec<(&'static str, String)> {
    vec![
        (
            "robot files",
            sha256_hex(&[&robot.facts_text, &robot.urdf_text]),
        ),
        ("plant settings", sha256_hex(&[&format!("{:?}", s.plant)])),
        (
            "tuning motion (gait.body_height, falls)",
            sha256_hex(&[&format!(
                "{} {} {} {} {} {:?} crawl-step v2",
                s.body_height,
                TUNE_SETTLE,
                TUNE_STEP_SHARE,
                TUNE_SWING_SHARE,
                TUNE_CYCLE_PERIOD,
                s.falls
            )]),
        ),
    ]
}

/// The hash of one law's settings before tuning at one rate (its `[laws.<name>]` table).
fn law_hash(s: &Scenario, law: &str, rate_hz: f64) -> String {
    sha256_hex(&[law, &format!("{:?}", s.law_base(law, rate_hz))])
}

/// The `inputs_sha256` column of a row: the inputs' hashes (16 hex digits each) and the law's.
fn row_digest(inputs: &[(&'static str, String)], s: &Scenario, law: &str, rate_hz: f64) -> String {
    let mut parts: Vec<String> = inputs.iter().map(|(_, h)| h[..16].to_string()).collect();
    parts.push(law_hash(s, law, rate_hz)[..16].to_string());
    parts.join("-")
}

fn sha256_hex(parts: &[&str]) -> String {
    let mut h = Sha256::new();
    for p in parts {
        h.update(p.as_bytes());
        h.update([0u8]);
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

/// The gait of the tuning motion: a paced crawl on the scenario's body height h with step h/5
/// and swing height h/6, the margin derived from the robot (only its first step is simulated).
fn tuning_gait(s: &Scenario) -> Gait {
    let h = s.body_height;
    Gait::Crawl {
        step_length: TUNE_STEP_SHARE * h,
        swing_height: TUNE_SWING_SHARE * h,
        cycle_period: TUNE_CYCLE_PERIOD,
        body_height: h,
        margin: None,
        shift_accel: Some(crate::planner::DEFAULT_SHIFT_ACCEL),
    }
}

/// The scenario of the tuning motion: the tuning crawl, exact model, no noise, the scenario's
/// plant and fall test; `duration` is the tuning step's end ([`tuning_step_end`]).
/// What every tuning run is built from: the scenario's robot and plant settings, the tuning
/// motion, no observation delay (the law settings are each trial's).
fn tuning_spec(s: &Scenario, duration: f64) -> CellSpec {
    let mut spec = CellSpec::scenario_defaults(s);
    spec.gait = tuning_gait(s);
    spec.duration = duration;
    spec.noise.delay = 0.0;
    spec
}

/// When the tuning crawl's first swing foot is back on the ground, plus [`TUNE_SETTLE`], s.
fn tuning_step_end(plan: &Plan, dt: f64) -> Option<f64> {
    let mut sample = plan.new_sample();
    let mut swung = false;
    let steps = (plan.duration() / dt).floor() as usize;
    for k in 0..steps {
        let t = k as f64 * dt;
        plan.sample(t, &mut sample);
        if sample.stance.iter().any(|&b| !b) {
            swung = true;
        } else if swung {
            return Some(t + TUNE_SETTLE);
        }
    }
    None
}

struct Tuner<'a> {
    scenario: &'a Scenario,
    spec: CellSpec,
    robot: &'a LoadedRobot,
    plan: Plan,
}

impl Tuner<'_> {
    fn trial(&self, combo: &Combo, settings: LawSettings, s: f64) -> Trial {
        let spec = CellSpec {
            law: settings,
            ..self.spec.clone()
        };
        let cell = Cell::probe(1.0, combo.rate_hz, combo.actuator, &combo.law);
        let mut rows: Vec<TraceRow> = Vec::new();
        let out = run_spec(
            self.robot,
            &cell,
            &spec,
            Some(&self.plan),
            Some((&mut rows, 1)),
        );
        let m = &out.metrics;
        let growth = self.rate_error_thirds(&rows);
        let why = match out.status {
            CellStatus::Diverged => format!("diverged ({})", out.message),
            CellStatus::Fell => format!("fell ({})", out.message),
            CellStatus::Error => format!("error ({})", out.message),
            _ if m.torque_limit_share > SATURATION_SHARE => format!(
                "at the torque limit {:.0} % of the time",
                100.0 * m.torque_limit_share
            ),
            _ if growth.1 > GROWTH_RATIO * growth.0 && growth.1 > GROWTH_FLOOR => format!(
                "joint-rate error grew from {:.3} to {:.3} rad/s RMS",
                growth.0, growth.1
            ),
            _ => String::new(),
        };
        Trial {
            s,
            unstable: !why.is_empty(),
            why,
            base_rms_mm: m.base_pos_rms_mm,
            joint_rms_deg: m.joint_rms_deg,
            torque_limit_share: m.torque_limit_share,
        }
    }

    /// Joint-rate error RMS (rad/s, all joints; rates by finite differences of the recorded
    /// angles, against the plan's) in the first and the last third of the motion. An
    /// oscillation shows in the rates; a slow drift of a soft law (e.g. friction it does not
    /// compensate) does not, so it is not mistaken for instability. A run that ended early
    /// counts as infinite growth.
    fn rate_error_thirds(&self, rows: &[TraceRow]) -> (f64, f64) {
        let dt = self.spec.plant.dt;
        let planned = (self.spec.duration / dt).round() as usize;
        if rows.len() < planned {
            return (0.0, f64::INFINITY);
        }
        let third = planned / 3;
        let mut sample = self.plan.new_sample();
        let mut rms = |from: usize, to: usize| {
            let (mut sum, mut n) = (0.0, 0usize);
            for i in from.max(1)..to {
                let (a, b) = (&rows[i - 1], &rows[i]);
                self.plan.sample(b.t, &mut sample);
                for k in 7..b.q.len() {
                    let e = (b.q[k] - a.q[k]) / dt - sample.v[k - 1];
                    sum += e * e;
                    n += 1;
                }
            }
            (sum / n.max(1) as f64).sqrt()
        };
        (rms(0, third), rms(planned - third, planned))
    }

    fn tune(&self, combo: &Combo) -> GainRow {
        let base = self.scenario.law_base(&combo.law, combo.rate_hz);
        let (lo, hi) = law_bounds(&combo.law);
        // Trials by scale (a scale tried twice, e.g. the lower bound, runs once).
        let mut seen: Vec<Trial> = Vec::new();
        let mut run = |s: f64| {
            if let Some(t) = seen.iter().find(|t| t.s == s) {
                return t.clone();
            }
            let t = self.trial(combo, scaled(&combo.law, &base, s), s);
            seen.push(t.clone());
            t
        };
        // 1. The critical scale.
        let (s_c, bound) = {
            let top = run(hi);
            if !top.unstable {
                (hi, "at-upper".to_string())
            } else {
                let bottom = run(lo);
                if bottom.unstable {
                    (lo, format!("below-lower: {}", bottom.why))
                } else {
                    let (mut a, mut b) = (lo.ln(), hi.ln());
                    for _ in 0..CRITICAL_STEPS {
                        let mid = 0.5 * (a + b);
                        if run(mid.exp()).unstable {
                            b = mid;
                        } else {
                            a = mid;
                        }
                    }
                    // The largest scale seen stable; the critical one lies within a step above.
                    (b.exp(), "inside".to_string())
                }
            }
        };
        let target = TRACK_SHARE.to_degrees();
        let s_max = if bound.starts_with("below") {
            lo
        } else {
            s_c / 2.0
        };
        let (chosen, reason) = if combo.law == "stiff-pd" {
            let t = run(s_max);
            let reason = if t.unstable {
                format!(
                    "s_c / 2 (6 dB gain margin), but unstable there on the tuning motion: {}",
                    t.why
                )
            } else {
                "s_c / 2: as stiff as stability allows with a 6 dB gain margin".to_string()
            };
            (t, reason)
        } else {
            let meets = |t: &Trial| !t.unstable && t.joint_rms_deg <= target;
            let top = run(s_max);
            if !meets(&top) {
                let why = if top.unstable {
                    top.why.clone()
                } else {
                    format!("joint RMS {:.3}° > {target:.3}°", top.joint_rms_deg)
                };
                (
                    top,
                    format!("tracking target NOT met even at s_c / 2 ({why}); runs at s_c / 2"),
                )
            } else {
                let bottom = if s_max > lo { Some(run(lo)) } else { None };
                match bottom {
                    Some(b) if meets(&b) => (
                        b,
                        "lowest scale meeting the tracking target (the search's lower bound)"
                            .to_string(),
                    ),
                    _ => {
                        let (mut a, mut b) = (lo.ln(), s_max.ln());
                        let mut best = top;
                        for _ in 0..TARGET_STEPS {
                            let mid = 0.5 * (a + b);
                            let t = run(mid.exp());
                            if meets(&t) {
                                b = mid;
                                best = t;
                            } else {
                                a = mid;
                            }
                        }
                        (
                            best,
                            "lowest scale meeting the tracking target, ≤ s_c / 2".to_string(),
                        )
                    }
                }
            }
        };
        let trials = seen.len();
        GainRow {
            combo: combo.clone(),
            s_critical: s_c,
            bound: bound.split(':').next().unwrap_or("").to_string(),
            s_chosen: chosen.s,
            settings: scaled(&combo.law, &base, chosen.s),
            base_rms_mm: chosen.base_rms_mm,
            joint_rms_deg: chosen.joint_rms_deg,
            torque_limit_share: chosen.torque_limit_share,
            target_joint_rms_deg: target,
            trials,
            reason: if let Some(why) = bound.strip_prefix("below-lower: ") {
                format!("no stable scale in the search range ({why}); runs at the lower bound")
            } else {
                reason
            },
        }
    }
}

/// The tuning table of a scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct GainTable {
    pub rows: Vec<GainRow>,
    /// Per row, the `inputs_sha256` column.
    pub digests: Vec<String>,
}

impl GainTable {
    /// Put the table's gains into the scenario (pinned rows keep the scenario's own).
    pub fn apply(&self, s: &mut Scenario) {
        for r in &self.rows {
            s.tuned.insert(
                gain_key(&r.combo.law, r.combo.rate_hz, r.combo.actuator),
                r.settings.clone(),
            );
        }
    }

    /// The table as CSV (header, then one row per combination in matrix order).
    pub fn to_csv(&self) -> String {
        let mut out = GAINS_COLUMNS.join(",") + "\n";
        let num = |x: f64| {
            if x.is_nan() {
                String::new()
            } else {
                format!("{x}")
            }
        };
        for (r, digest) in self.rows.iter().zip(&self.digests) {
            let st = &r.settings;
            let (skp, skd, tkp, tkd, jkp, jkd) = if r.combo.law == "stiff-pd" {
                (
                    st.stiff_kp,
                    st.stiff_kd,
                    f64::NAN,
                    f64::NAN,
                    f64::NAN,
                    f64::NAN,
                )
            } else {
                (
                    f64::NAN,
                    f64::NAN,
                    st.base_kp,
                    st.base_kd,
                    st.joint_kp,
                    st.joint_kd,
                )
            };
            let fields = [
                r.combo.law.clone(),
                num(r.combo.rate_hz),
                r.combo.actuator.name().to_string(),
                num(r.s_critical),
                r.bound.clone(),
                num(r.s_chosen),
                num(skp),
                num(skd),
                num(tkp),
                num(tkd),
                num(jkp),
                num(jkd),
                num(r.base_rms_mm),
                num(r.joint_rms_deg),
                num(r.torque_limit_share),
                num(r.target_joint_rms_deg),
                r.trials.to_string(),
                format!("\"{}\"", r.reason.replace('"', "'")),
                digest.clone(),
            ];
            out.push_str(&fields.join(","));
            out.push('\n');
        }
        out
    }
}

/// Tune every combination the scenario needs (pinned ones are listed with their pinned gains,
/// no trials). `threads`: rayon workers (default one per core); the result does not depend on it.
pub fn tune(
    s: &Scenario,
    robot: &LoadedRobot,
    threads: Option<usize>,
) -> Result<GainTable, String> {
    let slope = crate::plant::terrain::Slope::degrees(0.0);
    let plan = Plan::build(
        &robot.model,
        &robot.facts,
        &slope,
        &tuning_gait(s),
        TUNE_PLAN_SPAN,
    )
    .map_err(|e| format!("{}: the tuning motion (one crawl step): {e}", s.source))?;
    let duration = tuning_step_end(&plan, s.plant.dt).ok_or_else(|| {
        format!(
            "{}: the tuning motion (one crawl step): no foot swings within {TUNE_PLAN_SPAN} s",
            s.source
        )
    })?;
    let tuner = Tuner {
        scenario: s,
        spec: tuning_spec(s, duration),
        robot,
        plan,
    };
    let all = combos(s);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads.unwrap_or(0))
        .build()
        .map_err(|e| format!("thread pool: {e}"))?;
    let rows: Vec<GainRow> = pool.install(|| {
        all.par_iter()
            .with_max_len(1)
            .map(|c| {
                if s.gains_pinned(&c.law, c.rate_hz) {
                    GainRow {
                        combo: c.clone(),
                        s_critical: f64::NAN,
                        bound: "pinned".into(),
                        s_chosen: f64::NAN,
                        settings: s.law_base(&c.law, c.rate_hz),
                        base_rms_mm: f64::NAN,
                        joint_rms_deg: f64::NAN,
                        torque_limit_share: f64::NAN,
                        target_joint_rms_deg: f64::NAN,
                        trials: 0,
                        reason: "gains pinned in the scenario's [laws] table; not tuned".into(),
                    }
                } else {
                    tuner.tune(c)
                }
            })
            .collect()
    });
    let inputs = tuning_inputs(s, robot);
    let digests = rows
        .iter()
        .map(|r| row_digest(&inputs, s, &r.combo.law, r.combo.rate_hz))
        .collect();
    Ok(GainTable { rows, digests })
}

/// Read a tuning table written earlier (`gains.csv`) for this scenario: its inputs must match
/// (the robot files, plant settings, tuning motion and law settings, each hashed) and it must
/// hold every combination the scenario needs; otherwise an error names what differs.
pub fn read_table(path: &Path, s: &Scenario, robot: &LoadedRobot) -> Result<GainTable, String> {
    let text = crate::limits::read_text_bounded(path, MAX_TABLE_BYTES, "the tuning table")?;
    let mut reader = csv::ReaderBuilder::new().from_reader(text.as_bytes());
    let head: Vec<String> = reader
        .headers()
        .map_err(|e| format!("{}: {e}", path.display()))?
        .iter()
        .map(|h| h.to_string())
        .collect();
    if head != GAINS_COLUMNS {
        return Err(format!(
            "{}: not a tuning table (expected the columns {})",
            path.display(),
            GAINS_COLUMNS.join(",")
        ));
    }
    let inputs = tuning_inputs(s, robot);
    let mut rows = Vec::new();
    for (i, rec) in reader.records().enumerate() {
        let row = i + 2;
        let rec = rec.map_err(|e| format!("{}: row {row}: {e}", path.display()))?;
        let field = |name: &str| -> &str {
            let k = GAINS_COLUMNS.iter().position(|c| *c == name).unwrap_or(0);
            rec.get(k).unwrap_or("")
        };
        let number = |name: &str| -> Result<f64, String> {
            let v = field(name);
            if v.is_empty() {
                return Ok(f64::NAN);
            }
            v.parse::<f64>().map_err(|_| {
                format!(
                    "{}: row {row}, column {name}: '{v}' is not a number",
                    path.display()
                )
            })
        };
        let law = field("law").to_string();
        let rate_hz = number("rate_hz")?;
        let theirs = field("inputs_sha256");
        let ours = row_digest(&inputs, s, &law, rate_hz);
        if theirs != ours {
            let parts: Vec<&str> = theirs.split('-').collect();
            let labels: Vec<String> = inputs
                .iter()
                .map(|(what, _)| what.to_string())
                .chain([format!("[laws.{law}] settings")])
                .collect();
            let differs: Vec<String> = ours
                .split('-')
                .zip(&labels)
                .enumerate()
                .filter(|(k, (h, _))| parts.get(*k).is_none_or(|p| p != h))
                .map(|(_, (_, what))| what.clone())
                .collect();
            return Err(format!(
                "{}: row {row}, column inputs_sha256: the table was made for other inputs; differs: {}",
                path.display(),
                differs.join(", ")
            ));
        }
        let actuator = ActuatorKind::parse(field("actuator")).ok_or_else(|| {
            format!(
                "{}: row {row}, column actuator: unknown actuator '{}'",
                path.display(),
                field("actuator")
            )
        })?;
        let s_chosen = number("s_chosen")?;
        let bound = field("s_critical_bound").to_string();
        let settings = if bound == "pinned" {
            s.law_base(&law, rate_hz)
        } else {
            if !(s_chosen.is_finite() && s_chosen > 0.0) {
                return Err(format!(
                    "{}: row {row}, column s_chosen: '{}': allowed: a number > 0",
                    path.display(),
                    field("s_chosen")
                ));
            }
            scaled(&law, &s.law_base(&law, rate_hz), s_chosen)
        };
        rows.push(GainRow {
            combo: Combo {
                law,
                rate_hz,
                actuator,
            },
            s_critical: number("s_critical")?,
            bound,
            s_chosen,
            settings,
            base_rms_mm: number("base_rms_mm")?,
            joint_rms_deg: number("joint_rms_deg")?,
            torque_limit_share: number("torque_limit_share")?,
            target_joint_rms_deg: number("target_joint_rms_deg")?,
            trials: field("trials").parse().unwrap_or(0),
            reason: field("reason").to_string(),
        });
    }
    for c in combos(s) {
        let found = rows.iter().find(|r| r.combo == c);
        match found {
            None => {
                return Err(format!(
                    "{}: no row for law {} at {} Hz with the {} actuator, which the scenario needs",
                    path.display(),
                    c.law,
                    c.rate_hz,
                    c.actuator.name()
                ));
            }
            Some(r) if (r.bound == "pinned") != s.gains_pinned(&c.law, c.rate_hz) => {
                return Err(format!(
                    "{}: row for law {} at {} Hz: the scenario {} that law's gains and the table {}",
                    path.display(),
                    c.law,
                    c.rate_hz,
                    if s.gains_pinned(&c.law, c.rate_hz) {
                        "pins"
                    } else {
                        "does not pin"
                    },
                    if r.bound == "pinned" {
                        "does"
                    } else {
                        "does not"
                    }
                ));
            }
            _ => {}
        }
    }
    // Keep only what this scenario needs, in its order.
    let rows: Vec<GainRow> = combos(s)
        .into_iter()
        .filter_map(|c| rows.iter().find(|r| r.combo == c).cloned())
        .collect();
    let digests = rows
        .iter()
        .map(|r| row_digest(&inputs, s, &r.combo.law, r.combo.rate_hz))
        .collect();
    Ok(GainTable { rows, digests })
}
