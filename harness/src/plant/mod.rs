//! The plant: the truth every controller is judged against. A rapier3d (f64) reduced-coordinate
//! multibody built from the same URDF and robot facts as the controllers' model, on a terrain,
//! driven by joint torques, read out in the model's conventions.
//!
//! What is switched off so the plant is rigid-body dynamics and nothing else (each was measured
//! to change a standing robot's slip or energy; `tests/plant_physics.rs` holds the checks): the
//! engine's default 0.1 N·m·s/rad damping on every multibody DOF, sleeping, contact recycling,
//! CCD. What is switched on because
//! real actuators have it: reflected rotor inertia as the engine's armature (the controllers'
//! model carries the same value), joint friction per actuator model. Contacts are stiff.

pub mod actuator;
pub mod terrain;
pub mod world;

use crate::robot::LoadedRobot;
use ::nalgebra::{DVector, UnitQuaternion};
use gripsweep_controllers::configuration::set_base_pose;
use gripsweep_controllers::model::{JointKind, RootKind};
use gripsweep_controllers::spatial::{Mat3, Pose as MPose, Vec3};
use rapier3d::prelude::*;
use terrain::{FOOT_FRICTION, GROUND_GROUP, ROBOT_GROUP, Terrain};

/// Engine settings of the plant.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlantSettings {
    /// Physics step, s (≤ 1 ms).
    pub dt: f64,
    /// Solver substeps per step: the accuracy knob of rapier's integrator.
    pub substeps: usize,
    /// Contact stiffness as a natural frequency, Hz, and its damping ratio.
    pub contact_hz: f64,
    pub contact_damping: f64,
    /// Enforce the URDF joint position limits as hard stops.
    pub joint_limits: bool,
}

impl Default for PlantSettings {
    /// Chosen by the fidelity checks and the benchmark in BENCHMARKS.md.
    fn default() -> Self {
        PlantSettings {
            dt: 5e-4,
            substeps: 4,
            contact_hz: 500.0,
            contact_damping: 1.0,
            joint_limits: true,
        }
    }
}

/// One foot's contact as the plant saw it during the last step.
#[derive(Clone, Copy, Debug, Default)]
pub struct FootReading {
    /// The solver pushed on the foot (normal impulse > 0) during the step.
    pub in_contact: bool,
    /// Force of the ground on the foot, world axes, N (impulse / dt).
    pub force: Vec3,
    /// The same force in the surface frame: [normal, t1 (uphill), t2].
    pub force_surface: [f64; 3],
    /// Velocity of the foot's material point at the contact, world axes, m/s.
    pub contact_point_velocity: Vec3,
    /// Its part tangential to the surface, m/s.
    pub slip_velocity: Vec3,
    /// Where the sphere meets the ground plane below its centre, world.
    pub contact_point: Vec3,
    /// Sphere centre, world.
    pub centre: Vec3,
}

/// The plant's state turned non-finite or the engine quarantined a body.
#[derive(Clone, Debug, PartialEq)]
pub struct Diverged(pub String);

struct Foot {
    body: usize,
    /// Sphere centre in the rapier body's frame.
    centre_local: Vec3,
    radius: f64,
    collider: ColliderHandle,
}

pub struct Plant {
    world: PhysicsWorld,
    settings: PlantSettings,
    model_root: RootKind,
    /// Rapier handle of each model body.
    bodies: Vec<RigidBodyHandle>,
    /// Multibody link id of each model body.
    link_ids: Vec<usize>,
    /// Generalized-velocity index of each joint in the engine.
    dof: Vec<usize>,
    joint_kinds: Vec<JointKind>,
    /// Joint axes in their child body frame.
    axes: Vec<Vec3>,
    /// Parent body of each joint.
    parents: Vec<usize>,
    /// Centre of mass of the base body in the base frame: the rapier root body sits there.
    base_com: Vec3,
    mb_handle: MultibodyJointHandle,
    feet: Vec<Foot>,
    ground: Vec<ColliderHandle>,
    /// Robot colliders that are not feet (touching the ground means a fall).
    other_colliders: Vec<ColliderHandle>,
    readings: Vec<FootReading>,
    other_contact: bool,
    tau: Vec<f64>,
    terrain: Box<dyn Terrain>,
    time: f64,
    // --- issue 14 (world14): a push on the trunk ---
    /// External force on the trunk at its centre of mass for the next step, world axes, N.
    base_force: Vec3,
    // --- end issue 14 ---
}

