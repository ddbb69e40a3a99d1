//! The metrics an unperceived world needs (issue 14), accumulated every physics step beside
//! [`crate::metrics::MetricsAccumulator`]:
//!
//! * `touchdown_force_peak_bw`: the largest ground force on a foot within
//!   [`TOUCHDOWN_WINDOW_S`] after it makes contact following a planned swing, in body weights
//!   (m g of the true robot) — the impact a stiff leg puts into the ground at an unseen step.
//!   The force is averaged over the last [`IMPACT_AVERAGE_S`] (the impulse over that time, divided
//!   by it), so the figure does not depend on the plant's step once the step is well below it:
//!   a single step's impulse / dt grows as the step shrinks (the impact's duration is set by the
//!   contact's stiffness, a 500 Hz contact rings with a 1 ms half-period);
//! * `torque_rate_peak_nm_per_s`: the largest change of a joint's commanded torque between two
//!   control steps, times the control rate;
//! * `push_displacement_mm`: the largest base position error against the plan from the push's
//!   start to the end of the run, minus the error at the start (NaN without a push);
//! * `push_recovery_s`: time from the push's start until the base position error is back
//!   within the tracking bound for good — the bound is [`RECOVERY_FACTOR`] × the run's own RMS
//!   error before the push, at least [`RECOVERY_FLOOR_MM`] (0 when the push never took it out;
//!   NaN without a push or when it was still out at the end);
//! * `step_early_share`, `step_late_share`: of the planned touchdowns, the share where the
//!   foot was already in contact in the last quarter of the swing (from 75 % to 95 % of it:
//!   it met ground above the plan's), and the share where it had not touched by
//!   [`LATE_SHARE`] of the swing's duration after the planned touchdown (ground below it).

use crate::plant::FootReading;
use gripsweep_controllers::spatial::Vec3;

pub const TOUCHDOWN_WINDOW_S: f64 = 0.05;
/// Time over which a foot's ground force is averaged for the touchdown peak, s.
pub const IMPACT_AVERAGE_S: f64 = 0.002;
pub const RECOVERY_FACTOR: f64 = 3.0;
pub const RECOVERY_FLOOR_MM: f64 = 5.0;
/// Late: no contact within this share of the swing's duration after the planned touchdown.
pub const LATE_SHARE: f64 = 0.1;

/// The columns these metrics add to `cells.csv`, in order: the last six of
/// [`crate::run_format::METRICS`] (a test checks).
pub const COLUMNS: [&str; 6] = [
    "touchdown_force_peak_bw",
    "torque_rate_peak_nm_per_s",
    "push_displacement_mm",
    "push_recovery_s",
    "step_early_share",
    "step_late_share",
];

#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WorldMetrics {
    pub touchdown_force_peak_bw: f64,
    pub torque_rate_peak_nm_per_s: f64,
    pub push_displacement_mm: f64,
    pub push_recovery_s: f64,
    pub step_early_share: f64,
    pub step_late_share: f64,
}

impl Default for WorldMetrics {
    fn default() -> Self {
        WorldMetrics {
            touchdown_force_peak_bw: f64::NAN,
            torque_rate_peak_nm_per_s: f64::NAN,
            push_displacement_mm: f64::NAN,
            push_recovery_s: f64::NAN,
            step_early_share: f64::NAN,
            step_late_share: f64::NAN,
        }
    }
}

impl WorldMetrics {
    pub fn values(&self) -> [f64; 6] {
        [
            self.touchdown_force_peak_bw,
            self.torque_rate_peak_nm_per_s,
            self.push_displacement_mm,
            self.push_recovery_s,
            self.step_early_share,
            self.step_late_share,
        ]
    }
}

struct FootTrack {
    planned_stance: bool,
    in_contact: bool,
    swing_start: f64,
    /// Contact flags of the open swing, one per physics step.
    swing_contact: Vec<bool>,
    /// After a planned touchdown: the deadline for contact, whether it came.
    late_deadline: Option<f64>,
    /// A touchdown window is open until this time (after contact following a swing).
    impact_until: f64,
    /// The ground force of the last steps covering [`IMPACT_AVERAGE_S`] (a ring).
    recent: Vec<Vec3>,
    swung: bool,
}

