//! A bare URDF as the robot: the robot facts a URDF does not carry, inferred, written as the
//! facts TOML a user can save and edit (`gripsweep robot x.urdf --draft-facts`), then loaded as
//! if the user had written it. The rules, in the README's *A bare URDF*:
//!
//! - **Feet**: the links named (the scenario's `feet`), else every leaf link (no child joint)
//!   with a sphere collision, in the model's link order. Their spheres must share one radius.
//! - **Nominal posture**: each foot directly below the origin of the first moving joint of its
//!   leg (its "hip", fixed in the trunk), on one ground [`STANCE_SHARES`] of the shortest leg's
//!   length below the hips (a leg's length: the distances from the hip through each following
//!   joint origin to the foot centre, which no joint angle changes; the first share the feet
//!   reach wins; a foot a joint limit keeps from the point below its hip may stay up to a tenth
//!   of the shortest leg's length away from it horizontally, on the same ground). Solved by damped least squares on the feet's
//!   Jacobians (Nakamura & Hanafusa, "Inverse kinematic solutions with singularity robustness for
//!   robot manipulator control", J. Dyn. Sys., Meas., Control 1986) within the joint limits,
//!   from the joints at mid-range, then from a quarter and three quarters of their ranges.
//!   The trunk frame stands level; its height comes from the feet as for any robot.
//! - **Actuators**: the facts' defaults (no armature, no delay or lag, torque loop 4 kHz with
//!   gain 10); joint friction from the URDF's `<dynamics>` where it has one, else none.

use crate::limits::{MAX_URDF_BYTES, read_text_bounded};
use crate::meshes::MeshSearch;
use crate::robot::LoadedRobot;
use gripsweep_controllers::algorithms::{
    Workspace, forward_kinematics, frame_jacobian, frame_pose,
};
use gripsweep_controllers::model::{Model, RootKind, parse_urdf};
use nalgebra::{DMatrix, DVector};
use std::fmt::Write as _;
use std::path::Path;

/// The ground lies this share of the shortest leg's length below the hips (a bent knee, far
/// from the stretched-leg singularity; the demo quadrupeds stand at 0.60–0.65), tried in this
/// order until the feet reach it within the joint limits.
pub const STANCE_SHARES: [f64; 4] = [0.7, 0.6, 0.8, 0.5];

/// Largest foot placement error the derived posture may keep, m.
const POSTURE_TOLERANCE: f64 = 1e-10;
/// Damped least-squares iterations per attempt (it converges linearly near the solution).
const MAX_POSTURE_ITERATIONS: usize = 2000;

/// Whether a robot file is a URDF (by its extension).
pub fn is_urdf_path(path: &Path) -> bool {
    matches!(
        path.extension()
            .and_then(|e| e.to_str())
            .map(str::to_ascii_lowercase)
            .as_deref(),
        Some("urdf" | "xml")
    )
}

/// Load a bare URDF with inferred facts.
pub fn load_bare_urdf(path: &Path, feet: Option<&[String]>) -> Result<LoadedRobot, String> {
    let text = read_text_bounded(path, MAX_URDF_BYTES, "the URDF")?;
    let shown = path.display().to_string();
    let (toml, problem) = draft_facts(&text, &shown, &file_name(path), feet)?;
    if let Some(p) = problem {
        return Err(format!("{shown}: {p}"));
    }
    let search = MeshSearch::new(path.parent(), None, &[]);
    let facts_name = format!("{shown} (robot facts inferred)");
    let mut robot = LoadedRobot::from_texts_searching(&facts_name, &toml, &shown, &text, &search)?;
    robot.inferred_facts = true;
    Ok(robot)
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| path.display().to_string())
}

/// The sphere radius of a link's collision, if it has one.
fn sphere_of(urdf: &urdf_rs::Robot, link: &str) -> Option<f64> {
    urdf.links
        .iter()
        .find(|l| l.name == link)?
        .collision
        .iter()
        .find_map(|c| match c.geometry {
            urdf_rs::Geometry::Sphere { radius } => Some(radius),
            _ => None,
        })
}

