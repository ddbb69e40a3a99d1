//! The world the plan does not know (issue 14): the ground a cell's plant stands on when it
//! differs from the nominal plane the planner plans on, and the pushes on the trunk.
//!
//! * Heading: the slope's uphill direction is turned about the vertical by −ψ, and the
//!   terrain's `surface_frame` (which the planner lays the gait out along) points its t1 at ψ
//!   from uphill within the plane (ψ = 90°: across the slope with the uphill side on the
//!   robot's right; the path then climbs at asin(sin θ cos ψ)). The plan and the controllers'
//!   ground normal follow because both read this terrain.
//! * An unperceived step: beyond the line at distance `step_at` along the path (plane
//!   coordinate u, along the walking direction t1 in the tangent plane), the ground is the
//!   nominal plane moved by `step_height` along its normal (up > 0, down < 0); the riser is
//!   perpendicular to the slope. Built from cuboids lying in the slope (a compound of boxes):
//!   flat faces give the engine exact planes, so a foot resting on either side rests on the
//!   analytic height, and the riser is a real edge a swinging foot can stub on.
//! * A bump field: a seeded sum of `BUMP_WAVES` cosines of one wavelength λ, random directions
//!   and phases, amplitude so the RMS height over the plane is `bump_rms`, faded in by a
//!   smoothstep over one wavelength from `bump_at` along the path. Built as one rapier height
//!   field (`HeightField`) lying in the slope with grid spacing λ / [`BUMP_CELLS_PER_WAVE`]: a
//!   compound of boxes cannot make a smooth undulating surface; the height field is one
//!   collider with piecewise-planar triangles through the analytic heights at its vertices.
//!   Between vertices the triangles depart from the analytic surface by at most
//!   A·(π h/λ)²/2 per wave (linear interpolation of a cosine, h the spacing), 0.02 A at 16
//!   cells per wavelength.
//! * A friction patch: a rectangle of the plane in plane coordinates with its own μ; the
//!   ground is split into boxes along the patch's edges (and the step's line), each with its
//!   own friction coefficient, because rapier has one friction coefficient per collider.
//!
//! With the heading 0 and none of these, [`Ground`] is exactly the plain [`Slope`] (the same
//! collider and the same arithmetic), so existing cells keep bit-identical results.

use super::terrain::{GROUND_GROUP, ROBOT_GROUP, Slope, Terrain};
use gripsweep_controllers::spatial::{Mat3, Vec3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rapier3d::prelude::*;

/// Cosines summed in a bump field.
pub const BUMP_WAVES: usize = 8;
/// Height-field grid cells per bump wavelength.
pub const BUMP_CELLS_PER_WAVE: f64 = 16.0;
/// Extent of the bump field's height field in plane coordinates, m: u from −1 to 6 along the
/// path, v ±2 across it. A robot that leaves it falls off its edge (and is recorded as fallen).
pub const BUMP_U: (f64, f64) = (-1.0, 6.0);
pub const BUMP_V: f64 = 2.0;
/// Half extent of the ground boxes, m (as the plain slope's slab).
const FAR: f64 = 200.0;
const HALF_THICKNESS: f64 = 0.5;

/// One `[terrain.<name>]` table: how the plant's ground differs from the nominal plane.
#[derive(Clone, Debug, PartialEq)]
pub struct TerrainVariant {
    /// Step height along the ground normal, m (0: no step).
    pub step_height: f64,
    /// Distance of the step's edge from the start along the path, m.
    pub step_at: f64,
    /// RMS height of the bump field, m (0: no bumps).
    pub bump_rms: f64,
    /// Wavelength of the bumps, m.
    pub bump_wavelength: f64,
    /// Where the bumps start along the path (faded in over one wavelength), m.
    pub bump_at: f64,
    /// Seed of the bump field (combined with the cell's seed number).
    pub bump_seed: u64,
}

impl TerrainVariant {
    /// The plane: what the axis value `plane` (the default) means.
    pub const PLANE: TerrainVariant = TerrainVariant {
        step_height: 0.0,
        step_at: 0.3,
        bump_rms: 0.0,
        bump_wavelength: 0.2,
        bump_at: 0.3,
        bump_seed: 1,
    };
}

/// Where a friction patch lies, in plane coordinates (u along the path, v to the left).
#[derive(Clone, Debug, PartialEq)]
pub enum PatchShape {
    /// A strip across the whole path: u from `at` to `at + width`.
    Strip { at: f64, width: f64 },
    /// A strip along the path under one foot's track: |v − v_foot| ≤ width / 2, from u = −1 m
    /// on, so the foot stands on it from the start and steps along it the whole run.
    Track { foot: String, width: f64 },
}

/// A friction patch resolved for one cell: rectangle [u0, u1] × [v0, v1] with friction `mu`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PatchRect {
    pub u0: f64,
    pub u1: f64,
    pub v0: f64,
    pub v1: f64,
    pub mu: f64,
}