fn to_v(v: &Vec3) -> Vector {
    Vector::new(v.x, v.y, v.z)
}
fn from_v(v: Vector) -> Vec3 {
    Vec3::new(v.x, v.y, v.z)
}
fn to_rot(r: &Mat3) -> Rotation {
    let q = UnitQuaternion::from_rotation_matrix(&::nalgebra::Rotation3::from_matrix_unchecked(*r));
    Rotation::from_xyzw(q.i, q.j, q.k, q.w)
}
fn from_rot(r: &Rotation) -> Mat3 {
    UnitQuaternion::from_quaternion(::nalgebra::Quaternion::new(r.w, r.x, r.y, r.z))
        .to_rotation_matrix()
        .into_inner()
}
fn to_pose(p: &MPose) -> Pose {
    Pose::from_parts(to_v(&p.trans), to_rot(&p.rot))
}
fn from_pose(p: &Pose) -> MPose {
    MPose::new(from_rot(&p.rotation), from_v(p.translation))
}

/// A rotation taking the x axis onto `axis` (rapier's 1-DOF joints move about / along their
/// frame's x axis).
fn x_onto(axis: &Vec3) -> Mat3 {
    match UnitQuaternion::rotation_between(&Vec3::x(), axis) {
        Some(q) => q.to_rotation_matrix().into_inner(),
        // axis = −x: half a turn about z.
        None => Mat3::new(-1.0, 0.0, 0.0, 0.0, -1.0, 0.0, 0.0, 0.0, 1.0),
    }
}

fn geometry_collider(g: &urdf_rs::Geometry) -> Option<ColliderBuilder> {
    match g {
        urdf_rs::Geometry::Box { size } => Some(ColliderBuilder::cuboid(
            size[0] / 2.0,
            size[1] / 2.0,
            size[2] / 2.0,
        )),
        urdf_rs::Geometry::Sphere { radius } => Some(ColliderBuilder::ball(*radius)),
        // URDF cylinders and capsules lie along their frame's z axis.
        urdf_rs::Geometry::Cylinder { radius, length } => Some(
            ColliderBuilder::cylinder(length / 2.0, *radius).rotation(Vector::new(
                std::f64::consts::FRAC_PI_2,
                0.0,
                0.0,
            )),
        ),
        urdf_rs::Geometry::Capsule { radius, length } => {
            Some(ColliderBuilder::capsule_z(length / 2.0, *radius))
        }
        urdf_rs::Geometry::Mesh { .. } => None,
    }
}

