//! Trajectory building blocks: polynomial pieces of a 3-D path (base and feet) and the quintic
//! Hermite interpolation of the joint knots.
//!
//! Every moving piece starts and ends with zero velocity and zero acceleration, or joins a piece
//! with the same velocity and zero acceleration, so a path assembled from them has continuous
//! acceleration at every joint of two pieces (C²): minimum-jerk rest-to-rest moves (Flash &
//! Hogan, "The coordination of arm movements: an experimentally confirmed mathematical model",
//! J. Neuroscience 1985), a swing bump 64 h s³(1 − s)³ (zero value, slope and curvature at both
//! ends, peak h at s = ½), and speed ramps with a smoothstep velocity profile.

use gripsweep_controllers::spatial::Vec3;

/// Highest power of τ in a piece.
const DEGREE: usize = 6;

/// p(t) = Σ_k c_k τ^k, τ = t − t0, on [t0, t1]. Coefficients in world axes.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Piece {
    pub t0: f64,
    pub t1: f64,
    pub c: [Vec3; DEGREE + 1],
}

impl Piece {
    /// Rest at `p` over [t0, t1].
    pub fn hold(t0: f64, t1: f64, p: Vec3) -> Piece {
        let mut c = [Vec3::zeros(); DEGREE + 1];
        c[0] = p;
        Piece { t0, t1, c }
    }

    /// Minimum-jerk move from rest at `p0` to rest at `p1`:
    /// p = p0 + Δ (10 s³ − 15 s⁴ + 6 s⁵), s = τ / T (Flash & Hogan 1985).
    pub fn min_jerk(t0: f64, t1: f64, p0: Vec3, p1: Vec3) -> Piece {
        let mut piece = Self::hold(t0, t1, p0);
        piece.add_min_jerk(p1 - p0);
        piece
    }

    /// Swing of a foot from rest at `p0` to rest at `p1`, lifted by `height` along the unit
    /// `lift` direction: p0 + Δ (10 s³ − 15 s⁴ + 6 s⁵) + lift · 64 h s³(1 − s)³, where
    /// 64 s³(1 − s)³ = 64 (s³ − 3 s⁴ + 3 s⁵ − s⁶) peaks at 1 for s = ½ and has zero slope and
    /// curvature at both ends.
    pub fn swing(t0: f64, t1: f64, p0: Vec3, p1: Vec3, lift: Vec3, height: f64) -> Piece {
        let mut piece = Self::min_jerk(t0, t1, p0, p1);
        let t = t1 - t0;
        let b = lift * (64.0 * height);
        piece.c[3] += b / t.powi(3);
        piece.c[4] += b * (-3.0 / t.powi(4));
        piece.c[5] += b * (3.0 / t.powi(5));
        piece.c[6] += b * (-1.0 / t.powi(6));
        piece
    }

    /// From rest at `p0`, speed up along `velocity` (the final velocity) with the smoothstep
    /// speed profile ṗ = V (3 s² − 2 s³), whose acceleration 6 V (s − s²)/T is zero at both
    /// ends: p = p0 + V T (s³ − s⁴/2).
    pub fn ramp_up(t0: f64, t1: f64, p0: Vec3, velocity: Vec3) -> Piece {
        let t = t1 - t0;
        let mut piece = Self::hold(t0, t1, p0);
        piece.c[3] = velocity / (t * t);
        piece.c[4] = velocity * (-0.5 / t.powi(3));
        piece
    }

    /// Constant velocity from `p0`.
    pub fn cruise(t0: f64, t1: f64, p0: Vec3, velocity: Vec3) -> Piece {
        let mut piece = Self::hold(t0, t1, p0);
        piece.c[1] = velocity;
        piece
    }

    /// From `velocity` at `p0` down to rest, the mirror of [`Piece::ramp_up`]:
    /// ṗ = V (1 − 3 s² + 2 s³), p = p0 + V T (s − s³ + s⁴/2).
    pub fn ramp_down(t0: f64, t1: f64, p0: Vec3, velocity: Vec3) -> Piece {
        let t = t1 - t0;
        let mut piece = Self::hold(t0, t1, p0);
        piece.c[1] = velocity;
        piece.c[3] = velocity * (-1.0 / (t * t));
        piece.c[4] = velocity * (0.5 / t.powi(3));
        piece
    }

