//! Leg inverse kinematics: where must a leg's joints be for its foot centre to sit at a target
//! given in the base frame? Any serial leg of three or more joints (revolute or prismatic, any
//! axis order: abduction first, hip yaw first, tilted axes) is served.
//!
//! * Analytic, for the common three-joint leg whose first joint turns about any axis
//!   (abduction or hip yaw) and whose second and third joints turn about parallel axes (hip and
//!   knee pitch). The geometry is read from the model's joint placements at build time, never
//!   assumed: the pitch joints keep the foot at a fixed offset along their common axis, which
//!   fixes the first angle (a sum of a sine and a cosine, two solutions); the distance from the
//!   hip axis to the foot fixes the knee (law of cosines in the plane normal to the pitch axes,
//!   two solutions); the hip angle then follows (the textbook decomposition of the 3-DOF leg,
//!   e.g. Siciliano & Khatib (eds.), "Springer Handbook of Robotics", 2016, ch. 2 on inverse
//!   kinematics by subproblems). Of the up to four solutions, the one within the joint limits
//!   closest to the nominal posture is taken. It is used only when it reproduces the nominal
//!   posture and nearby targets through the model's forward kinematics and agrees there with
//!   the numeric method.
//! * Numeric, for any other leg: Levenberg–Marquardt damped least squares on the leg's
//!   columns of the model's foot Jacobian (`frame_jacobian`), each step projected onto the
//!   joint limits (Marquardt, "An algorithm for least-squares estimation of nonlinear
//!   parameters", SIAM J. Appl. Math. 1963; Wampler, "Manipulator inverse kinematic solutions
//!   based on vector formulations and damped least-squares methods", IEEE Trans. SMC 1986;
//!   the projection as in Kanzow, Yamashita & Fukushima, J. Comput. Appl. Math. 2004), warm
//!   started from the previous instant's angles and, when that fails, from the nominal
//!   posture and a fixed set of seeds around it. A leg of more than three joints has more
//!   joints than a point foot has coordinates; the directions its Jacobian leaves free at the
//!   nominal posture are held at their nominal values (configuration control, Seraji 1989),
//!   which makes the system square, the solution unique near the nominal posture, and its
//!   rates and accelerations exact derivatives of its angles.
//! * A leg of fewer than three joints is refused: a point foot has three coordinates to place.

use super::PlanError;
use gripsweep_controllers::algorithms::{
    Workspace, forward_kinematics, frame_jacobian, frame_pose,
};
use gripsweep_controllers::model::{JointKind, Model, RootKind};
use gripsweep_controllers::robot_facts::RobotFacts;
use gripsweep_controllers::spatial::{Mat3, Pose, Vec3, skew};
use nalgebra::{DMatrix, DVector};
use std::f64::consts::PI;

/// How a leg's inverse kinematics is solved.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum IkMethod {
    /// Closed form (three revolute joints, the last two parallel).
    Analytic,
    /// Damped least squares on the model's Jacobian.
    Numeric,
}

/// Residual below which the numeric solution counts as converged, m.
const NUMERIC_TOLERANCE: f64 = 1e-13;
/// Largest forward-kinematics mismatch an analytic solution may show before the numeric
/// method is used instead, m.
const ANALYTIC_CHECK: f64 = 1e-10;
/// A numeric descent that ends closer than this to the target without converging has stalled
/// at a singular posture (a reachable target the leg cannot be steered to), m.
const STALL_GAP: f64 = 1e-4;
/// Slack on joint limits for solutions that land on a limit up to rounding, rad.
const LIMIT_SLACK: f64 = 1e-9;

/// Rotation by `q` about the unit axis `a` (Rodrigues: I + sin q [a]× + (1 − cos q)[a]×²), the
/// same formula the model's forward kinematics uses.
fn axis_rotation(a: &Vec3, q: f64) -> Mat3 {
    let (s, c) = q.sin_cos();
    let ax = skew(a);
    Mat3::identity() + ax * s + ax * ax * (1.0 - c)
}

/// The fixed geometry of a leg with a first revolute joint and two parallel pitch joints.
#[derive(Clone, Debug)]
struct PitchPair {
    /// First joint: placement in the base, axis.
    x1: Pose,
    a1: Vec3,
    /// Second joint: placement in body 1, axis (body-2 axes).
    x2: Pose,
    a2: Vec3,
    /// Third joint: placement in body 2, axis (body-3 axes).
    x3: Pose,
    a3: Vec3,
    /// Foot centre in body 3.
    foot: Vec3,
    /// The common pitch axis in body-1 axes.
    u: Vec3,
    /// Offset of the foot along `u` from body 1's origin (constant for any pitch angles).
    k_u: f64,
    /// Knee offset and foot offset, both in the third joint's axes, normal to its axis.
    e_perp: Vec3,
    f_perp: Vec3,
}

