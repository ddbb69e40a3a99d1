//! Robot facts that URDF does not carry, read from a small TOML beside the URDF: which frames
//! are sphere feet, actuator parameters (reflected rotor inertia, joint friction, current- and
//! torque-loop figures) with per-joint overrides, and the nominal standing posture.
//! Every field and its default is documented on the struct; `scenarios/robots/*.toml` show them.

use crate::model::Model;
use serde::Deserialize;
use std::collections::BTreeMap;

/// The whole robot-facts file.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RobotFacts {
    /// Path of the URDF, relative to the TOML file.
    pub urdf: String,
    pub feet: Feet,
    /// Defaults for every actuated joint.
    #[serde(default)]
    pub actuators: ActuatorTable,
    /// Nominal standing joint angles, rad, by joint name (unlisted joints: 0).
    #[serde(default)]
    pub nominal: BTreeMap<String, f64>,
    /// Let links of the robot collide with each other in the plant (default off).
    #[serde(default)]
    pub self_collision: bool,
    /// Folders searched for `package://NAME/…` collision meshes, relative to the facts file
    /// (the harness resolves them; see its `meshes` module). Default: none.
    #[serde(default)]
    pub package_dirs: Vec<String>,
    /// Joint friction from the URDF's `<dynamics friction damping>` by joint name: (Coulomb
    /// N·m, viscous N·m·s/rad). Never read from the TOML; filled by [`RobotFacts::set_urdf_dynamics`].
    /// Precedence in [`RobotFacts::actuator`]: a joint's own `[actuators.joints.<joint>]` value,
    /// then the `[actuators]` default, then the URDF, then 0.
    #[serde(skip)]
    pub urdf_friction: BTreeMap<String, (f64, f64)>,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Feet {
    /// Named frames at the centres of the sphere feet.
    pub frames: Vec<String>,
    /// Sphere radius, m.
    pub radius: f64,
}

/// Actuator parameters of one joint. Defaults are invented demo values, stated in
/// `scenarios/robots/brindle.toml`.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct ActuatorParams {
    /// Reflected rotor inertia (rotor inertia × gear ratio²), kg·m². Default 0.
    pub armature: f64,
    /// Joint Coulomb friction, N·m. Default 0.
    pub coulomb: f64,
    /// Joint viscous friction, N·m·s/rad. Default 0.
    pub viscous: f64,
    /// Relative error of the estimated torque constant (open-loop current drive). Default 0.
    pub torque_constant_error: f64,
    /// Transport delay of the command, s (open-loop current drive). Default 0.
    pub delay: f64,
    /// First-order lag time constant of the current loop, s. Default 0.
    pub lag: f64,
    /// Rate of the inner joint-torque loop, Hz (torque-feedback drive). Default 4000.
    pub torque_loop_rate: f64,
    /// Loop gain of the inner torque loop; residual friction = friction / (1 + gain). Default 10.
    pub torque_loop_gain: f64,
}

impl Default for ActuatorParams {
    fn default() -> Self {
        ActuatorParams {
            armature: 0.0,
            coulomb: 0.0,
            viscous: 0.0,
            torque_constant_error: 0.0,
            delay: 0.0,
            lag: 0.0,
            torque_loop_rate: 4000.0,
            torque_loop_gain: 10.0,
        }
    }
}

/// Per-joint overrides: any subset of [`ActuatorParams`]' fields.
#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ActuatorOverride {
    pub armature: Option<f64>,
    pub coulomb: Option<f64>,
    pub viscous: Option<f64>,
    pub torque_constant_error: Option<f64>,
    pub delay: Option<f64>,
    pub lag: Option<f64>,
    pub torque_loop_rate: Option<f64>,
    pub torque_loop_gain: Option<f64>,
}

/// No `deny_unknown_fields` here: with a `flatten` field serde would then reject every key of
/// the flattened defaults; unknown keys land in [`ActuatorDefaults::unknown`] instead.
#[derive(Clone, Debug, Default, Deserialize)]
pub struct ActuatorTable {
    #[serde(flatten)]
    pub defaults: ActuatorDefaults,
    #[serde(default)]
    pub joints: BTreeMap<String, ActuatorOverride>,
}

/// Same fields as [`ActuatorParams`]; a separate type because `flatten` and `deny_unknown_fields`
/// do not combine in serde, so unknown names are caught by [`RobotFacts::from_toml_str`] instead.
#[derive(Clone, Debug, Default, Deserialize)]
pub struct ActuatorDefaults {
    pub armature: Option<f64>,
    pub coulomb: Option<f64>,
    pub viscous: Option<f64>,
    pub torque_constant_error: Option<f64>,
    pub delay: Option<f64>,
    pub lag: Option<f64>,
    pub torque_loop_rate: Option<f64>,
    pub torque_loop_gain: Option<f64>,
    #[serde(flatten)]
    pub unknown: BTreeMap<String, toml::Value>,
}