    fn add_min_jerk(&mut self, delta: Vec3) {
        let t = self.t1 - self.t0;
        self.c[3] += delta * (10.0 / t.powi(3));
        self.c[4] += delta * (-15.0 / t.powi(4));
        self.c[5] += delta * (6.0 / t.powi(5));
    }

    /// Whether the piece stands still (only the constant term).
    pub fn is_constant(&self) -> bool {
        self.c[1..].iter().all(|c| *c == Vec3::zeros())
    }

    /// Position, velocity and acceleration at `t` (Horner's scheme on τ = t − t0).
    #[inline]
    pub fn eval(&self, t: f64) -> (Vec3, Vec3, Vec3) {
        let tau = t - self.t0;
        let mut p = self.c[DEGREE];
        let mut v = self.c[DEGREE] * DEGREE as f64;
        let mut a = self.c[DEGREE] * (DEGREE * (DEGREE - 1)) as f64;
        for k in (0..DEGREE).rev() {
            p = p * tau + self.c[k];
            if k >= 1 {
                v = v * tau + self.c[k] * k as f64;
            }
            if k >= 2 {
                a = a * tau + self.c[k] * (k * (k - 1)) as f64;
            }
        }
        (p, v, a)
    }

    /// End position.
    pub fn end(&self) -> Vec3 {
        self.eval(self.t1).0
    }
}

/// Index of the piece that covers `t` in a contiguous, sorted list (the first whose end is not
/// before `t`; the last one past the end). No allocation.
#[inline]
pub(crate) fn piece_at(pieces: &[Piece], t: f64) -> usize {
    pieces
        .partition_point(|p| p.t1 < t)
        .min(pieces.len().saturating_sub(1))
}