impl PitchPair {
    /// Reads the geometry from the model; None when the leg is not of this kind.
    fn from_model(model: &Model, joints: &[usize; 3], foot: &Vec3) -> Option<PitchPair> {
        let [j1, j2, j3] = joints.map(|k| &model.joints[k]);
        if [j1, j2, j3].iter().any(|j| j.kind != JointKind::Revolute) {
            return None;
        }
        // The third axis seen in body 2 must be ± the second axis.
        let a3_in_2 = j3.x_tree.rot * j3.axis;
        if a3_in_2.cross(&j2.axis).norm() > 1e-12 {
            return None;
        }
        let sign = a3_in_2.dot(&j2.axis).signum();
        let u = j2.x_tree.rot * j2.axis;
        // The first axis must not be parallel to the pitch axis (it would not move the foot
        // out of the pitch plane).
        if j1.axis.cross(&u).norm() < 0.1 {
            return None;
        }
        // Along-axis part of the foot in body 2: knee offset along a2 plus the foot's offset
        // along a3 (which the knee rotation keeps).
        let d_u = j3.x_tree.trans.dot(&j2.axis) + sign * foot.dot(&j3.axis);
        let k_u = j2.x_tree.trans.dot(&u) + d_u;
        let e = j3.x_tree.rot.transpose() * j3.x_tree.trans;
        let e_perp = e - j3.axis * e.dot(&j3.axis);
        let f_perp = foot - j3.axis * foot.dot(&j3.axis);
        if e_perp.norm() < 1e-6 || f_perp.norm() < 1e-6 {
            return None;
        }
        Some(PitchPair {
            x1: j1.x_tree,
            a1: j1.axis,
            x2: j2.x_tree,
            a2: j2.axis,
            x3: j3.x_tree,
            a3: j3.axis,
            foot: *foot,
            u,
            k_u,
            e_perp,
            f_perp,
        })
    }

    /// Foot centre in the base frame for the three angles.
    fn forward(&self, q: &[f64; 3]) -> Vec3 {
        let in2 = self.x3.trans + self.x3.rot * (axis_rotation(&self.a3, q[2]) * self.foot);
        let in1 = self.x2.trans + self.x2.rot * (axis_rotation(&self.a2, q[1]) * in2);
        self.x1.trans + self.x1.rot * (axis_rotation(&self.a1, q[0]) * in1)
    }

    /// All closed-form solutions (up to four), or a reason why there is none.
    fn solve(&self, target: &Vec3, out: &mut [[f64; 3]; 4]) -> Result<usize, String> {
        // Target in the first joint's frame before its rotation.
        let p1 = self.x1.rot.transpose() * (target - self.x1.trans);
        // p1 · R(a1, q1) u = k_u  ⇔  A cos q1 + B sin q1 = C.
        let along = self.a1.dot(&self.u);
        let u_perp = self.u - self.a1 * along;
        let (a, b) = (p1.dot(&u_perp), p1.dot(&self.a1.cross(&self.u)));
        let c = self.k_u - along * p1.dot(&self.a1);
        let q1_roots = sine_cosine_roots(a, b, c).ok_or_else(|| {
            format!(
                "no angle of the first joint brings it to the leg's sideways offset {:.4} m (the target is {:.4} m from that joint's axis)",
                self.k_u,
                (p1 - self.a1 * p1.dot(&self.a1)).norm()
            )
        })?;
        let mut n = 0;
        let mut knee_reason = String::new();
        for q1 in q1_roots {
            // Foot relative to the second joint, in body-2 axes before its rotation.
            let p_leg = axis_rotation(&self.a1, q1).transpose() * p1;
            let r2 = self.x2.rot.transpose() * (p_leg - self.x2.trans);
            let r2_perp = r2 - self.a2 * r2.dot(&self.a2);
            // |e⊥ + R(a3, q3) f⊥|² = |r2⊥|²  ⇔  A3 cos q3 + B3 sin q3 = C3.
            let a3c = self.e_perp.dot(&self.f_perp);
            let b3c = self.e_perp.dot(&self.a3.cross(&self.f_perp));
            let c3 = 0.5
                * (r2_perp.norm_squared()
                    - self.e_perp.norm_squared()
                    - self.f_perp.norm_squared());
            let Some(q3_roots) = sine_cosine_roots(a3c, b3c, c3) else {
                let (le, lf) = (self.e_perp.norm(), self.f_perp.norm());
                knee_reason = format!(
                    "it is {:.4} m from the hip pitch axis; the leg spans {:.4}–{:.4} m",
                    r2_perp.norm(),
                    (le - lf).abs(),
                    le + lf
                );
                continue;
            };
            for q3 in q3_roots {
                let w2 = self.x3.trans + self.x3.rot * (axis_rotation(&self.a3, q3) * self.foot);
                let w2_perp = w2 - self.a2 * w2.dot(&self.a2);
                // R(a2, q2) w2⊥ = r2⊥: the signed angle between them about a2.
                let q2 = self
                    .a2
                    .dot(&w2_perp.cross(&r2_perp))
                    .atan2(w2_perp.dot(&r2_perp));
                out[n] = [q1, q2, q3];
                n += 1;
            }
        }
        if n == 0 {
            return Err(knee_reason);
        }
        Ok(n)
    }
}