impl PatchRect {
    pub fn contains(&self, u: f64, v: f64) -> bool {
        u >= self.u0 && u <= self.u1 && v >= self.v0 && v <= self.v1
    }
}

/// One `[push.<name>]` table: a push on the trunk at its centre of mass.
#[derive(Clone, Debug, PartialEq)]
pub struct PushVariant {
    /// Impulse, N·s (`impulse`: applied as impulse / dt over one plant step), or force, N
    /// (`force`: held for `duration_s`).
    pub impulse: bool,
    pub magnitude: f64,
    /// Direction in the ground's tangent plane, degrees from the uphill direction,
    /// counter-clockwise seen from above the slope (90: the uphill direction turned left).
    pub direction_deg: f64,
    /// How long a force is held, s.
    pub duration_s: f64,
    /// Which gait cycle (0-based) and where in it (0 ≤ phase < 1) the push starts.
    pub cycle: u32,
    pub phase: f64,
}

/// A bump field: δ(u, v) = A Σ cos(k (cos φ u + sin φ v) + ψ), faded in from `at`.
#[derive(Clone, Debug)]
pub struct BumpField {
    amp: f64,
    k: f64,
    dirs: Vec<(f64, f64, f64)>,
    at: f64,
    wavelength: f64,
}

impl BumpField {
    /// Seeded from the variant's seed and the cell's seed number, so every law of one seed
    /// meets the same field.
    pub fn new(v: &TerrainVariant, seed_number: u32) -> BumpField {
        let mut rng = ChaCha8Rng::seed_from_u64(
            v.bump_seed
                .wrapping_mul(0x9e37_79b9_7f4a_7c15)
                .wrapping_add(seed_number as u64),
        );
        let dirs = (0..BUMP_WAVES)
            .map(|_| {
                let phi = std::f64::consts::TAU * rng.random::<f64>();
                let psi = std::f64::consts::TAU * rng.random::<f64>();
                (phi.cos(), phi.sin(), psi)
            })
            .collect();
        BumpField {
            // The mean square of a sum of cosines with distinct directions is K A² / 2.
            amp: v.bump_rms * (2.0 / BUMP_WAVES as f64).sqrt(),
            k: std::f64::consts::TAU / v.bump_wavelength,
            dirs,
            at: v.bump_at,
            wavelength: v.bump_wavelength,
        }
    }

    /// Height along the ground normal at plane coordinates (u, v), m.
    pub fn height(&self, u: f64, v: f64) -> f64 {
        let s = ((u - self.at) / self.wavelength).clamp(0.0, 1.0);
        let fade = s * s * (3.0 - 2.0 * s);
        if fade == 0.0 {
            return 0.0;
        }
        let sum: f64 = self
            .dirs
            .iter()
            .map(|&(c, sn, psi)| (self.k * (c * u + sn * v) + psi).cos())
            .sum();
        fade * self.amp * sum
    }
}

/// The plant's ground for one cell.
pub struct Ground {
    slope: Slope,
    /// Heading ψ, rad: the uphill direction's azimuth is −ψ.
    heading: f64,
    step: Option<(f64, f64)>,
    bumps: Option<BumpField>,
    patch: Option<PatchRect>,
    /// Normal and the plane frame (t1 along the path, t2 = n × t1), world.
    n: Vec3,
    t1: Vec3,
    t2: Vec3,
}

