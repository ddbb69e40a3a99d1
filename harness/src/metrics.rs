//! Per-cell metrics, accumulated every physics step (DESIGN.md, "Metrics"). Nothing here
//! allocates per step once built.

use crate::plant::FootReading;
use gripsweep_controllers::spatial::{Mat3, Vec3, so3_log};

/// How a cell ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum CellStatus {
    Ok,
    /// The law reported it could not satisfy its constraints on more than
    /// [`INFEASIBLE_SHARE`] of its control steps (the robot stayed up).
    Infeasible,
    /// Trunk low, trunk or leg touching the ground, or tilted beyond the limit.
    Fell,
    /// Non-finite state or the engine quarantined a body.
    Diverged,
    /// The cell could not be set up (e.g. the plan does not fit the slope).
    Error,
}

/// Share of control steps with a law reporting trouble above which a cell is "infeasible".
pub const INFEASIBLE_SHARE: f64 = 0.05;

impl CellStatus {
    pub fn name(self) -> &'static str {
        match self {
            CellStatus::Ok => "ok",
            CellStatus::Infeasible => "infeasible",
            CellStatus::Fell => "fell",
            CellStatus::Diverged => "diverged",
            CellStatus::Error => "error",
        }
    }
    pub fn parse(s: &str) -> Option<CellStatus> {
        [
            CellStatus::Ok,
            CellStatus::Infeasible,
            CellStatus::Fell,
            CellStatus::Diverged,
            CellStatus::Error,
        ]
        .into_iter()
        .find(|c| c.name() == s)
    }
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
}

impl CellMetrics {
    pub const COLUMNS: [&'static str; 17] = [
        "sim_time_s",
        "slip_mean_mm",
        "slip_max_mm",
        "slip_total_mm",
        "stance_phases",
        "base_pos_rms_mm",
        "base_orient_rms_deg",
        "joint_rms_deg",
        "progress_m",
        "progress_planned_m",
        "torque_rms_nm",
        "torque_peak_nm",
        "torque_limit_share",
        "energy_j",
        "friction_use_max",
        "friction_over_share",
        "law_trouble_share",
    ];

    pub fn values(&self) -> [f64; 17] {
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
        ]
    }
}

/// Friction usage above this counts as "at the limit" (a sliding contact sits at exactly 1).
const AT_LIMIT: f64 = 0.99;

pub struct MetricsAccumulator {
    dt: f64,
    mu: f64,
    /// Per foot: slip path of the open stance phase, and whether a phase is open.
    phase_path: Vec<f64>,
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
    stance_steps: u64,
    over_steps: u64,
    control_steps: u64,
    trouble_steps: u64,
    start: Vec3,
}

impl MetricsAccumulator {
    pub fn new(n_feet: usize, dt: f64, mu: f64, start: Vec3) -> Self {
        MetricsAccumulator {
            dt,
            mu,
            phase_path: vec![0.0; n_feet],
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
            stance_steps: 0,
            over_steps: 0,
            control_steps: 0,
            trouble_steps: 0,
            start,
        }
    }

    fn close_phase(&mut self, i: usize) {
        if self.phase_open[i] {
            self.phases += 1;
            self.slip_max = self.slip_max.max(self.phase_path[i]);
            self.phase_open[i] = false;
            self.phase_path[i] = 0.0;
        }
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
                let f = &feet[i];
                if f.in_contact {
                    // Slip: path of the material contact point tangential to the surface.
                    let ds = f.slip_velocity.norm() * dt;
                    self.phase_path[i] += ds;
                    self.slip_total += ds;
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
        if any_saturated {
            self.limit_steps += 1;
        }
    }

    /// One control step and whether the law reported trouble.
    pub fn control_step(&mut self, trouble: bool) {
        self.control_steps += 1;
        if trouble {
            self.trouble_steps += 1;
        }
    }

    pub fn trouble_share(&self) -> f64 {
        if self.control_steps == 0 {
            0.0
        } else {
            self.trouble_steps as f64 / self.control_steps as f64
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
        CellMetrics {
            sim_time_s: self.steps as f64 * self.dt,
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
        }
    }
}