/// The robot facts TOML inferred for the URDF `text` (named `shown` in messages, `urdf_field`
/// in the TOML's `urdf`), with comments saying where each value came from. When no standing
/// posture can be derived the draft holds the joints at mid-range and the second value says
/// why (the draft is then a start for the user's own angles, not a robot that loads as is).
pub fn draft_facts(
    text: &str,
    shown: &str,
    urdf_field: &str,
    feet: Option<&[String]>,
) -> Result<(String, Option<String>), String> {
    let urdf = parse_urdf(text).map_err(|e| format!("{shown}: {e}"))?;
    let model = Model::from_urdf(&urdf, RootKind::Floating).map_err(|e| format!("{shown}: {e}"))?;
    let feet: Vec<String> = match feet {
        Some(f) => f.to_vec(),
        None => {
            let parents: Vec<&str> = urdf.joints.iter().map(|j| j.parent.link.as_str()).collect();
            model
                .frames
                .iter()
                .map(|f| f.name.clone())
                .filter(|n| !parents.contains(&n.as_str()) && sphere_of(&urdf, n).is_some())
                .collect()
        }
    };
    if feet.is_empty() {
        return Err(format!(
            "{shown}: no feet: no leaf link has a sphere collision; name the foot links (a scenario's `feet`) or write a robot facts file"
        ));
    }
    let mut radius = None;
    for f in &feet {
        if model.frame_index(f).is_none() {
            return Err(format!("{shown}: foot '{f}' is not a link of the URDF"));
        }
        let Some(r) = sphere_of(&urdf, f) else {
            return Err(format!(
                "{shown}: foot '{f}' has no sphere collision, so its radius is unknown; give it one or write a robot facts file"
            ));
        };
        match radius {
            None => radius = Some((f.clone(), r)),
            Some((ref f0, r0)) if (r - r0).abs() > 1e-12 * r0.max(1.0) => {
                return Err(format!(
                    "{shown}: feet '{f0}' and '{f}' have spheres of radius {r0} m and {r} m; one robot has one foot radius: write a robot facts file"
                ));
            }
            _ => {}
        }
    }
    let radius = radius.map_or(0.0, |(_, r)| r);
    let (nominal, problem) = match stance_posture(&model, &feet) {
        Ok(q) => (q, None),
        Err(e) => {
            let q = posture_at(&model, 0.5);
            let nqb = model.nq_base();
            (q.as_slice()[nqb..].to_vec(), Some(e))
        }
    };

    let mut s = String::new();
    let _ = writeln!(
        s,
        "# Robot facts inferred from {urdf_field} by gripsweep (see the README, \"A bare URDF\"); save\n# this beside the URDF and edit it."
    );
    let _ = writeln!(s, "urdf = {:?}", urdf_field);
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "[feet]   # leaf links with a sphere collision (or the ones named), their sphere's radius"
    );
    let _ = writeln!(
        s,
        "frames = [{}]",
        feet.iter()
            .map(|f| format!("{f:?}"))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let _ = writeln!(s, "radius = {radius:?}");
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "# Actuators: the defaults (armature 0, no delay or lag, torque loop 4000 Hz with gain 10);\n# joint friction from the URDF's <dynamics> where it has one. A value set here wins over it.\n[actuators]"
    );
    let _ = writeln!(s);
    match &problem {
        None => {
            let _ = writeln!(
                s,
                "# Nominal posture, rad: each foot below its leg's first joint, on one level ground.\n[nominal]"
            );
        }
        Some(p) => {
            let _ = writeln!(
                s,
                "# Nominal posture: NOT derived ({p}).\n# The joints are at mid-range: replace them with a standing posture.\n[nominal]"
            );
        }
    }
    for (j, x) in model.joints.iter().zip(&nominal) {
        let _ = writeln!(s, "{} = {x:?}", toml_key(&j.name));
    }
    Ok((s, problem))
}

/// A TOML key: bare when it can be, quoted otherwise.
fn toml_key(name: &str) -> String {
    if !name.is_empty()
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
    {
        name.to_string()
    } else {
        format!("{name:?}")
    }
}