impl Plant {
    /// Build the plant for one robot on one terrain with the cell's ground friction `mu`, in
    /// the robot's nominal posture, standing on the terrain at the origin.
    pub fn new(
        robot: &LoadedRobot,
        terrain: Box<dyn Terrain>,
        mu: f64,
        settings: PlantSettings,
    ) -> Plant {
        let model = &robot.model;
        let mut world = configured_world(&settings);
        world.gravity = to_v(&model.gravity);
        let base_com = model.inertias[0].com();
        // Offset of each rapier body frame from its model body frame (only the root moves).
        let offset = |b: usize| if b == 0 { base_com } else { Vec3::zeros() };
        let mut bodies = Vec::with_capacity(model.n_bodies());
        for (b, inertia) in model.inertias.iter().enumerate() {
            let i_c = inertia.inertia_at_com();
            let com = inertia.com() - offset(b);
            let mprops = MassProperties::with_inertia_matrix(
                to_v(&com),
                inertia.mass,
                rapier3d::math::Matrix::from_cols(
                    to_v(&i_c.column(0).into()),
                    to_v(&i_c.column(1).into()),
                    to_v(&i_c.column(2).into()),
                ),
            );
            let kind = if b == 0 && model.root == RootKind::Fixed {
                RigidBodyType::Fixed
            } else {
                RigidBodyType::Dynamic
            };
            // A fixed root is welded where the model says; a floating one is placed by set_state.
            let place = if b == 0 {
                model
                    .fixed_base_pose
                    .compose(&MPose::new(Mat3::identity(), base_com))
            } else {
                MPose::IDENTITY
            };
            let rb = RigidBodyBuilder::new(kind)
                .pose(to_pose(&place))
                .additional_mass_properties(mprops)
                .can_sleep(false)
                .ccd_enabled(false)
                .build();
            bodies.push(world.bodies.insert(rb));
        }
        let mut mb_handle = None;
        for (k, j) in model.joints.iter().enumerate() {
            let a = x_onto(&j.axis);
            let frame1 = MPose::new(Mat3::identity(), -offset(j.parent))
                .compose(&j.x_tree)
                .compose(&MPose::new(a, Vec3::zeros()));
            let frame2 = MPose::new(a, Vec3::zeros());
            let (locked, axis) = match j.kind {
                JointKind::Revolute => (JointAxesMask::LOCKED_REVOLUTE_AXES, JointAxis::AngX),
                JointKind::Prismatic => (JointAxesMask::LOCKED_PRISMATIC_AXES, JointAxis::LinX),
            };
            let mut builder = GenericJointBuilder::new(locked)
                .local_frame1(to_pose(&frame1))
                .local_frame2(to_pose(&frame2))
                .contacts_enabled(false);
            if settings.joint_limits && j.lower.is_finite() && j.upper.is_finite() {
                builder = builder.limits(axis, [j.lower, j.upper]);
            }
            let h = world
                .multibody_joints
                .insert(bodies[j.parent], bodies[k + 1], builder.build(), true)
                .expect("a tree in topological order always attaches");
            mb_handle.get_or_insert(h);
        }
        let mb_handle = mb_handle.expect("a robot has at least one joint");

        // Colliders: sphere feet from the facts; other links' URDF collision shapes (meshes as
        // their convex hulls), which only serve to detect a trunk or leg touching the ground.
        let foot_frames = robot.foot_frames();
        let groups = InteractionGroups::new(
            ROBOT_GROUP,
            if robot.facts.self_collision {
                GROUND_GROUP | ROBOT_GROUP
            } else {
                GROUND_GROUP
            },
            InteractionTestMode::And,
        );
        let mut feet = Vec::new();
        for &f in &foot_frames {
            let frame = &model.frames[f];
            let centre_local = frame.placement.trans - offset(frame.body);
            let c = ColliderBuilder::ball(robot.facts.feet.radius)
                .translation(to_v(&centre_local))
                .density(0.0)
                .friction(FOOT_FRICTION)
                .friction_combine_rule(CoefficientCombineRule::Min)
                .restitution(0.0)
                .collision_groups(groups)
                .build();
            let collider =
                world
                    .colliders
                    .insert_with_parent(c, bodies[frame.body], &mut world.bodies);
            feet.push(Foot {
                body: frame.body,
                centre_local,
                radius: robot.facts.feet.radius,
                collider,
            });
        }
        let foot_links: Vec<&str> = robot.facts.feet.frames.iter().map(|s| s.as_str()).collect();
        let mut other_colliders = Vec::new();
        for link in &robot.urdf.links {
            if foot_links.contains(&link.name.as_str()) {
                continue;
            }
            let Some(fi) = model.frame_index(&link.name) else {
                continue;
            };
            let frame = &model.frames[fi];
            for (index, col) in link.collision.iter().enumerate() {
                // A mesh is its convex hull, loaded with the robot (crate::meshes); a mesh that
                // was not loaded is listed in `robot.missing_meshes` and has no collider.
                let builder = match &col.geometry {
                    urdf_rs::Geometry::Mesh { .. } => robot
                        .meshes
                        .iter()
                        .find(|m| m.link == link.name && m.index == index)
                        .and_then(|m| {
                            let points: Vec<Vector> = m
                                .hull
                                .iter()
                                .map(|p| Vector::new(p[0], p[1], p[2]))
                                .collect();
                            ColliderBuilder::convex_hull(&points)
                        }),
                    g => geometry_collider(g),
                };
                let Some(builder) = builder else {
                    continue;
                };
                let origin = MPose::from_xyz_rpy(*col.origin.xyz, *col.origin.rpy);
                let in_body = MPose::new(Mat3::identity(), -offset(frame.body))
                    .compose(&frame.placement)
                    .compose(&origin);
                let shape_rot = builder.position.rotation;
                let c = builder
                    .position(to_pose(&in_body) * Pose::from_rotation(shape_rot))
                    .density(0.0)
                    .friction(FOOT_FRICTION)
                    .friction_combine_rule(CoefficientCombineRule::Min)
                    .collision_groups(groups)
                    .build();
                other_colliders.push(world.colliders.insert_with_parent(
                    c,
                    bodies[frame.body],
                    &mut world.bodies,
                ));
            }
        }
        let ground = terrain.build(&mut world.colliders, mu);

        // No hidden damping anywhere; armature from the facts (the model carries the same).
        {
            let (mb, _) = world
                .multibody_joints
                .get_mut(mb_handle)
                .expect("just built");
            mb.damping_mut().fill(0.0);
            mb.frictions_mut().fill(0.0);
            mb.armature_mut().fill(0.0);
        }
        let mut plant = Plant {
            world,
            settings,
            model_root: model.root,
            bodies,
            link_ids: Vec::new(),
            dof: Vec::new(),
            joint_kinds: model.joints.iter().map(|j| j.kind).collect(),
            axes: model.joints.iter().map(|j| j.axis).collect(),
            parents: model.joints.iter().map(|j| j.parent).collect(),
            base_com,
            mb_handle,
            feet,
            ground,
            other_colliders,
            readings: vec![FootReading::default(); foot_frames.len()],
            other_contact: false,
            tau: vec![0.0; model.n_joints()],
            terrain,
            time: 0.0,
            base_force: Vec3::zeros(),
        };
        plant.index_dofs();
        let armature: Vec<f64> = model.joints.iter().map(|j| j.armature).collect();
        {
            let dof = plant.dof.clone();
            let mb = plant.multibody_mut();
            for (k, a) in armature.iter().enumerate() {
                mb.armature_mut()[dof[k]] = *a;
            }
        }
        plant
    }