impl Ground {
    /// The nominal plane of a cell: slope and heading, nothing unperceived.
    pub fn plane(slope_deg: f64, heading_deg: f64) -> Ground {
        let slope = Slope::degrees(slope_deg);
        let heading = heading_deg.to_radians();
        let (sa, ca) = (slope.angle.sin(), slope.angle.cos());
        let n = if heading == 0.0 {
            slope.normal_at(0.0, 0.0)
        } else {
            Vec3::new(-sa * heading.cos(), sa * heading.sin(), ca)
        };
        // The walking direction: in the plane, ψ from uphill u towards n × u (ψ = 90°: the
        // uphill side on the robot's right).
        let u = Vec3::new(
            slope.angle.cos() * heading.cos(),
            -slope.angle.cos() * heading.sin(),
            slope.angle.sin(),
        );
        let t1 = if heading == 0.0 {
            slope.surface_frame(0.0, 0.0).1
        } else {
            (u * heading.cos() + n.cross(&u) * heading.sin()).normalize()
        };
        let t2 = n.cross(&t1);
        Ground {
            slope,
            heading,
            step: None,
            bumps: None,
            patch: None,
            n,
            t1,
            t2,
        }
    }

    /// The plant's ground: the plane with the variant's step and bumps and the patch.
    pub fn with(mut self, v: &TerrainVariant, seed_number: u32, patch: Option<PatchRect>) -> Self {
        if v.step_height != 0.0 {
            self.step = Some((v.step_at, v.step_height));
        }
        if v.bump_rms > 0.0 {
            self.bumps = Some(BumpField::new(v, seed_number));
        }
        self.patch = patch;
        self
    }

    fn plain(&self) -> bool {
        self.heading == 0.0 && self.step.is_none() && self.bumps.is_none() && self.patch.is_none()
    }

    /// Unit vector uphill along the surface.
    pub fn uphill(&self) -> Vec3 {
        if self.heading == 0.0 {
            return self.slope.uphill();
        }
        let (sa, ca) = (self.slope.angle.sin(), self.slope.angle.cos());
        Vec3::new(ca * self.heading.cos(), -ca * self.heading.sin(), sa)
    }

    /// Unit vector along the path (the plan's t1).
    pub fn forward(&self) -> Vec3 {
        if self.heading == 0.0 {
            self.slope.uphill()
        } else {
            self.t1
        }
    }

    /// Height of the nominal plane at (x, y).
    fn plane_height(&self, x: f64, y: f64) -> f64 {
        if self.heading == 0.0 {
            self.slope.height_at(x, y)
        } else {
            -(self.n.x * x + self.n.y * y) / self.n.z
        }
    }

    /// Plane coordinates (u along the path, v to the left) of the plane point above (x, y).
    pub fn plane_coords(&self, x: f64, y: f64) -> (f64, f64) {
        let p = Vec3::new(x, y, self.plane_height(x, y));
        (p.dot(&self.t1), p.dot(&self.t2))
    }

    /// Offset of the plant's ground from the nominal plane along its normal at plane
    /// coordinates (u, v), m: the step and the bumps (the analytic surface).
    pub fn offset(&self, u: f64, v: f64) -> f64 {
        let step = match self.step {
            Some((at, h)) if u >= at => h,
            _ => 0.0,
        };
        step + self.bumps.as_ref().map_or(0.0, |b| b.height(u, v))
    }

    /// The step's edge and height, if any.
    pub fn step(&self) -> Option<(f64, f64)> {
        self.step
    }

    /// The plane frame (t1 along the path, t2, n) as a rotation's columns.
    fn frame(&self) -> Mat3 {
        Mat3::from_columns(&[self.t1, self.t2, self.n])
    }

    fn ground_box(
        &self,
        (u0, u1): (f64, f64),
        (v0, v1): (f64, f64),
        top: f64,
        mu: f64,
    ) -> Collider {
        let centre_local = Vec3::new(0.5 * (u0 + u1), 0.5 * (v0 + v1), top - HALF_THICKNESS);
        let centre = self.frame() * centre_local;
        ground_collider(
            ColliderBuilder::cuboid(0.5 * (u1 - u0), 0.5 * (v1 - v0), HALF_THICKNESS),
            self.frame(),
            centre,
            mu,
        )
    }

