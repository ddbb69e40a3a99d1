//! `gripsweep robot`: load a robot (a robot facts TOML and the URDF it names, a bare URDF, or the
//! demo quadruped compiled into the binary) and report what the model made of it — for a person
//! (a summary table) or for a program (JSON), optionally with the dynamics terms at one state
//! (M, h, RNEA τ, centre of mass, every frame's position, Jacobian and J̇v). It is the user's check
//! that a URDF loads as intended, and our interface to outside references.
//!
//! Every failure is a [`CliError`]: one message naming the file and the field, link or joint,
//! for exit code [`CliError::EXIT_CODE`].

use clap::Args;
use gripsweep_controllers::RobotFacts;
use gripsweep_controllers::algorithms::{
    Workspace, center_of_mass, crba_after_fk, forward_kinematics, frame_bias_acceleration,
    frame_jacobian, frame_pose, rnea_after_fk, velocities_and_bias,
};
use gripsweep_controllers::model::{JointKind, Model, RootKind};
use nalgebra::{DMatrix, DVector};
use serde_json::{Map, Value, json};
use std::fmt::{self, Write as _};
use std::path::{Path, PathBuf};

/// The demo quadruped's URDF, compiled in so `gripsweep robot` works with no file.
pub const DEMO_URDF: &str = include_str!("../../scenarios/robots/brindle.urdf");
/// The demo quadruped's robot facts.
pub const DEMO_FACTS: &str = include_str!("../../scenarios/robots/brindle.toml");
const DEMO_FACTS_NAME: &str = "embedded scenarios/robots/brindle.toml";
const DEMO_URDF_NAME: &str = "embedded scenarios/robots/brindle.urdf";

/// Flags of `gripsweep robot`.
#[derive(Args, Clone, Debug, Default)]
pub struct RobotArgs {
    /// Robot to load: a robot facts .toml (which names its URDF) or a bare .urdf. Default: the
    /// demo quadruped "brindle" compiled into the binary.
    #[arg(value_name = "FILE")]
    pub file: Option<PathBuf>,

    /// Print JSON on stdout instead of the human summary. Default: the human summary.
    #[arg(long)]
    pub json: bool,

    /// Also report the dynamics at one state read from this JSON file, with fields "q", "v" and
    /// "a" (arrays in the model's conventions, see controllers/src/model.rs): M, h, RNEA τ,
    /// centre of mass, and every frame's position, translational Jacobian and J̇v. Needs --json.
    /// Default: no state.
    #[arg(long, value_name = "STATE.json", requires = "json")]
    pub state: Option<PathBuf>,

    /// Add each joint's reflected rotor inertia (armature, from the robot facts TOML) to the
    /// diagonal of M and to RNEA τ. Default: off, M is the rigid-body mass matrix alone (as in
    /// the reference comparison); the armature is reported either way.
    #[arg(long)]
    pub with_armature: bool,

    /// With a bare .urdf: print the robot facts TOML inferred for it (feet, foot radius, a
    /// standing posture, actuator defaults; see the README, "A bare URDF") instead of the
    /// summary, to save beside the URDF and edit. Default: off.
    #[arg(long, conflicts_with_all = ["json", "state", "with_armature"])]
    pub draft_facts: bool,
}

/// A failure of the `robot` command: one message naming the file and what is wrong with it.
#[derive(Clone, Debug, PartialEq)]
pub struct CliError(pub String);

impl CliError {
    /// Exit code for bad input (a file or a flag the command cannot use).
    pub const EXIT_CODE: u8 = 2;
}

impl fmt::Display for CliError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for CliError {}

fn fail<T>(msg: impl Into<String>) -> Result<T, CliError> {
    Err(CliError(msg.into()))
}

/// A loaded robot: the model (floating base) and, when it came from a TOML, its facts.
#[derive(Clone, Debug)]
pub struct LoadedRobot {
    pub model: Model,
    pub facts: Option<RobotFacts>,
    /// The file the robot was named by, as shown in messages.
    pub source: String,
    /// The URDF the model was built from, as shown in messages.
    pub urdf_source: String,
    /// Collision meshes left out (see `crate::meshes`), said once on stderr and in the summary.
    pub mesh_warning: Option<String>,
}