/// The joint angles of the inferred nominal posture (see the module documentation).
pub fn stance_posture(model: &Model, feet: &[String]) -> Result<Vec<f64>, String> {
    let frames: Vec<usize> = feet
        .iter()
        .map(|f| model.frame_index(f).ok_or_else(|| format!("no link '{f}'")))
        .collect::<Result<_, _>>()?;
    // Each foot's chain of joints, root side first.
    let chain = |frame: usize| -> Vec<usize> {
        let mut ks = Vec::new();
        let mut b = model.frames[frame].body;
        while b != 0 {
            ks.push(b - 1);
            b = model.joints[b - 1].parent;
        }
        ks.reverse();
        ks
    };
    let mut ws = Workspace::new(model);
    let q_mid = posture_at(model, 0.5);
    forward_kinematics(model, &mut ws, &q_mid);
    // Each leg's hip (the first joint's origin, fixed in the trunk) and length.
    let mut legs = Vec::with_capacity(frames.len());
    for (f, &fi) in feet.iter().zip(&frames) {
        let ks = chain(fi);
        let Some(&first) = ks.first() else {
            return Err(format!(
                "foot '{f}' is on the trunk itself (no joint moves it), so it cannot be a foot"
            ));
        };
        // Joint origins along the leg, then the foot: their distances are fixed by the URDF.
        let mut points: Vec<_> = ks.iter().map(|&k| ws.o_m[k + 1].trans).collect();
        points.push(frame_pose(model, &ws, fi).trans);
        let length: f64 = points.windows(2).map(|w| (w[1] - w[0]).norm()).sum();
        if length <= 0.0 || !length.is_finite() {
            return Err(format!(
                "foot '{f}': its leg has no length (joint '{}' sits at the foot)",
                model.joints[first].name
            ));
        }
        legs.push((points[0], length));
    }
    let mut best = f64::INFINITY;
    for stance_share in STANCE_SHARES {
        // One ground for every foot: as low as the shortest reach allows at this share.
        let ground_z = legs
            .iter()
            .map(|(hip, length)| hip.z - stance_share * length)
            .fold(f64::NEG_INFINITY, f64::max);
        let targets: Vec<_> = legs
            .iter()
            .map(|(hip, _)| nalgebra::Vector3::new(hip.x, hip.y, ground_z))
            .collect();
        for start in [0.5, 0.25, 0.75] {
            // Horizontal slack: a tenth of the shortest leg.
            let slack = 0.1 * legs.iter().map(|l| l.1).fold(f64::INFINITY, f64::min);
            match solve_feet(model, &mut ws, &frames, &targets, start, slack) {
                Ok(q) => return Ok(q),
                Err(e) => best = best.min(e),
            }
        }
    }
    Err(format!(
        "cannot derive a standing posture: with every foot below its leg's first joint at {STANCE_SHARES:?} of the shortest leg's length, a foot stays at least {:.1} mm from its place within the joint limits; write the nominal angles in a robot facts file (`gripsweep robot FILE --draft-facts` prints one to start from, joints at mid-range)",
        best * 1000.0
    ))
}

/// Damped least squares for the joint angles that put each foot frame at its target (base
/// fixed, level, at the origin), from every joint at `start` of its range, clamped to the
/// limits. Returns the joint angles, or the largest foot error left.
fn solve_feet(
    model: &Model,
    ws: &mut Workspace,
    frames: &[usize],
    targets: &[nalgebra::Vector3<f64>],
    start: f64,
    slack: f64,
) -> Result<Vec<f64>, f64> {
    let (nj, nqb, nvb) = (model.n_joints(), model.nq_base(), model.nv_base());
    let mut q = posture_at(model, start);
    let mut jac = DMatrix::zeros(3, model.nv());
    let mut jj = DMatrix::zeros(3 * frames.len(), nj);
    let mut err = DVector::zeros(3 * frames.len());
    let mut max_err = f64::INFINITY;
    let (mut max_z, mut max_xy) = (f64::INFINITY, f64::INFINITY);
    for _ in 0..MAX_POSTURE_ITERATIONS {
        forward_kinematics(model, ws, &q);
        max_err = 0.0;
        (max_z, max_xy) = (0.0, 0.0);
        for (i, (&fi, t)) in frames.iter().zip(targets).enumerate() {
            let e = t - frame_pose(model, ws, fi).trans;
            max_err = f64::max(max_err, e.norm());
            max_z = f64::max(max_z, e.z.abs());
            max_xy = f64::max(max_xy, e.xy().norm());
            err.fixed_rows_mut::<3>(3 * i).copy_from(&e);
            frame_jacobian(model, ws, fi, &mut jac, 0, false);
            jj.rows_mut(3 * i, 3)
                .copy_from(&jac.columns(nvb, nj).clone_owned());
        }
        if max_err < POSTURE_TOLERANCE {
            return Ok((0..nj).map(|k| q[nqb + k]).collect());
        }
        // Δq = Jᵀ (J Jᵀ + λ² I)⁻¹ e with λ = 0.01 m.
        let mut a = &jj * jj.transpose();
        for d in 0..a.nrows() {
            a[(d, d)] += 1e-4;
        }
        let Some(chol) = a.cholesky() else { break };
        let dq = jj.transpose() * chol.solve(&err);
        for (k, j) in model.joints.iter().enumerate() {
            q[nqb + k] = (q[nqb + k] + dq[k]).clamp(j.lower, j.upper);
        }
    }
    // A joint limit may keep a foot from the point below its hip: the feet still stand on one
    // ground, as close to below their hips as the limits allow, if that is within `slack`.
    if max_z < POSTURE_TOLERANCE.sqrt() && max_xy < slack {
        return Ok((0..nj).map(|k| q[nqb + k]).collect());
    }
    Err(max_err)
}

/// Every joint at `share` of its range (0 for a joint without finite limits), base level at
/// the origin.
fn posture_at(model: &Model, share: f64) -> DVector<f64> {
    let mut q = model.neutral();
    for (k, j) in model.joints.iter().enumerate() {
        if j.lower.is_finite() && j.upper.is_finite() {
            q[model.nq_base() + k] = j.lower + share * (j.upper - j.lower);
        }
    }
    q
}