const ACTUATOR_FIELDS: &str = "armature, coulomb, viscous, torque_constant_error, delay, lag, torque_loop_rate, torque_loop_gain, joints";

/// "line L, column C: message" instead of the parser's multi-line snippet, so a command-line
/// tool can print one line prefixed with the file name.
fn one_line_toml_error(text: &str, e: &toml::de::Error) -> String {
    let msg = e.message().trim_end().replace('\n', "; ");
    match e.span() {
        Some(span) => {
            let before = &text[..span.start.min(text.len())];
            let line_start = before.rfind('\n').map_or(0, |i| i + 1);
            let line = before.matches('\n').count() + 1;
            let column = before[line_start..].chars().count() + 1;
            format!("line {line}, column {column}: {msg}")
        }
        None => msg,
    }
}

/// Upper bounds of the actuator figures: a delay is held as one command per plant step, so it
/// must stay bounded (the harness also bounds it in plant steps); the others keep the models'
/// arithmetic finite.
pub const MAX_ACTUATOR_DELAY_S: f64 = 0.5;
pub const MAX_ACTUATOR_LAG_S: f64 = 10.0;
pub const MAX_TORQUE_LOOP_RATE_HZ: f64 = 1e6;
pub const MAX_TORQUE_LOOP_GAIN: f64 = 1e6;

impl RobotFacts {
    /// Parse TOML text. Errors name the field and what is allowed.
    pub fn from_toml_str(text: &str) -> Result<RobotFacts, String> {
        let facts: RobotFacts = toml::from_str(text).map_err(|e| one_line_toml_error(text, &e))?;
        if let Some(name) = facts.actuators.defaults.unknown.keys().next() {
            return Err(format!(
                "unknown field `actuators.{name}`; allowed: {ACTUATOR_FIELDS}"
            ));
        }
        Ok(facts)
    }

    /// The resolved parameters of one joint: defaults, then its override.
    pub fn actuator(&self, joint: &str) -> ActuatorParams {
        let d = &self.actuators.defaults;
        let base = ActuatorParams::default();
        // Anything the facts say wins over the URDF's <dynamics>, which wins over 0.
        let (urdf_coulomb, urdf_viscous) = self
            .urdf_friction
            .get(joint)
            .copied()
            .unwrap_or((base.coulomb, base.viscous));
        let mut p = ActuatorParams {
            armature: d.armature.unwrap_or(base.armature),
            coulomb: d.coulomb.unwrap_or(urdf_coulomb),
            viscous: d.viscous.unwrap_or(urdf_viscous),
            torque_constant_error: d
                .torque_constant_error
                .unwrap_or(base.torque_constant_error),
            delay: d.delay.unwrap_or(base.delay),
            lag: d.lag.unwrap_or(base.lag),
            torque_loop_rate: d.torque_loop_rate.unwrap_or(base.torque_loop_rate),
            torque_loop_gain: d.torque_loop_gain.unwrap_or(base.torque_loop_gain),
        };
        if let Some(o) = self.actuators.joints.get(joint) {
            p.armature = o.armature.unwrap_or(p.armature);
            p.coulomb = o.coulomb.unwrap_or(p.coulomb);
            p.viscous = o.viscous.unwrap_or(p.viscous);
            p.torque_constant_error = o.torque_constant_error.unwrap_or(p.torque_constant_error);
            p.delay = o.delay.unwrap_or(p.delay);
            p.lag = o.lag.unwrap_or(p.lag);
            p.torque_loop_rate = o.torque_loop_rate.unwrap_or(p.torque_loop_rate);
            p.torque_loop_gain = o.torque_loop_gain.unwrap_or(p.torque_loop_gain);
        }
        p
    }