/// Load a robot from a facts TOML, a bare URDF, or (with `None`) the embedded demo quadruped.
/// Facts are validated against the model.
pub fn load_robot(file: Option<&Path>) -> Result<LoadedRobot, CliError> {
    let Some(path) = file else {
        return from_facts_text(DEMO_FACTS, DEMO_FACTS_NAME, |_| {
            Ok((DEMO_URDF.to_string(), DEMO_URDF_NAME.to_string()))
        });
    };
    let shown = path.display().to_string();
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match ext.as_deref() {
        Some("toml") => {
            let text = read_text(path, crate::limits::MAX_FACTS_BYTES, "the robot file")?;
            let dir = path.parent().unwrap_or(Path::new(""));
            from_facts_text(&text, &shown, |urdf_field| {
                let urdf_path = dir.join(urdf_field);
                let urdf_text = crate::limits::read_text_bounded(
                    &urdf_path,
                    crate::limits::MAX_URDF_BYTES,
                    "the URDF",
                )
                .map_err(|e| CliError(format!("{shown}: field `urdf` = \"{urdf_field}\": {e}")))?;
                Ok((urdf_text, urdf_path.display().to_string()))
            })
        }
        Some("urdf") | Some("xml") => {
            let text = read_text(path, crate::limits::MAX_URDF_BYTES, "the URDF")?;
            let urdf = gripsweep_controllers::model::parse_urdf(&text)
                .map_err(|e| CliError(format!("{shown}: {e}")))?;
            let model = Model::from_urdf(&urdf, RootKind::Floating)
                .map_err(|e| CliError(format!("{shown}: {e}")))?;
            let search = crate::meshes::MeshSearch::new(path.parent(), None, &[]);
            let mesh_warning = mesh_warning(&urdf, &search, &[], &shown)?;
            Ok(LoadedRobot {
                model,
                facts: None,
                source: shown.clone(),
                urdf_source: shown,
                mesh_warning,
            })
        }
        _ => fail(format!(
            "{shown}: unknown kind of robot file; allowed: a robot facts file ending in .toml or a URDF ending in .urdf or .xml"
        )),
    }
}

fn read_text(path: &Path, limit: u64, what: &str) -> Result<String, CliError> {
    crate::limits::read_text_bounded(path, limit, what).map_err(CliError)
}

fn from_facts_text(
    text: &str,
    shown: &str,
    read_urdf: impl FnOnce(&str) -> Result<(String, String), CliError>,
) -> Result<LoadedRobot, CliError> {
    crate::limits::check_toml_depth(text).map_err(|e| CliError(format!("{shown}: {e}")))?;
    let facts = RobotFacts::from_toml_str(text).map_err(|e| CliError(format!("{shown}: {e}")))?;
    let (urdf_text, urdf_shown) = read_urdf(&facts.urdf)?;
    let urdf = gripsweep_controllers::model::parse_urdf(&urdf_text)
        .map_err(|e| CliError(format!("{urdf_shown}: {e}")))?;
    let model = Model::from_urdf(&urdf, RootKind::Floating)
        .map_err(|e| CliError(format!("{urdf_shown}: {e}")))?;
    facts
        .validate(&model)
        .map_err(|e| CliError(format!("{shown}: {e}")))?;
    facts
        .check_foot_spheres(&urdf, &urdf_shown)
        .map_err(|e| CliError(format!("{shown}: {e}")))?;
    let mut facts = facts;
    facts
        .set_urdf_dynamics(&urdf, &model)
        .map_err(|e| CliError(format!("{urdf_shown}: {e}")))?;
    // Embedded robots carry no meshes; files resolve from the URDF's and the facts' folders.
    let search = crate::meshes::MeshSearch::new(
        Path::new(&urdf_shown).parent(),
        Path::new(shown).parent(),
        &facts.package_dirs,
    );
    let mesh_warning = mesh_warning(&urdf, &search, &facts.feet.frames, &urdf_shown)?;
    Ok(LoadedRobot {
        model,
        facts: Some(facts),
        source: shown.to_string(),
        urdf_source: urdf_shown,
        mesh_warning,
    })
}

/// Load the URDF's collision meshes (an unreadable file is an error) and return the one
/// warning about those left out.
fn mesh_warning(
    urdf: &urdf_rs::Robot,
    search: &crate::meshes::MeshSearch,
    feet: &[String],
    urdf_shown: &str,
) -> Result<Option<String>, CliError> {
    let (_, missing) = crate::meshes::load(urdf, search, feet)
        .map_err(|e| CliError(format!("{urdf_shown}: {e}")))?;
    Ok(crate::meshes::missing_warning(urdf_shown, &missing))
}

