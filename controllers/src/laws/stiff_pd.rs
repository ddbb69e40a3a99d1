//! High-gain joint-space PD on the planned joint trajectory; no model, the base is not
//! actuated. The default gains are the highest found stable on the default plant at 1 kHz
//! (see DEVELOPERS.md, "Gains").

use super::{ControlLaw, LawSettings, LawStatus, Observation, Target};
use crate::model::Model;
use crate::spatial::Vec3;

pub struct StiffPd {
    kp: f64,
    kd: f64,
    nj: usize,
    forces: Vec<Vec3>,
}

impl StiffPd {
    pub const NAME: &'static str = "stiff-pd";
    pub fn boxed(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Box<dyn ControlLaw> {
        Box::new(StiffPd {
            kp: settings.stiff_kp,
            kd: settings.stiff_kd,
            nj: model.n_joints(),
            forces: vec![Vec3::zeros(); feet.len()],
        })
    }
}

impl ControlLaw for StiffPd {
    fn name(&self) -> &str {
        Self::NAME
    }
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        for j in 0..self.nj {
            tau[j] = self.kp * (target.q[7 + j] - obs.q[7 + j])
                + self.kd * (target.v[6 + j] - obs.v[6 + j]);
        }
        LawStatus::Solved
    }
    fn predicted_forces(&self) -> &[Vec3] {
        &self.forces
    }
}
