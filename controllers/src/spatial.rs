//! Spatial algebra in the style of Featherstone, "Rigid Body Dynamics Algorithms" (Springer,
//! 2008), chapter 2, stored as pairs of 3-vectors instead of 6-vectors so each operation is a
//! handful of 3×3 products and nothing allocates.
//!
//! Conventions: a motion vector is `(ang, lin)` = (ω, v_O) with v_O the velocity of the point
//! at the frame origin; a force vector is `(ang, lin)` = (n_O, f) with n_O the moment about the
//! origin. A [`Pose`] `(rot, trans)` places a child frame in its parent:
//! `p_parent = rot · p_child + trans`.

use nalgebra::{Matrix3, Rotation3, UnitQuaternion, Vector3};

pub type Vec3 = Vector3<f64>;
pub type Mat3 = Matrix3<f64>;

/// Skew-symmetric matrix `[a]×` with `[a]× b = a × b`.
#[inline]
pub fn skew(a: &Vec3) -> Mat3 {
    Mat3::new(0.0, -a.z, a.y, a.z, 0.0, -a.x, -a.y, a.x, 0.0)
}

/// Rigid placement of a child frame in a parent frame.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pose {
    pub rot: Mat3,
    pub trans: Vec3,
}

impl Pose {
    pub const IDENTITY: Pose = Pose {
        rot: Mat3::new(1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0),
        trans: Vec3::new(0.0, 0.0, 0.0),
    };

    pub fn new(rot: Mat3, trans: Vec3) -> Self {
        Pose { rot, trans }
    }

    /// URDF `<origin xyz rpy>`: rotation = Rz(yaw) Ry(pitch) Rx(roll) (URDF specification,
    /// fixed-axis roll-pitch-yaw).
    pub fn from_xyz_rpy(xyz: [f64; 3], rpy: [f64; 3]) -> Self {
        let rot = Rotation3::from_euler_angles(rpy[0], rpy[1], rpy[2]).into_inner();
        Pose {
            rot,
            trans: Vec3::new(xyz[0], xyz[1], xyz[2]),
        }
    }

    pub fn from_quaternion(q: &UnitQuaternion<f64>, trans: Vec3) -> Self {
        Pose {
            rot: q.to_rotation_matrix().into_inner(),
            trans,
        }
    }

    /// `self ∘ child`: placement of a grandchild given the child's placement in `self`'s child.
    #[inline]
    pub fn compose(&self, child: &Pose) -> Pose {
        Pose {
            rot: self.rot * child.rot,
            trans: self.rot * child.trans + self.trans,
        }
    }

    #[inline]
    pub fn inverse(&self) -> Pose {
        let rt = self.rot.transpose();
        Pose {
            rot: rt,
            trans: -(rt * self.trans),
        }
    }

    #[inline]
    pub fn act_point(&self, p: &Vec3) -> Vec3 {
        self.rot * p + self.trans
    }
}

/// Spatial motion vector (ω, v_O).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Motion {
    pub ang: Vec3,
    pub lin: Vec3,
}

/// Spatial force vector (n_O, f).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Force {
    pub ang: Vec3,
    pub lin: Vec3,
}

impl Motion {
    pub const ZERO: Motion = Motion {
        ang: Vec3::new(0.0, 0.0, 0.0),
        lin: Vec3::new(0.0, 0.0, 0.0),
    };

    #[inline]
    pub fn new(ang: Vec3, lin: Vec3) -> Self {
        Motion { ang, lin }
    }

    /// Express a parent-frame motion in the child frame placed by `x` (Featherstone's X·m with
    /// X = child_X_parent): ω_c = Rᵀω, v_c = Rᵀ(v_O + ω × p).
    #[inline]
    pub fn to_child(&self, x: &Pose) -> Motion {
        let rt = x.rot.transpose();
        Motion {
            ang: rt * self.ang,
            lin: rt * (self.lin + self.ang.cross(&x.trans)),
        }
    }

    /// Express a child-frame motion in the parent frame (inverse of [`Motion::to_child`]).
    #[inline]
    pub fn to_parent(&self, x: &Pose) -> Motion {
        let ang = x.rot * self.ang;
        Motion {
            ang,
            lin: x.rot * self.lin + x.trans.cross(&ang),
        }
    }

    /// Motion cross product `self ×m m` (Featherstone eq. 2.31).
    #[inline]
    pub fn cross_motion(&self, m: &Motion) -> Motion {
        Motion {
            ang: self.ang.cross(&m.ang),
            lin: self.ang.cross(&m.lin) + self.lin.cross(&m.ang),
        }
    }

    /// Force cross product `self ×f f` (Featherstone eq. 2.32).
    #[inline]
    pub fn cross_force(&self, f: &Force) -> Force {
        Force {
            ang: self.ang.cross(&f.ang) + self.lin.cross(&f.lin),
            lin: self.ang.cross(&f.lin),
        }
    }