    fn multibody(&self) -> &Multibody {
        mb_ref(&self.world.multibody_joints, self.mb_handle)
    }
    fn multibody_mut(&mut self) -> &mut Multibody {
        mb_mut(&mut self.world.multibody_joints, self.mb_handle)
    }

    /// Refresh the engine's link ids and DOF indices (a fixed root re-indexes them once).
    fn index_dofs(&mut self) {
        let bodies_handles = self.bodies.clone();
        let mb = mb_mut(&mut self.world.multibody_joints, self.mb_handle);
        mb.forward_kinematics(&self.world.bodies, true);
        let link_of = |h: RigidBodyHandle| {
            mb.links()
                .find(|l| l.rigid_body_handle() == h)
                .map(|l| l.link_id())
        };
        self.link_ids = bodies_handles
            .iter()
            .map(|&h| link_of(h).expect("every body is a link"))
            .collect();
        self.dof = (0..self.joint_kinds.len())
            .map(|k| mb.link(self.link_ids[k + 1]).expect("link").assembly_id())
            .collect();
    }

    pub fn settings(&self) -> &PlantSettings {
        &self.settings
    }
    pub fn time(&self) -> f64 {
        self.time
    }
    pub fn terrain(&self) -> &dyn Terrain {
        self.terrain.as_ref()
    }