/// One state in the model's conventions.
#[derive(Clone, Debug, PartialEq)]
pub struct State {
    pub q: DVector<f64>,
    pub v: DVector<f64>,
    pub a: DVector<f64>,
}

/// Read and check a state file: a JSON object with exactly the fields `q` (nq numbers), `v` and
/// `a` (nv numbers each), all finite, the base quaternion of unit norm.
pub fn read_state(path: &Path, model: &Model) -> Result<State, CliError> {
    let shown = path.display();
    // A state is a few hundred numbers; the facts limit is ample.
    let text = read_text(path, crate::limits::MAX_FACTS_BYTES, "the state file")?;
    let value: Value = serde_json::from_str(&text).map_err(|e| {
        CliError(format!(
            "{shown}: not readable JSON: {e} (numbers must be finite: JSON has no NaN or Infinity)"
        ))
    })?;
    let Value::Object(obj) = value else {
        return fail(format!(
            "{shown}: expected a JSON object with fields \"q\", \"v\", \"a\""
        ));
    };
    if let Some(k) = obj.keys().find(|k| !["q", "v", "a"].contains(&k.as_str())) {
        return fail(format!(
            "{shown}: unknown field \"{k}\"; allowed: \"q\", \"v\", \"a\""
        ));
    }
    let field = |name: &str, len: usize, what: &str| -> Result<DVector<f64>, CliError> {
        let Some(val) = obj.get(name) else {
            return fail(format!(
                "{shown}: missing field \"{name}\" ({what}, {len} numbers)"
            ));
        };
        let Some(items) = val.as_array() else {
            return fail(format!(
                "{shown}: field \"{name}\" is not an array; expected {len} numbers ({what})"
            ));
        };
        if items.len() != len {
            return fail(format!(
                "{shown}: field \"{name}\" has {} entries; robot '{}' needs {len} ({what})",
                items.len(),
                model.name
            ));
        }
        let mut out = DVector::zeros(len);
        for (i, item) in items.iter().enumerate() {
            match item.as_f64() {
                Some(x) if x.is_finite() => out[i] = x,
                _ => {
                    return fail(format!(
                        "{shown}: field \"{name}\" entry {i} is {item}; allowed: a finite number"
                    ));
                }
            }
        }
        Ok(out)
    };
    let nj = model.n_joints();
    let q_what = match model.root {
        RootKind::Floating => {
            format!("base position 3, base quaternion x y z w 4, joint positions {nj}")
        }
        RootKind::Fixed => format!("joint positions {nj}"),
    };
    let v_what = |kind: &str| match model.root {
        RootKind::Floating => {
            format!("base linear 3 and angular 3 {kind} in the base frame, joint {kind} {nj}")
        }
        RootKind::Fixed => format!("joint {kind} {nj}"),
    };
    let q = field("q", model.nq(), &q_what)?;
    let v = field("v", model.nv(), &v_what("velocities"))?;
    let a = field("a", model.nv(), &v_what("accelerations"))?;
    if model.root == RootKind::Floating {
        let norm = q.fixed_rows::<4>(3).norm();
        if (norm - 1.0).abs() > 1e-6 {
            return fail(format!(
                "{shown}: field \"q\" entries 3..7 (base quaternion x y z w) have norm {norm}; allowed: a unit quaternion (norm within 1e-6 of 1)"
            ));
        }
    }
    Ok(State { q, v, a })
}

fn kind_name(kind: JointKind, lower: f64, upper: f64) -> &'static str {
    match kind {
        JointKind::Prismatic => "prismatic",
        JointKind::Revolute if lower.is_infinite() && upper.is_infinite() => "continuous",
        JointKind::Revolute => "revolute",
    }
}

fn finite_or_null(x: f64) -> Value {
    if x.is_finite() { json!(x) } else { Value::Null }
}

fn vec3(v: &nalgebra::Vector3<f64>) -> Value {
    json!([v.x, v.y, v.z])
}

fn rows(m: &DMatrix<f64>) -> Value {
    Value::Array(
        (0..m.nrows())
            .map(|r| json!((0..m.ncols()).map(|c| m[(r, c)]).collect::<Vec<f64>>()))
            .collect(),
    )
}