pub struct WorldAccumulator {
    dt: f64,
    weight: f64,
    feet: Vec<FootTrack>,
    touchdowns: u64,
    early: u64,
    late: u64,
    impact_peak: f64,
    /// Physics steps seen (the ring index of `FootTrack::recent`).
    steps: u64,
    rate_peak: f64,
    last_command: Vec<f64>,
    have_command: bool,
    push_start: Option<f64>,
    pre_sq: f64,
    pre_n: u64,
    err_at_push: f64,
    err_max_after: f64,
    last_out: Option<f64>,
    bound_mm: f64,
}

impl WorldAccumulator {
    /// `weight`: the true robot's m g, N; `push_start`: when a push starts (None: no push).
    pub fn new(
        n_feet: usize,
        n_joints: usize,
        dt: f64,
        weight: f64,
        push_start: Option<f64>,
    ) -> Self {
        let average_steps = ((IMPACT_AVERAGE_S / dt).round() as usize).max(1);
        WorldAccumulator {
            dt,
            weight,
            feet: (0..n_feet)
                .map(|_| FootTrack {
                    planned_stance: true,
                    in_contact: true,
                    swing_start: 0.0,
                    swing_contact: Vec::with_capacity(4096),
                    late_deadline: None,
                    impact_until: f64::NEG_INFINITY,
                    recent: vec![Vec3::zeros(); average_steps],
                    swung: false,
                })
                .collect(),
            touchdowns: 0,
            early: 0,
            late: 0,
            impact_peak: 0.0,
            steps: 0,
            rate_peak: 0.0,
            last_command: vec![0.0; n_joints],
            have_command: false,
            push_start,
            pre_sq: 0.0,
            pre_n: 0,
            err_at_push: f64::NAN,
            err_max_after: 0.0,
            last_out: None,
            bound_mm: f64::NAN,
        }
    }

    /// After a control step: the law's command and the control rate.
    pub fn control_step(&mut self, command: &[f64], rate_hz: f64) {
        if self.have_command {
            for (c, l) in command.iter().zip(&self.last_command) {
                self.rate_peak = self.rate_peak.max((c - l).abs() * rate_hz);
            }
        }
        self.last_command.copy_from_slice(command);
        self.have_command = true;
    }

    /// After a physics step ending at `t`: the plan's stance flags, the feet, and the base
    /// position error against the plan, m.
    pub fn step(&mut self, t: f64, stance: &[bool], feet: &[FootReading], base_err: f64) {
        for ((f, &st), r) in self.feet.iter_mut().zip(stance).zip(feet) {
            let contact = r.in_contact;
            if f.planned_stance && !st {
                f.swing_start = t;
                f.swing_contact.clear();
                f.swung = true;
            }
            if !st && f.swing_contact.len() < f.swing_contact.capacity() {
                f.swing_contact.push(contact);
            }
            if !f.planned_stance && st {
                // A planned touchdown: judge the swing's last quarter for early contact.
                let n = f.swing_contact.len();
                let (a, b) = ((0.75 * n as f64) as usize, (0.95 * n as f64) as usize);
                self.touchdowns += 1;
                if f.swing_contact[a.min(n)..b.min(n)].iter().any(|&c| c) {
                    self.early += 1;
                }
                f.late_deadline = Some(t + LATE_SHARE * (t - f.swing_start));
            }
            if let Some(d) = f.late_deadline {
                if contact {
                    f.late_deadline = None;
                } else if t > d {
                    self.late += 1;
                    f.late_deadline = None;
                }
            }
            // Impact: contact made after a swing opens the window.
            if contact && !f.in_contact && f.swung {
                f.impact_until = t + TOUCHDOWN_WINDOW_S;
            }
            let n = f.recent.len();
            f.recent[self.steps as usize % n] = r.force;
            if t <= f.impact_until {
                let mean = f.recent.iter().sum::<Vec3>() / n as f64;
                self.impact_peak = self.impact_peak.max(mean.norm() / self.weight);
            }
            f.in_contact = contact;
            f.planned_stance = st;
        }
        self.steps += 1;
        let err_mm = base_err * 1e3;
        match self.push_start {
            Some(p) if t > p => {
                if self.err_at_push.is_nan() {
                    self.err_at_push = err_mm;
                    let rms = if self.pre_n > 0 {
                        (self.pre_sq / self.pre_n as f64).sqrt()
                    } else {
                        0.0
                    };
                    self.bound_mm = (RECOVERY_FACTOR * rms).max(RECOVERY_FLOOR_MM);
                }
                self.err_max_after = self.err_max_after.max(err_mm);
                if err_mm > self.bound_mm {
                    self.last_out = Some(t);
                }
            }
            _ => {
                self.pre_sq += err_mm * err_mm;
                self.pre_n += 1;
            }
        }
    }

