//! Per-cell metrics, accumulated every physics step (README, "Outputs", says what each
//! column measures; the column list itself is `run_format::METRICS`). Nothing here
//! allocates per step once built.

use crate::plant::FootReading;
use gripsweep_controllers::laws::LawStatus;
use gripsweep_controllers::spatial::{Mat3, Vec3, so3_log};

/// How a cell ended: the one outcome enum of the run format.
pub use crate::run_format::Outcome as CellStatus;

/// Share of control steps with a law reporting trouble above which a cell is "infeasible".
pub const INFEASIBLE_SHARE: f64 = 0.05;

/// The tests that call a run that stayed up `no-control` (README, "Statuses"). Any one fires.
///
/// * Torque limit: some joint's actuator saturated on more than this share of physics steps —
///   the law's command was not what the robot received most of the time.
pub const NO_CONTROL_LIMIT_SHARE: f64 = 0.5;
/// * Tracking: base position RMS error against the plan above this share of the planned body
///   height (the trunk's height above the ground; a robot-size bound, not a fixed length).
pub const NO_CONTROL_TRACKING_SHARE_OF_HEIGHT: f64 = 0.5;
/// * Oscillation: some joint's applied torque changed sign more often than this many times a
///   second over the run, counting a change only when the torque swings from above
///   +[`FLIP_BAND_SHARE`] to below −[`FLIP_BAND_SHARE`] of that joint's torque limit (or back),
///   so chatter around zero on an unloaded joint does not count.
pub const NO_CONTROL_FLIP_RATE_HZ: f64 = 20.0;
/// Hysteresis band of the torque-sign count, share of the joint's torque limit.
pub const FLIP_BAND_SHARE: f64 = 0.05;

/// Which no-control test fires for a run that stayed up, as a message with the numbers
/// (`None`: the law controlled the robot). `body_height`: the plan's trunk height, m.
pub fn no_control_reason(m: &CellMetrics, body_height: f64) -> Option<String> {
    let mut fired = Vec::new();
    if m.torque_limit_share > NO_CONTROL_LIMIT_SHARE {
        fired.push(format!(
            "at a torque limit {:.0} % of the time (test: > {:.0} %)",
            100.0 * m.torque_limit_share,
            100.0 * NO_CONTROL_LIMIT_SHARE
        ));
    }
    let bound_mm = 1e3 * NO_CONTROL_TRACKING_SHARE_OF_HEIGHT * body_height;
    if m.base_pos_rms_mm > bound_mm {
        fired.push(format!(
            "base {:.0} mm RMS off the plan (test: > {:.0} mm, {:.0} % of the body height)",
            m.base_pos_rms_mm,
            bound_mm,
            100.0 * NO_CONTROL_TRACKING_SHARE_OF_HEIGHT
        ));
    }
    if m.torque_flip_rate_hz > NO_CONTROL_FLIP_RATE_HZ {
        fired.push(format!(
            "a joint torque reversed {:.0} times a second (test: > {:.0}/s)",
            m.torque_flip_rate_hz, NO_CONTROL_FLIP_RATE_HZ
        ));
    }
    if fired.is_empty() {
        None
    } else {
        Some(format!("did not control the robot: {}", fired.join("; ")))
    }
}

/// The law-status shares of a run, as a message part ("solved 20 %, infeasible 80 %, …").
pub fn law_share_text(m: &CellMetrics) -> String {
    format!(
        "law solved {:.0} %, infeasible {:.0} %, underactuated {:.0} %, failed {:.0} % of control steps",
        100.0 * m.law_solved_share,
        100.0 * m.law_infeasible_share,
        100.0 * m.law_underactuated_share,
        100.0 * m.law_failed_share
    )
}

