//! Loading a robot: the facts TOML, the URDF it names, the rigid-body model with the facts
//! applied. The demo quadruped is compiled into the binary so the tool runs with no files.

use crate::limits::{MAX_FACTS_BYTES, MAX_URDF_BYTES, check_toml_depth, read_text_bounded};
use crate::meshes::{CollisionMesh, MeshSearch, MissingMesh};
use gripsweep_controllers::{Model, RobotFacts, RootKind};
use std::path::{Path, PathBuf};

/// The demo quadruped's files, embedded.
pub const DEMO_URDF: &str = include_str!("../../scenarios/robots/brindle.urdf");
pub const DEMO_FACTS: &str = include_str!("../../scenarios/robots/brindle.toml");

/// A robot ready to simulate and control: the parsed URDF (the plant reads its collision
/// shapes), the model (armature applied), and the facts.
#[derive(Clone, Debug)]
pub struct LoadedRobot {
    /// Where the facts came from (for messages and manifests).
    pub source: String,
    /// Where the URDF came from.
    pub urdf_source: String,
    pub urdf_text: String,
    pub facts_text: String,
    pub urdf: urdf_rs::Robot,
    pub model: Model,
    pub facts: RobotFacts,
    /// Collision meshes of non-foot links, loaded as convex hulls (see [`crate::meshes`]).
    pub meshes: Vec<CollisionMesh>,
    /// Collision meshes the plant goes without (file not found, format not read).
    pub missing_meshes: Vec<MissingMesh>,
    /// True when the facts were inferred from a bare URDF ([`crate::infer`]); `facts_text` is
    /// then the inferred TOML.
    pub inferred_facts: bool,
}

impl LoadedRobot {
    /// The embedded demo quadruped.
    pub fn demo() -> Result<LoadedRobot, String> {
        Self::from_texts(
            "<embedded brindle.toml>",
            DEMO_FACTS,
            "<embedded brindle.urdf>",
            DEMO_URDF,
        )
    }

    /// From a facts TOML on disk; its `urdf` path is relative to the TOML.
    pub fn from_facts_file(path: &Path) -> Result<LoadedRobot, String> {
        let facts_text = read_text_bounded(path, MAX_FACTS_BYTES, "the robot file")?;
        check_toml_depth(&facts_text).map_err(|e| format!("{}: {e}", path.display()))?;
        let facts = RobotFacts::from_toml_str(&facts_text)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        let facts_dir = path.parent().unwrap_or(Path::new("."));
        let urdf_path: PathBuf = facts_dir.join(&facts.urdf);
        let urdf_text = read_text_bounded(&urdf_path, MAX_URDF_BYTES, "the URDF")
            .map_err(|e| format!("{}: field `urdf` = \"{}\": {e}", path.display(), facts.urdf))?;
        let search = MeshSearch::new(urdf_path.parent(), Some(facts_dir), &facts.package_dirs);
        Self::from_texts_searching(
            &path.display().to_string(),
            &facts_text,
            &urdf_path.display().to_string(),
            &urdf_text,
            &search,
        )
    }

    /// From a robot file: a facts TOML, or a bare URDF (`.urdf`, `.xml`) whose facts are
    /// inferred ([`crate::infer`]; `feet` names the foot links, else they are inferred too).
    pub fn from_file(path: &Path, feet: Option<&[String]>) -> Result<LoadedRobot, String> {
        if crate::infer::is_urdf_path(path) {
            crate::infer::load_bare_urdf(path, feet)
        } else if feet.is_some() {
            Err(format!(
                "{}: feet are named in the robot facts file (`feet.frames`); a scenario's `feet` is only for a bare URDF",
                path.display()
            ))
        } else {
            Self::from_facts_file(path)
        }
    }

    /// From the two texts; `facts_name` and `urdf_name` label messages.
    pub fn from_texts(
        facts_name: &str,
        facts_text: &str,
        urdf_name: &str,
        urdf_text: &str,
    ) -> Result<LoadedRobot, String> {
        Self::from_texts_searching(
            facts_name,
            facts_text,
            urdf_name,
            urdf_text,
            &MeshSearch::default(),
        )
    }

    /// [`LoadedRobot::from_texts`], with collision meshes looked for as `search` says.
    pub fn from_texts_searching(
        facts_name: &str,
        facts_text: &str,
        urdf_name: &str,
        urdf_text: &str,
        search: &MeshSearch,
    ) -> Result<LoadedRobot, String> {
        check_toml_depth(facts_text).map_err(|e| format!("{facts_name}: {e}"))?;
        let mut facts =
            RobotFacts::from_toml_str(facts_text).map_err(|e| format!("{facts_name}: {e}"))?;
        let urdf = gripsweep_controllers::model::parse_urdf(urdf_text)
            .map_err(|e| format!("{urdf_name}: {e}"))?;
        let mut model =
            Model::from_urdf(&urdf, RootKind::Floating).map_err(|e| format!("{urdf_name}: {e}"))?;
        facts
            .validate(&model)
            .map_err(|e| format!("{facts_name}: {e}"))?;
        facts
            .check_foot_spheres(&urdf, urdf_name)
            .map_err(|e| format!("{facts_name}: {e}"))?;
        facts
            .set_urdf_dynamics(&urdf, &model)
            .map_err(|e| format!("{urdf_name}: {e}"))?;
        facts.apply_armature(&mut model);
        let (meshes, missing_meshes) = crate::meshes::load(&urdf, search, &facts.feet.frames)
            .map_err(|e| format!("{urdf_name}: {e}"))?;
        Ok(LoadedRobot {
            source: facts_name.to_string(),
            urdf_source: urdf_name.to_string(),
            urdf_text: urdf_text.to_string(),
            facts_text: facts_text.to_string(),
            urdf,
            model,
            facts,
            meshes,
            missing_meshes,
            inferred_facts: false,
        })
    }

