//! The rigid-body algorithms, each a plain function of (model, workspace, q, v, …) mirroring the
//! passes in Featherstone, "Rigid Body Dynamics Algorithms" (Springer, 2008): forward
//! kinematics (ch. 4), RNEA (table 5.1), CRBA (table 6.2), Jacobians and bias accelerations of
//! frame points (ch. 3.10 / 8), centre of mass. Nothing here allocates once the [`Workspace`]
//! is built.

use crate::model::{JointKind, Model, RootKind};
use crate::spatial::{Force, Inertia, Motion, Pose, Vec3, skew};
use nalgebra::{DMatrix, DVector, Quaternion, UnitQuaternion};

/// Preallocated scratch space for one model. One per thread; reused every control step.
#[derive(Clone, Debug)]
pub struct Workspace {
    /// Placement of body i in its parent (i ≥ 1); entry 0 is the base placement in the world.
    pub x_up: Vec<Pose>,
    /// Placement of each body in the world.
    pub o_m: Vec<Pose>,
    /// Spatial velocity of each body, in its own frame.
    pub vel: Vec<Motion>,
    /// Spatial acceleration of each body, in its own frame (RNEA: includes the fictitious
    /// gravity acceleration of the root; bias pass: velocity-product terms only).
    pub acc: Vec<Motion>,
    /// Bias acceleration of each body (a = 0, no gravity), filled by
    /// [`velocities_and_bias`].
    pub acc_bias: Vec<Motion>,
    pub force: Vec<Force>,
    /// Composite inertias (CRBA), each in its body's frame.
    pub i_comp: Vec<Inertia>,
    /// Joint-space mass matrix from [`crba`].
    pub mass_matrix: DMatrix<f64>,
    /// Generalized forces from [`rnea`] / [`nonlinear_effects`].
    pub tau: DVector<f64>,
    zero_a: DVector<f64>,
}

impl Workspace {
    pub fn new(model: &Model) -> Self {
        let nb = model.n_bodies();
        let nv = model.nv();
        Workspace {
            x_up: vec![Pose::IDENTITY; nb],
            o_m: vec![Pose::IDENTITY; nb],
            vel: vec![Motion::ZERO; nb],
            acc: vec![Motion::ZERO; nb],
            acc_bias: vec![Motion::ZERO; nb],
            force: vec![Force::ZERO; nb],
            i_comp: vec![Inertia::ZERO; nb],
            mass_matrix: DMatrix::zeros(nv, nv),
            tau: DVector::zeros(nv),
            zero_a: DVector::zeros(nv),
        }
    }
}

/// Motion subspace S of a 1-DOF joint, in the child frame.
#[inline]
fn subspace(kind: JointKind, axis: &Vec3) -> Motion {
    match kind {
        JointKind::Revolute => Motion::new(*axis, Vec3::zeros()),
        JointKind::Prismatic => Motion::new(Vec3::zeros(), *axis),
    }
}

/// Placement of the base in the world from q.
pub fn base_pose(model: &Model, q: &DVector<f64>) -> Pose {
    match model.root {
        RootKind::Fixed => model.fixed_base_pose,
        RootKind::Floating => {
            let quat = UnitQuaternion::from_quaternion(Quaternion::new(q[6], q[3], q[4], q[5]));
            Pose::from_quaternion(&quat, Vec3::new(q[0], q[1], q[2]))
        }
    }
}

/// Base twist (ω, v_O) in the base frame from v (zero for a fixed root).
#[inline]
fn base_twist(model: &Model, v: &DVector<f64>) -> Motion {
    match model.root {
        RootKind::Fixed => Motion::ZERO,
        RootKind::Floating => Motion::new(Vec3::new(v[3], v[4], v[5]), Vec3::new(v[0], v[1], v[2])),
    }
}