/// The numbers of one cell (the metric columns of `cells.csv`, in order).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CellMetrics {
    pub sim_time_s: f64,
    pub slip_mean_mm: f64,
    pub slip_max_mm: f64,
    pub slip_total_mm: f64,
    pub stance_phases: u64,
    pub base_pos_rms_mm: f64,
    pub base_orient_rms_deg: f64,
    pub joint_rms_deg: f64,
    pub progress_m: f64,
    pub progress_planned_m: f64,
    pub torque_rms_nm: f64,
    pub torque_peak_nm: f64,
    pub torque_limit_share: f64,
    pub energy_j: f64,
    pub friction_use_max: f64,
    pub friction_over_share: f64,
    pub law_trouble_share: f64,
    pub law_solved_share: f64,
    pub law_infeasible_share: f64,
    pub law_underactuated_share: f64,
    pub law_failed_share: f64,
    pub stance_off_ground_share: f64,
    pub torque_flip_rate_hz: f64,
    /// issue 14 (world14): impacts, torque rate, push response, early/late steps
    /// (`crate::world_metrics::COLUMNS`, the last six of `run_format::METRICS`).
    pub world: crate::world_metrics::WorldMetrics,
}

impl CellMetrics {
    /// The metric columns, in file order: the run format's [`crate::run_format::METRICS`]
    /// (`values` must follow it; a test checks the count).
    pub const COLUMNS: [&'static str; 29] = crate::run_format::metric_columns();

    pub fn values(&self) -> [f64; 29] {
        let w = self.world.values();
        [
            self.sim_time_s,
            self.slip_mean_mm,
            self.slip_max_mm,
            self.slip_total_mm,
            self.stance_phases as f64,
            self.base_pos_rms_mm,
            self.base_orient_rms_deg,
            self.joint_rms_deg,
            self.progress_m,
            self.progress_planned_m,
            self.torque_rms_nm,
            self.torque_peak_nm,
            self.torque_limit_share,
            self.energy_j,
            self.friction_use_max,
            self.friction_over_share,
            self.law_trouble_share,
            self.law_solved_share,
            self.law_infeasible_share,
            self.law_underactuated_share,
            self.law_failed_share,
            self.stance_off_ground_share,
            self.torque_flip_rate_hz,
            w[0],
            w[1],
            w[2],
            w[3],
            w[4],
            w[5],
        ]
    }
}

/// Friction usage above this counts as "at the limit" (a sliding contact sits at exactly 1).
const AT_LIMIT: f64 = 0.99;

/// Slip of a planned-stance foot (README, "Outputs": `slip_mean_mm`).
///
/// For each planned stance phase the accumulator integrates the tangential velocity of the
/// foot sphere's material point at the ground contact, c − r n (c the centre, r the radius,
/// n the surface normal), every physics step, touching or not, into a displacement vector
/// D(t) = ∫ (v_c + ω × (−r n))_t dt. Since d/dt (c − r n) = v_c for a fixed n, this equals the
/// tangential displacement of the point c − r n minus the rolling part ∫ r (ω × n) dt — the
/// two formulations are the same quantity, and the integral needs only the per-step read-out
/// the plant already gives (rapier moves positions with the end-of-step velocity, so the sum
/// of v dt reproduces the centre's displacement to rounding). A phase's slip is the largest
/// |D| reached during the phase: a foot dragged away and back still counts how far it went.
/// Pure rolling (a foot tipping over its sphere while the leg pivots) does not count.
pub struct MetricsAccumulator {
    dt: f64,
    mu: f64,
    /// Per foot: displacement of the open stance phase, its largest norm, whether open.
    phase_disp: Vec<Vec3>,
    phase_peak: Vec<f64>,
    phase_open: Vec<bool>,
    phases: u64,
    slip_total: f64,
    slip_max: f64,
    steps: u64,
    base_pos_sq: f64,
    orient_sq: f64,
    joint_sq: f64,
    joint_count: u64,
    torque_sq: f64,
    torque_peak: f64,
    limit_steps: u64,
    energy: f64,
    use_max: f64,
    /// Planned-stance foot-steps: all, touching, and touching at the friction limit.
    planned_stance_steps: u64,
    stance_steps: u64,
    over_steps: u64,
    control_steps: u64,
    /// Control steps per law status: solved, infeasible, underactuated, failed.
    law_counts: [u64; 4],
    /// Per joint: hysteresis band (N·m), last torque sign outside the band, sign changes.
    flip_band: Vec<f64>,
    flip_sign: Vec<i8>,
    flips: Vec<u64>,
    start: Vec3,
}

impl MetricsAccumulator {
    pub fn new(n_feet: usize, dt: f64, mu: f64, start: Vec3) -> Self {
        MetricsAccumulator {
            dt,
            mu,
            phase_disp: vec![Vec3::zeros(); n_feet],
            phase_peak: vec![0.0; n_feet],
            phase_open: vec![false; n_feet],
            phases: 0,
            slip_total: 0.0,
            slip_max: 0.0,
            steps: 0,
            base_pos_sq: 0.0,
            orient_sq: 0.0,
            joint_sq: 0.0,
            joint_count: 0,
            torque_sq: 0.0,
            torque_peak: 0.0,
            limit_steps: 0,
            energy: 0.0,
            use_max: 0.0,
            planned_stance_steps: 0,
            stance_steps: 0,
            over_steps: 0,
            control_steps: 0,
            law_counts: [0; 4],
            flip_band: Vec::new(),
            flip_sign: Vec::new(),
            flips: Vec::new(),
            start,
        }
    }