    /// The metrics at the end of a run that ended at `t_end`.
    pub fn finish(&self, t_end: f64) -> WorldMetrics {
        let share = |k: u64| {
            if self.touchdowns == 0 {
                f64::NAN
            } else {
                k as f64 / self.touchdowns as f64
            }
        };
        let (disp, recovery) = match self.push_start {
            Some(p) if !self.err_at_push.is_nan() => {
                let rec = match self.last_out {
                    None => 0.0,
                    // Still out of the bound in the last step: not recovered.
                    Some(last) if last >= t_end - 1.5 * self.dt => f64::NAN,
                    Some(last) => last - p,
                };
                ((self.err_max_after - self.err_at_push).max(0.0), rec)
            }
            _ => (f64::NAN, f64::NAN),
        };
        WorldMetrics {
            touchdown_force_peak_bw: self.impact_peak,
            torque_rate_peak_nm_per_s: self.rate_peak,
            push_displacement_mm: disp,
            push_recovery_s: recovery,
            step_early_share: share(self.early),
            step_late_share: share(self.late),
        }
    }
}

/// Base position error against the plan, m.
pub fn base_error(base: &Vec3, plan_base: &Vec3) -> f64 {
    (base - plan_base).norm()
}

#[cfg(test)]
mod columns_tests {
    #[test]
    fn the_world_columns_end_the_run_formats_metric_list() {
        let m = crate::run_format::metric_columns();
        assert_eq!(&m[m.len() - super::COLUMNS.len()..], &super::COLUMNS[..]);
    }
}

#[cfg(test)]
mod impact_tests {
    use super::*;

    /// One foot swings, touches down and takes a 1 ms impact of 1000 N, then carries 100 N: the
    /// touchdown peak is the 2 ms average, (1000 N · 1 ms + 100 N · 1 ms) / 2 ms = 550 N, at a
    /// 1 ms and at a 0.5 ms step alike (impulse conservation; the single-step force would read
    /// 1000 N at either step here, and more at the finer one for a shorter impact).
    #[test]
    fn the_touchdown_peak_is_a_two_millisecond_average_at_any_step() {
        for dt in [1e-3, 5e-4] {
            let weight = 100.0;
            let mut w = WorldAccumulator::new(1, 1, dt, weight, None);
            let mut t = 0.0;
            let mut step = |w: &mut WorldAccumulator, stance: bool, force: f64| {
                t += dt;
                let r = FootReading {
                    in_contact: force > 0.0,
                    force: Vec3::new(0.0, 0.0, force),
                    ..FootReading::default()
                };
                w.step(t, &[stance], &[r], 0.0);
            };
            let n = |s: f64| (s / dt).round() as usize;
            for _ in 0..n(0.01) {
                step(&mut w, true, 100.0);
            }
            for _ in 0..n(0.1) {
                step(&mut w, false, 0.0);
            }
            for _ in 0..n(0.001) {
                step(&mut w, true, 1000.0);
            }
            for _ in 0..n(0.02) {
                step(&mut w, true, 100.0);
            }
            let peak = w.finish(t).touchdown_force_peak_bw;
            assert!((peak - 5.5).abs() < 1e-9, "dt {dt}: {peak} body weights");
        }
    }
}
