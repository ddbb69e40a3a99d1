//! Minimum-torque inverse dynamics: of the torques consistent with the constrained dynamics,
//! the one of least norm, by orthogonal decomposition of the contact Jacobian (Mistry, Buchli &
//! Schaal, "Inverse dynamics control of floating base systems using orthogonal decomposition",
//! ICRA 2010): τ = (Q_uᵀSᵀ)⁺ Q_uᵀ (M v̇ + h). No measured forces and no M⁻¹; the contact forces
//! are a prediction. Everything but this choice is the shared skeleton ([`super::whole_body`]).

use super::whole_body::{Distribution, WholeBody};
use super::{ControlLaw, LawSettings, LawStatus};
use crate::model::Model;

pub struct MinTorqueId {
    pub body: WholeBody,
}

impl MinTorqueId {
    pub const NAME: &'static str = "min-torque-id";
    pub fn new(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Self {
        MinTorqueId {
            body: WholeBody::new(model, feet, settings),
        }
    }
    pub fn boxed(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Box<dyn ControlLaw> {
        Box::new(Self::new(model, feet, settings))
    }
}

impl Distribution for MinTorqueId {
    fn name(&self) -> &str {
        Self::NAME
    }
    fn body(&self) -> &WholeBody {
        &self.body
    }
    fn body_mut(&mut self) -> &mut WholeBody {
        &mut self.body
    }
    fn distribute(&mut self) -> LawStatus {
        self.body.min_torque()
    }
}