/// The angles x with A cos x + B sin x = C: atan2(B, A) ± acos(C / √(A² + B²)); None when
/// |C| exceeds √(A² + B²) beyond rounding.
pub(crate) fn sine_cosine_roots(a: f64, b: f64, c: f64) -> Option<[f64; 2]> {
    let rho = a.hypot(b);
    if rho < 1e-12 {
        return None;
    }
    let ratio = c / rho;
    if ratio.abs() > 1.0 + 1e-12 {
        return None;
    }
    let phi = b.atan2(a);
    let delta = ratio.clamp(-1.0, 1.0).acos();
    Some([phi + delta, phi - delta])
}

/// `q` shifted by a whole number of turns to lie closest to `reference`.
fn nearest_turn(q: f64, reference: f64) -> f64 {
    q - 2.0 * PI * ((q - reference) / (2.0 * PI)).round()
}

/// Most joints a leg may have (a bound on the numeric method's work per target).
pub const MAX_LEG_JOINTS: usize = 8;

/// One leg: its foot frame, its joints from the base outward, how it is solved.
#[derive(Clone, Debug)]
pub struct Leg {
    foot: String,
    frame: usize,
    joints: Vec<usize>,
    nominal: Vec<f64>,
    lower: Vec<f64>,
    upper: Vec<f64>,
    names: Vec<String>,
    /// Rows that fix the joints a point foot leaves free (n − 3 rows of n): the directions of
    /// the Jacobian's null space at the nominal posture, held at their nominal value, so that
    /// IK has one smooth solution and its rates follow from one square system (configuration
    /// control: Seraji, "Configuration control of redundant manipulators: theory and
    /// implementation", IEEE Trans. Robotics and Automation 5(4), 1989).
    extra: DMatrix<f64>,
    pitch_pair: Option<PitchPair>,
    method: IkMethod,
}

impl Leg {
    /// Name of the foot frame.
    pub fn foot(&self) -> &str {
        &self.foot
    }
    /// Index of the foot frame in the model.
    pub fn frame(&self) -> usize {
        self.frame
    }
    /// Indices of the leg's joints (model order), from the base outward.
    pub fn joints(&self) -> &[usize] {
        &self.joints
    }
    /// Number of joints of the leg (three or more).
    pub fn n(&self) -> usize {
        self.joints.len()
    }
    /// Nominal angles of the leg's joints.
    pub fn nominal(&self) -> &[f64] {
        &self.nominal
    }
    /// Joint limits, rad (the leg's joints in order).
    pub fn limits(&self) -> (&[f64], &[f64]) {
        (&self.lower, &self.upper)
    }
    /// The method chosen for this leg.
    pub fn method(&self) -> IkMethod {
        self.method
    }
    /// Whether the leg has the structure the closed form needs.
    pub fn has_closed_form(&self) -> bool {
        self.pitch_pair.is_some()
    }
    /// The rows fixing a redundant leg's extra joints (empty for three joints).
    pub fn extra_rows(&self) -> &DMatrix<f64> {
        &self.extra
    }
}

/// Preallocated buffers for the numeric method, and its counters.
#[derive(Clone, Debug)]
pub struct IkScratch {
    ws: Workspace,
    /// Configuration with the base at the world origin, so that world = base frame.
    q: DVector<f64>,
    jac: DMatrix<f64>,
    /// Numeric solves done and Levenberg–Marquardt iterations they took (for benchmarks and
    /// reports; they do not change any answer).
    pub numeric_solves: u64,
    pub numeric_iterations: u64,
}

/// The legs of a robot, one per foot in the facts' order.
#[derive(Clone, Debug)]
pub struct Legs {
    legs: Vec<Leg>,
}