/// The nominal posture: base at the origin with identity orientation, joints at the facts'
/// nominal angles (or the neutral configuration without facts).
pub fn nominal_q(robot: &LoadedRobot) -> DVector<f64> {
    let model = &robot.model;
    let mut q = model.neutral();
    if let Some(facts) = &robot.facts {
        for (k, angle) in facts.nominal_joints(model).into_iter().enumerate() {
            q[model.nq_base() + k] = angle;
        }
    }
    q
}

fn armature_of(robot: &LoadedRobot, joint: &str) -> f64 {
    robot
        .facts
        .as_ref()
        .map_or(0.0, |f| f.actuator(joint).armature)
}

/// Everything `robot --json` prints without a state.
pub fn summary_json(robot: &LoadedRobot, with_armature: bool) -> Map<String, Value> {
    let model = &robot.model;
    let mut ws = Workspace::new(model);
    let q0 = nominal_q(robot);
    forward_kinematics(model, &mut ws, &q0);
    let com = center_of_mass(model, &ws);
    let joints: Vec<Value> = model
        .joints
        .iter()
        .enumerate()
        .map(|(k, j)| {
            json!({
                "name": j.name,
                "v_index": model.nv_base() + k,
                "kind": kind_name(j.kind, j.lower, j.upper),
                "axis": vec3(&j.axis),
                "parent_body": model.body_names[j.parent],
                "child_body": model.body_names[k + 1],
                "lower": finite_or_null(j.lower),
                "upper": finite_or_null(j.upper),
                "effort_limit": j.effort_limit,
                "velocity_limit": j.velocity_limit,
                "armature": armature_of(robot, &j.name),
            })
        })
        .collect();
    let mut out = Map::new();
    out.insert("name".into(), json!(model.name));
    out.insert("source".into(), json!(robot.source));
    out.insert("urdf".into(), json!(robot.urdf_source));
    out.insert("dof".into(), json!(model.nv()));
    out.insert("nq".into(), json!(model.nq()));
    out.insert("total_mass".into(), json!(model.total_mass()));
    out.insert("joint_names".into(), json!(model.joint_names()));
    out.insert(
        "frame_names".into(),
        json!(model.frames.iter().map(|f| &f.name).collect::<Vec<_>>()),
    );
    out.insert("body_names".into(), json!(model.body_names));
    out.insert("joints".into(), Value::Array(joints));
    let (feet, radius) = match &robot.facts {
        Some(f) => (f.feet.frames.clone(), json!(f.feet.radius)),
        None => (Vec::new(), Value::Null),
    };
    out.insert("feet".into(), json!(feet));
    out.insert("foot_radius".into(), radius);
    // The stance the gait defaults are derived from (see the README's scenario table).
    if let Some(f) = &robot.facts {
        let st = crate::robot::nominal_stance(model, f);
        out.insert("stance_height".into(), json!(st.height));
        out.insert("stance_feet".into(), json!(st.feet));
    }
    out.insert("nominal_q".into(), json!(q0.as_slice()));
    out.insert("com_nominal".into(), vec3(&com));
    out.insert("armature_in_mass_matrix".into(), json!(with_armature));
    out
}

/// The dynamics terms at one state: `M` (rows), `h`, `rnea`, `com`, and `frames` (name →
/// position, translational world-aligned Jacobian rows, J̇v).
pub fn state_json(model: &Model, state: &State) -> Map<String, Value> {
    let nv = model.nv();
    let mut ws = Workspace::new(model);
    forward_kinematics(model, &mut ws, &state.q);
    crba_after_fk(model, &mut ws);
    let mass = rows(&ws.mass_matrix);
    rnea_after_fk(model, &mut ws, &state.v, &DVector::zeros(nv));
    let h = json!(ws.tau.as_slice());
    rnea_after_fk(model, &mut ws, &state.v, &state.a);
    let tau = json!(ws.tau.as_slice());
    let com = center_of_mass(model, &ws);
    velocities_and_bias(model, &mut ws, &state.v);
    let mut jac = DMatrix::zeros(3, nv);
    let mut frames = Map::new();
    for (k, f) in model.frames.iter().enumerate() {
        frame_jacobian(model, &ws, k, &mut jac, 0, false);
        frames.insert(
            f.name.clone(),
            json!({
                "position": vec3(&frame_pose(model, &ws, k).trans),
                "jacobian": rows(&jac),
                "bias_acceleration": vec3(&frame_bias_acceleration(model, &ws, k)),
            }),
        );
    }
    let mut out = Map::new();
    out.insert("q".into(), json!(state.q.as_slice()));
    out.insert("v".into(), json!(state.v.as_slice()));
    out.insert("a".into(), json!(state.a.as_slice()));
    out.insert("M".into(), mass);
    out.insert("h".into(), h);
    out.insert("rnea".into(), tau);
    out.insert("com".into(), vec3(&com));
    out.insert("frames".into(), Value::Object(frames));
    out
}

