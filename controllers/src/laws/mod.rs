//! Control laws behind one small trait. Every law receives the same observation and the same
//! planned reference and returns joint torques and a status; model-based laws also expose the
//! contact forces they predict. A built-in law is one file here and one entry in
//! [`registry::Registry::builtin`]; a model-based law implements
//! [`whole_body::Distribution`] (its force or torque distribution) and shares the rest of the
//! control step. Laws from outside this repository register through [`registry`].

pub mod cone_program;
pub mod force_cost_id;
pub mod min_torque_id;
pub mod registry;
pub mod stiff_pd;
pub mod whole_body;

pub use registry::{FieldKind, LawBuilder, LawEntry, LawField, Registry};

use crate::model::Model;
use crate::spatial::Vec3;
use nalgebra::DVector;
use std::collections::BTreeMap;
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
/// [`LawSettings::default`]. A registered law's own `[laws.<name>]` fields are in
/// [`LawSettings::extra`] (see [`LawSettings::field`]).
#[derive(Clone, PartialEq)]
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
    /// A registered law's own settings fields by name (its declared defaults, then the
    /// scenario's values); empty for the built-in laws.
    pub extra: BTreeMap<String, f64>,
}

impl LawSettings {
    /// A law's own settings field (declared with [`LawField::own`]); the harness fills every
    /// declared field before building the law, so `None` means the name was not declared.
    pub fn field(&self, name: &str) -> Option<f64> {
        self.extra.get(name).copied()
    }
}

/// The derived form, with `extra` only when a law has own fields (so the settings hashes that
/// tuning tables carry stay what they were for the built-in laws).
impl fmt::Debug for LawSettings {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut d = f.debug_struct("LawSettings");
        d.field("stiff_kp", &self.stiff_kp)
            .field("stiff_kd", &self.stiff_kd)
            .field("joint_kp", &self.joint_kp)
            .field("joint_kd", &self.joint_kd)
            .field("base_kp", &self.base_kp)
            .field("base_kd", &self.base_kd)
            .field("orient_kp", &self.orient_kp)
            .field("orient_kd", &self.orient_kd)
            .field("posture_kp", &self.posture_kp)
            .field("posture_kd", &self.posture_kd)
            .field("tangent_weight", &self.tangent_weight)
            .field("normal_weight", &self.normal_weight)
            .field("torque_weight", &self.torque_weight)
            .field("load_floor_share", &self.load_floor_share)
            .field("mu_estimate", &self.mu_estimate)
            .field("cone_margin", &self.cone_margin)
            .field("min_normal_force", &self.min_normal_force)
            .field("ground_normal", &self.ground_normal)
            .field("foot_radius", &self.foot_radius);
        if !self.extra.is_empty() {
            d.field("extra", &self.extra);
        }
        d.finish()
    }
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
            extra: BTreeMap::new(),
        }
    }
}

/// A control law.
pub trait ControlLaw: Send {
    /// The registered name.
    fn name(&self) -> &str;
    /// Joint torques (model joint order) for this step.
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus;
    /// Contact forces the law predicts at each foot (world, N; zero for feet in swing or for
    /// model-free laws), from the last [`ControlLaw::compute`].
    fn predicted_forces(&self) -> &[Vec3];
}

/// Names of the laws in the process's registry (built-in first, then registered ones).
pub fn law_names() -> Vec<String> {
    registry::with(|r| r.names())
}

/// Build a law of the process's registry by name (a former name is accepted, with a notice).
pub fn build_law(
    name: &str,
    model: Model,
    feet: Vec<usize>,
    settings: &LawSettings,
) -> Result<Box<dyn ControlLaw>, String> {
    let canonical = registry::resolve(name).ok_or_else(|| registry::with(|r| r.unknown(name)))?;
    let builder = registry::with(|r| r.get(&canonical).map(|e| e.builder.clone()))
        .ok_or_else(|| registry::with(|r| r.unknown(name)))?;
    builder(model, feet, settings)
}