/// Forward kinematics: placement of every body in its parent and in the world.
pub fn forward_kinematics(model: &Model, ws: &mut Workspace, q: &DVector<f64>) {
    let nqb = model.nq_base();
    let base = base_pose(model, q);
    ws.x_up[0] = base;
    ws.o_m[0] = base;
    for (k, j) in model.joints.iter().enumerate() {
        let i = k + 1;
        let qk = q[nqb + k];
        // X_up = X_tree · X_joint(q): the child frame turns about / slides along its own axis.
        ws.x_up[i] = match j.kind {
            JointKind::Revolute => {
                let (s, c) = qk.sin_cos();
                // Rodrigues: R = cos q I + sin q [a]× + (1 − cos q) a aᵀ, |a| = 1.
                let r = nalgebra::Matrix3::from_diagonal_element(c)
                    + skew(&j.axis) * s
                    + j.axis * j.axis.transpose() * (1.0 - c);
                Pose::new(j.x_tree.rot * r, j.x_tree.trans)
            }
            JointKind::Prismatic => {
                Pose::new(j.x_tree.rot, j.x_tree.trans + j.x_tree.rot * (j.axis * qk))
            }
        };
        ws.o_m[i] = ws.o_m[j.parent].compose(&ws.x_up[i]);
    }
}

/// World placement of a named frame (after [`forward_kinematics`]).
#[inline]
pub fn frame_pose(model: &Model, ws: &Workspace, frame: usize) -> Pose {
    let f = &model.frames[frame];
    ws.o_m[f.body].compose(&f.placement)
}

/// Recursive Newton–Euler inverse dynamics with gravity (Featherstone table 5.1):
/// τ = M(q) a + C(q, v) v + g(q), returned in `ws.tau`. Runs forward kinematics.
pub fn rnea<'w>(
    model: &Model,
    ws: &'w mut Workspace,
    q: &DVector<f64>,
    v: &DVector<f64>,
    a: &DVector<f64>,
) -> &'w DVector<f64> {
    forward_kinematics(model, ws, q);
    rnea_after_fk(model, ws, v, a);
    &ws.tau
}

/// h(q, v) = C(q, v) v + g(q) = RNEA(q, v, 0), returned in `ws.tau`.
pub fn nonlinear_effects<'w>(
    model: &Model,
    ws: &'w mut Workspace,
    q: &DVector<f64>,
    v: &DVector<f64>,
) -> &'w DVector<f64> {
    forward_kinematics(model, ws, q);
    let zero = std::mem::take(&mut ws.zero_a);
    rnea_after_fk(model, ws, v, &zero);
    ws.zero_a = zero;
    &ws.tau
}

/// RNEA on placements already in the workspace.
pub fn rnea_after_fk(model: &Model, ws: &mut Workspace, v: &DVector<f64>, a: &DVector<f64>) {
    let nvb = model.nv_base();
    let base_rot_t = ws.o_m[0].rot.transpose();
    // Gravity enters as a fictitious upward acceleration of the root (Featherstone §5.3).
    let a_grav = Motion::new(Vec3::zeros(), -(base_rot_t * model.gravity));
    ws.vel[0] = base_twist(model, v);
    ws.acc[0] = base_twist(model, a).add(&a_grav);
    let i0 = &model.inertias[0];
    let iv0 = i0.mul_motion(&ws.vel[0]);
    ws.force[0] = i0.mul_motion(&ws.acc[0]).add(&ws.vel[0].cross_force(&iv0));
    for (k, j) in model.joints.iter().enumerate() {
        let i = k + 1;
        let p = j.parent;
        let s = subspace(j.kind, &j.axis);
        let vj = s.scale(v[nvb + k]);
        // v_i = X v_λ + S q̇;  a_i = X a_λ + S q̈ + v_i ×m S q̇
        let vi = ws.vel[p].to_child(&ws.x_up[i]).add(&vj);
        let ai = ws.acc[p]
            .to_child(&ws.x_up[i])
            .add(&s.scale(a[nvb + k]))
            .add(&vi.cross_motion(&vj));
        // f_i = I a_i + v_i ×f I v_i
        let inertia = &model.inertias[i];
        let ivi = inertia.mul_motion(&vi);
        ws.force[i] = inertia.mul_motion(&ai).add(&vi.cross_force(&ivi));
        ws.vel[i] = vi;
        ws.acc[i] = ai;
    }
    for (k, j) in model.joints.iter().enumerate().rev() {
        let i = k + 1;
        let s = subspace(j.kind, &j.axis);
        // τ_i = Sᵀ f_i (+ armature q̈, the reflected rotor inertia);  f_λ += X*ᵀ f_i
        ws.tau[nvb + k] = ws.force[i].dot(&s) + j.armature * a[nvb + k];
        let fp = ws.force[i].to_parent(&ws.x_up[i]);
        ws.force[j.parent] = ws.force[j.parent].add(&fp);
    }
    if model.root == RootKind::Floating {
        let f0 = ws.force[0];
        ws.tau.fixed_rows_mut::<3>(0).copy_from(&f0.lin);
        ws.tau.fixed_rows_mut::<3>(3).copy_from(&f0.ang);
    }
}