fn fmt_limit(x: f64) -> String {
    if x.is_finite() {
        format!("{x:.3}")
    } else {
        "-".into()
    }
}

/// The human summary.
pub fn summary_text(robot: &LoadedRobot, with_armature: bool) -> String {
    let model = &robot.model;
    let mut ws = Workspace::new(model);
    let q0 = nominal_q(robot);
    forward_kinematics(model, &mut ws, &q0);
    let com = center_of_mass(model, &ws);
    let mut s = String::new();
    // Writing to a String cannot fail.
    let _ = writeln!(s, "robot '{}'", model.name);
    let _ = writeln!(s, "  from              {}", robot.source);
    if robot.urdf_source != robot.source {
        let _ = writeln!(s, "  URDF              {}", robot.urdf_source);
    }
    let _ = writeln!(
        s,
        "  coordinates       nq {} = 7 + {nj}, nv {} = 6 + {nj} (floating base, then one per joint)",
        model.nq(),
        model.nv(),
        nj = model.n_joints()
    );
    let _ = writeln!(
        s,
        "  bodies ({:2})       {}",
        model.n_bodies(),
        model.body_names.join(", ")
    );
    let fixed: Vec<&str> = model
        .frames
        .iter()
        .filter(|f| !model.body_names.contains(&f.name))
        .map(|f| f.name.as_str())
        .collect();
    let _ = writeln!(
        s,
        "  links  ({:2})       every body, plus fixed links merged into their parent: {}",
        model.frames.len(),
        if fixed.is_empty() {
            "none".to_string()
        } else {
            fixed.join(", ")
        }
    );
    let _ = writeln!(s, "  total mass        {:.4} kg", model.total_mass());
    let posture = if robot.facts.as_ref().is_some_and(|f| !f.nominal.is_empty()) {
        "nominal posture from the robot facts"
    } else {
        "neutral posture (joints at 0 within limits)"
    };
    let _ = writeln!(
        s,
        "  centre of mass    ({:.4}, {:.4}, {:.4}) m in the base frame, {posture}",
        com.x, com.y, com.z
    );
    match &robot.facts {
        Some(f) => {
            let _ = writeln!(
                s,
                "  feet              {} (sphere radius {} m)",
                f.feet.frames.join(", "),
                f.feet.radius
            );
            let st = crate::robot::nominal_stance(model, f);
            let _ = writeln!(
                s,
                "  stance height     {:.4} m: base frame above the ground in the nominal posture (the default gait.body_height; step h/5, swing height h/6, weight-shift amplitude h/10; the crawl margin comes from the support triangles)",
                st.height
            );
            for (name, p) in f.feet.frames.iter().zip(&st.feet) {
                let _ = writeln!(
                    s,
                    "  foot {name:<12} ({:.4}, {:.4}, {:.4}) m in the base frame, nominal posture",
                    p[0], p[1], p[2]
                );
            }
        }
        None => {
            let _ = writeln!(
                s,
                "  feet              none named (a bare URDF; feet come from a robot facts TOML, and --draft-facts prints the facts inferred for it)"
            );
        }
    }
    let _ = writeln!(
        s,
        "  mass matrix       {}",
        if with_armature {
            "includes the armature below"
        } else {
            "rigid bodies only (armature left out; --with-armature adds it)"
        }
    );
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "joints in v order (limits in rad or m, effort in N·m or N, velocity in rad/s or m/s, armature in kg·m² or kg)"
    );
    let width = model
        .joints
        .iter()
        .map(|j| j.name.len())
        .max()
        .unwrap_or(5)
        .max(5);
    let _ = writeln!(
        s,
        "  {:>3}  {:<width$}  {:<10}  {:<22}  {:>8}  {:>8}  {:>7}  {:>8}  {:>8}",
        "v", "joint", "kind", "axis", "lower", "upper", "effort", "velocity", "armature"
    );
    for (k, j) in model.joints.iter().enumerate() {
        let axis = format!("({:.3}, {:.3}, {:.3})", j.axis.x, j.axis.y, j.axis.z);
        let _ = writeln!(
            s,
            "  {:>3}  {:<width$}  {:<10}  {:<22}  {:>8}  {:>8}  {:>7.1}  {:>8.1}  {:>8.4}",
            model.nv_base() + k,
            j.name,
            kind_name(j.kind, j.lower, j.upper),
            axis,
            fmt_limit(j.lower),
            fmt_limit(j.upper),
            j.effort_limit,
            j.velocity_limit,
            armature_of(robot, &j.name),
        );
    }
    s
}