    /// Set joint friction per joint: Coulomb (N·m, the engine's implicit dry friction) and
    /// viscous (N·m·s/rad, the engine's implicit joint damping).
    pub fn set_joint_friction(&mut self, coulomb: &[f64], viscous: &[f64]) {
        let dof = self.dof.clone();
        let mb = self.multibody_mut();
        for k in 0..dof.len() {
            mb.frictions_mut()[dof[k]] = coulomb[k];
            mb.damping_mut()[dof[k]] = viscous[k];
        }
    }

    /// Hold every joint at its present position with the engine's implicit joint motors (a
    /// critically damped position servo of natural frequency `hz`, acceleration-based so it
    /// does not depend on the link inertias, solved inside the constraint solver): the robot
    /// stands as one rigid body with no controller in the loop (the slip floor).
    pub fn lock_joints(&mut self, hz: f64) {
        let omega = 2.0 * std::f64::consts::PI * hz;
        let link_ids = self.link_ids.clone();
        let kinds = self.joint_kinds.clone();
        let mb = self.multibody_mut();
        for (k, kind) in kinds.iter().enumerate() {
            let Some(link) = mb.link_mut(link_ids[k + 1]) else {
                continue;
            };
            let coords = link.joint.coords();
            let (axis, target) = match kind {
                JointKind::Revolute => (JointAxis::AngX, coords[3]),
                JointKind::Prismatic => (JointAxis::LinX, coords[0]),
            };
            link.joint
                .data
                .set_motor_model(axis, MotorModel::AccelerationBased)
                .set_motor_position(axis, target, omega * omega, 2.0 * omega);
        }
    }

    /// Put the robot in state (q, v) in the model's conventions.
    pub fn set_state(&mut self, q: &DVector<f64>, v: &DVector<f64>) {
        let nj = self.joint_kinds.len();
        let floating = self.model_root == RootKind::Floating;
        let (nqb, nvb) = if floating { (7, 6) } else { (0, 0) };
        let dof = self.dof.clone();
        let kinds = self.joint_kinds.clone();
        let base_com = self.base_com;
        let root_body = self.bodies[0];
        let mb = mb_mut(&mut self.world.multibody_joints, self.mb_handle);
        let mut disp = vec![0.0; mb.ndofs()];
        for k in 0..nj {
            let link = mb
                .link(
                    mb.links()
                        .position(|l| l.assembly_id() == dof[k])
                        .expect("dof"),
                )
                .expect("link");
            let coords = link.joint().coords();
            let current = match kinds[k] {
                JointKind::Revolute => coords[3],
                JointKind::Prismatic => coords[0],
            };
            disp[dof[k]] = q[nqb + k] - current;
        }
        mb.apply_displacements(&disp);
        if floating {
            let mut qb = q.clone();
            let base = base_pose_of(&mut qb);
            let root = base.compose(&MPose::new(Mat3::identity(), base_com));
            self.world.bodies[root_body].set_position(to_pose(&root), true);
            let mb = mb_mut(&mut self.world.multibody_joints, self.mb_handle);
            mb.forward_kinematics(&self.world.bodies, true);
            let w_b = Vec3::new(v[3], v[4], v[5]);
            let v_b = Vec3::new(v[0], v[1], v[2]);
            // Engine root velocity: [COM velocity, angular velocity], world axes.
            let v_com = base.rot * (v_b + w_b.cross(&base_com));
            let w = base.rot * w_b;
            let mut gv = mb.generalized_velocity_mut();
            for r in 0..3 {
                gv[r] = v_com[r];
                gv[3 + r] = w[r];
            }
        }
        let mb = mb_mut(&mut self.world.multibody_joints, self.mb_handle);
        mb.forward_kinematics(&self.world.bodies, true);
        {
            let mut gv = mb.generalized_velocity_mut();
            for k in 0..nj {
                gv[dof[k]] = v[nvb + k];
            }
        }
        mb.update_rigid_bodies(&mut self.world.bodies, true);
        self.index_dofs();
        self.sync_body_velocities();
        // Fresh contacts for the new pose, and read-outs (positions) that match it.
        self.world.detect_collisions(&(), &());
        self.read_contacts();
    }