    #[inline]
    pub fn add(&self, o: &Motion) -> Motion {
        Motion {
            ang: self.ang + o.ang,
            lin: self.lin + o.lin,
        }
    }

    #[inline]
    pub fn scale(&self, s: f64) -> Motion {
        Motion {
            ang: self.ang * s,
            lin: self.lin * s,
        }
    }
}

impl Force {
    pub const ZERO: Force = Force {
        ang: Vec3::new(0.0, 0.0, 0.0),
        lin: Vec3::new(0.0, 0.0, 0.0),
    };

    /// Express a child-frame force in the parent frame (Featherstone's X*ᵀ·f):
    /// f_p = R f, n_p = R n + p × R f.
    #[inline]
    pub fn to_parent(&self, x: &Pose) -> Force {
        let lin = x.rot * self.lin;
        Force {
            ang: x.rot * self.ang + x.trans.cross(&lin),
            lin,
        }
    }

    #[inline]
    pub fn add(&self, o: &Force) -> Force {
        Force {
            ang: self.ang + o.ang,
            lin: self.lin + o.lin,
        }
    }

    #[inline]
    pub fn sub(&self, o: &Force) -> Force {
        Force {
            ang: self.ang - o.ang,
            lin: self.lin - o.lin,
        }
    }

    /// Power pairing m·f.
    #[inline]
    pub fn dot(&self, m: &Motion) -> f64 {
        self.ang.dot(&m.ang) + self.lin.dot(&m.lin)
    }
}

/// Spatial inertia about a frame origin, by its ten parameters: mass m, first moment h = m c
/// and rotational inertia I_O about the origin (Featherstone eq. 2.63).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Inertia {
    pub mass: f64,
    pub h: Vec3,
    pub i_o: Mat3,
}

impl Inertia {
    pub const ZERO: Inertia = Inertia {
        mass: 0.0,
        h: Vec3::new(0.0, 0.0, 0.0),
        i_o: Mat3::new(0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0),
    };

    /// From mass, centre of mass `c` and inertia `i_c` about the centre of mass (parallel axis
    /// theorem: I_O = I_C − m [c]×²).
    pub fn from_com(mass: f64, c: Vec3, i_c: Mat3) -> Self {
        let cx = skew(&c);
        Inertia {
            mass,
            h: c * mass,
            i_o: i_c - cx * cx * mass,
        }
    }

    pub fn com(&self) -> Vec3 {
        if self.mass > 0.0 {
            self.h / self.mass
        } else {
            Vec3::zeros()
        }
    }

    /// Rotational inertia about the centre of mass.
    pub fn inertia_at_com(&self) -> Mat3 {
        let c = self.com();
        let cx = skew(&c);
        self.i_o + cx * cx * self.mass
    }

    /// I·m: n = I_O ω + h × v, f = m v − h × ω.
    #[inline]
    pub fn mul_motion(&self, m: &Motion) -> Force {
        Force {
            ang: self.i_o * m.ang + self.h.cross(&m.lin),
            lin: m.lin * self.mass - self.h.cross(&m.ang),
        }
    }

    /// Express an inertia given in a child frame in the parent frame (Featherstone's
    /// X*ᵀ I X with the child placed by `x`): rotate, then shift the origin by `p`:
    /// I_O' = R I Rᵀ − m[p]×² − [p]×[h']× − [h']×[p]×, h' = R h.
    #[inline]
    pub fn to_parent(&self, x: &Pose) -> Inertia {
        let h_rot = x.rot * self.h;
        let i_rot = x.rot * self.i_o * x.rot.transpose();
        let p = &x.trans;
        // With [a]×[b]× = b aᵀ − (a·b) I the shift is
        // (m p·p + 2 p·h') I − (m p + h') pᵀ − p h'ᵀ: two outer products instead of three 3×3
        // matrix products.
        let diag = self.mass * p.dot(p) + 2.0 * p.dot(&h_rot);
        let shift = Mat3::from_diagonal_element(diag)
            - (p * self.mass + h_rot) * p.transpose()
            - p * h_rot.transpose();
        Inertia {
            mass: self.mass,
            h: h_rot + p * self.mass,
            i_o: i_rot + shift,
        }
    }

    #[inline]
    pub fn add(&self, o: &Inertia) -> Inertia {
        Inertia {
            mass: self.mass + o.mass,
            h: self.h + o.h,
            i_o: self.i_o + o.i_o,
        }
    }
}

/// SO(3) exponential map (Rodrigues' formula), with a series near zero.
pub fn so3_exp(w: &Vec3) -> Mat3 {
    let theta2 = w.norm_squared();
    let theta = theta2.sqrt();
    let (a, b) = if theta < 1e-6 {
        (1.0 - theta2 / 6.0, 0.5 - theta2 / 24.0)
    } else {
        (theta.sin() / theta, (1.0 - theta.cos()) / theta2)
    };
    let wx = skew(w);
    Mat3::identity() + wx * a + wx * wx * b
}