/// One run of the numeric method: the angles reached, the residual left, iterations used.
struct Descent {
    q: Vec<f64>,
    residual: f64,
    iterations: u64,
}

impl Legs {
    /// Find each foot's leg in the model, check it is a chain of three or more moving joints
    /// from the base that no other leg shares, and pick its method: the closed form when the
    /// structure fits and it reproduces the nominal posture and nearby targets, else numeric.
    pub fn new(model: &Model, facts: &RobotFacts) -> Result<Legs, PlanError> {
        if model.root != RootKind::Floating {
            return Err(PlanError(
                "the planner needs a floating-base model (a legged robot), not a fixed root".into(),
            ));
        }
        let nominal_all = facts.nominal_joints(model);
        let mut owner: Vec<Option<usize>> = vec![None; model.n_joints()];
        let mut legs = Vec::with_capacity(facts.feet.frames.len());
        let mut ws = Workspace::new(model);
        let mut jac = DMatrix::zeros(3, model.nv());
        let mut q_nom = model.neutral();
        for (k, &x) in nominal_all.iter().enumerate() {
            q_nom[7 + k] = x;
        }
        forward_kinematics(model, &mut ws, &q_nom);
        for (i, name) in facts.feet.frames.iter().enumerate() {
            let frame = model.frame_index(name).ok_or_else(|| {
                PlanError(format!(
                    "field `feet.frames`: foot '{name}' is not a frame of the model"
                ))
            })?;
            let mut chain = Vec::new();
            let mut b = model.frames[frame].body;
            while b != 0 {
                chain.push(b - 1);
                b = model.parent(b);
            }
            chain.reverse();
            if chain.len() < 3 {
                let names: Vec<&str> = chain
                    .iter()
                    .map(|&k| model.joints[k].name.as_str())
                    .collect();
                return Err(PlanError(format!(
                    "foot '{name}': its leg has {} moving joints between the base and the foot ({}); the planner needs at least 3 per leg: a point foot has three coordinates to place in space, and fewer joints reach only a curve or surface of them",
                    chain.len(),
                    if names.is_empty() {
                        "none".to_string()
                    } else {
                        names.join(", ")
                    }
                )));
            }
            if chain.len() > MAX_LEG_JOINTS {
                return Err(PlanError(format!(
                    "foot '{name}': its leg has {} moving joints between the base and the foot; the planner serves at most {MAX_LEG_JOINTS} per leg",
                    chain.len()
                )));
            }
            for &k in &chain {
                if let Some(other) = owner[k] {
                    return Err(PlanError(format!(
                        "foot '{name}' and foot '{}' share joint '{}': each foot needs its own leg",
                        facts.feet.frames[other], model.joints[k].name
                    )));
                }
                owner[k] = Some(i);
            }
            let n = chain.len();
            // The extra rows: the null space of the leg's foot Jacobian at the nominal posture.
            frame_jacobian(model, &ws, frame, &mut jac, 0, false);
            let j_leg = DMatrix::from_fn(3, n, |r, c| jac[(r, 6 + chain[c])]);
            let extra = if n == 3 {
                DMatrix::zeros(0, 3)
            } else {
                null_space_rows(&j_leg).ok_or_else(|| {
                    PlanError(format!(
                        "foot '{name}': in the nominal posture the leg's joints cannot move the foot in every direction (its Jacobian has rank < 3): {}",
                        singular_reason(model, &chain, &j_leg)
                    ))
                })?
            };
            let pitch_pair = if n == 3 {
                let joints3 = [chain[0], chain[1], chain[2]];
                PitchPair::from_model(model, &joints3, &model.frames[frame].placement.trans)
            } else {
                None
            };
            legs.push(Leg {
                foot: name.clone(),
                frame,
                nominal: chain.iter().map(|&k| nominal_all[k]).collect(),
                lower: chain.iter().map(|&k| model.joints[k].lower).collect(),
                upper: chain.iter().map(|&k| model.joints[k].upper).collect(),
                names: chain
                    .iter()
                    .map(|&k| model.joints[k].name.clone())
                    .collect(),
                joints: chain,
                extra,
                pitch_pair,
                method: IkMethod::Numeric,
            });
        }
        let mut set = Legs { legs };
        let mut scratch = set.new_scratch(model);
        for i in 0..set.legs.len() {
            if set.closed_form_self_check(model, i, &mut scratch) {
                set.legs[i].method = IkMethod::Analytic;
            }
        }
        Ok(set)
    }