/// Composite-rigid-body algorithm (Featherstone table 6.2): the joint-space mass matrix M(q) in
/// `ws.mass_matrix`, armature on the joint diagonal. Runs forward kinematics.
pub fn crba<'w>(model: &Model, ws: &'w mut Workspace, q: &DVector<f64>) -> &'w DMatrix<f64> {
    forward_kinematics(model, ws, q);
    crba_after_fk(model, ws);
    &ws.mass_matrix
}

pub fn crba_after_fk(model: &Model, ws: &mut Workspace) {
    let nvb = model.nv_base();
    ws.i_comp.copy_from_slice(&model.inertias);
    for (k, j) in model.joints.iter().enumerate().rev() {
        let i = k + 1;
        // I^c_λ += X*ᵀ I^c_i X
        let moved = ws.i_comp[i].to_parent(&ws.x_up[i]);
        ws.i_comp[j.parent] = ws.i_comp[j.parent].add(&moved);
    }
    let m = &mut ws.mass_matrix;
    for (k, jk) in model.joints.iter().enumerate() {
        let i = k + 1;
        let col = nvb + k;
        // F = I^c_i S_i, walked up to the root: M_ij = S_jᵀ F
        let mut f = ws.i_comp[i].mul_motion(&subspace(jk.kind, &jk.axis));
        m[(col, col)] = f.dot(&subspace(jk.kind, &jk.axis)) + jk.armature;
        let mut b = i;
        while b != 0 {
            f = f.to_parent(&ws.x_up[b]);
            b = model.parent(b);
            if b == 0 {
                if model.root == RootKind::Floating {
                    for r in 0..3 {
                        m[(r, col)] = f.lin[r];
                        m[(col, r)] = f.lin[r];
                        m[(3 + r, col)] = f.ang[r];
                        m[(col, 3 + r)] = f.ang[r];
                    }
                }
            } else {
                let jb = &model.joints[b - 1];
                let row = nvb + b - 1;
                let val = f.dot(&subspace(jb.kind, &jb.axis));
                m[(row, col)] = val;
                m[(col, row)] = val;
            }
        }
    }
    // Entries between joints on different branches are never written: they stay at the zero
    // the workspace was built with.
    if model.root == RootKind::Floating {
        // Base block of the composite inertia of the whole tree, in [lin, ang] order:
        // [[m I, −[h]×], [[h]×, I_O]].
        let ic = &ws.i_comp[0];
        let hx = skew(&ic.h);
        for r in 0..3 {
            for c in 0..3 {
                m[(r, c)] = if r == c { ic.mass } else { 0.0 };
                m[(r, 3 + c)] = -hx[(r, c)];
                m[(3 + r, c)] = hx[(r, c)];
                m[(3 + r, 3 + c)] = ic.i_o[(r, c)];
            }
        }
    }
}

/// Spatial velocities and the bias accelerations (a = 0, gravity off) of every body, for
/// J̇v terms. Needs forward kinematics.
pub fn velocities_and_bias(model: &Model, ws: &mut Workspace, v: &DVector<f64>) {
    let nvb = model.nv_base();
    ws.vel[0] = base_twist(model, v);
    ws.acc_bias[0] = Motion::ZERO;
    for (k, j) in model.joints.iter().enumerate() {
        let i = k + 1;
        let vj = subspace(j.kind, &j.axis).scale(v[nvb + k]);
        let vi = ws.vel[j.parent].to_child(&ws.x_up[i]).add(&vj);
        ws.acc_bias[i] = ws.acc_bias[j.parent]
            .to_child(&ws.x_up[i])
            .add(&vi.cross_motion(&vj));
        ws.vel[i] = vi;
    }
}