    /// The one warning about collision meshes left out, if any (see [`crate::meshes`]).
    pub fn mesh_warning(&self) -> Option<String> {
        crate::meshes::missing_warning(&self.urdf_source, &self.missing_meshes)
    }

    /// Frame indices of the feet, in the facts' order.
    pub fn foot_frames(&self) -> Vec<usize> {
        self.facts
            .feet
            .frames
            .iter()
            .map(|f| self.model.frame_index(f).expect("validated"))
            .collect()
    }
}

/// The robot standing in its nominal posture (the facts' `[nominal]` joint angles, base frame
/// level): where the feet are and how high the base frame stands above the ground they touch.
#[derive(Clone, Debug, PartialEq)]
pub struct NominalStance {
    /// Base frame above the ground along the normal, m: the foot radius minus the mean height
    /// of the foot-sphere centres in the base frame (the planner's nominal height).
    pub height: f64,
    /// Foot-sphere centres in the base frame, m, in the facts' order.
    pub feet: Vec<[f64; 3]>,
}

/// The nominal stance of a model with its facts.
pub fn nominal_stance(model: &Model, facts: &RobotFacts) -> NominalStance {
    use gripsweep_controllers::algorithms::{Workspace, forward_kinematics, frame_pose};
    let mut ws = Workspace::new(model);
    let mut q = model.neutral();
    let nb = if model.root == RootKind::Floating {
        7
    } else {
        0
    };
    for (k, x) in facts.nominal_joints(model).into_iter().enumerate() {
        q[nb + k] = x;
    }
    forward_kinematics(model, &mut ws, &q);
    let feet: Vec<[f64; 3]> = facts
        .feet
        .frames
        .iter()
        .filter_map(|f| model.frame_index(f))
        .map(|i| {
            let p = frame_pose(model, &ws, i).trans;
            [p.x, p.y, p.z]
        })
        .collect();
    let mean_z = feet.iter().map(|f| f[2]).sum::<f64>() / feet.len().max(1) as f64;
    NominalStance {
        height: facts.feet.radius - mean_z,
        feet,
    }
}

impl LoadedRobot {
    /// [`nominal_stance`] of this robot.
    pub fn nominal_stance(&self) -> NominalStance {
        nominal_stance(&self.model, &self.facts)
    }
}

/// What the planner's stance check found: the robot stands in its nominal posture and shifts
/// its weight towards each foot in turn (amplitude h/10, the scenario default) on flat ground.
#[derive(Clone, Debug, PartialEq)]
pub struct StanceCheck {
    /// Nominal stance height h, m.
    pub height: f64,
    /// Weight-shift amplitude checked, m.
    pub shift: f64,
    /// Per foot: the number of joints of its leg and the leg's inverse-kinematics method.
    pub legs: Vec<(String, usize, crate::planner::IkMethod)>,
}

/// Run the planner's stance check on a model with its facts: the legs are found (each of three
/// or more joints), the nominal stance is planned, and so is a weight shift of h/10 towards
/// each foot in turn. An error names the cause in the robot's terms.
pub fn stance_check(model: &Model, facts: &RobotFacts) -> Result<StanceCheck, String> {
    use crate::planner::{Gait, Legs, Plan};
    let flat = crate::plant::terrain::Slope::degrees(0.0);
    let legs = Legs::new(model, facts).map_err(|e| e.0)?;
    let height = nominal_stance(model, facts).height;
    if !(height.is_finite() && height > 0.0) {
        return Err(format!(
            "the nominal posture puts the feet {:.3} m above the base frame: the robot cannot stand on them",
            -height
        ));
    }
    Plan::build(model, facts, &flat, &Gait::Stand, 1.0)
        .map_err(|e| format!("the nominal stance cannot be planned: {e}"))?;
    let shift = height / 10.0;
    if legs.len() >= 3 {
        let period = 2.0 * (legs.len() as f64 / 4.0).max(1.0);
        Plan::build(
            model,
            facts,
            &flat,
            &Gait::WeightShift {
                amplitude: shift,
                period,
                body_height: height,
            },
            period + 0.5,
        )
        .map_err(|e| format!("a weight shift of {shift:.4} m (h/10) cannot be planned: {e}"))?;
    }
    Ok(StanceCheck {
        height,
        shift,
        legs: (0..legs.len())
            .map(|i| {
                let leg = legs.leg(i);
                (leg.foot().to_string(), leg.n(), leg.method())
            })
            .collect(),
    })
}