    /// The closed form must give back the nominal angles for the nominal foot position, agree
    /// with the numeric method there, and reproduce nearby targets through the model's own
    /// forward kinematics.
    fn closed_form_self_check(&self, model: &Model, i: usize, scratch: &mut IkScratch) -> bool {
        let leg = &self.legs[i];
        if leg.pitch_pair.is_none() {
            return false;
        }
        let home = self.model_foot_position(model, i, &leg.nominal, scratch);
        let Ok(q) = self.solve_with(model, i, &home, IkMethod::Analytic, &leg.nominal, scratch)
        else {
            return false;
        };
        if (0..3).any(|k| (q[k] - leg.nominal[k]).abs() > 1e-9) {
            return false;
        }
        for d in [
            Vec3::new(0.01, 0.0, 0.0),
            Vec3::new(0.0, 0.01, 0.0),
            Vec3::new(0.0, 0.0, 0.01),
        ] {
            for sign in [-1.0, 1.0] {
                let target = home + d * sign;
                // A nearby target may leave the joint limits on a leg at its limit: that says
                // nothing about the closed form, so only real answers are checked.
                if let Ok(q) =
                    self.solve_with(model, i, &target, IkMethod::Analytic, &leg.nominal, scratch)
                {
                    if (self.model_foot_position(model, i, &q, scratch) - target).norm()
                        > ANALYTIC_CHECK
                    {
                        return false;
                    }
                    // The numeric method, started at the nominal posture, lands on the same
                    // branch.
                    if let Ok(qn) =
                        self.solve_with(model, i, &target, IkMethod::Numeric, &leg.nominal, scratch)
                        && (0..3).any(|k| (qn[k] - q[k]).abs() > 1e-8)
                    {
                        return false;
                    }
                }
            }
        }
        true
    }

    pub fn new_scratch(&self, model: &Model) -> IkScratch {
        IkScratch {
            ws: Workspace::new(model),
            q: model.neutral(),
            jac: DMatrix::zeros(3, model.nv()),
            numeric_solves: 0,
            numeric_iterations: 0,
        }
    }

    pub fn len(&self) -> usize {
        self.legs.len()
    }

    pub fn is_empty(&self) -> bool {
        self.legs.is_empty()
    }

    pub fn leg(&self, i: usize) -> &Leg {
        &self.legs[i]
    }

    /// Foot centre in the base frame for the leg's angles, by the model's forward kinematics
    /// (base at the origin).
    pub fn model_foot_position(
        &self,
        model: &Model,
        i: usize,
        angles: &[f64],
        scratch: &mut IkScratch,
    ) -> Vec3 {
        let leg = &self.legs[i];
        for (&joint, &angle) in leg.joints.iter().zip(angles) {
            scratch.q[7 + joint] = angle;
        }
        forward_kinematics(model, &mut scratch.ws, &scratch.q);
        frame_pose(model, &scratch.ws, leg.frame).trans
    }

    /// Joint angles putting foot `i`'s centre at `target` (base frame), with the leg's chosen
    /// method; an analytic answer that fails its check falls back to the numeric method.
    /// `seed` starts the numeric iterations (the previous solution along a trajectory).
    pub fn solve(
        &self,
        model: &Model,
        i: usize,
        target: &Vec3,
        seed: &[f64],
        scratch: &mut IkScratch,
    ) -> Result<Vec<f64>, String> {
        let leg = &self.legs[i];
        if leg.method == IkMethod::Analytic {
            match self.solve_with(model, i, target, IkMethod::Analytic, seed, scratch) {
                Ok(q) => {
                    let pair = leg.pitch_pair.as_ref().expect("analytic legs have one");
                    if (pair.forward(&[q[0], q[1], q[2]]) - target).norm() <= ANALYTIC_CHECK {
                        return Ok(q);
                    }
                }
                // Out of reach or outside the limits: the numeric method would not do better
                // (the closed form lists every solution).
                Err(e) => return Err(e),
            }
        }
        self.solve_with(model, i, target, IkMethod::Numeric, seed, scratch)
    }

    /// As [`Legs::solve`] with a given method (errors when the leg has no closed form).
    pub fn solve_with(
        &self,
        model: &Model,
        i: usize,
        target: &Vec3,
        method: IkMethod,
        seed: &[f64],
        scratch: &mut IkScratch,
    ) -> Result<Vec<f64>, String> {
        let leg = &self.legs[i];
        if !target.iter().all(|x| x.is_finite()) {
            return Err(format!("target {target:?} is not finite"));
        }
        if seed.len() != leg.n() {
            return Err(format!(
                "a seed of {} angles for a leg of {} joints",
                seed.len(),
                leg.n()
            ));
        }
        let q = match method {
            IkMethod::Analytic => self.closed_form(leg, target)?.to_vec(),
            IkMethod::Numeric => self.numeric(model, leg, target, seed, scratch)?,
        };
        check_limits(leg, &q)?;
        Ok(q)
    }