fn ik_name(method: crate::planner::IkMethod) -> &'static str {
    match method {
        crate::planner::IkMethod::Analytic => "closed form",
        crate::planner::IkMethod::Numeric => "numeric",
    }
}

/// The planner's stance check, for the human summary.
fn stance_text(st: &crate::robot::StanceCheck) -> String {
    let mut s = String::new();
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "planner check: ok — stands in the nominal posture ({:.4} m) and shifts its weight {:.4} m (h/10) towards each foot on flat ground",
        st.height, st.shift
    );
    for (foot, n, method) in &st.legs {
        let _ = writeln!(
            s,
            "  leg of {foot:<12} {n} joints, inverse kinematics {}",
            ik_name(*method)
        );
    }
    s
}

/// The whole `robot` command: returns what goes to stdout.
pub fn run(args: &RobotArgs) -> Result<String, CliError> {
    if args.draft_facts {
        let Some(path) = args
            .file
            .as_deref()
            .filter(|p| crate::infer::is_urdf_path(p))
        else {
            return fail("--draft-facts needs a bare URDF (FILE ending in .urdf or .xml)");
        };
        let text = read_text(path, crate::limits::MAX_URDF_BYTES, "the URDF")?;
        let name = path.file_name().map_or_else(
            || path.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        );
        let (toml, problem) =
            crate::infer::draft_facts(&text, &path.display().to_string(), &name, None)
                .map_err(CliError)?;
        if let Some(p) = problem {
            eprintln!("gripsweep: warning: {}: {p}", path.display());
        }
        return Ok(toml);
    }
    let mut robot = load_robot(args.file.as_deref())?;
    if let Some(w) = &robot.mesh_warning {
        eprintln!("gripsweep: warning: {w}");
    }
    if args.with_armature {
        match &robot.facts {
            Some(facts) => facts.apply_armature(&mut robot.model),
            None => {
                return fail(format!(
                    "{}: --with-armature needs a robot facts .toml (a bare URDF carries no armature)",
                    robot.source
                ));
            }
        }
    }
    if args.state.is_some() && !args.json {
        return fail("--state needs --json (the dynamics terms are printed as JSON only)");
    }
    // A robot the planner cannot serve is refused here, not at the first run.
    let stance = match &robot.facts {
        Some(facts) => Some(
            crate::robot::stance_check(&robot.model, facts).map_err(|e| {
                CliError(format!(
                    "{}: the planner cannot serve this robot: {e}",
                    robot.source
                ))
            })?,
        ),
        None => None,
    };
    if !args.json {
        let mut text = summary_text(&robot, args.with_armature);
        if let Some(st) = &stance {
            text.push_str(&stance_text(st));
        }
        return Ok(text);
    }
    let mut out = summary_json(&robot, args.with_armature);
    if let Some(st) = &stance {
        out.insert(
            "planner_check".into(),
            json!({
                "stand": true,
                "weight_shift_m": st.shift,
                "legs": st.legs.iter().map(|(foot, n, method)| json!({
                    "foot": foot,
                    "joints": n,
                    "ik": ik_name(*method),
                })).collect::<Vec<_>>(),
            }),
        );
    }
    if let Some(path) = &args.state {
        let state = read_state(path, &robot.model)?;
        out.insert("state_file".into(), json!(path.display().to_string()));
        out.extend(state_json(&robot.model, &state));
    }
    let mut text = serde_json::to_string_pretty(&Value::Object(out))
        .map_err(|e| CliError(format!("cannot write JSON: {e}")))?;
    text.push('\n');
    Ok(text)
}
