//! Actuator models: what turns a controller's torque command into the torque a joint feels.
//! One type per model behind [`Actuator`]; each joint gets its own instance (state: delay line,
//! lag). Joint friction itself is simulated by the engine (Coulomb as rapier's implicit dry
//! joint friction, which sticks exactly at zero velocity; viscous as its implicit joint
//! damping), so each model only says how much friction the joint shows.

use gripsweep_controllers::robot_facts::ActuatorParams;
use std::collections::VecDeque;
use std::fmt;

/// The actuator axis of the scenario matrix.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum ActuatorKind {
    /// Applied torque = command, clamped at the effort limit; no joint friction.
    Ideal,
    /// No joint torque sensing: command → motor current through an estimated torque constant
    /// (with error), transport delay, first-order current lag; joint friction uncompensated.
    OpenCurrent,
    /// Joint torque sensing closes an inner loop that rejects friction and lag by 1 + gain.
    TorqueLoop,
}

impl ActuatorKind {
    pub const ALL: [ActuatorKind; 3] = [
        ActuatorKind::Ideal,
        ActuatorKind::OpenCurrent,
        ActuatorKind::TorqueLoop,
    ];

    pub fn name(self) -> &'static str {
        match self {
            ActuatorKind::Ideal => "ideal",
            ActuatorKind::OpenCurrent => "open-current",
            ActuatorKind::TorqueLoop => "torque-loop",
        }
    }

    pub fn parse(s: &str) -> Option<ActuatorKind> {
        Self::ALL.into_iter().find(|k| k.name() == s)
    }

    /// Build the actuator of one joint.
    pub fn build(self, p: &ActuatorParams, effort_limit: f64, dt: f64) -> Box<dyn Actuator> {
        match self {
            ActuatorKind::Ideal => Box::new(Ideal {
                limit: effort_limit,
                saturated: false,
            }),
            ActuatorKind::OpenCurrent => Box::new(CurrentDrive::new(
                DriveFigures {
                    gain: 1.0 + p.torque_constant_error,
                    delay: p.delay,
                    lag: p.lag,
                    coulomb: p.coulomb,
                    viscous: p.viscous,
                },
                effort_limit,
                dt,
            )),
            ActuatorKind::TorqueLoop => {
                // The sensed-torque loop divides every error it sees by (1 + K): friction,
                // torque-constant error, and the current lag (closed-loop bandwidth (1 + K)
                // times the open loop's). The command itself still reaches the drive one inner
                // loop period late (zero-order hold of the inner loop).
                let k1 = 1.0 + p.torque_loop_gain;
                Box::new(CurrentDrive::new(
                    DriveFigures {
                        gain: 1.0 + p.torque_constant_error / k1,
                        delay: 1.0 / p.torque_loop_rate,
                        lag: p.lag / k1,
                        coulomb: p.coulomb / k1,
                        viscous: p.viscous / k1,
                    },
                    effort_limit,
                    dt,
                ))
            }
        }
    }
}

impl fmt::Display for ActuatorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

pub trait Actuator: Send {
    /// The torque the joint receives during the next plant step of length `dt`, given the
    /// controller's (held) command.
    fn drive(&mut self, command: f64) -> f64;
    /// Joint friction the plant must simulate: (Coulomb N·m, viscous N·m·s/rad).
    fn friction(&self) -> (f64, f64);
    /// Whether the last [`Actuator::drive`] hit the effort limit.
    fn saturated(&self) -> bool;
}

pub struct Ideal {
    limit: f64,
    saturated: bool,
}

impl Actuator for Ideal {
    fn drive(&mut self, command: f64) -> f64 {
        self.saturated = command.abs() >= self.limit;
        command.clamp(-self.limit, self.limit)
    }
    fn friction(&self) -> (f64, f64) {
        (0.0, 0.0)
    }
    fn saturated(&self) -> bool {
        self.saturated
    }
}

/// Effective figures of a current-driven joint (open loop, or inside a torque loop).
#[derive(Clone, Copy, Debug)]
pub struct DriveFigures {
    /// True / estimated torque constant.
    pub gain: f64,
    /// Transport delay of the command, s.
    pub delay: f64,
    /// First-order lag time constant, s.
    pub lag: f64,
    pub coulomb: f64,
    pub viscous: f64,
}

pub struct CurrentDrive {
    fig: DriveFigures,
    limit: f64,
    /// Commands waiting out the transport delay, one per plant step: the whole steps n of the
    /// delay d = (n + f) dt, and one more when it has a fraction f of a step.
    line: VecDeque<f64>,
    /// The fraction f of a step in the delay (0 when d is a whole number of steps).
    frac: f64,
    /// Lag filter factor per step: 1 − exp(−dt / T).
    alpha: f64,
    torque: f64,
    saturated: bool,
}

impl CurrentDrive {
    pub fn new(fig: DriveFigures, limit: f64, dt: f64) -> Self {
        // A delay that is not a whole number of plant steps keeps its fraction (rounding it
        // made the delay depend on the step: a 0.25 ms torque-loop delay was none at 1 ms
        // steps and 0.5 ms at 0.5 ms steps).
        let exact = fig.delay / dt;
        let whole = (exact + 1e-9).floor();
        let frac = if exact - whole > 1e-9 {
            exact - whole
        } else {
            0.0
        };
        let steps = whole as usize + usize::from(frac > 0.0);
        let alpha = if fig.lag > 0.0 {
            1.0 - (-dt / fig.lag).exp()
        } else {
            1.0
        };
        CurrentDrive {
            fig,
            limit,
            line: std::iter::repeat_n(0.0, steps).collect(),
            frac,
            alpha,
            torque: 0.0,
            saturated: false,
        }
    }
}