    /// The closed-form solution within the limits closest to the nominal posture.
    fn closed_form(&self, leg: &Leg, target: &Vec3) -> Result<[f64; 3], String> {
        let pair = leg
            .pitch_pair
            .as_ref()
            .ok_or_else(|| format!("foot '{}': the leg has no closed-form solution", leg.foot))?;
        let mut roots = [[0.0; 3]; 4];
        let n = pair
            .solve(target, &mut roots)
            .map_err(|why| format!("target {} is out of reach: {why}", fmt3(target)))?;
        let mut best: Option<([f64; 3], f64)> = None;
        let mut least_violation: Option<(String, f64)> = None;
        for root in roots.iter().take(n) {
            let q = [0, 1, 2].map(|k| nearest_turn(root[k], leg.nominal[k]));
            if (pair.forward(&q) - target).norm() > 1e-6 {
                continue;
            }
            if let Err(e) = check_limits(leg, &q) {
                let excess = limit_excess(leg, &q);
                if least_violation.as_ref().is_none_or(|(_, x)| excess < *x) {
                    least_violation = Some((e, excess));
                }
                continue;
            }
            let dist: f64 = (0..3).map(|k| (q[k] - leg.nominal[k]).powi(2)).sum();
            if best.is_none_or(|(_, d)| dist < d) {
                best = Some((q, dist));
            }
        }
        match (best, least_violation) {
            (Some((q, _)), _) => Ok(q),
            (None, Some((e, _))) => Err(format!("target {}: {e}", fmt3(target))),
            (None, None) => Err(format!(
                "target {} is out of reach (no closed-form root reproduces it)",
                fmt3(target)
            )),
        }
    }

    /// The numeric method: projected Levenberg–Marquardt from several deterministic seeds
    /// (the given one first, so a trajectory keeps its branch; then the nominal posture and
    /// nominal postures with one joint turned ±0.5 rad); the first seed that converges within
    /// the limits wins. Without any, the failure is explained: when the same method without
    /// limits converges, the joint limit in the way and by how much; else how far the target
    /// is out of reach.
    fn numeric(
        &self,
        model: &Model,
        leg: &Leg,
        target: &Vec3,
        seed: &[f64],
        s: &mut IkScratch,
    ) -> Result<Vec<f64>, String> {
        let n = leg.n();
        let clamp = |q: &[f64]| -> Vec<f64> {
            (0..n)
                .map(|k| q[k].clamp(leg.lower[k], leg.upper[k]))
                .collect()
        };
        let mut seeds: Vec<Vec<f64>> = vec![clamp(seed), leg.nominal.clone()];
        for k in 0..n {
            for d in [0.5, -0.5] {
                let mut q = leg.nominal.clone();
                q[k] += d;
                seeds.push(clamp(&q));
            }
        }
        s.numeric_solves += 1;
        let mut closest: Option<Descent> = None;
        for start in &seeds {
            let run = self.descend(model, leg, target, start, true, s);
            s.numeric_iterations += run.iterations;
            if run.residual < NUMERIC_TOLERANCE {
                return Ok(run.q);
            }
            if closest.as_ref().is_none_or(|c| run.residual < c.residual) {
                closest = Some(run);
            }
        }
        // Diagnosis: the same descent with the limits lifted.
        for start in &seeds[..2] {
            let free = self.descend(model, leg, target, start, false, s);
            if free.residual < NUMERIC_TOLERANCE
                && let Err(e) = check_limits(leg, &free.q)
            {
                return Err(format!("target {}: {e}", fmt3(target)));
            }
        }
        let gap = closest.as_ref().map_or(f64::INFINITY, |c| c.residual);
        if let Some(c) = closest.as_ref().filter(|c| c.residual < STALL_GAP) {
            // Stalled next to the target: the leg is at (or next to) a singular posture
            // where some direction of foot motion is lost.
            for (&joint, &angle) in leg.joints.iter().zip(&c.q) {
                s.q[7 + joint] = angle;
            }
            forward_kinematics(model, &mut s.ws, &s.q);
            frame_jacobian(model, &s.ws, leg.frame, &mut s.jac, 0, false);
            let j_leg = DMatrix::from_fn(3, n, |r, k| s.jac[(r, 6 + leg.joints[k])]);
            return Err(format!(
                "target {}: the leg stops {gap:.1e} m short of it at a singular posture: {}",
                fmt3(target),
                singular_reason(model, &leg.joints, &j_leg)
            ));
        }
        Err(format!(
            "target {} is out of reach by {gap:.4} m (the closest the leg gets within its joint limits)",
            fmt3(target)
        ))
    }

