//! Operations on the configuration manifold: the floating base lives on SE(3), so q and v have
//! different sizes and "q + v dt" is the exponential map (conventions in [`crate::model`]).

use crate::algorithms::base_pose;
use crate::model::{Model, RootKind};
use crate::spatial::{Pose, Vec3, se3_exp, se3_log};
use nalgebra::{DVector, Rotation3, UnitQuaternion};

/// Write a base placement into q's first seven entries.
pub fn set_base_pose(q: &mut DVector<f64>, pose: &Pose) {
    let quat = UnitQuaternion::from_rotation_matrix(&Rotation3::from_matrix_unchecked(pose.rot));
    q[0] = pose.trans.x;
    q[1] = pose.trans.y;
    q[2] = pose.trans.z;
    q[3] = quat.i;
    q[4] = quat.j;
    q[5] = quat.k;
    q[6] = quat.w;
}

/// q ⊕ v dt: the base moves along the body twist for dt (SE(3) exponential), joints add.
pub fn integrate(model: &Model, q: &DVector<f64>, v: &DVector<f64>, dt: f64) -> DVector<f64> {
    let mut out = q.clone();
    if model.root == RootKind::Floating {
        let w = Vec3::new(v[3], v[4], v[5]) * dt;
        let lin = Vec3::new(v[0], v[1], v[2]) * dt;
        let moved = base_pose(model, q).compose(&se3_exp(&w, &lin));
        set_base_pose(&mut out, &moved);
    }
    let (nqb, nvb) = (model.nq_base(), model.nv_base());
    for k in 0..model.n_joints() {
        out[nqb + k] = q[nqb + k] + v[nvb + k] * dt;
    }
    out
}

/// q1 ⊖ q0: the v (body twist for the base) that carries q0 to q1 in unit time, so that
/// `integrate(q0, difference(q0, q1), 1) = q1`.
pub fn difference(model: &Model, q0: &DVector<f64>, q1: &DVector<f64>) -> DVector<f64> {
    let mut out = DVector::zeros(model.nv());
    difference_into(model, q0, q1, &mut out);
    out
}

/// [`difference`] into a preallocated vector.
pub fn difference_into(
    model: &Model,
    q0: &DVector<f64>,
    q1: &DVector<f64>,
    out: &mut DVector<f64>,
) {
    if model.root == RootKind::Floating {
        let rel = base_pose(model, q0)
            .inverse()
            .compose(&base_pose(model, q1));
        let (w, lin) = se3_log(&rel);
        out.fixed_rows_mut::<3>(0).copy_from(&lin);
        out.fixed_rows_mut::<3>(3).copy_from(&w);
    }
    let (nqb, nvb) = (model.nq_base(), model.nv_base());
    for k in 0..model.n_joints() {
        out[nvb + k] = q1[nqb + k] - q0[nqb + k];
    }
}