/// Quintic Hermite basis on u ∈ [0, 1] and its first two derivatives in u: the unique quintic
/// with given value, slope and curvature at both ends (e.g. de Boor, "A Practical Guide to
/// Splines", 1978, ch. 1 on Hermite interpolation). Order of the six weights: p0, h v0, h² a0,
/// h² a1, h v1, p1.
#[inline]
pub(crate) fn quintic_hermite(u: f64) -> [[f64; 6]; 3] {
    let u2 = u * u;
    let u3 = u2 * u;
    let u4 = u3 * u;
    let u5 = u4 * u;
    [
        [
            1.0 - 10.0 * u3 + 15.0 * u4 - 6.0 * u5,
            u - 6.0 * u3 + 8.0 * u4 - 3.0 * u5,
            0.5 * (u2 - 3.0 * u3 + 3.0 * u4 - u5),
            0.5 * (u3 - 2.0 * u4 + u5),
            -4.0 * u3 + 7.0 * u4 - 3.0 * u5,
            10.0 * u3 - 15.0 * u4 + 6.0 * u5,
        ],
        [
            -30.0 * u2 + 60.0 * u3 - 30.0 * u4,
            1.0 - 18.0 * u2 + 32.0 * u3 - 15.0 * u4,
            0.5 * (2.0 * u - 9.0 * u2 + 12.0 * u3 - 5.0 * u4),
            0.5 * (3.0 * u2 - 8.0 * u3 + 5.0 * u4),
            -12.0 * u2 + 28.0 * u3 - 15.0 * u4,
            30.0 * u2 - 60.0 * u3 + 30.0 * u4,
        ],
        [
            -60.0 * u + 180.0 * u2 - 120.0 * u3,
            -36.0 * u + 96.0 * u2 - 60.0 * u3,
            0.5 * (2.0 - 18.0 * u + 36.0 * u2 - 20.0 * u3),
            0.5 * (6.0 * u - 24.0 * u2 + 20.0 * u3),
            -24.0 * u + 84.0 * u2 - 60.0 * u3,
            60.0 * u - 180.0 * u2 + 120.0 * u3,
        ],
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fd_check(piece: &Piece) {
        let eps = 1e-5;
        for k in 0..=20 {
            let t = piece.t0 + (piece.t1 - piece.t0) * (0.02 + 0.96 * k as f64 / 20.0);
            let (_, v, a) = piece.eval(t);
            let (pp, vp, _) = piece.eval(t + eps);
            let (pm, vm, _) = piece.eval(t - eps);
            assert!(((pp - pm) / (2.0 * eps) - v).norm() < 1e-7 * (1.0 + v.norm()));
            assert!(((vp - vm) / (2.0 * eps) - a).norm() < 1e-6 * (1.0 + a.norm()));
        }
    }

    #[test]
    fn pieces_meet_their_end_conditions() {
        let p0 = Vec3::new(0.1, -0.2, 0.3);
        let p1 = Vec3::new(0.4, 0.1, 0.2);
        let lift = Vec3::new(0.0, 0.0, 1.0);
        let swing = Piece::swing(1.0, 1.5, p0, p1, lift, 0.07);
        let (ps, vs, as_) = swing.eval(1.0);
        let (pe, ve, ae) = swing.eval(1.5);
        assert!((ps - p0).norm() < 1e-15 && vs.norm() < 1e-15 && as_.norm() < 1e-15);
        assert!((pe - p1).norm() < 1e-13 && ve.norm() < 1e-11 && ae.norm() < 1e-9);
        // Peak lift h at mid-swing, above the straight line.
        let mid = swing.eval(1.25).0;
        assert!(((mid - (p0 + p1) * 0.5).dot(&lift) - 0.07).abs() < 1e-13);
        fd_check(&swing);

        let vel = Vec3::new(0.2, 0.0, 0.05);
        let up = Piece::ramp_up(0.0, 2.0, p0, vel);
        let (_, v_end, a_end) = up.eval(2.0);
        assert!((v_end - vel).norm() < 1e-14 && a_end.norm() < 1e-14);
        // Travels V T / 2 while speeding up.
        assert!((up.end() - p0 - vel).norm() < 1e-14);
        let down = Piece::ramp_down(2.0, 4.0, up.end(), vel);
        let (_, v0, a0) = down.eval(2.0);
        let (_, v1, a1) = down.eval(4.0);
        assert!((v0 - vel).norm() < 1e-15 && a0.norm() < 1e-15);
        assert!(v1.norm() < 1e-14 && a1.norm() < 1e-14);
        fd_check(&up);
        fd_check(&down);
        assert!(Piece::hold(0.0, 1.0, p0).is_constant() && !up.is_constant());
    }

    #[test]
    fn quintic_hermite_reproduces_quintics() {
        // Any quintic is its own Hermite interpolant.
        let f =
            |x: f64| 0.3 - 1.2 * x + 0.7 * x * x + 2.0 * x.powi(3) - 0.4 * x.powi(4) + x.powi(5);
        let df = |x: f64| -1.2 + 1.4 * x + 6.0 * x * x - 1.6 * x.powi(3) + 5.0 * x.powi(4);
        let ddf = |x: f64| 1.4 + 12.0 * x - 4.8 * x * x + 20.0 * x.powi(3);
        let (x0, h) = (0.4, 0.3);
        let x1 = x0 + h;
        let w = [
            f(x0),
            h * df(x0),
            h * h * ddf(x0),
            h * h * ddf(x1),
            h * df(x1),
            f(x1),
        ];
        for k in 0..=10 {
            let u = k as f64 / 10.0;
            let b = quintic_hermite(u);
            let dot = |r: usize| (0..6).map(|i| b[r][i] * w[i]).sum::<f64>();
            let x = x0 + h * u;
            assert!((dot(0) - f(x)).abs() < 1e-13);
            assert!((dot(1) / h - df(x)).abs() < 1e-12);
            assert!((dot(2) / (h * h) - ddf(x)).abs() < 1e-10);
        }
    }

    #[test]
    fn piece_lookup_covers_the_boundaries() {
        let z = Vec3::zeros();
        let pieces = [
            Piece::hold(0.0, 1.0, z),
            Piece::hold(1.0, 2.0, z),
            Piece::hold(2.0, 3.0, z),
        ];
        assert_eq!(piece_at(&pieces, 0.0), 0);
        assert_eq!(piece_at(&pieces, 1.0), 0);
        assert_eq!(piece_at(&pieces, 1.0 + 1e-12), 1);
        assert_eq!(piece_at(&pieces, 3.0), 2);
        assert_eq!(piece_at(&pieces, 7.0), 2);
    }
}