    /// One Levenberg–Marquardt descent on the square system [p* − p(q); −C (q − q_nom)] = 0
    /// (the extra rows C of a redundant leg), each step projected onto the joint limits when
    /// `limited` (a projected Levenberg–Marquardt step: Kanzow, Yamashita & Fukushima,
    /// "Levenberg–Marquardt methods with strong local convergence properties for solving
    /// nonlinear equations with convex constraints", J. Comput. Appl. Math. 172(2), 2004).
    fn descend(
        &self,
        model: &Model,
        leg: &Leg,
        target: &Vec3,
        start: &[f64],
        limited: bool,
        s: &mut IkScratch,
    ) -> Descent {
        let n = leg.n();
        let m = leg.extra.nrows();
        let cols: Vec<usize> = leg.joints.iter().map(|k| 6 + k).collect();
        let project = |q: &mut [f64]| {
            if limited {
                for ((x, lo), hi) in q.iter_mut().zip(&leg.lower).zip(&leg.upper) {
                    *x = x.clamp(*lo, *hi);
                }
            }
        };
        let residual = |q: &[f64], s: &mut IkScratch, r: &mut DVector<f64>| {
            for (&joint, &angle) in leg.joints.iter().zip(q) {
                s.q[7 + joint] = angle;
            }
            forward_kinematics(model, &mut s.ws, &s.q);
            let e = target - frame_pose(model, &s.ws, leg.frame).trans;
            for k in 0..3 {
                r[k] = e[k];
            }
            for row in 0..m {
                r[3 + row] = -(0..n)
                    .map(|c| leg.extra[(row, c)] * (q[c] - leg.nominal[c]))
                    .sum::<f64>();
            }
            r.norm()
        };
        let mut q = start.to_vec();
        project(&mut q);
        let mut r = DVector::zeros(3 + m);
        let mut r_trial = DVector::zeros(3 + m);
        let mut norm = residual(&q, s, &mut r);
        let mut a = DMatrix::zeros(3 + m, n);
        let mut trial = vec![0.0; n];
        let mut iterations = 0;
        // Levenberg–Marquardt: solve (AᵀA + μ I) Δ = Aᵀ r; shrink μ after a step that lowers
        // the residual (towards Gauss–Newton, quadratic convergence), grow it after one that
        // does not (towards a short gradient step).
        let mut mu = 1e-6;
        for _ in 0..100 {
            iterations += 1;
            frame_jacobian(model, &s.ws, leg.frame, &mut s.jac, 0, false);
            for r_ in 0..3 {
                for c in 0..n {
                    a[(r_, c)] = s.jac[(r_, cols[c])];
                }
            }
            for row in 0..m {
                for c in 0..n {
                    a[(3 + row, c)] = leg.extra[(row, c)];
                }
            }
            let ata = a.transpose() * &a;
            let atr = a.transpose() * &r;
            if norm < NUMERIC_TOLERANCE {
                // Converged: one undamped Gauss–Newton step takes the residual from the
                // tolerance to rounding level, so that the angles are as smooth in time as the
                // closed form's (finite differences of them stay clean).
                if let Some(delta) = ata.clone().lu().solve(&atr) {
                    for ((t, x), d) in trial.iter_mut().zip(&q).zip(delta.iter()) {
                        *t = x + d;
                    }
                    project(&mut trial);
                    let t_norm = residual(&trial, s, &mut r_trial);
                    if t_norm < norm {
                        q.copy_from_slice(&trial);
                    }
                }
                break;
            }
            let mut accepted = false;
            while mu < 1e12 {
                let damped = &ata + DMatrix::identity(n, n) * mu;
                let Some(delta) = damped.lu().solve(&atr) else {
                    mu *= 10.0;
                    continue;
                };
                for ((t, x), d) in trial.iter_mut().zip(&q).zip(delta.iter()) {
                    *t = x + d;
                }
                project(&mut trial);
                let t_norm = residual(&trial, s, &mut r_trial);
                if t_norm < norm {
                    q.copy_from_slice(&trial);
                    std::mem::swap(&mut r, &mut r_trial);
                    norm = t_norm;
                    mu = (mu * 0.1).max(1e-15);
                    accepted = true;
                    break;
                }
                mu *= 10.0;
            }
            if !accepted {
                break;
            }
            // The workspace now holds the accepted point (its residual was the last one
            // computed), so the Jacobian of the next round is taken there.
        }
        // Leave the workspace at the returned point for callers that read it.
        let norm = residual(&q, s, &mut r);
        Descent {
            q,
            residual: norm,
            iterations,
        }
    }
}