    /// The joints' torque limits (N·m), for the torque-reversal count's hysteresis band
    /// ([`FLIP_BAND_SHARE`] of each). Without it no reversal is counted. A limit that is not
    /// finite and positive gives a zero band (every sign change counts).
    pub fn with_torque_limits(mut self, limits: &[f64]) -> Self {
        self.flip_band = limits
            .iter()
            .map(|&l| {
                if l.is_finite() && l > 0.0 {
                    FLIP_BAND_SHARE * l
                } else {
                    0.0
                }
            })
            .collect();
        self.flip_sign = vec![0; limits.len()];
        self.flips = vec![0; limits.len()];
        self
    }

    fn close_phase(&mut self, i: usize) {
        if self.phase_open[i] {
            self.phases += 1;
            self.slip_total += self.phase_peak[i];
            self.slip_max = self.slip_max.max(self.phase_peak[i]);
            self.phase_open[i] = false;
            self.phase_disp[i] = Vec3::zeros();
            self.phase_peak[i] = 0.0;
        }
    }

    /// The open phase's slip displacement of foot `i` so far (m, world), for tests and traces.
    pub fn phase_displacement(&self, i: usize) -> Vec3 {
        self.phase_disp[i]
    }

    /// One physics step: planned stance, the plant's foot read-out, tracking errors, applied
    /// torques and joint rates.
    #[allow(clippy::too_many_arguments)]
    pub fn step(
        &mut self,
        stance: &[bool],
        feet: &[FootReading],
        base_pos: &Vec3,
        base_rot: &Mat3,
        plan_pos: &Vec3,
        plan_rot: &Mat3,
        joint_err: impl Iterator<Item = f64>,
        tau: &[f64],
        qdot: &[f64],
        any_saturated: bool,
    ) {
        self.steps += 1;
        let dt = self.dt;
        for i in 0..feet.len() {
            if stance[i] {
                self.phase_open[i] = true;
                self.planned_stance_steps += 1;
                let f = &feet[i];
                // Every planned-stance step counts, touching or not (see the type's comment).
                self.phase_disp[i] += f.slip_velocity * dt;
                self.phase_peak[i] = self.phase_peak[i].max(self.phase_disp[i].norm());
                if f.in_contact {
                    self.stance_steps += 1;
                    let fn_ = f.force_surface[0];
                    if fn_ > 1e-9 {
                        let ft = (f.force_surface[1].powi(2) + f.force_surface[2].powi(2)).sqrt();
                        let usage = ft / (self.mu * fn_);
                        self.use_max = self.use_max.max(usage);
                        if usage > AT_LIMIT {
                            self.over_steps += 1;
                        }
                    }
                }
            } else {
                self.close_phase(i);
            }
        }
        self.base_pos_sq += (base_pos - plan_pos).norm_squared();
        self.orient_sq += so3_log(&(plan_rot.transpose() * base_rot)).norm_squared();
        for e in joint_err {
            self.joint_sq += e * e;
            self.joint_count += 1;
        }
        for (t, w) in tau.iter().zip(qdot) {
            self.torque_sq += t * t;
            self.torque_peak = self.torque_peak.max(t.abs());
            self.energy += (t * w).abs() * dt;
        }
        for (k, &t) in tau.iter().enumerate().take(self.flip_band.len()) {
            let band = self.flip_band[k];
            let sign = if t > band {
                1
            } else if t < -band {
                -1
            } else {
                0
            };
            if sign != 0 {
                if self.flip_sign[k] != 0 && sign != self.flip_sign[k] {
                    self.flips[k] += 1;
                }
                self.flip_sign[k] = sign;
            }
        }
        if any_saturated {
            self.limit_steps += 1;
        }
    }

