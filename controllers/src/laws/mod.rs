//! Control laws behind one small trait. Every law receives the same observation and the same
//! planned reference and returns joint torques and a status; model-based laws also expose the
//! contact forces they predict. A new law is one file here and one line in [`REGISTRY`].

pub mod cone_program;
pub mod id_min_torque;
pub mod id_tangent;
pub mod stiff_pd;
pub mod whole_body;

use crate::model::Model;
use crate::spatial::Vec3;
use nalgebra::DVector;
use std::fmt;

/// What a law sees of the robot at a control step (model conventions, see [`crate::model`]).
pub struct Observation<'a> {
    pub q: &'a DVector<f64>,
    pub v: &'a DVector<f64>,
}

/// The plan at this instant: generalized position, velocity and acceleration references and
/// which feet are planned in stance.
pub struct Target<'a> {
    pub q: &'a DVector<f64>,
    pub v: &'a DVector<f64>,
    pub a: &'a DVector<f64>,
    pub stance: &'a [bool],
}

/// Outcome of one control step, counted by the metrics (never a silent fallback).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum LawStatus {
    /// Torques computed as the law intends.
    Solved,
    /// The law's constraints cannot all hold (e.g. the demanded contact forces leave the
    /// friction cones); the closest feasible command was applied.
    Infeasible,
    /// Too few stance feet to control the base (the torques still track the joints).
    Underactuated,
    /// A numerical failure (singular contact Jacobian, solver did not converge); the torques
    /// are the joint feedback alone.
    Failed,
}

impl LawStatus {
    pub fn name(self) -> &'static str {
        match self {
            LawStatus::Solved => "solved",
            LawStatus::Infeasible => "infeasible",
            LawStatus::Underactuated => "underactuated",
            LawStatus::Failed => "failed",
        }
    }
}

impl fmt::Display for LawStatus {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Settings shared by the laws; each law reads the fields it needs. Defaults are stated on
/// [`LawSettings::default`].
#[derive(Clone, Debug, PartialEq)]
pub struct LawSettings {
    /// Stiff joint PD (the model-free law): gains per joint, N·m/rad and N·m·s/rad.
    pub stiff_kp: f64,
    pub stiff_kd: f64,
    /// Low-gain joint PD added to every model-based law's torques.
    pub joint_kp: f64,
    pub joint_kd: f64,
    /// Feedback on the plan in v̇_ref: base position, base orientation, joints (1/s², 1/s).
    pub base_kp: f64,
    pub base_kd: f64,
    pub orient_kp: f64,
    pub orient_kd: f64,
    pub posture_kp: f64,
    pub posture_kd: f64,
    /// Contact-force cost (as published): tangential and normal weights per N², torque weight
    /// per (N·m)².
    pub tangent_weight: f64,
    pub normal_weight: f64,
    pub torque_weight: f64,
    /// Load normalisation: the expected normal load is floored at this share of the robot's
    /// weight divided by the number of stance feet.
    pub load_floor_share: f64,
    /// The friction coefficient the controllers believe (the scenario's estimate).
    pub mu_estimate: f64,
    /// Per-foot friction estimates (in the order of the law's feet), replacing `mu_estimate`
    /// for those feet; empty: `mu_estimate` for every foot. (issue 14: a friction patch the
    /// controllers know.)
    pub mu_estimate_feet: Vec<f64>,
    /// Safety margin on μ̂ in the cone program: cones use μ̂ (1 − margin).
    pub cone_margin: f64,
    /// Minimum normal force per stance foot in the cone program, N.
    pub min_normal_force: f64,
    /// Outward ground normal the controllers assume (world).
    pub ground_normal: Vec3,
    /// Radius of the sphere feet (the robot facts' `feet.radius`), m: the model-based laws put
    /// each stance foot's contact at centre − radius · n, where the sphere touches the ground.
    /// 0 puts it at the foot frame (the sphere centre).
    pub foot_radius: f64,
}

impl Default for LawSettings {
    fn default() -> Self {
        LawSettings {
            // The highest gains found stable on the default plant (brindle, 1 ms, 4 substeps,
            // armature from its facts) at a 1 kHz loop: kd ≥ 60 limit-cycles against the torque
            // limits; kp up to 120000 stayed stable with kd 40 (see DEVELOPERS.md, "Gains").
            stiff_kp: 20000.0,
            stiff_kd: 30.0,
            joint_kp: 30.0,
            joint_kd: 1.0,
            base_kp: 100.0,
            base_kd: 20.0,
            orient_kp: 100.0,
            orient_kd: 20.0,
            posture_kp: 100.0,
            posture_kd: 20.0,
            tangent_weight: 1.0,
            normal_weight: 1e-3,
            torque_weight: 1e-4,
            load_floor_share: 0.2,
            mu_estimate: 0.5,
            mu_estimate_feet: Vec::new(),
            cone_margin: 0.1,
            min_normal_force: 2.0,
            ground_normal: Vec3::z(),
            foot_radius: 0.0,
        }
    }
}

/// A control law.
pub trait ControlLaw: Send {
    /// The registered name.
    fn name(&self) -> &'static str;
    /// Joint torques (model joint order) for this step.
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus;
    /// Contact forces the law predicts at each foot (world, N; zero for feet in swing or for
    /// model-free laws), from the last [`ControlLaw::compute`].
    fn predicted_forces(&self) -> &[Vec3];
}

/// How to build a law: its own model of the robot (which may differ from the plant's), the
/// frame indices of the feet, the settings.
pub type LawBuilder = fn(Model, Vec<usize>, &LawSettings) -> Box<dyn ControlLaw>;

/// Every law, by name. One line per law.
pub const REGISTRY: &[(&str, LawBuilder)] = &[
    ("stiff-pd", stiff_pd::StiffPd::boxed),
    ("id-lean", id_min_torque::IdLean::boxed),
    ("id-grip", id_tangent::IdGrip::boxed_published),
    ("id-grip-load", id_tangent::IdGrip::boxed_load_normalised),
    ("cone-margin", cone_program::ConeMargin::boxed),
];

/// Names of the registered laws.
pub fn law_names() -> Vec<&'static str> {
    REGISTRY.iter().map(|(n, _)| *n).collect()
}

/// Build a registered law by name.
pub fn build_law(
    name: &str,
    model: Model,
    feet: Vec<usize>,
    settings: &LawSettings,
) -> Result<Box<dyn ControlLaw>, String> {
    REGISTRY
        .iter()
        .find(|(n, _)| *n == name)
        .map(|(_, b)| b(model, feet, settings))
        .ok_or_else(|| {
            format!(
                "unknown controller '{name}'; allowed: {}",
                law_names().join(", ")
            )
        })
}