/// World-frame linear velocity of a frame's origin (after [`velocities_and_bias`]).
pub fn frame_velocity(model: &Model, ws: &Workspace, frame: usize) -> Vec3 {
    let f = &model.frames[frame];
    let vb = &ws.vel[f.body];
    let r = f.placement.trans;
    ws.o_m[f.body].rot * (vb.lin + vb.ang.cross(&r))
}

/// J̇v of a frame origin: its classical acceleration in world axes when v̇ = 0
/// (Featherstone eq. 2.41: a_point = a_O + α × r + ω × (v_O + ω × r)). Needs
/// [`velocities_and_bias`].
pub fn frame_bias_acceleration(model: &Model, ws: &Workspace, frame: usize) -> Vec3 {
    let f = &model.frames[frame];
    let vb = &ws.vel[f.body];
    let ab = &ws.acc_bias[f.body];
    let r = f.placement.trans;
    let acc = ab.lin + ab.ang.cross(&r) + vb.ang.cross(&(vb.lin + vb.ang.cross(&r)));
    ws.o_m[f.body].rot * acc
}

/// J̇v of the ground contact point of a sphere foot whose centre is the frame's origin: the
/// point c + d with d = −r n fixed in the world (r the radius, n the ground normal), so
/// ṗ = v_c + ω × d and p̈ = a_c + α × d — no ω × (ω × d) term, because the contact point is not a
/// material point of the sphere: it stays at c − r n while the sphere rolls (the rolling
/// constraint of a sphere on a plane; e.g. Murray, Li & Sastry, "A Mathematical Introduction to
/// Robotic Manipulation", CRC 1994, §5.2, rolling contact). Needs [`velocities_and_bias`].
pub fn contact_point_bias_acceleration(
    model: &Model,
    ws: &Workspace,
    frame: usize,
    offset: &Vec3,
) -> Vec3 {
    let f = &model.frames[frame];
    let alpha = ws.o_m[f.body].rot * ws.acc_bias[f.body].ang;
    frame_bias_acceleration(model, ws, frame) + alpha.cross(offset)
}

/// World-aligned translational Jacobian of the point p = frame origin + `offset` (world),
/// rigidly attached to the frame's body at this configuration, into rows `row0..row0+3` of
/// `out`: J_p = J_o + [−offset]× J_ω, i.e. ṗ = v_o + ω × offset. `scratch` (6 × nv) holds the
/// frame's full Jacobian.
pub fn point_jacobian(
    model: &Model,
    ws: &Workspace,
    frame: usize,
    offset: &Vec3,
    scratch: &mut DMatrix<f64>,
    out: &mut DMatrix<f64>,
    row0: usize,
) {
    frame_jacobian(model, ws, frame, scratch, 0, true);
    for c in 0..out.ncols() {
        let lin = Vec3::new(scratch[(0, c)], scratch[(1, c)], scratch[(2, c)]);
        let ang = Vec3::new(scratch[(3, c)], scratch[(4, c)], scratch[(5, c)]);
        let p = lin + ang.cross(offset);
        for r in 0..3 {
            out[(row0 + r, c)] = p[r];
        }
    }
}

/// The same translational Jacobian as [`point_jacobian`], written as three contiguous columns
/// of a column-major nv × 3 block (`out[r * nv + c]` = row r, v column c; J_pᵀ, as the laws
/// stack it), without the 6 × nv scratch: columns outside the frame's chain are zeroed.
pub fn point_jacobian_transposed(
    model: &Model,
    ws: &Workspace,
    frame: usize,
    offset: &Vec3,
    out: &mut [f64],
) {
    let nv = model.nv();
    out[..3 * nv].fill(0.0);
    let f = &model.frames[frame];
    let p = ws.o_m[f.body].act_point(&f.placement.trans);
    point_jacobian_columns(model, ws, f.body, &p, |col, lin, ang| {
        let v = lin + ang.cross(offset);
        for r in 0..3 {
            out[r * nv + col] = v[r];
        }
    });
}

/// The v columns a frame's Jacobian can touch: the base's (0..6 floating) and the joints on its
/// chain to the root, ascending.
pub fn frame_support(model: &Model, frame: usize) -> Vec<usize> {
    let nvb = model.nv_base();
    let mut cols: Vec<usize> = (0..nvb).collect();
    let mut chain = Vec::new();
    let mut b = model.frames[frame].body;
    while b != 0 {
        chain.push(nvb + b - 1);
        b = model.joints[b - 1].parent;
    }
    chain.sort_unstable();
    cols.extend(chain);
    cols
}

