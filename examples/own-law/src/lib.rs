//! A control law of our own, outside the gripsweep repository's law set: a joint PD on the
//! planned joint trajectory plus the model's gravity and Coriolis/centrifugal torques,
//!
//!   τ = h_j(q, v) + K_p (q_plan − q) + K_d (v_plan − v),
//!
//! h_j the joint rows of h(q, v) = RNEA(q, v, 0) (recursive Newton–Euler; Featherstone,
//! "Rigid Body Dynamics Algorithms", Springer 2008, §5.3). Compensating h is common practice
//! for joint-space PD; on a floating-base robot it ignores the contact forces, so the PD still
//! carries each stance leg's share of the weight. Its two gains are its own settings
//! (`[laws.compensated-pd]` `kp`, `kd`), declared with the registry entry so the scenario
//! checker validates them and the tuner scales them (kp × s, kd × √s).

use gripsweep::controllers::Model;
use gripsweep::controllers::Workspace;
use gripsweep::controllers::algorithms::{forward_kinematics, rnea_after_fk};
use gripsweep::controllers::spatial::Vec3;
use gripsweep::{
    ControlLaw, FieldKind, LawEntry, LawField, LawSettings, LawStatus, Observation, Target,
};
use nalgebra::DVector;

/// The registered name.
pub const NAME: &str = "compensated-pd";

pub struct CompensatedPd {
    model: Model,
    ws: Workspace,
    kp: f64,
    kd: f64,
    nj: usize,
    /// Base coordinates before the joints: 7 in q and 6 in v for a floating base, 0 fixed.
    q0: usize,
    v0: usize,
    zero: DVector<f64>,
    forces: Vec<Vec3>,
}

impl CompensatedPd {
    pub fn new(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Result<Self, String> {
        let field = |name: &str| {
            settings
                .field(name)
                .ok_or_else(|| format!("{NAME}: setting '{name}' missing"))
        };
        let nv = model.nv();
        let nj = model.n_joints();
        Ok(CompensatedPd {
            ws: Workspace::new(&model),
            kp: field("kp")?,
            kd: field("kd")?,
            nj,
            q0: model.nq() - nj,
            v0: nv - nj,
            zero: DVector::zeros(nv),
            forces: vec![Vec3::zeros(); feet.len()],
            model,
        })
    }
}

impl ControlLaw for CompensatedPd {
    fn name(&self) -> &str {
        NAME
    }
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        forward_kinematics(&self.model, &mut self.ws, obs.q);
        rnea_after_fk(&self.model, &mut self.ws, obs.v, &self.zero);
        for (j, t) in tau.iter_mut().enumerate().take(self.nj) {
            let (iq, iv) = (self.q0 + j, self.v0 + j);
            *t = self.ws.tau[iv]
                + self.kp * (target.q[iq] - obs.q[iq])
                + self.kd * (target.v[iv] - obs.v[iv]);
        }
        LawStatus::Solved
    }
    fn predicted_forces(&self) -> &[Vec3] {
        // A joint-space law predicts no contact forces.
        &self.forces
    }
}

/// The registry entry: name, summary, builder and the `[laws.compensated-pd]` fields. The
/// default gains are starting points only: unless a scenario pins them, the tuner scales them
/// per robot, control rate and actuator before any cell runs.
pub fn entry() -> LawEntry {
    LawEntry::new(
        NAME,
        "joint PD plus the model's gravity and Coriolis torques (example crate)",
        |model, feet, settings| Ok(Box::new(CompensatedPd::new(model, feet, settings)?)),
    )
    .field(LawField::own("kp", FieldKind::Stiffness, 400.0))
    .field(LawField::own("kd", FieldKind::Damping, 8.0).zero_ok())
}
