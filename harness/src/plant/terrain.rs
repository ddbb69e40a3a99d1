//! Terrain behind one small interface: it puts its colliders into the world and answers
//! height, surface normal and surface frame at a horizontal position, so the plant, the planner
//! and the metrics all read the same ground. A step, a heightfield or per-foot friction patches
//! implement the same trait.

use gripsweep_controllers::spatial::Vec3;
use rapier3d::prelude::*;

/// Collision group of the ground; robot colliders are in [`ROBOT_GROUP`].
pub const GROUND_GROUP: Group = Group::GROUP_1;
pub const ROBOT_GROUP: Group = Group::GROUP_2;

/// The foot colliders' own friction: far above any cell value, so that with the `Min` combine
/// rule the ground's (the cell's) coefficient is what every foot sees. rapier picks the combine
/// rule of higher priority (Average < Min < Multiply < Max); both sides use `Min`.
pub const FOOT_FRICTION: f64 = 1.0e3;

pub trait Terrain: Send + Sync {
    /// A short label for reports, e.g. "slope 10.0°".
    fn label(&self) -> String;
    /// Ground height z at (x, y).
    fn height_at(&self, x: f64, y: f64) -> f64;
    /// Outward unit surface normal at (x, y).
    fn normal_at(&self, x: f64, y: f64) -> Vec3;
    /// Static friction coefficient at (x, y) given the cell's value (uniform ground: the same).
    fn friction_at(&self, _x: f64, _y: f64, cell_mu: f64) -> f64 {
        cell_mu
    }
    /// Insert the ground colliders; the cell's friction coefficient goes on each.
    fn build(&self, colliders: &mut ColliderSet, cell_mu: f64) -> Vec<ColliderHandle>;

    /// Surface frame at (x, y): (normal, t1, t2) with t1 the uphill-pointing direction in the
    /// surface (world +x projected onto it) and t2 = n × t1.
    fn surface_frame(&self, x: f64, y: f64) -> (Vec3, Vec3, Vec3) {
        let n = self.normal_at(x, y);
        let ex = Vec3::x();
        let t1 = (ex - n * n.dot(&ex)).normalize();
        (n, t1, n.cross(&t1))
    }
}

/// A plane through the origin tilted by `angle` about the world y axis, rising towards +x:
/// z = x tan(angle). Uphill is +x; gravity stays along −z.
#[derive(Clone, Copy, Debug)]
pub struct Slope {
    pub angle: f64,
}

impl Slope {
    pub fn degrees(deg: f64) -> Self {
        Slope {
            angle: deg.to_radians(),
        }
    }
    /// Unit vector pointing uphill along the surface.
    pub fn uphill(&self) -> Vec3 {
        Vec3::new(self.angle.cos(), 0.0, self.angle.sin())
    }
}

impl Terrain for Slope {
    fn label(&self) -> String {
        format!("slope {:.1}°", self.angle.to_degrees())
    }
    fn height_at(&self, x: f64, _y: f64) -> f64 {
        x * self.angle.tan()
    }
    fn normal_at(&self, _x: f64, _y: f64) -> Vec3 {
        Vec3::new(-self.angle.sin(), 0.0, self.angle.cos())
    }
    fn build(&self, colliders: &mut ColliderSet, cell_mu: f64) -> Vec<ColliderHandle> {
        // A thick slab whose top face is the plane: robust contact generation against spheres
        // and boxes, no infinite shapes.
        let half_thickness = 0.5;
        let n = self.normal_at(0.0, 0.0);
        let rot =
            rapier3d::math::Rotation::from_axis_angle(Vector::new(0.0, 1.0, 0.0), -self.angle);
        let centre = -n * half_thickness;
        let slab = ColliderBuilder::cuboid(200.0, 200.0, half_thickness)
            .position(Pose::from_parts(
                Vector::new(centre.x, centre.y, centre.z),
                rot,
            ))
            .friction(cell_mu)
            .friction_combine_rule(CoefficientCombineRule::Min)
            .restitution(0.0)
            .collision_groups(InteractionGroups::new(
                GROUND_GROUP,
                ROBOT_GROUP,
                InteractionTestMode::And,
            ))
            .build();
        vec![colliders.insert(slab)]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slope_frame_is_orthonormal_and_uphill() {
        let s = Slope::degrees(20.0);
        let (n, t1, t2) = s.surface_frame(0.3, -0.2);
        assert!(
            (n.norm() - 1.0).abs() < 1e-15 && n.dot(&t1).abs() < 1e-15 && t1.dot(&t2).abs() < 1e-15
        );
        assert!((t1 - s.uphill()).norm() < 1e-15);
        // The plane contains the uphill direction and the height rises along it.
        assert!((s.height_at(1.0, 0.0) - 20f64.to_radians().tan()).abs() < 1e-15);
        assert!(n.dot(&s.uphill()).abs() < 1e-15);
    }
}