/// Rows spanning the null space of a 3 × n Jacobian of rank 3 (None when the rank is lower):
/// the right singular vectors of its n − 3 smallest singular values, each signed so that its
/// largest entry is positive (deterministic).
fn null_space_rows(j: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let n = j.ncols();
    // Jᵀ J is n × n symmetric; its eigenvectors for the n − 3 zero eigenvalues span the null
    // space. The symmetric eigen-decomposition is deterministic for a given matrix.
    let jtj = j.transpose() * j;
    let eig = jtj.symmetric_eigen();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| eig.eigenvalues[a].total_cmp(&eig.eigenvalues[b]));
    let scale = eig.eigenvalues.amax().max(1e-300);
    // The three kept directions must be well away from zero.
    if eig.eigenvalues[order[n - 3]] < 1e-8 * scale {
        return None;
    }
    let mut rows = DMatrix::zeros(n - 3, n);
    for (r, &k) in order.iter().take(n - 3).enumerate() {
        let v = eig.eigenvectors.column(k);
        let big = v
            .iter()
            .fold(0.0f64, |m, &x| if x.abs() > m.abs() { x } else { m });
        let sign = if big < 0.0 { -1.0 } else { 1.0 };
        for c in 0..n {
            rows[(r, c)] = sign * v[c];
        }
    }
    Some(rows)
}

/// Why a leg's 3 × n foot Jacobian is (nearly) singular, in the robot's terms: a joint whose
/// axis passes (nearly) through the foot cannot move it; otherwise the leg is stretched
/// straight or folded flat and the foot cannot move along the direction named.
pub fn singular_reason(model: &Model, joints: &[usize], j_leg: &DMatrix<f64>) -> String {
    let n = joints.len();
    // A revolute joint's column is a × r: its norm is the foot's distance from the axis.
    let norms: Vec<f64> = (0..n).map(|c| j_leg.column(c).norm()).collect();
    let longest = norms.iter().fold(0.0f64, |m, &x| m.max(x));
    if let Some(k) = (0..n)
        .find(|&k| model.joints[joints[k]].kind == JointKind::Revolute && norms[k] < 0.1 * longest)
    {
        return format!(
            "the foot is {:.4} m from the axis of joint '{}', so turning that joint barely moves it (a foot under a hip yaw axis, say); a posture that keeps the foot off that axis avoids it",
            norms[k], model.joints[joints[k]].name
        );
    }
    let svd = (j_leg * j_leg.transpose()).symmetric_eigen();
    let mut k = 0;
    for c in 1..3 {
        if svd.eigenvalues[c] < svd.eigenvalues[k] {
            k = c;
        }
    }
    let d = svd.eigenvectors.column(k);
    format!(
        "the leg is stretched straight or folded flat: its joints cannot move the foot along ({:.2}, {:.2}, {:.2}) in the base frame (smallest singular value {:.1e} m/rad)",
        d[0],
        d[1],
        d[2],
        svd.eigenvalues[k].max(0.0).sqrt()
    )
}

/// How far the angles lie outside the leg's limits, summed, rad.
fn limit_excess(leg: &Leg, q: &[f64]) -> f64 {
    (0..leg.n())
        .map(|k| (leg.lower[k] - q[k]).max(0.0) + (q[k] - leg.upper[k]).max(0.0))
        .sum()
}

/// The joint furthest outside its limits, named with the angle it would need and the excess.
fn check_limits(leg: &Leg, q: &[f64]) -> Result<(), String> {
    let mut worst: Option<(usize, f64)> = None;
    for (k, &angle) in q.iter().enumerate() {
        let excess = (leg.lower[k] - angle).max(angle - leg.upper[k]);
        if excess > LIMIT_SLACK && worst.is_none_or(|(_, x)| excess > x) {
            worst = Some((k, excess));
        }
    }
    match worst {
        None => Ok(()),
        Some((k, excess)) => {
            let angle = q[k];
            let side = if angle < leg.lower[k] {
                "below its lower limit"
            } else {
                "above its upper limit"
            };
            Err(format!(
                "it needs joint '{}' = {angle:.4} rad, outside its limits [{}, {}] by {excess:.4} rad ({side})",
                leg.names[k], leg.lower[k], leg.upper[k]
            ))
        }
    }
}

fn fmt3(v: &Vec3) -> String {
    format!("({:.4}, {:.4}, {:.4}) m in the base frame", v.x, v.y, v.z)
}