/// World-aligned Jacobian of a frame (after forward kinematics): rows `row0..row0+3` of `out`
/// get the translational part of the frame origin, and, when `angular` is set, rows
/// `row0+3..row0+6` the rotational part. Columns outside the frame's chain are zeroed.
pub fn frame_jacobian(
    model: &Model,
    ws: &Workspace,
    frame: usize,
    out: &mut DMatrix<f64>,
    row0: usize,
    angular: bool,
) {
    let f = &model.frames[frame];
    let p = ws.o_m[f.body].act_point(&f.placement.trans);
    let rows = if angular { 6 } else { 3 };
    for r in row0..row0 + rows {
        for c in 0..out.ncols() {
            out[(r, c)] = 0.0;
        }
    }
    point_jacobian_columns(model, ws, f.body, &p, |col, lin, ang| {
        for r in 0..3 {
            out[(row0 + r, col)] = lin[r];
            if angular {
                out[(row0 + 3 + r, col)] = ang[r];
            }
        }
    });
}

/// Calls `put(column, linear, angular)` for every v column that moves a point `p` (world)
/// rigidly attached to `body`.
fn point_jacobian_columns(
    model: &Model,
    ws: &Workspace,
    body: usize,
    p: &Vec3,
    mut put: impl FnMut(usize, Vec3, Vec3),
) {
    let nvb = model.nv_base();
    let mut b = body;
    while b != 0 {
        let j = &model.joints[b - 1];
        let a_w = ws.o_m[b].rot * j.axis;
        let (lin, ang) = match j.kind {
            JointKind::Revolute => (a_w.cross(&(p - ws.o_m[b].trans)), a_w),
            JointKind::Prismatic => (a_w, Vec3::zeros()),
        };
        put(nvb + b - 1, lin, ang);
        b = j.parent;
    }
    if model.root == RootKind::Floating {
        // ṗ = R v_b + (R ω_b) × (p − p_b): linear columns R, angular columns −[p − p_b]× R.
        let rot = ws.o_m[0].rot;
        let r = p - ws.o_m[0].trans;
        let lin_ang = -skew(&r) * rot;
        for c in 0..3 {
            put(c, rot.column(c).into(), Vec3::zeros());
            put(3 + c, lin_ang.column(c).into(), rot.column(c).into());
        }
    }
}

/// Centre of mass of the whole robot in the world (after forward kinematics).
pub fn center_of_mass(model: &Model, ws: &Workspace) -> Vec3 {
    let mut first_moment = Vec3::zeros();
    let mut mass = 0.0;
    for (b, inertia) in model.inertias.iter().enumerate() {
        first_moment += ws.o_m[b].act_point(&inertia.com()) * inertia.mass;
        mass += inertia.mass;
    }
    first_moment / mass
}

/// Jacobian of the centre of mass, 3 × nv, into `out` (after forward kinematics).
pub fn com_jacobian(model: &Model, ws: &Workspace, out: &mut DMatrix<f64>) {
    out.fill(0.0);
    let total = model.total_mass();
    for (b, inertia) in model.inertias.iter().enumerate() {
        if inertia.mass == 0.0 {
            continue;
        }
        let c = ws.o_m[b].act_point(&inertia.com());
        let w = inertia.mass / total;
        point_jacobian_columns(model, ws, b, &c, |col, lin, _| {
            for r in 0..3 {
                out[(r, col)] += w * lin[r];
            }
        });
    }
}

/// Total linear momentum and angular momentum about the world origin, in world axes (after
/// forward kinematics and [`velocities_and_bias`]).
pub fn momentum_world(model: &Model, ws: &Workspace) -> (Vec3, Vec3) {
    let mut lin = Vec3::zeros();
    let mut ang = Vec3::zeros();
    for (b, inertia) in model.inertias.iter().enumerate() {
        let f = inertia.mul_motion(&ws.vel[b]);
        // Move the body-frame momentum to the world frame.
        let fw = f.to_parent(&ws.o_m[b]);
        lin += fw.lin;
        ang += fw.ang;
    }
    (lin, ang)
}