    fn height_field(&self, b: &BumpField, mu: f64) -> Collider {
        let h = b.wavelength / BUMP_CELLS_PER_WAVE;
        let nu = ((BUMP_U.1 - BUMP_U.0) / h).ceil() as usize;
        let nv = ((2.0 * BUMP_V) / h).ceil() as usize;
        let (lu, lv) = (nu as f64 * h, nv as f64 * h);
        // Rapier's height field: local x across columns, local z across rows, heights along
        // local y; vertex (i, j) at x = −lx/2 + j lx/ncols', z = −lz/2 + i lz/nrows'. Local x → t1
        // (u), y → n, z → −t2 (a right-handed frame), centred at (u_c, v_c).
        let (uc, vc) = (BUMP_U.0 + 0.5 * lu, 0.0);
        let array = rapier3d::parry::utils::Array2::from_fn(nv + 1, nu + 1, |i, j| {
            let v = vc + 0.5 * lv - i as f64 * h;
            let u = uc - 0.5 * lu + j as f64 * h;
            b.height(u, v)
        });
        let rot = Mat3::from_columns(&[self.t1, self.n, -self.t2]);
        let c = self.t1 * uc + self.t2 * vc;
        ground_collider(
            ColliderBuilder::heightfield(array, Vector::new(lu, 1.0, lv)),
            rot,
            c,
            mu,
        )
    }
}

fn ground_groups() -> InteractionGroups {
    InteractionGroups::new(GROUND_GROUP, ROBOT_GROUP, InteractionTestMode::And)
}

/// Sorted cut positions inside (−FAR, FAR), with the far ends.
fn cuts(inner: &[f64]) -> Vec<f64> {
    let mut c = vec![-FAR];
    let mut v: Vec<f64> = inner.iter().copied().filter(|x| x.abs() < FAR).collect();
    v.sort_by(f64::total_cmp);
    v.dedup();
    c.extend(v);
    c.push(FAR);
    c
}

impl Terrain for Ground {
    fn label(&self) -> String {
        let mut s = self.slope.label();
        if self.heading != 0.0 {
            s += &format!(", heading {:.0}°", self.heading.to_degrees());
        }
        if let Some((at, h)) = self.step {
            s += &format!(", step {:+.0} mm at {at} m", h * 1e3);
        }
        if self.bumps.is_some() {
            s += ", bumps";
        }
        if self.patch.is_some() {
            s += ", patch";
        }
        s
    }
    fn height_at(&self, x: f64, y: f64) -> f64 {
        if self.plain() {
            return self.slope.height_at(x, y);
        }
        let (u, v) = self.plane_coords(x, y);
        // Exact for the step's flat parts; for bumps the offset is taken at the plane point
        // above (x, y) (an error of order δ·|∇δ|·tan θ, fine for the fall test that uses it).
        self.plane_height(x, y) + self.offset(u, v) / self.n.z
    }
    fn normal_at(&self, x: f64, y: f64) -> Vec3 {
        if self.plain() {
            return self.slope.normal_at(x, y);
        }
        // The bumps tilt the true surface; the normal reported stays the plane's (what the
        // controllers assume), the surface frame the metrics use with it.
        self.n
    }
    fn friction_at(&self, x: f64, y: f64, cell_mu: f64) -> f64 {
        match self.patch {
            Some(p) => {
                let (u, v) = self.plane_coords(x, y);
                if p.contains(u, v) { p.mu } else { cell_mu }
            }
            None => cell_mu,
        }
    }
    fn build(&self, colliders: &mut ColliderSet, cell_mu: f64) -> Vec<ColliderHandle> {
        if self.plain() {
            return self.slope.build(colliders, cell_mu);
        }
        if let Some(b) = &self.bumps {
            // Validation keeps patches and steps off a bump field.
            return vec![colliders.insert(self.height_field(b, cell_mu))];
        }
        let mut us = Vec::new();
        let mut vs = Vec::new();
        if let Some((at, _)) = self.step {
            us.push(at);
        }
        if let Some(p) = self.patch {
            us.extend([p.u0, p.u1]);
            vs.extend([p.v0, p.v1]);
        }
        let (us, vs) = (cuts(&us), cuts(&vs));
        let mut out = Vec::new();
        for wu in us.windows(2) {
            for wv in vs.windows(2) {
                let (um, vm) = (0.5 * (wu[0] + wu[1]), 0.5 * (wv[0] + wv[1]));
                let mu = match self.patch {
                    Some(p) if p.contains(um, vm) => p.mu,
                    _ => cell_mu,
                };
                let top = self.offset(um, vm);
                out.push(colliders.insert(self.ground_box(
                    (wu[0], wu[1]),
                    (wv[0], wv[1]),
                    top,
                    mu,
                )));
            }
        }
        out
    }
    fn surface_frame(&self, x: f64, y: f64) -> (Vec3, Vec3, Vec3) {
        if self.plain() {
            return self.slope.surface_frame(x, y);
        }
        (self.n, self.t1, self.t2)
    }
}