/// SO(3) logarithm: the rotation vector ω with exp([ω]×) = R, |ω| ≤ π.
///
/// Through the unit quaternion (w, u): θ = 2 atan2(|u|, w), which stays accurate for small
/// angles where acos((tr R − 1)/2) loses half the digits.
pub fn so3_log(r: &Mat3) -> Vec3 {
    let q = UnitQuaternion::from_rotation_matrix(&Rotation3::from_matrix_unchecked(*r));
    let (w, u) = if q.w < 0.0 {
        (-q.w, -q.imag())
    } else {
        (q.w, q.imag())
    };
    let s = u.norm();
    if s < 1e-12 {
        return u * (2.0 / w);
    }
    u * (2.0 * s.atan2(w) / s)
}

/// Left Jacobian-related matrix V(ω) of SE(3): the translation of exp of a twist (ω, v) is V v,
/// V = I + (1 − cos θ)/θ² [ω]× + (θ − sin θ)/θ³ [ω]×² (e.g. Lynch & Park, "Modern Robotics",
/// 2017, eq. 3.88).
pub fn se3_v(w: &Vec3) -> Mat3 {
    let theta2 = w.norm_squared();
    let theta = theta2.sqrt();
    let (b, c) = if theta < 1e-5 {
        (0.5 - theta2 / 24.0, 1.0 / 6.0 - theta2 / 120.0)
    } else {
        (
            (1.0 - theta.cos()) / theta2,
            (theta - theta.sin()) / (theta2 * theta),
        )
    };
    let wx = skew(w);
    Mat3::identity() + wx * b + wx * wx * c
}

/// SE(3) exponential of a body twist (ω, v): the displacement it produces in unit time.
pub fn se3_exp(w: &Vec3, v: &Vec3) -> Pose {
    Pose {
        rot: so3_exp(w),
        trans: se3_v(w) * v,
    }
}

/// SE(3) logarithm: the body twist (ω, v) with exp = `x`.
pub fn se3_log(x: &Pose) -> (Vec3, Vec3) {
    let w = so3_log(&x.rot);
    let v = se3_v(&w).try_inverse().unwrap_or_else(Mat3::identity) * x.trans;
    (w, v)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pose(a: f64) -> Pose {
        Pose::from_xyz_rpy([0.3, -0.2 * a, 0.5], [0.4 * a, -0.7, 1.1])
    }

    #[test]
    fn motion_transform_round_trip() {
        let x = pose(1.0);
        let m = Motion::new(Vec3::new(0.1, 0.2, -0.3), Vec3::new(1.0, -2.0, 0.5));
        let back = m.to_child(&x).to_parent(&x);
        assert!((back.ang - m.ang).norm() < 1e-14 && (back.lin - m.lin).norm() < 1e-14);
    }

    #[test]
    fn power_is_frame_invariant() {
        // m·f must not depend on the frame both are expressed in (Featherstone §2.7).
        let x = pose(0.5);
        let m_child = Motion::new(Vec3::new(0.3, -0.1, 0.2), Vec3::new(0.4, 0.5, -0.6));
        let f_child = Force {
            ang: Vec3::new(1.0, 2.0, 3.0),
            lin: Vec3::new(-1.0, 0.5, 0.25),
        };
        let p_child = f_child.dot(&m_child);
        let p_parent = f_child.to_parent(&x).dot(&m_child.to_parent(&x));
        assert!((p_child - p_parent).abs() < 1e-13);
    }

    #[test]
    fn inertia_transform_matches_momentum() {
        // Momentum computed in the child then moved equals momentum of the moved inertia.
        let x = pose(-1.0);
        let i = Inertia::from_com(
            2.5,
            Vec3::new(0.05, -0.02, 0.1),
            Mat3::new(0.02, 0.001, 0.0, 0.001, 0.03, 0.002, 0.0, 0.002, 0.025),
        );
        let m = Motion::new(Vec3::new(0.3, -0.1, 0.2), Vec3::new(0.4, 0.5, -0.6));
        let a = i.mul_motion(&m).to_parent(&x);
        let b = i.to_parent(&x).mul_motion(&m.to_parent(&x));
        assert!((a.ang - b.ang).norm() < 1e-13 && (a.lin - b.lin).norm() < 1e-13);
        let back = i.to_parent(&x).to_parent(&x.inverse());
        assert!((back.i_o - i.i_o).norm() < 1e-13 && (back.h - i.h).norm() < 1e-14);
    }

    #[test]
    fn se3_exp_log_round_trip() {
        for k in 0..20 {
            let s = k as f64 * 0.15;
            let w = Vec3::new(0.3 * s, -0.2, 0.1 * s);
            let v = Vec3::new(1.0, -0.5 * s, 0.2);
            let x = se3_exp(&w, &v);
            let (w2, v2) = se3_log(&x);
            assert!((w - w2).norm() < 1e-12 && (v - v2).norm() < 1e-12, "{k}");
        }
    }
}
