//! Floating-base inverse dynamics with the minimum-norm torque, by orthogonal decomposition of
//! the contact Jacobian (Mistry, Buchli & Schaal, "Inverse dynamics control of floating base
//! systems using orthogonal decomposition", ICRA 2010): τ = (Q_uᵀSᵀ)⁺ Q_uᵀ (M v̇ + h). No
//! measured forces and no M⁻¹; the contact forces are a prediction.

use super::whole_body::WholeBody;
use super::{ControlLaw, LawSettings, LawStatus, Observation, Target};
use crate::model::Model;
use crate::spatial::Vec3;

pub struct IdLean {
    pub body: WholeBody,
}

impl IdLean {
    pub fn new(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Self {
        IdLean {
            body: WholeBody::new(model, feet, settings),
        }
    }
    pub fn boxed(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Box<dyn ControlLaw> {
        Box::new(Self::new(model, feet, settings))
    }
}

impl ControlLaw for IdLean {
    fn name(&self) -> &'static str {
        "id-lean"
    }
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        if let Err(status) = self.body.prepare(obs, target) {
            self.body.fallback(obs, target, tau);
            return status;
        }
        let status = self.body.min_torque();
        if status == LawStatus::Failed {
            self.body.fallback(obs, target, tau);
            return status;
        }
        self.body.predict_forces();
        self.body.output_with_joint_pd(obs, target, tau);
        status
    }
    fn predicted_forces(&self) -> &[Vec3] {
        &self.body.forces
    }
}