/// Forward dynamics v̇ = M⁻¹(τ − h) by Cholesky. For checks and tools, not the control path:
/// it allocates the factor.
pub fn forward_dynamics(
    model: &Model,
    ws: &mut Workspace,
    q: &DVector<f64>,
    v: &DVector<f64>,
    tau: &DVector<f64>,
) -> Option<DVector<f64>> {
    nonlinear_effects(model, ws, q, v);
    crba_after_fk(model, ws);
    let rhs = tau - &ws.tau;
    ws.mass_matrix.clone().cholesky().map(|c| c.solve(&rhs))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::configuration::{difference, integrate};
    use crate::model::{Model, RootKind};
    use crate::test_robots::{TWIG, planar_arm};

    /// splitmix64: a tiny deterministic generator for test states.
    struct Rng(u64);
    impl Rng {
        fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^= z >> 31;
            lo + (hi - lo) * ((z >> 11) as f64 / (1u64 << 53) as f64)
        }
    }

    fn random_state(model: &Model, rng: &mut Rng) -> (DVector<f64>, DVector<f64>, DVector<f64>) {
        let mut q = model.neutral();
        let nqb = model.nq_base();
        if model.root == RootKind::Floating {
            for k in 0..3 {
                q[k] = rng.uniform(-1.0, 1.0);
            }
            let quat = nalgebra::Vector4::from_fn(|_, _| rng.uniform(-1.0, 1.0)).normalize();
            for k in 0..4 {
                q[3 + k] = quat[k];
            }
        }
        for (k, j) in model.joints.iter().enumerate() {
            q[nqb + k] = rng.uniform(j.lower.max(-3.0), j.upper.min(3.0));
        }
        let v = DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0));
        let a = DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0));
        (q, v, a)
    }

    fn twig() -> Model {
        Model::from_urdf_str(TWIG, RootKind::Floating).unwrap()
    }

    #[test]
    fn loader_merges_fixed_links_and_orders_joints() {
        let m = twig();
        assert_eq!(m.joint_names(), vec!["a_turn", "b_turn", "slide", "spin"]);
        assert_eq!(m.nq(), 11);
        assert_eq!(m.nv(), 10);
        assert!((m.total_mass() - (3.0 + 0.7 + 0.4 + 0.05 + 0.9 + 1.2 + 0.3)).abs() < 1e-12);
        let tip = &m.frames[m.frame_index("tip").unwrap()];
        assert_eq!(m.body_names[tip.body], "arm_b");
        assert!((tip.placement.trans - Vec3::new(0.0, 0.0, -0.25)).norm() < 1e-15);
        assert!(m.joints[3].lower.is_infinite());
    }

    #[test]
    fn mass_matrix_is_symmetric_positive_definite_and_consistent_with_rnea() {
        let model = twig();
        let mut ws = Workspace::new(&model);
        let mut rng = Rng(7);
        for _ in 0..25 {
            let (q, v, a) = random_state(&model, &mut rng);
            let m = crba(&model, &mut ws, &q).clone();
            assert!((&m - m.transpose()).amax() < 1e-14);
            assert!(m.clone().cholesky().is_some(), "M not positive definite");
            let h = nonlinear_effects(&model, &mut ws, &q, &v).clone();
            let tau = rnea(&model, &mut ws, &q, &v, &a).clone();
            // M a + h = RNEA(q, v, a)
            let err = (&m * &a + &h - &tau).amax();
            assert!(err < 1e-12 * (1.0 + tau.amax()), "M a + h - rnea = {err}");
        }
    }

    #[test]
    fn armature_adds_to_the_joint_diagonal_only() {
        let mut model = twig();
        let mut ws = Workspace::new(&model);
        let q = random_state(&model, &mut Rng(3)).0;
        let m0 = crba(&model, &mut ws, &q).clone();
        for (k, j) in model.joints.iter_mut().enumerate() {
            j.armature = 0.01 * (k + 1) as f64;
        }
        let m1 = crba(&model, &mut ws, &q).clone();
        let mut diff = m1 - m0;
        for k in 0..model.n_joints() {
            assert!((diff[(6 + k, 6 + k)] - 0.01 * (k + 1) as f64).abs() < 1e-15);
            diff[(6 + k, 6 + k)] = 0.0;
        }
        assert!(diff.amax() < 1e-15);
    }

    #[test]
    fn jacobians_and_bias_match_finite_differences() {
        let model = twig();
        let mut ws = Workspace::new(&model);
        let mut rng = Rng(11);
        let nv = model.nv();
        let mut jac = DMatrix::zeros(6, nv);
        let mut jac_p = DMatrix::zeros(6, nv);
        let mut jac_m = DMatrix::zeros(6, nv);
        let eps = 1e-6;
        for _ in 0..10 {
            let (q, v, _) = random_state(&model, &mut rng);
            for frame in 0..model.frames.len() {
                forward_kinematics(&model, &mut ws, &q);
                frame_jacobian(&model, &ws, frame, &mut jac, 0, true);
                velocities_and_bias(&model, &mut ws, &v);
                let bias = frame_bias_acceleration(&model, &ws, frame);
                let vel = frame_velocity(&model, &ws, frame);
                let pose0 = frame_pose(&model, &ws, frame);
                let qp = integrate(&model, &q, &v, eps);
                let qm = integrate(&model, &q, &v, -eps);
                forward_kinematics(&model, &mut ws, &qp);
                let pp = frame_pose(&model, &ws, frame);
                frame_jacobian(&model, &ws, frame, &mut jac_p, 0, true);
                forward_kinematics(&model, &mut ws, &qm);
                let pm = frame_pose(&model, &ws, frame);
                frame_jacobian(&model, &ws, frame, &mut jac_m, 0, true);
                let jv = &jac * &v;
                let fd_lin = (pp.trans - pm.trans) / (2.0 * eps);
                let fd_ang = crate::spatial::so3_log(&(pp.rot * pm.rot.transpose())) / (2.0 * eps);
                let lin: Vec3 = jv.fixed_rows::<3>(0).into();
                let ang: Vec3 = jv.fixed_rows::<3>(3).into();
                assert!(
                    (lin - fd_lin).norm() < 1e-7,
                    "frame {frame} lin {}",
                    (lin - fd_lin).norm()
                );
                assert!(
                    (ang - fd_ang).norm() < 1e-7,
                    "frame {frame} ang {ang} {fd_ang}"
                );
                assert!((lin - vel).norm() < 1e-12);
                let _ = pose0;
                // J̇ v = d/dt (J v) along the motion with v̇ = 0.
                let fd_bias: Vec3 = ((&jac_p * &v - &jac_m * &v) / (2.0 * eps))
                    .fixed_rows::<3>(0)
                    .into();
                assert!(
                    (bias - fd_bias).norm() < 1e-6 * (1.0 + bias.norm()),
                    "frame {frame} bias"
                );
            }
        }
    }

    #[test]
    fn com_jacobian_matches_finite_differences() {
        let model = twig();
        let mut ws = Workspace::new(&model);
        let (q, v, _) = random_state(&model, &mut Rng(5));
        forward_kinematics(&model, &mut ws, &q);
        let mut jc = DMatrix::zeros(3, model.nv());
        com_jacobian(&model, &ws, &mut jc);
        let eps = 1e-6;
        forward_kinematics(&model, &mut ws, &integrate(&model, &q, &v, eps));
        let cp = center_of_mass(&model, &ws);
        forward_kinematics(&model, &mut ws, &integrate(&model, &q, &v, -eps));
        let cm = center_of_mass(&model, &ws);
        let fd = (cp - cm) / (2.0 * eps);
        let jv: Vec3 = (&jc * &v).fixed_rows::<3>(0).into();
        assert!((jv - fd).norm() < 1e-8);
    }

    #[test]
    fn momentum_is_conserved_without_gravity() {
        // Joint torques are internal: with no gravity and no contact, d/dt of the total
        // momentum along the forward-dynamics motion must vanish (Newton–Euler for the whole
        // system). Central differences of the momentum along (q ⊕ ±ε v, v ± ε v̇).
        let mut model = twig();
        model.gravity = Vec3::zeros();
        let mut ws = Workspace::new(&model);
        let mut rng = Rng(21);
        for _ in 0..10 {
            let (q, v, _) = random_state(&model, &mut rng);
            let mut tau = DVector::from_fn(model.nv(), |_, _| rng.uniform(-5.0, 5.0));
            tau.rows_mut(0, 6).fill(0.0);
            let vdot = forward_dynamics(&model, &mut ws, &q, &v, &tau).unwrap();
            let eps = 1e-5;
            let mut momentum = |sign: f64| {
                let qs = integrate(&model, &q, &v, sign * eps);
                let vs = &v + &vdot * (sign * eps);
                forward_kinematics(&model, &mut ws, &qs);
                velocities_and_bias(&model, &mut ws, &vs);
                momentum_world(&model, &ws)
            };
            let (lp, ap) = momentum(1.0);
            let (lm, am) = momentum(-1.0);
            let rate_lin = (lp - lm).norm() / (2.0 * eps);
            let rate_ang = (ap - am).norm() / (2.0 * eps);
            assert!(
                rate_lin < 1e-6 && rate_ang < 1e-6,
                "dp/dt {rate_lin}, dL/dt {rate_ang}"
            );
        }
    }

    #[test]
    fn integrate_and_difference_are_inverse() {
        let model = twig();
        let mut rng = Rng(9);
        for _ in 0..10 {
            let (q, v, _) = random_state(&model, &mut rng);
            let q1 = integrate(&model, &q, &v, 0.7);
            let d = difference(&model, &q, &q1);
            assert!((d - &v * 0.7).amax() < 1e-10);
        }
    }

    #[test]
    fn planar_arm_mass_matrix_and_bias_match_the_textbook() {
        // Spong, Hutchinson & Vidyasagar, "Robot Modeling and Control" (2006), §7.3.2:
        // d11 = m1 lc1² + m2 (l1² + lc2² + 2 l1 lc2 cos q2) + I1 + I2,
        // d12 = m2 (lc2² + l1 lc2 cos q2) + I2, d22 = m2 lc2² + I2;
        // c1 = −m2 l1 lc2 sin q2 (2 q̇1 q̇2 + q̇2²), c2 = m2 l1 lc2 sin q2 q̇1²;
        // g1 = (m1 lc1 + m2 l1) g cos q1 + m2 lc2 g cos(q1 + q2), g2 = m2 lc2 g cos(q1 + q2)
        // with gravity along −y of the arm's plane.
        let (l1, lc1, lc2, m1, m2, i1, i2) = (0.6, 0.25, 0.3, 2.0, 1.3, 0.05, 0.03);
        let mut model =
            Model::from_urdf_str(&planar_arm(l1, lc1, lc2, m1, m2, i1, i2), RootKind::Fixed)
                .unwrap();
        let g = 9.81;
        model.gravity = Vec3::new(0.0, -g, 0.0);
        let mut ws = Workspace::new(&model);
        let mut rng = Rng(1);
        for _ in 0..20 {
            let q = DVector::from_fn(2, |_, _| rng.uniform(-3.0, 3.0));
            let v = DVector::from_fn(2, |_, _| rng.uniform(-3.0, 3.0));
            let m = crba(&model, &mut ws, &q).clone();
            let c2 = q[1].cos();
            let d11 = m1 * lc1 * lc1 + m2 * (l1 * l1 + lc2 * lc2 + 2.0 * l1 * lc2 * c2) + i1 + i2;
            let d12 = m2 * (lc2 * lc2 + l1 * lc2 * c2) + i2;
            let d22 = m2 * lc2 * lc2 + i2;
            assert!((m[(0, 0)] - d11).abs() < 1e-12 && (m[(0, 1)] - d12).abs() < 1e-12);
            assert!((m[(1, 0)] - d12).abs() < 1e-12 && (m[(1, 1)] - d22).abs() < 1e-12);
            let hh = -m2 * l1 * lc2 * q[1].sin();
            let c = [hh * (2.0 * v[0] * v[1] + v[1] * v[1]), -hh * v[0] * v[0]];
            let gr = [
                (m1 * lc1 + m2 * l1) * g * q[0].cos() + m2 * lc2 * g * (q[0] + q[1]).cos(),
                m2 * lc2 * g * (q[0] + q[1]).cos(),
            ];
            let h = nonlinear_effects(&model, &mut ws, &q, &v);
            assert!((h[0] - c[0] - gr[0]).abs() < 1e-11 && (h[1] - c[1] - gr[1]).abs() < 1e-11);
        }
    }
}