impl Actuator for CurrentDrive {
    fn drive(&mut self, command: f64) -> f64 {
        // The driver limits current: the command is clamped at the effort limit before the
        // torque-constant error scales it; the shaft torque is clamped at the limit again.
        self.line.push_back(command.clamp(-self.limit, self.limit));
        let delayed = if self.frac > 0.0 {
            // The commands are held over each step; delayed by (n + f) steps, the step
            // sees the command of n + 1 steps ago for its first f and that of n steps ago for
            // the rest: their step average (the impulse the delayed command delivers).
            let older = self.line.pop_front().unwrap_or(0.0);
            let newer = self.line.front().copied().unwrap_or(0.0);
            self.frac * older + (1.0 - self.frac) * newer
        } else {
            self.line.pop_front().unwrap_or(0.0)
        };
        let target = delayed * self.fig.gain;
        self.torque += self.alpha * (target - self.torque);
        self.saturated = command.abs() >= self.limit || self.torque.abs() >= self.limit;
        self.torque.clamp(-self.limit, self.limit)
    }
    fn friction(&self) -> (f64, f64) {
        (self.fig.coulomb, self.fig.viscous)
    }
    fn saturated(&self) -> bool {
        self.saturated
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> ActuatorParams {
        ActuatorParams {
            armature: 0.01,
            coulomb: 0.5,
            viscous: 0.04,
            torque_constant_error: 0.1,
            delay: 0.003,
            lag: 0.005,
            torque_loop_rate: 4000.0,
            torque_loop_gain: 9.0,
        }
    }

    /// Step response of a first-order lag after a pure delay: y(t) = G (1 − e^{−(t−d)/T}).
    #[test]
    fn open_current_step_response_has_the_configured_delay_and_lag() {
        let dt = 1e-4;
        let mut a = ActuatorKind::OpenCurrent.build(&params(), 30.0, dt);
        let mut out = Vec::new();
        for _ in 0..400 {
            out.push(a.drive(10.0));
        }
        // Nothing arrives before the delay (30 steps of 0.1 ms).
        assert!(out[..30].iter().all(|&y| y == 0.0));
        assert!(out[30] > 0.0);
        // After the delay the response follows the discrete first-order lag exactly; one lag
        // time constant later it has risen to 1 − 1/e of the final 11 N·m (gain 1.1).
        let k = 30 + 50; // delay + T, in steps (sample k has seen k − 29 filter updates)
        let expected = 11.0 * (1.0 - (-(k as f64 - 29.0) * dt / 0.005).exp());
        assert!((out[k] - expected).abs() < 1e-9, "{} vs {expected}", out[k]);
        assert!((out[k] / 11.0 - (1.0 - (-1.0f64).exp())).abs() < 0.02);
        assert!((out[399] - 11.0).abs() < 0.01);
        assert_eq!(a.friction(), (0.5, 0.04));
    }

    #[test]
    fn torque_loop_divides_friction_lag_and_gain_error_by_one_plus_gain() {
        let dt = 1e-4;
        let mut a = ActuatorKind::TorqueLoop.build(&params(), 30.0, dt);
        let (c, b) = a.friction();
        assert!((c - 0.05).abs() < 1e-15 && (b - 0.004).abs() < 1e-15);
        let mut last = 0.0;
        for _ in 0..200 {
            last = a.drive(10.0);
        }
        // Final value 10 (1 + 0.1 / 10) = 10.1.
        assert!((last - 10.1).abs() < 1e-6);
    }

    /// A delay of a fraction of a step delivers the delayed command's impulse whatever the
    /// step: the 0.25 ms inner-loop delay of a 4 kHz torque loop (with no lag, so the output
    /// is the delayed command itself) gives at 1 ms steps 0.75 of a step's new command in its
    /// first step, and at 0.5 ms steps 0.5; over the first millisecond both deliver
    /// 0.75 ms × the command (exact for a held command delayed by 0.25 ms).
    #[test]
    fn a_fractional_delay_keeps_the_delayed_impulse_at_any_step() {
        let mut p = params();
        p.lag = 0.0;
        p.torque_constant_error = 0.0;
        for (dt, first) in [(1e-3, 7.5), (5e-4, 5.0)] {
            let mut a = ActuatorKind::TorqueLoop.build(&p, 30.0, dt);
            let y0 = a.drive(10.0);
            assert!((y0 - first).abs() < 1e-12, "dt {dt}: {y0}");
            let steps = (1e-3 / dt).round() as usize;
            let mut impulse = y0 * dt;
            for _ in 1..steps {
                impulse += a.drive(10.0) * dt;
            }
            assert!(
                (impulse - 10.0 * 0.75e-3).abs() < 1e-12,
                "dt {dt}: {impulse}"
            );
            assert!((a.drive(10.0) - 10.0).abs() < 1e-12);
        }
        // A whole number of steps is the plain delay line (open loop, 3 ms at 1 ms).
        let mut a = ActuatorKind::OpenCurrent.build(&params(), 30.0, 1e-3);
        let y: Vec<f64> = (0..4).map(|_| a.drive(10.0)).collect();
        assert!(y[..3].iter().all(|&v| v == 0.0) && y[3] > 0.0, "{y:?}");
    }

    #[test]
    fn every_model_clamps_at_the_effort_limit_and_reports_it() {
        for kind in ActuatorKind::ALL {
            let mut a = kind.build(&params(), 20.0, 1e-3);
            let mut y = 0.0;
            for _ in 0..200 {
                y = a.drive(100.0);
            }
            assert!((y - 20.0).abs() < 1e-12 && a.saturated(), "{kind}");
            let y = a.drive(-5.0);
            assert!(y <= 20.0);
        }
    }
}