    /// The engine stores link velocities on the rigid bodies after a step; after a manual state
    /// change, copy them from the multibody so velocity read-outs agree.
    fn sync_body_velocities(&mut self) {
        let mb = mb_ref(&self.world.multibody_joints, self.mb_handle);
        mb.update_rigid_bodies(&mut self.world.bodies, false);
    }

    /// The true state (q, v) in the model's conventions.
    pub fn state(&self, q: &mut DVector<f64>, v: &mut DVector<f64>) {
        let mb = self.multibody();
        let floating = self.model_root == RootKind::Floating;
        let (nqb, nvb) = if floating { (7, 6) } else { (0, 0) };
        let gv = mb.generalized_velocity();
        if floating {
            let root = from_pose(mb.link(self.link_ids[0]).expect("root").local_to_world());
            let base = root.compose(&MPose::new(Mat3::identity(), -self.base_com));
            set_base_pose(q, &base);
            let v_com = Vec3::new(gv[0], gv[1], gv[2]);
            let w = Vec3::new(gv[3], gv[4], gv[5]);
            let v_origin = v_com - w.cross(&(base.rot * self.base_com));
            let rt = base.rot.transpose();
            let vb = rt * v_origin;
            let wb = rt * w;
            for r in 0..3 {
                v[r] = vb[r];
                v[3 + r] = wb[r];
            }
        }
        for (k, &d) in self.dof.iter().enumerate() {
            let link = mb.link(self.link_ids[k + 1]).expect("link");
            let c = link.joint().coords();
            q[nqb + k] = match self.joint_kinds[k] {
                JointKind::Revolute => c[3],
                JointKind::Prismatic => c[0],
            };
            v[nvb + k] = gv[d];
        }
    }

    /// Joint torques (N·m or N, model joint order) applied during the following steps.
    // --- issue 14 (world14) ---
    /// Push the trunk with `f` (world axes, N, through its centre of mass) during every
    /// following step until set again (zero: no push).
    pub fn set_base_force(&mut self, f: Vec3) {
        self.base_force = f;
    }
    // --- end issue 14 ---

    pub fn set_joint_torques(&mut self, tau: &[f64]) {
        self.tau.copy_from_slice(tau);
    }

    /// Advance one physics step.
    pub fn step(&mut self) -> Result<(), Diverged> {
        // User forces persist in rapier: reset, then put each joint's equal and opposite pair.
        for &h in &self.bodies {
            let rb = &mut self.world.bodies[h];
            rb.reset_forces(false);
            rb.reset_torques(false);
        }
        let mb = mb_ref(&self.world.multibody_joints, self.mb_handle);
        for k in 0..self.tau.len() {
            let child = self.bodies[k + 1];
            let parent = self.bodies[self.parents[k]];
            let child_pose = from_pose(
                mb.link(self.link_ids[k + 1])
                    .expect("link")
                    .local_to_world(),
            );
            let axis_w = child_pose.rot * self.axes[k];
            match self.joint_kinds[k] {
                JointKind::Revolute => {
                    let t = to_v(&(axis_w * self.tau[k]));
                    self.world.bodies[child].add_torque(t, true);
                    self.world.bodies[parent].add_torque(-t, true);
                }
                JointKind::Prismatic => {
                    // Equal and opposite forces at one world point: work τ q̇ exactly.
                    let f = to_v(&(axis_w * self.tau[k]));
                    let p = to_v(&child_pose.trans);
                    self.world.bodies[child].add_force_at_point(f, p, true);
                    self.world.bodies[parent].add_force_at_point(-f, p, true);
                }
            }
        }
        // --- issue 14 (world14): a push on the trunk, through its centre of mass (the rapier
        // root body's frame origin) ---
        if self.base_force != Vec3::zeros() {
            let f = to_v(&self.base_force);
            self.world.bodies[self.bodies[0]].add_force(f, true);
        }
        // --- end issue 14 ---
        self.world.step();
        self.time += self.settings.dt;
        if !self.world.quarantine().is_empty() {
            return Err(Diverged(format!(
                "the engine quarantined a body at t = {:.4} s (non-finite state)",
                self.time
            )));
        }
        let gv = self.multibody().generalized_velocity();
        if gv.iter().any(|x| !x.is_finite()) {
            return Err(Diverged(format!(
                "non-finite velocity at t = {:.4} s",
                self.time
            )));
        }
        self.read_contacts();
        Ok(())
    }