    /// Check the facts against the model: feet and joints named exist, values in range.
    pub fn validate(&self, model: &Model) -> Result<(), String> {
        if self.feet.frames.is_empty() {
            return Err("field `feet.frames` is empty; name at least one foot frame".into());
        }
        for f in &self.feet.frames {
            if model.frame_index(f).is_none() {
                return Err(format!(
                    "field `feet.frames`: foot '{f}' is not a link of the URDF; frames are: {}",
                    model
                        .frames
                        .iter()
                        .map(|f| f.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                ));
            }
        }
        if !(self.feet.radius.is_finite() && self.feet.radius > 0.0) {
            return Err(format!(
                "field `feet.radius` = {}: allowed: a radius > 0 m",
                self.feet.radius
            ));
        }
        let joint_list = || model.joint_names().join(", ");
        for name in self.actuators.joints.keys() {
            if model.joint_index(name).is_none() {
                return Err(format!(
                    "table `actuators.joints.{name}`: no such moving joint; joints are: {}",
                    joint_list()
                ));
            }
        }
        for (name, val) in &self.nominal {
            let Some(k) = model.joint_index(name) else {
                return Err(format!(
                    "field `nominal.{name}`: no such moving joint; joints are: {}",
                    joint_list()
                ));
            };
            let j = &model.joints[k];
            if !val.is_finite() || *val < j.lower || *val > j.upper {
                return Err(format!(
                    "field `nominal.{name}` = {val}: outside the joint's limits [{}, {}]",
                    j.lower, j.upper
                ));
            }
        }
        for j in &model.joints {
            let p = self.actuator(&j.name);
            let checks = [
                ("armature", p.armature, p.armature >= 0.0),
                ("coulomb", p.coulomb, p.coulomb >= 0.0),
                ("viscous", p.viscous, p.viscous >= 0.0),
                (
                    "torque_constant_error",
                    p.torque_constant_error,
                    p.torque_constant_error.abs() < 1.0,
                ),
                (
                    "delay",
                    p.delay,
                    (0.0..=MAX_ACTUATOR_DELAY_S).contains(&p.delay),
                ),
                ("lag", p.lag, (0.0..=MAX_ACTUATOR_LAG_S).contains(&p.lag)),
                (
                    "torque_loop_rate",
                    p.torque_loop_rate,
                    (1.0 / MAX_ACTUATOR_DELAY_S..=MAX_TORQUE_LOOP_RATE_HZ)
                        .contains(&p.torque_loop_rate),
                ),
                (
                    "torque_loop_gain",
                    p.torque_loop_gain,
                    (0.0..=MAX_TORQUE_LOOP_GAIN).contains(&p.torque_loop_gain),
                ),
            ];
            for (field, val, ok) in checks {
                if !val.is_finite() || !ok {
                    return Err(format!(
                        "actuator field `{field}` = {val} for joint '{}': allowed: a finite value {}",
                        j.name,
                        match field {
                            "torque_constant_error" => "in (−1, 1)",
                            "torque_loop_rate" =>
                                "from 2 to 1e6 Hz (its period is a delay ≤ 0.5 s)",
                            "delay" => "from 0 to 0.5 s",
                            "lag" => "from 0 to 10 s",
                            "torque_loop_gain" => "from 0 to 1e6",
                            _ => "≥ 0",
                        }
                    ));
                }
            }
        }
        Ok(())
    }

    /// Read the moving joints' `<dynamics friction damping>` from the URDF into
    /// [`RobotFacts::urdf_friction`] (`friction` is Coulomb friction, N·m or N; `damping` viscous,
    /// N·m·s/rad or N·s/m, as the URDF specification defines them). Errors name the joint.
    pub fn set_urdf_dynamics(
        &mut self,
        urdf: &urdf_rs::Robot,
        model: &Model,
    ) -> Result<(), String> {
        self.urdf_friction.clear();
        for j in &urdf.joints {
            let Some(d) = &j.dynamics else { continue };
            if model.joint_index(&j.name).is_none() {
                continue; // a fixed joint has no friction to feed
            }
            for (attr, val) in [("friction", d.friction), ("damping", d.damping)] {
                if !(val.is_finite() && val >= 0.0) {
                    return Err(format!(
                        "joint '{}': <dynamics {attr}=\"{val}\">: allowed: a finite value ≥ 0",
                        j.name
                    ));
                }
            }
            self.urdf_friction
                .insert(j.name.clone(), (d.friction, d.damping));
        }
        Ok(())
    }

    /// Check every foot whose URDF link
    /// carries a sphere collision: its radius must equal `feet.radius` (the plant's feet and
    /// the controllers' contact points use `feet.radius`, so a different sphere in the URDF
    /// means the file says two things). `urdf_name` labels the message.
    pub fn check_foot_spheres(&self, urdf: &urdf_rs::Robot, urdf_name: &str) -> Result<(), String> {
        for foot in &self.feet.frames {
            let Some(link) = urdf.links.iter().find(|l| &l.name == foot) else {
                continue;
            };
            for c in &link.collision {
                if let urdf_rs::Geometry::Sphere { radius } = c.geometry {
                    let tol = 1e-9 * radius.abs().max(self.feet.radius.abs()).max(1.0);
                    if (radius - self.feet.radius).abs() > tol {
                        return Err(format!(
                            "field `feet.radius` = {} m disagrees with the URDF: foot '{foot}' has a collision sphere of radius {radius} m in {urdf_name}; make the two equal (the plant and the controllers use `feet.radius`)",
                            self.feet.radius
                        ));
                    }
                }
            }
        }
        Ok(())
    }

    /// Put each joint's reflected rotor inertia into the model (it enters M's diagonal).
    pub fn apply_armature(&self, model: &mut Model) {
        for k in 0..model.joints.len() {
            let a = self.actuator(&model.joints[k].name).armature;
            model.joints[k].armature = a;
        }
    }

    /// Nominal joint positions in the model's joint order.
    pub fn nominal_joints(&self, model: &Model) -> Vec<f64> {
        model
            .joints
            .iter()
            .map(|j| self.nominal.get(&j.name).copied().unwrap_or(0.0))
            .collect()
    }
}