/// The force a push puts on the trunk during the plant step starting at `t`, world axes, N
/// (zero outside the push). `start` is the push's start time, `dt` the plant step, `ground`
/// gives the direction in its tangent plane.
pub fn push_force(p: &PushVariant, start: f64, t: f64, dt: f64, ground: &Ground) -> Vec3 {
    let (steps, force) = if p.impulse {
        (1, p.magnitude / dt)
    } else {
        ((p.duration_s / dt).round().max(1.0) as usize, p.magnitude)
    };
    let first = (start / dt).round() as i64;
    let now = (t / dt).round() as i64;
    if now < first || now >= first + steps as i64 {
        return Vec3::zeros();
    }
    push_direction(p, ground) * force
}

/// Unit direction of a push: in the tangent plane, `direction_deg` from uphill about n.
pub fn push_direction(p: &PushVariant, ground: &Ground) -> Vec3 {
    let up = ground.uphill();
    let left = ground.n.cross(&up);
    let a = p.direction_deg.to_radians();
    up * a.cos() + left * a.sin()
}

/// A piece of ground: the shape placed at `centre` with orientation `rot` (columns: the shape's
/// local axes in the world), friction μ combined by the minimum, no restitution, in the ground's
/// collision groups.
fn ground_collider(shape: ColliderBuilder, rot: Mat3, centre: Vec3, mu: f64) -> Collider {
    let q = nalgebra::UnitQuaternion::from_rotation_matrix(
        &nalgebra::Rotation3::from_matrix_unchecked(rot),
    );
    shape
        .position(Pose::from_parts(
            Vector::new(centre.x, centre.y, centre.z),
            Rotation::from_xyzw(q.i, q.j, q.k, q.w),
        ))
        .friction(mu)
        .friction_combine_rule(CoefficientCombineRule::Min)
        .restitution(0.0)
        .collision_groups(ground_groups())
        .build()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_heading_is_the_plain_slope_bit_for_bit() {
        let g = Ground::plane(12.5, 0.0);
        let s = Slope::degrees(12.5);
        for &(x, y) in &[(0.3, -0.2), (-1.7, 0.4), (0.0, 0.0)] {
            assert_eq!(g.height_at(x, y).to_bits(), s.height_at(x, y).to_bits());
            assert_eq!(g.surface_frame(x, y), s.surface_frame(x, y));
        }
        assert_eq!(g.uphill(), s.uphill());
    }

    #[test]
    fn heading_turns_the_uphill_direction() {
        // Walking across (ψ = 90°): the path is level, uphill is to the robot's right (−y).
        let g = Ground::plane(20.0, 90.0);
        let f = g.forward();
        assert!(f.z.abs() < 1e-12 && (f.x - 1.0).abs() < 1e-12);
        let up = g.uphill();
        assert!(up.y < -0.9 && up.dot(&g.n).abs() < 1e-12);
        assert!((g.height_at(0.0, -1.0) - 20f64.to_radians().tan()).abs() < 1e-12);
        // Diagonal: a line in the plane at ψ from its line of steepest slope climbs at
        // asin(sin θ cos ψ) (its rise per length along it is sin θ cos ψ).
        let g = Ground::plane(20.0, 45.0);
        let want = (20f64.to_radians().sin() * 45f64.to_radians().cos()).asin();
        // … and makes the angle ψ with uphill inside the plane.
        assert!((g.forward().dot(&g.uphill()) - 45f64.to_radians().cos()).abs() < 1e-12);
        assert!((g.forward().z.asin() - want).abs() < 1e-12);
    }

    #[test]
    fn bump_field_rms_is_the_stated_one() {
        let v = TerrainVariant {
            bump_rms: 0.01,
            bump_at: -100.0,
            ..TerrainVariant::PLANE
        };
        let b = BumpField::new(&v, 0);
        let (mut s2, mut n) = (0.0, 0.0);
        for i in 0..400 {
            for j in 0..400 {
                let h = b.height(i as f64 * 0.0137, j as f64 * 0.0113);
                s2 += h * h;
                n += 1.0;
            }
        }
        let rms = (s2 / n).sqrt();
        // A finite window of 5.5 m × 4.5 m (≈ 25 wavelengths): within 15 % of the stated RMS.
        assert!((rms / 0.01 - 1.0).abs() < 0.15, "rms {rms}");
    }
}