    fn read_contacts(&mut self) {
        let dt = self.settings.dt;
        let np = &self.world.narrow_phase;
        let ground = &self.ground;
        let mb = mb_ref(&self.world.multibody_joints, self.mb_handle);
        let gv = mb.generalized_velocity();
        for (i, foot) in self.feet.iter().enumerate() {
            let rb = &self.world.bodies[self.bodies[foot.body]];
            let link_id = self.link_ids[foot.body];
            let link = mb.link(link_id).expect("every body is a link");
            let pose = from_pose(link.local_to_world());
            let centre = pose.act_point(&foot.centre_local);
            let (n, t1, t2) = self.terrain.surface_frame(centre.x, centre.y);
            let contact_point = centre - n * foot.radius;
            let mut impulse = Vec3::zeros();
            let mut touching = false;
            for &g in ground {
                let Some(pair) = np.contact_pair(foot.collider, g) else {
                    continue;
                };
                let foot_is_first = pair.collider1 == foot.collider;
                for m in pair.solver_manifolds() {
                    // Impulses act on collider 1 along force_dir1 = −normal and the tangent
                    // basis the solver builds from it (rapier 0.36,
                    // compute_tangent_contact_directions).
                    let dir1 = -from_v(m.data.normal);
                    let (tb1, tb2) = solver_tangents(&dir1);
                    for p in &m.points {
                        if p.data.impulse > 0.0 {
                            touching = true;
                        }
                        let on_first = dir1 * p.data.impulse
                            + tb1 * p.data.tangent_impulse[0]
                            + tb2 * p.data.tangent_impulse[1];
                        impulse += if foot_is_first { on_first } else { -on_first };
                    }
                }
            }
            let force = impulse / dt;
            // The material point's velocity from the engine's final generalized velocity: the
            // link body's Jacobian (from the forward kinematics at the step's final pose) gives
            // [velocity of the link's centre of mass; angular velocity], world axes. Not the
            // rigid body's own velocity: rapier 0.36 writes a multibody link's velocity to its
            // rigid body only at the start of each substep (`Multibody::update_velocities`),
            // never after the last one, so it is the velocity the last substep began with,
            // position-correction bias included. That stale value showed 63 mm/s of slip on
            // feet that did not move under a large tangential force (tests/stance_slip.rs).
            let twist = mb.body_jacobian(link_id) * gv;
            let com = pose.act_point(&from_v(rb.local_center_of_mass()));
            let lin = Vec3::new(twist[0], twist[1], twist[2]);
            let ang = Vec3::new(twist[3], twist[4], twist[5]);
            let vel = lin + ang.cross(&(contact_point - com));
            let slip = vel - n * n.dot(&vel);
            self.readings[i] = FootReading {
                in_contact: touching,
                force,
                force_surface: [force.dot(&n), force.dot(&t1), force.dot(&t2)],
                contact_point_velocity: vel,
                slip_velocity: slip,
                contact_point,
                centre,
            };
        }
        self.other_contact = self.other_colliders.iter().any(|&c| {
            ground.iter().any(|&g| {
                np.contact_pair(c, g).is_some_and(|pair| {
                    pair.solver_manifolds()
                        .iter()
                        .any(|m| m.points.iter().any(|p| p.data.impulse > 0.0))
                })
            })
        });
    }

    /// Per-foot contact read-out of the last step, in the facts' foot order.
    pub fn feet(&self) -> &[FootReading] {
        &self.readings
    }