    /// One control step and the law's status on it.
    pub fn control_step(&mut self, status: LawStatus) {
        self.control_steps += 1;
        let slot = match status {
            LawStatus::Solved => 0,
            LawStatus::Infeasible => 1,
            LawStatus::Underactuated => 2,
            LawStatus::Failed => 3,
        };
        self.law_counts[slot] += 1;
    }

    fn law_share(&self, slot: usize) -> f64 {
        if self.control_steps == 0 {
            0.0
        } else {
            self.law_counts[slot] as f64 / self.control_steps as f64
        }
    }

    /// Share of control steps on which the law reported anything but solved.
    pub fn trouble_share(&self) -> f64 {
        if self.control_steps == 0 {
            0.0
        } else {
            1.0 - self.law_share(0)
        }
    }

    pub fn finish(
        mut self,
        end: &Vec3,
        uphill: &Vec3,
        planned_progress: f64,
        n_joints: usize,
    ) -> CellMetrics {
        for i in 0..self.phase_open.len() {
            self.close_phase(i);
        }
        let steps = self.steps.max(1) as f64;
        let nan_if_none = |count: u64, v: f64| if count == 0 { f64::NAN } else { v };
        let sim_time = self.steps as f64 * self.dt;
        let flips_max = self.flips.iter().copied().max().unwrap_or(0);
        CellMetrics {
            sim_time_s: sim_time,
            slip_mean_mm: nan_if_none(
                self.phases,
                1e3 * self.slip_total / self.phases.max(1) as f64,
            ),
            slip_max_mm: 1e3 * self.slip_max,
            slip_total_mm: 1e3 * self.slip_total,
            stance_phases: self.phases,
            base_pos_rms_mm: 1e3 * (self.base_pos_sq / steps).sqrt(),
            base_orient_rms_deg: (self.orient_sq / steps).sqrt().to_degrees(),
            joint_rms_deg: nan_if_none(
                self.joint_count,
                (self.joint_sq / self.joint_count.max(1) as f64)
                    .sqrt()
                    .to_degrees(),
            ),
            progress_m: (end - self.start).dot(uphill),
            progress_planned_m: planned_progress,
            torque_rms_nm: (self.torque_sq / (steps * n_joints.max(1) as f64)).sqrt(),
            torque_peak_nm: self.torque_peak,
            torque_limit_share: self.limit_steps as f64 / steps,
            energy_j: self.energy,
            friction_use_max: self.use_max,
            friction_over_share: nan_if_none(
                self.stance_steps,
                self.over_steps as f64 / self.stance_steps.max(1) as f64,
            ),
            law_trouble_share: self.trouble_share(),
            law_solved_share: self.law_share(0),
            law_infeasible_share: self.law_share(1),
            law_underactuated_share: self.law_share(2),
            law_failed_share: self.law_share(3),
            stance_off_ground_share: nan_if_none(
                self.planned_stance_steps,
                1.0 - self.stance_steps as f64 / self.planned_stance_steps.max(1) as f64,
            ),
            torque_flip_rate_hz: if sim_time > 0.0 {
                flips_max as f64 / sim_time
            } else {
                0.0
            },
            world: Default::default(), // issue 14: filled by the cell
        }
    }
}