    /// Whether a robot collider other than a foot pushed on the ground during the last step.
    pub fn body_touching_ground(&self) -> bool {
        self.other_contact
    }
}

/// The robot's multibody in its set; free functions so a caller can hold it while borrowing
/// the rigid-body set (a disjoint field of the world).
fn mb_ref(set: &MultibodyJointSet, h: MultibodyJointHandle) -> &Multibody {
    set.get(h)
        .expect("the plant's multibody exists for its lifetime")
        .0
}
fn mb_mut(set: &mut MultibodyJointSet, h: MultibodyJointHandle) -> &mut Multibody {
    set.get_mut(h)
        .expect("the plant's multibody exists for its lifetime")
        .0
}

/// An empty world with the plant's engine settings; tests of the engine (a block on the
/// plant's terrain) use the same.
pub fn configured_world(settings: &PlantSettings) -> PhysicsWorld {
    let mut world = PhysicsWorld::new();
    world.gravity = Vector::new(0.0, 0.0, -9.81);
    let ip = &mut world.integration_parameters;
    ip.dt = settings.dt;
    ip.num_solver_iterations = settings.substeps;
    ip.contact_recycling = false;
    ip.max_ccd_substeps = 0;
    // rapier's default; multibody contacts are solved with per-point Coulomb friction whatever
    // this says (measured: identical robot trajectories with either setting). For rigid bodies
    // it matters: a 4-point box slid with μ_eff = 0.936 μ under `Coulomb` and exactly μ under
    // `Simplified` (tests/plant_physics.rs).
    ip.friction_model = FrictionModel::Simplified;
    // Two unbiased (relaxation) sweeps per substep instead of rapier's one. rapier 0.36 solves
    // friction only in the unbiased sweep that follows each substep's position update, and the
    // velocity that sweep leaves is the step's final velocity: the state every law observes and
    // the slip read-out. One Gauss–Seidel sweep does not converge the coupled foot contacts of
    // a robot whose feet sit far out from the hips (the yaw-first quadruped yarrow): its stance
    // feet kept a steady 15–20 mm/s of tangential velocity while their positions did not change
    // at all, the laws' damping answered that velocity, and the robot held by the stiff joint
    // PD built up 27 N of inward squeeze per foot (measured: tests/stance_slip.rs). A second
    // sweep converges it (a third and fourth changed the crawl's slip by < 0.01 mm); solving
    // friction in the biased sweep too (`friction_in_bias_pass`) removed it standing but left
    // 11 mm per stance phase of it in the crawl.
    ip.num_internal_stabilization_iterations = 2;
    ip.contact_softness = SpringCoefficients::new(settings.contact_hz, settings.contact_damping);
    ip.static_contact_softness =
        SpringCoefficients::new(settings.contact_hz, settings.contact_damping);
    world
}

/// The tangent basis rapier 0.36's contact solver uses for a force direction `d`
/// (`orthonormal_vector`, then d × t1): Duff et al., "Building an Orthonormal Basis,
/// Revisited", JCGT 2017, the branchless construction rapier cites.
fn solver_tangents(d: &Vec3) -> (Vec3, Vec3) {
    let sign = 1f64.copysign(d.z);
    let a = -1.0 / (sign + d.z);
    let b = d.x * d.y * a;
    let t1 = Vec3::new(b, sign + d.y * d.y * a, -d.y);
    (t1, d.cross(&t1))
}

/// Base pose from q, normalising the quaternion in q.
fn base_pose_of(q: &mut DVector<f64>) -> MPose {
    let n = (q[3] * q[3] + q[4] * q[4] + q[5] * q[5] + q[6] * q[6]).sqrt();
    for k in 3..7 {
        q[k] /= n;
    }
    let quat = UnitQuaternion::from_quaternion(::nalgebra::Quaternion::new(q[6], q[3], q[4], q[5]));
    MPose::from_quaternion(&quat, Vec3::new(q[0], q[1], q[2]))
}
