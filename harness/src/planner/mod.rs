//! The planner: from a robot, the terrain and a gait, the one plan every controller of a cell
//! follows: base pose, twist and acceleration, each foot's position, velocity and acceleration,
//! the stance schedule, and the joint references that realise them.
//!
//! # How the plan is made
//!
//! * The trunk stays parallel to the terrain's tangent plane at the start (its z axis along
//!   the normal, its x axis uphill), `body_height` above it along the normal. The base and the
//!   feet move along polynomial pieces (`pieces.rs`) that meet with continuous acceleration:
//!   minimum-jerk moves between rest points, a 64 h s³(1 − s)³ lift for swings, smoothstep speed
//!   ramps for the trot. These are evaluated analytically at any time.
//! * A stance foot's centre sits `radius` above the terrain along the normal at its spot and
//!   does not move; a swing goes from lift-off to touchdown, lifted along the normal. Spots are
//!   laid out in the tangent plane at the start and dropped onto the terrain's own height and
//!   normal there (the same thing on a plane slope).
//! * Joint angles come from each leg's inverse kinematics (`legs.rs`: closed form for a leg
//!   with an abduction/hip-yaw joint and two parallel pitch joints, damped least squares on the
//!   model's Jacobian otherwise). Joint rates and accelerations come through the Jacobian, not
//!   by differencing: with the base motion known, per leg
//!   q̇_leg = J_leg⁻¹ (ṗ_foot − J_base v_base) and
//!   q̈_leg = J_leg⁻¹ (p̈_foot − J_base v̇_base − J̇ v),
//!   J̇ v the foot's bias acceleration with the full v (differentiating ṗ = J v; e.g. Siciliano
//!   et al., "Robotics: Modelling, Planning and Control", Springer 2009, §3.7 and §3.9).
//! * Knots: at build time this exact solution is computed at knots no more than
//!   [`KNOT_SPACING`] apart, with a knot at every breakpoint (where a piece or the stance set
//!   changes). [`Plan::sample`] returns the base and feet analytically and the joints by quintic
//!   Hermite interpolation of (q, q̇, q̈) between knots: exact at the knots, C² everywhere, and
//!   the joint velocity and acceleration it returns are the derivatives of the joint position it
//!   returns. Between breakpoints the motion is analytic, so the interpolation error is of order
//!   h⁶ q⁽⁶⁾ / 46080 (far below 1e-12 rad for these gaits; the tests measure it against
//!   [`Plan::evaluate`], the exact solution at any time).
//! * Memory: the knots are not all kept. The build evaluates every knot once (to check them),
//!   keeping only the numeric legs' seed at the start of each chunk of [`CHUNK_KNOTS`] knots;
//!   a chunk is evaluated again from its seed when a sample needs it, the same evaluations in
//!   the same order, so it is bit for bit the chunk the build saw. A plan keeps at most
//!   [`CACHE_CHUNKS`] chunks (shared by every thread sampling it, least recently used dropped
//!   first), so its memory does not grow with the duration beyond that (about 16 s of knots).
//!   `sample` allocates only when it moves into a chunk no longer kept.
//!
//! # Centre of mass in the static crawl
//!
//! The crawl chooses base positions with the centre of mass treated as fixed in the base frame
//! (its place in the starting posture, from the model's `center_of_mass`), projected along
//! gravity onto the ground plane. The legs moving under the base shift the real centre of
//! mass (a swinging leg of the demo quadruped is a ninth of its mass; the approximation misses
//! by 2–10 mm there, more on steeper slopes), so the plan then computes the real projected
//! centre of mass with the full model during every swing and widens the margin of each support
//! edge by what the approximation missed, repeating until the real centre of mass keeps the
//! margin at every knot of every swing.

mod gaits;
pub mod legs;
pub mod limit;
mod pieces;
mod support;

pub use legs::{IkMethod, IkScratch, Leg, Legs};

use crate::plant::terrain::Terrain;
use gaits::{CrawlParams, CrawlSwing, Ground, Schedule, Setup, TrotParams};
use gripsweep_controllers::algorithms::{
    Workspace, center_of_mass, forward_kinematics, frame_bias_acceleration, frame_jacobian,
    frame_pose, velocities_and_bias,
};
use gripsweep_controllers::model::Model;
use gripsweep_controllers::robot_facts::RobotFacts;
use gripsweep_controllers::spatial::{Mat3, Pose, Vec3};
use nalgebra::{DMatrix, DVector};
use pieces::{Piece, piece_at, quintic_hermite};
use std::fmt;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use support::P2;

/// Default peak base acceleration of the crawl's paced shifts, m/s²: 2 % of standard gravity
/// (see the README, "The planner": the horizontal force a base acceleration a needs adds about
/// a / (g cos θ) to the friction the plan needs, here ≤ 0.02 / cos θ).
pub const DEFAULT_SHIFT_ACCEL: f64 = 0.02 * 9.806_65;
/// Largest time between joint knots, s.
pub const KNOT_SPACING: f64 = 1e-3;
/// Longest plan, s.
pub const MAX_DURATION: f64 = 600.0;
/// Knots per chunk of a plan's knot cache (a chunk also holds the next chunk's first knot).
pub const CHUNK_KNOTS: usize = 256;
/// Chunks a plan keeps at most (≈ 16 s of knots at [`KNOT_SPACING`]).
pub const CACHE_CHUNKS: usize = 64;
/// Shortest swing or base move, s.
const MIN_PHASE: f64 = 0.01;
/// A leg whose Jacobian has |det J| / Π |columns| below this is treated as singular.
const SINGULAR_RATIO: f64 = 1e-3;
/// Largest mismatch between the planned foot and the forward kinematics of the planned joints
/// accepted at a knot, m.
const FOOT_CHECK: f64 = 1e-9;
/// Extra margin the crawl asks of the approximate centre of mass on top of the measured
/// correction, so that the real one keeps the margin after the correction converges, m.
const CRAWL_SAFETY: f64 = 1e-5;
/// Spacing of the exact solutions in the crawl's coarse centre-of-mass pass, s.
const CRAWL_CHECK_SPACING: f64 = 5e-3;
/// Rounds of the crawl's centre-of-mass correction before giving up.
const CRAWL_ROUNDS: usize = 12;

/// A plan that cannot be made, with the parameter (or foot and time) it is about.
#[derive(Clone, Debug, PartialEq)]
pub struct PlanError(pub String);

impl fmt::Display for PlanError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for PlanError {}

/// The motion to plan.
#[derive(Clone, Debug, PartialEq)]
pub enum Gait {
    /// Hold the nominal stance.
    Stand,
    /// Static crawl up the slope: one swing foot at a time; before each swing the base shifts
    /// so the centre of mass (projected along gravity onto the ground) lies inside the polygon
    /// of the stance feet with `margin` (m) to every edge. `cycle_period` sets the even slot
    /// grid (cycle / feet per foot, half shift, half swing); with `shift_accel` (m/s²) a shift
    /// lasts as long as its length needs for a peak base acceleration within it (never less
    /// than its even share), so the cycle lengthens; `None` keeps the even grid (the faster,
    /// dynamic plan).
    Crawl {
        step_length: f64,
        swing_height: f64,
        cycle_period: f64,
        body_height: f64,
        margin: Option<f64>,
        shift_accel: Option<f64>,
    },
    /// Weight shifting in place: all feet in stance; the base moves by `amplitude` towards each
    /// foot in turn (rest to rest), one round per `period`.
    WeightShift {
        amplitude: f64,
        period: f64,
        body_height: f64,
    },
    /// Trot at a modest speed: diagonal pairs (for 4 feet; for 6 feet an alternating tripod)
    /// swing together.
    Trot {
        step_length: f64,
        swing_height: f64,
        cycle_period: f64,
        body_height: f64,
    },
}

impl Gait {
    fn name(&self) -> &'static str {
        match self {
            Gait::Stand => "Stand",
            Gait::Crawl { .. } => "Crawl",
            Gait::WeightShift { .. } => "WeightShift",
            Gait::Trot { .. } => "Trot",
        }
    }

    /// Every parameter checked: finite and in range.
    fn validate(&self) -> Result<(), PlanError> {
        let gait = self.name();
        let check = |name: &str, value: f64, ok: bool, allowed: &str| {
            if value.is_finite() && ok {
                Ok(())
            } else {
                Err(PlanError(format!(
                    "{gait}: `{name}` = {value}: allowed: a finite value {allowed}"
                )))
            }
        };
        match *self {
            Gait::Stand => Ok(()),
            Gait::Crawl {
                step_length,
                swing_height,
                cycle_period,
                body_height,
                margin,
                shift_accel,
            } => {
                check("step_length", step_length, step_length >= 0.0, "≥ 0 m")?;
                check("swing_height", swing_height, swing_height > 0.0, "> 0 m")?;
                check("cycle_period", cycle_period, cycle_period > 0.0, "> 0 s")?;
                check("body_height", body_height, body_height > 0.0, "> 0 m")?;
                if let Some(a) = shift_accel {
                    check("shift_accel", a, a > 0.0, "> 0 m/s²")?;
                }
                match margin {
                    Some(m) => check("margin", m, m >= 0.0, "≥ 0 m"),
                    None => Ok(()),
                }
            }
            Gait::WeightShift {
                amplitude,
                period,
                body_height,
            } => {
                check("amplitude", amplitude, amplitude > 0.0, "> 0 m")?;
                check("period", period, period > 0.0, "> 0 s")?;
                check("body_height", body_height, body_height > 0.0, "> 0 m")
            }
            Gait::Trot {
                step_length,
                swing_height,
                cycle_period,
                body_height,
            } => {
                check("step_length", step_length, step_length >= 0.0, "≥ 0 m")?;
                check("swing_height", swing_height, swing_height > 0.0, "> 0 m")?;
                check("cycle_period", cycle_period, cycle_period > 0.0, "> 0 s")?;
                check("body_height", body_height, body_height > 0.0, "> 0 m")
            }
        }
    }
}

/// Everything a controller or the metrics need at one time.
#[derive(Clone, Debug, PartialEq)]
pub struct PlanSample {
    /// Full generalized reference (base + joints) in the model's conventions.
    pub q: DVector<f64>,
    pub v: DVector<f64>,
    pub a: DVector<f64>,
    /// Per foot, facts order.
    pub stance: Vec<bool>,
    /// Foot centres, world.
    pub foot_pos: Vec<Vec3>,
    pub foot_vel: Vec<Vec3>,
    pub foot_acc: Vec<Vec3>,
    pub base_pos: Vec3,
    /// Which stance phase (changes when the stance set changes).
    pub phase_index: usize,
    /// The knot chunk the last sample read (not part of the sample's value).
    knots: ChunkHandle,
}

/// The joint knots of consecutive knot indices `first..first + len`: n_joints values of q,
/// q̇, q̈ per knot.
#[derive(Debug)]
struct KnotChunk {
    first: usize,
    q: Vec<f64>,
    v: Vec<f64>,
    a: Vec<f64>,
}

impl KnotChunk {
    /// An empty chunk starting at knot `first`, room for `knots` knots of `nj` joints.
    fn new(first: usize, knots: usize, nj: usize) -> Self {
        KnotChunk {
            first,
            q: Vec::with_capacity(knots * nj),
            v: Vec::with_capacity(knots * nj),
            a: Vec::with_capacity(knots * nj),
        }
    }

    /// Append the joints of an exact solution as the next knot.
    fn push(&mut self, out: &PlanSample) {
        self.q.extend(out.q.iter().skip(7));
        self.v.extend(out.v.iter().skip(6));
        self.a.extend(out.a.iter().skip(6));
    }
}

/// A sample's reference to the chunk it read last: (knot set, chunk index, chunk).
#[derive(Clone, Default)]
struct ChunkHandle(Option<(u64, usize, Arc<KnotChunk>)>);

impl PartialEq for ChunkHandle {
    fn eq(&self, _: &Self) -> bool {
        true
    }
}

impl fmt::Debug for ChunkHandle {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.0 {
            Some((_, c, _)) => write!(f, "chunk {c}"),
            None => f.write_str("no chunk"),
        }
    }
}

/// Where the knots are: per breakpoint interval (start, end, knots in it, first knot index),
/// the knot count (the last knot at the plan's end), the numeric legs' seed (n_joints angles)
/// at the start of each chunk, and a process-unique id of this set of knots.
#[derive(Clone, Debug, Default)]
struct KnotGrid {
    intervals: Vec<(f64, f64, usize, usize)>,
    count: usize,
    end: f64,
    seeds: Vec<f64>,
    id: u64,
}

static KNOT_SET_IDS: AtomicU64 = AtomicU64::new(1);

impl KnotGrid {
    /// Time of knot `k` (the build's own formula).
    fn time(&self, k: usize) -> f64 {
        if k + 1 >= self.count {
            return self.end;
        }
        let j = self.intervals.partition_point(|iv| iv.3 <= k) - 1;
        let (b0, b1, m, first) = self.intervals[j];
        b0 + (b1 - b0) * (k - first) as f64 / m as f64
    }

    /// The number of knots whose time satisfies `pred`, `pred` true on a prefix.
    fn partition_point(&self, pred: impl Fn(f64) -> bool) -> usize {
        let (mut lo, mut hi) = (0, self.count);
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            if pred(self.time(mid)) {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        lo
    }
}

/// One kept chunk: (knot set id, chunk index, chunk, last use).
type KeptChunk = (u64, usize, Arc<KnotChunk>, u64);

/// The chunks a plan keeps, and the use clock.
#[derive(Default)]
struct KnotCache(Mutex<(Vec<KeptChunk>, u64)>);

impl KnotCache {
    fn get(&self, id: u64, c: usize) -> Option<Arc<KnotChunk>> {
        let mut g = self.0.lock().unwrap_or_else(|e| e.into_inner());
        g.1 += 1;
        let now = g.1;
        g.0.iter_mut().find(|e| e.0 == id && e.1 == c).map(|e| {
            e.3 = now;
            e.2.clone()
        })
    }

    fn put(&self, id: u64, c: usize, chunk: Arc<KnotChunk>) -> Arc<KnotChunk> {
        let mut g = self.0.lock().unwrap_or_else(|e| e.into_inner());
        g.1 += 1;
        let now = g.1;
        g.0.retain(|e| e.0 == id);
        if let Some(e) = g.0.iter_mut().find(|e| e.1 == c) {
            // Another thread made it meanwhile: the same values; keep the first.
            e.3 = now;
            return e.2.clone();
        }
        if g.0.len() >= CACHE_CHUNKS
            && let Some(old) = (0..g.0.len()).min_by_key(|&i| g.0[i].3)
        {
            g.0.swap_remove(old);
        }
        g.0.push((id, c, chunk.clone(), now));
        chunk
    }

    fn clear(&self) {
        self.0.lock().unwrap_or_else(|e| e.into_inner()).0.clear();
    }
}

impl Clone for KnotCache {
    /// A clone starts with no chunks (it makes them again from the same seeds).
    fn clone(&self) -> Self {
        KnotCache::default()
    }
}

impl fmt::Debug for KnotCache {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let n = self.0.lock().map(|g| g.0.len()).unwrap_or(0);
        write!(f, "KnotCache({n} chunks)")
    }
}

/// Buffers for [`Plan::evaluate`] (the exact solution at any time).
#[derive(Clone, Debug)]
pub struct PlanScratch {
    ws: Workspace,
    jac: DMatrix<f64>,
    ik: IkScratch,
    /// Per leg: the inverse of the square leg matrix [J_leg; C] (C the rows fixing a redundant
    /// leg's extra joints) and p̈ − J_base v̇_base, between the velocity and acceleration passes.
    legs: Vec<(DMatrix<f64>, Vec3)>,
}

/// A plan: analytic base and feet, joints at knots.
#[derive(Clone, Debug)]
pub struct Plan {
    model: Model,
    legs: Legs,
    duration: f64,
    ground: Ground,
    /// Base orientation as q stores it (x y z w).
    base_quat: [f64; 4],
    base: Vec<Piece>,
    feet: Vec<Vec<Piece>>,
    phase_starts: Vec<f64>,
    phase_stance: Vec<Vec<bool>>,
    breakpoints: Vec<f64>,
    /// Where the joint knots are, and the chunks of them kept (see the module notes).
    knots: KnotGrid,
    knot_cache: KnotCache,
    /// Nominal joint angles (joints on no leg hold them).
    joint_nominal: Vec<f64>,
    /// Joints that belong to no leg.
    free_joints: Vec<usize>,
    cycles: usize,
    /// Crawl only: rounds of the centre-of-mass correction, and the largest widening of a
    /// support edge it needed, m.
    crawl_rounds: usize,
    crawl_widening: f64,
    /// Projection of the centre of mass along gravity onto the plane: (a, b) = s.xy − s.z g.xy / g.z.
    gravity_local: Vec3,
    /// Radius of the sphere feet, m.
    foot_radius: f64,
    /// Length of the first whole gait cycle, s (crawl and trot; 0 otherwise).
    first_cycle: f64,
    /// Crawl only: the centre-of-mass margin used (given, or derived from the robot), m.
    crawl_margin: f64,
    /// The gait planned, and the robot's nominal stance height (for the hints of errors).
    gait: Gait,
    stance_height: f64,
}

impl Plan {
    /// Make the plan. Errors name the parameter, or the foot and time, at fault.
    pub fn build(
        model: &Model,
        facts: &RobotFacts,
        terrain: &dyn Terrain,
        gait: &Gait,
        duration: f64,
    ) -> Result<Plan, PlanError> {
        if !(duration.is_finite() && duration > 0.0) {
            return Err(PlanError(format!(
                "duration = {duration}: allowed: a finite value > 0 s"
            )));
        }
        if duration > MAX_DURATION {
            return Err(PlanError(format!(
                "duration = {duration} s: allowed: at most {MAX_DURATION} s"
            )));
        }
        gait.validate()?;
        let radius = facts.feet.radius;
        if !(radius.is_finite() && radius > 0.0) {
            return Err(PlanError(format!(
                "field `feet.radius` = {radius}: allowed: a radius > 0 m"
            )));
        }
        let legs = Legs::new(model, facts)?;
        let n_feet = legs.len();
        if n_feet == 0 {
            return Err(PlanError(
                "field `feet.frames` is empty: no feet to plan".into(),
            ));
        }
        let min_feet = match gait {
            Gait::Stand => 1,
            Gait::WeightShift { .. } => 3,
            Gait::Crawl { .. } | Gait::Trot { .. } => 4,
        };
        if n_feet < min_feet {
            return Err(PlanError(format!(
                "{}: the robot has {n_feet} feet; this gait needs at least {min_feet}",
                gait.name()
            )));
        }
        // The shortest move of the gait must span a few knots.
        let n = n_feet as f64;
        let shortest = match *gait {
            Gait::Stand => None,
            Gait::Crawl { cycle_period, .. } => Some((
                "cycle_period",
                cycle_period,
                cycle_period / n * (1.0 - gaits::CRAWL_SHIFT_FRACTION),
            )),
            Gait::WeightShift { period, .. } => Some(("period", period, period / n)),
            Gait::Trot { cycle_period, .. } => Some((
                "cycle_period",
                cycle_period,
                0.5 * cycle_period * gaits::TROT_SWING_FRACTION,
            )),
        };
        if let Some((name, value, phase)) = shortest
            && phase < MIN_PHASE
        {
            return Err(PlanError(format!(
                "{}: `{name}` = {value} s makes moves of {phase:.4} s with {n_feet} feet; allowed: a period giving moves of at least {MIN_PHASE} s",
                gait.name()
            )));
        }
        let g_norm = model.gravity.norm();
        if !(g_norm.is_finite() && g_norm > 0.0) {
            return Err(PlanError(
                "the model's gravity is zero: the planner projects the centre of mass along it"
                    .into(),
            ));
        }

        // The ground plane at the start.
        let z0 = terrain.height_at(0.0, 0.0);
        let (n, t1, t2) = terrain.surface_frame(0.0, 0.0);
        let rot = Mat3::from_columns(&[t1, t2, n]);
        if !(z0.is_finite() && rot.iter().all(|x| x.is_finite()))
            || (rot.transpose() * rot - Mat3::identity()).amax() > 1e-9
        {
            return Err(PlanError(format!(
                "terrain '{}': no valid surface frame at the origin (height {z0}, normal {n:?})",
                terrain.label()
            )));
        }
        let ground = Ground {
            origin: Vec3::new(0.0, 0.0, z0),
            rot,
        };
        let gravity_local = rot.transpose() * (model.gravity / g_norm);
        if gravity_local.z > -1e-3 {
            return Err(PlanError(format!(
                "terrain '{}': gravity runs (nearly) along the ground; the planner needs ground it can stand on",
                terrain.label()
            )));
        }

        // Nominal stance in the base frame: the footprint and the nominal height.
        let joint_nominal = facts.nominal_joints(model);
        let mut ws = Workspace::new(model);
        let mut q_nom = model.neutral();
        for (k, &x) in joint_nominal.iter().enumerate() {
            q_nom[7 + k] = x;
        }
        forward_kinematics(model, &mut ws, &q_nom);
        let feet_base: Vec<Vec3> = (0..n_feet)
            .map(|i| frame_pose(model, &ws, legs.leg(i).frame()).trans)
            .collect();
        let footprint: Vec<P2> = feet_base.iter().map(|f| P2::new(f.x, f.y)).collect();
        let nominal_height = radius - feet_base.iter().map(|f| f.z).sum::<f64>() / n_feet as f64;
        let height = match *gait {
            Gait::Stand => nominal_height,
            Gait::Crawl { body_height, .. }
            | Gait::WeightShift { body_height, .. }
            | Gait::Trot { body_height, .. } => body_height,
        };
        let (crawl_order, trot_group) = foot_order(&footprint);
        let in_legs: Vec<bool> = (0..model.n_joints())
            .map(|k| (0..n_feet).any(|i| legs.leg(i).joints().contains(&k)))
            .collect();
        let free_joints = (0..model.n_joints()).filter(|&k| !in_legs[k]).collect();
        let mut setup = Setup {
            terrain,
            ground: ground.clone(),
            radius,
            duration,
            foot_names: facts.feet.frames.clone(),
            footprint,
            height,
            com_offset: P2::zeros(),
            crawl_order,
            trot_group,
        };

        // The plan skeleton; its pieces are replaced per gait below.
        let base_rot = nalgebra::UnitQuaternion::from_rotation_matrix(
            &nalgebra::Rotation3::from_matrix_unchecked(rot),
        );
        let mut plan = Plan {
            model: model.clone(),
            legs,
            duration,
            ground,
            base_quat: [base_rot.i, base_rot.j, base_rot.k, base_rot.w],
            base: Vec::new(),
            feet: Vec::new(),
            phase_starts: Vec::new(),
            phase_stance: Vec::new(),
            breakpoints: Vec::new(),
            knots: KnotGrid::default(),
            knot_cache: KnotCache::default(),
            joint_nominal,
            free_joints,
            cycles: 0,
            crawl_rounds: 0,
            crawl_widening: 0.0,
            gravity_local,
            foot_radius: radius,
            first_cycle: 0.0,
            crawl_margin: match *gait {
                Gait::Crawl {
                    margin: Some(m), ..
                } => m,
                _ => 0.0,
            },
            gait: gait.clone(),
            stance_height: nominal_height,
        };

        // The starting posture fixes where the centre of mass sits relative to the base.
        plan.install(gaits::stand(&setup));
        let mut scratch = plan.new_scratch();
        let mut start = plan.new_sample();
        plan.seed_nominal(&mut start);
        plan.evaluate_exact(0.0, &mut scratch, &mut start)?;
        forward_kinematics(&plan.model, &mut scratch.ws, &start.q);
        let com = center_of_mass(&plan.model, &scratch.ws);
        // The base starts at (0, 0) in the plane.
        setup.com_offset = plan.project(&com);

        match *gait {
            Gait::Stand => {
                plan.make_knots(&mut scratch)?;
            }
            Gait::WeightShift {
                amplitude, period, ..
            } => {
                plan.install(gaits::weight_shift(&setup, amplitude, period)?);
                plan.make_knots(&mut scratch)?;
            }
            Gait::Trot {
                step_length,
                swing_height,
                cycle_period,
                ..
            } => {
                let params = TrotParams {
                    step_length,
                    swing_height,
                    cycle_period,
                };
                plan.install(gaits::trot(&setup, &params)?);
                plan.make_knots(&mut scratch)?;
            }
            Gait::Crawl {
                step_length,
                swing_height,
                cycle_period,
                margin,
                shift_accel,
                ..
            } => {
                let margin = match margin {
                    Some(m) => m,
                    None => derived_margin(&setup)?,
                };
                plan.crawl_margin = margin;
                let params = CrawlParams {
                    step_length,
                    swing_height,
                    cycle_period,
                    margin,
                    shift_accel,
                };
                plan.crawl_with_real_com(&setup, &params, &mut scratch)?;
            }
        }
        Ok(plan)
    }

    /// The static crawl, its base positions corrected until the full model's projected centre
    /// of mass keeps the margin at every knot of every swing (see the module notes).
    fn crawl_with_real_com(
        &mut self,
        setup: &Setup,
        params: &CrawlParams,
        scratch: &mut PlanScratch,
    ) -> Result<(), PlanError> {
        let mut extra: Vec<Vec<f64>> = Vec::new();
        let mut out = self.new_sample();
        let mut worst = f64::NEG_INFINITY;
        for round in 1..=CRAWL_ROUNDS {
            let schedule = gaits::crawl(setup, params, &extra)?;
            let swings = schedule.swings.clone();
            self.install(schedule);
            // A coarse pass of exact solutions steers the correction; the knots are made, and
            // checked at every one, only once the coarse pass holds.
            let (need, coarse) =
                self.com_shortfall(&swings, params.margin, scratch, &mut out, false)?;
            worst = coarse;
            if coarse >= 0.0 {
                self.make_knots(scratch)?;
                let (need, fine) =
                    self.com_shortfall(&swings, params.margin, scratch, &mut out, true)?;
                worst = fine;
                if fine >= 0.0 {
                    self.crawl_rounds = round;
                    self.crawl_widening = extra.iter().flatten().fold(0.0, |m, &x| f64::max(m, x));
                    return Ok(());
                }
                extra = need;
            } else {
                extra = need;
            }
        }
        Err(PlanError(format!(
            "Crawl: the centre of mass could not be kept {} m inside the support polygon with the swinging legs counted (short by {:.2e} m after {CRAWL_ROUNDS} rounds); allowed: a smaller margin",
            params.margin, -worst
        )))
    }

    /// The real (full-model) projected centre of mass during every swing, at the knots or, for
    /// the coarse pass, at exact solutions no more than [`CRAWL_CHECK_SPACING`] apart. Returns
    /// per swing and support edge the margin widening that the approximate centre of mass needs
    /// for the real one to keep the margin (plus [`CRAWL_SAFETY`]), and the smallest slack of
    /// the real one over the margin.
    fn com_shortfall(
        &self,
        swings: &[CrawlSwing],
        margin: f64,
        scratch: &mut PlanScratch,
        out: &mut PlanSample,
        at_knots: bool,
    ) -> Result<(Vec<Vec<f64>>, f64), PlanError> {
        let mut needs = Vec::with_capacity(swings.len());
        let mut worst = f64::INFINITY;
        self.seed_nominal(out);
        for swing in swings {
            let mut need = vec![f64::NEG_INFINITY; swing.support.edges.len()];
            let mut account = |com: P2| {
                let shortfall = com - swing.target;
                for (e, (normal, _)) in swing.support.edges.iter().enumerate() {
                    need[e] = need[e].max(-normal.dot(&shortfall) + CRAWL_SAFETY);
                }
                worst = worst.min(swing.support.margin_of(&com) - margin);
            };
            if at_knots {
                let first = self.knots.partition_point(|t| t < swing.t0);
                for k in first..self.knots.count {
                    let t = self.knots.time(k);
                    if t > swing.t1 {
                        break;
                    }
                    self.sample(t, out);
                    forward_kinematics(&self.model, &mut scratch.ws, &out.q);
                    account(self.project(&center_of_mass(&self.model, &scratch.ws)));
                }
            } else {
                let m = ((swing.t1 - swing.t0) / CRAWL_CHECK_SPACING)
                    .ceil()
                    .max(1.0) as usize;
                for i in 0..=m {
                    let t = swing.t0 + (swing.t1 - swing.t0) * i as f64 / m as f64;
                    // The previous solution seeds the numeric legs; the workspace is left at
                    // the solved configuration.
                    self.evaluate_exact(t, scratch, out)?;
                    account(self.project(&center_of_mass(&self.model, &scratch.ws)));
                }
            }
            needs.push(need);
        }
        Ok((needs, worst))
    }

    fn install(&mut self, s: Schedule) {
        self.base = s.base;
        self.feet = s.feet;
        self.phase_starts = s.phases.iter().map(|p| p.0).collect();
        self.phase_stance = s.phases.into_iter().map(|p| p.1).collect();
        self.cycles = s.cycles;
        self.first_cycle = s.first_cycle;
        let mut b: Vec<f64> = vec![0.0, self.duration];
        for p in self.base.iter().chain(self.feet.iter().flatten()) {
            b.push(p.t0);
            b.push(p.t1);
        }
        b.extend(self.phase_starts.iter().copied());
        b.retain(|t| (0.0..=self.duration).contains(t));
        b.sort_by(f64::total_cmp);
        b.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
        if let Some(last) = b.last_mut() {
            *last = self.duration;
        }
        self.breakpoints = b;
        self.knots = KnotGrid::default();
        self.knot_cache.clear();
    }

    /// Exact solutions at knots: every breakpoint, and between breakpoints no more than
    /// [`KNOT_SPACING`] apart wherever something moves.
    fn make_knots(&mut self, scratch: &mut PlanScratch) -> Result<(), PlanError> {
        let mut grid = KnotGrid {
            end: self.duration,
            id: KNOT_SET_IDS.fetch_add(1, Ordering::Relaxed),
            ..KnotGrid::default()
        };
        let mut first = 0;
        for w in self.breakpoints.windows(2) {
            let (b0, b1) = (w[0], w[1]);
            let mid = 0.5 * (b0 + b1);
            let still = self.base[piece_at(&self.base, mid)].is_constant()
                && self.feet.iter().all(|f| f[piece_at(f, mid)].is_constant());
            let m = if still {
                1
            } else {
                ((b1 - b0) / KNOT_SPACING).ceil().max(1.0) as usize
            };
            grid.intervals.push((b0, b1, m, first));
            first += m;
        }
        grid.count = first + 1;
        let nj = self.model.n_joints();
        self.knot_cache.clear();
        // Every knot once, in order (the previous knot's angles seed the numeric legs, keeping
        // one branch throughout); each chunk is kept as it completes.
        let mut out = self.new_sample();
        self.seed_nominal(&mut out);
        let (mut prev_q, mut prev_v) = (vec![0.0; nj], vec![0.0; nj]);
        let mut chunk = KnotChunk::new(0, CHUNK_KNOTS + 1, nj);
        for k in 0..grid.count {
            if k % CHUNK_KNOTS == 0 {
                grid.seeds.extend(out.q.iter().skip(7));
            }
            let t = grid.time(k);
            self.evaluate_exact(t, scratch, &mut out)?;
            if k > 0 {
                self.check_same_branch(grid.time(k - 1), t, &prev_q, &prev_v, &out)?;
            }
            for (j, p) in prev_q.iter_mut().enumerate() {
                *p = out.q[7 + j];
                prev_v[j] = out.v[6 + j];
            }
            chunk.push(&out);
            let c = chunk.first / CHUNK_KNOTS;
            if k == (c + 1) * CHUNK_KNOTS || k + 1 == grid.count {
                // This knot also opens the next chunk.
                let mut next = KnotChunk::new(k, CHUNK_KNOTS + 1, nj);
                next.push(&out);
                let done = std::mem::replace(&mut chunk, next);
                self.knot_cache.put(grid.id, c, Arc::new(done));
            }
        }
        self.knots = grid;
        Ok(())
    }

    /// Knots `c · CHUNK_KNOTS ..= (c + 1) · CHUNK_KNOTS` (or to the last), evaluated again
    /// from the chunk's seed: the same evaluations, in the same order, as the build's.
    fn make_chunk(&self, c: usize) -> KnotChunk {
        let nj = self.model.n_joints();
        let g = &self.knots;
        let first = c * CHUNK_KNOTS;
        let last = ((c + 1) * CHUNK_KNOTS).min(g.count - 1);
        let mut scratch = self.new_scratch();
        let mut out = self.new_sample();
        for j in 0..nj {
            out.q[7 + j] = g.seeds[c * nj + j];
        }
        let mut chunk = KnotChunk::new(first, last + 1 - first, nj);
        for k in first..=last {
            // Every knot passed this evaluation when the plan was built, with these inputs.
            if let Err(e) = self.evaluate_exact(g.time(k), &mut scratch, &mut out) {
                panic!("plan knot {k} failed on re-evaluation after passing at build: {e}");
            }
            chunk.push(&out);
        }
        chunk
    }

    /// The chunk holding knot `k` and the next one, from the sample's handle, the plan's
    /// cache, or made again.
    fn chunk_for(&self, k: usize, handle: &mut ChunkHandle) -> Arc<KnotChunk> {
        let id = self.knots.id;
        let c = k / CHUNK_KNOTS;
        if let Some((hid, hc, chunk)) = &handle.0
            && *hid == id
            && *hc == c
        {
            return chunk.clone();
        }
        let chunk = match self.knot_cache.get(id, c) {
            Some(ch) => ch,
            None => self.knot_cache.put(id, c, Arc::new(self.make_chunk(c))),
        };
        handle.0 = Some((id, c, chunk.clone()));
        chunk
    }

    /// Consecutive knots must lie on one smooth joint path: the trapezoid rule
    /// q₁ ≈ q₀ + h (q̇₀ + q̇₁)/2 holds to h³ max|q⃛|/12 (≪ 1e-3 rad at 1 ms), while a jump to
    /// another inverse-kinematics branch moves a joint by a sizeable angle at once.
    fn check_same_branch(
        &self,
        t0: f64,
        t1: f64,
        q0: &[f64],
        v0: &[f64],
        out: &PlanSample,
    ) -> Result<(), PlanError> {
        let h = t1 - t0;
        for i in 0..self.legs.len() {
            for &k in self.legs.leg(i).joints() {
                let predicted = q0[k] + 0.5 * h * (v0[k] + out.v[6 + k]);
                if (out.q[7 + k] - predicted).abs() > 1e-3 {
                    return Err(PlanError(format!(
                        "foot '{}' between t = {t0:.4} s and {t1:.4} s: joint '{}' jumps from {:.4} to {:.4} rad (the leg's inverse kinematics changes branch: the leg passes a stretched or folded posture, or a joint limit turns it to another solution); {}",
                        self.legs.leg(i).foot(),
                        self.model.joints[k].name,
                        q0[k],
                        out.q[7 + k],
                        self.hint(out.stance[i])
                    )));
                }
            }
        }
        Ok(())
    }

    /// Which gait settings would help a leg that cannot follow the plan, in the scenario's
    /// field names, with their values now.
    fn hint(&self, stance: bool) -> String {
        let h = self.stance_height;
        let body = |b: f64| {
            if (b - h).abs() > 1e-3 {
                format!(
                    "a `gait.body_height` nearer the robot's nominal stance height {h:.3} m (now {b:.4} m)"
                )
            } else {
                format!(
                    "a `gait.body_height` a little below the robot's nominal stance height {h:.3} m (more reach)"
                )
            }
        };
        match self.gait {
            Gait::Stand => format!(
                "the robot is the cause, not the gait: its nominal posture (`[nominal]` in the robot facts) puts the base {h:.3} m above the ground"
            ),
            Gait::WeightShift {
                amplitude,
                body_height,
                ..
            } => format!(
                "gait settings that would help: a smaller `gait.amplitude` (now {amplitude:.4} m), or {}",
                body(body_height)
            ),
            Gait::Crawl {
                step_length,
                swing_height,
                body_height,
                ..
            } => {
                if stance {
                    format!(
                        "gait settings that would help: a smaller `gait.margin` (the sideways weight shift; now {:.4} m), a shorter `gait.step_length` (now {step_length:.4} m), or {}",
                        self.crawl_margin,
                        body(body_height)
                    )
                } else {
                    format!(
                        "gait settings that would help: a lower `gait.swing_height` (now {swing_height:.4} m), a shorter `gait.step_length` (now {step_length:.4} m), or {}",
                        body(body_height)
                    )
                }
            }
            Gait::Trot {
                step_length,
                swing_height,
                body_height,
                ..
            } => {
                if stance {
                    format!(
                        "gait settings that would help: a shorter `gait.step_length` (now {step_length:.4} m), or {}",
                        body(body_height)
                    )
                } else {
                    format!(
                        "gait settings that would help: a lower `gait.swing_height` (now {swing_height:.4} m), a shorter `gait.step_length` (now {step_length:.4} m), or {}",
                        body(body_height)
                    )
                }
            }
        }
    }

    fn seed_nominal(&self, out: &mut PlanSample) {
        for (k, &x) in self.joint_nominal.iter().enumerate() {
            out.q[7 + k] = x;
        }
    }

    /// Plane coordinates of a world point projected along gravity onto the ground plane.
    fn project(&self, p: &Vec3) -> P2 {
        let s = self.ground.local(p);
        let g = &self.gravity_local;
        P2::new(s.x - s.z * g.x / g.z, s.y - s.z * g.y / g.z)
    }

    /// A sample with every buffer sized (allocates once).
    pub fn new_sample(&self) -> PlanSample {
        let n = self.legs.len();
        PlanSample {
            q: self.model.neutral(),
            v: DVector::zeros(self.model.nv()),
            a: DVector::zeros(self.model.nv()),
            stance: vec![true; n],
            foot_pos: vec![Vec3::zeros(); n],
            foot_vel: vec![Vec3::zeros(); n],
            foot_acc: vec![Vec3::zeros(); n],
            base_pos: Vec3::zeros(),
            phase_index: 0,
            knots: ChunkHandle::default(),
        }
    }

    /// Buffers for [`Plan::evaluate`].
    pub fn new_scratch(&self) -> PlanScratch {
        PlanScratch {
            ws: Workspace::new(&self.model),
            jac: DMatrix::zeros(3, self.model.nv()),
            ik: self.legs.new_scratch(&self.model),
            legs: (0..self.legs.len())
                .map(|i| {
                    let n = self.legs.leg(i).n();
                    (DMatrix::zeros(n, n), Vec3::zeros())
                })
                .collect(),
        }
    }

    /// The plan at time `t` (clamped to [0, duration]): base and feet analytic, joints
    /// interpolated between the knots. Allocates nothing.
    pub fn sample(&self, t: f64, out: &mut PlanSample) {
        let t = self.clamp_time(t);
        self.base_and_feet(t, out);
        self.joints_from_knots(t, out);
    }

    /// The exact plan at time `t`: inverse kinematics and the Jacobian solves done at `t`
    /// itself, as at a knot (for checks; `sample` is the fast path).
    pub fn evaluate(
        &self,
        t: f64,
        scratch: &mut PlanScratch,
        out: &mut PlanSample,
    ) -> Result<(), PlanError> {
        let t = self.clamp_time(t);
        // The interpolated angles seed the numeric legs.
        self.joints_from_knots(t, out);
        self.evaluate_exact(t, scratch, out)
    }

    fn clamp_time(&self, t: f64) -> f64 {
        if t.is_nan() {
            0.0
        } else {
            t.clamp(0.0, self.duration)
        }
    }

    fn base_and_feet(&self, t: f64, out: &mut PlanSample) {
        let (p, pd, pdd) = self.base[piece_at(&self.base, t)].eval(t);
        let rt = self.ground.rot.transpose();
        // The trunk does not turn (ω = 0), so its body-frame velocity is Rᵀ ṗ and the
        // derivative of that is Rᵀ p̈.
        let (vb, ab) = (rt * pd, rt * pdd);
        for k in 0..3 {
            out.q[k] = p[k];
            out.v[k] = vb[k];
            out.a[k] = ab[k];
            out.v[3 + k] = 0.0;
            out.a[3 + k] = 0.0;
        }
        for k in 0..4 {
            out.q[3 + k] = self.base_quat[k];
        }
        out.base_pos = p;
        for (i, foot) in self.feet.iter().enumerate() {
            let (fp, fv, fa) = foot[piece_at(foot, t)].eval(t);
            out.foot_pos[i] = fp;
            out.foot_vel[i] = fv;
            out.foot_acc[i] = fa;
        }
        let phase = self
            .phase_starts
            .partition_point(|&s| s <= t)
            .saturating_sub(1);
        out.phase_index = phase;
        out.stance.copy_from_slice(&self.phase_stance[phase]);
    }

    fn joints_from_knots(&self, t: f64, out: &mut PlanSample) {
        let nj = self.model.n_joints();
        let g = &self.knots;
        let n = g.count;
        if n == 0 {
            return;
        }
        let k = g.partition_point(|x| x <= t).saturating_sub(1);
        let chunk = self.chunk_for(k.min(n - 1), &mut out.knots);
        let at = |k: usize| (k - chunk.first) * nj;
        let tk = g.time(k);
        if k + 1 >= n || t == tk {
            let i = at(k.min(n - 1));
            for j in 0..nj {
                out.q[7 + j] = chunk.q[i + j];
                out.v[6 + j] = chunk.v[i + j];
                out.a[6 + j] = chunk.a[i + j];
            }
            return;
        }
        let h = g.time(k + 1) - tk;
        let u = (t - tk) / h;
        let basis = quintic_hermite(u);
        let (i0, i1) = (at(k), at(k + 1));
        for j in 0..nj {
            let w = [
                chunk.q[i0 + j],
                h * chunk.v[i0 + j],
                h * h * chunk.a[i0 + j],
                h * h * chunk.a[i1 + j],
                h * chunk.v[i1 + j],
                chunk.q[i1 + j],
            ];
            let dot = |r: usize| -> f64 { (0..6).map(|i| basis[r][i] * w[i]).sum() };
            out.q[7 + j] = dot(0);
            out.v[6 + j] = dot(1) / h;
            out.a[6 + j] = dot(2) / (h * h);
        }
    }

    /// Base and feet at `t`, then the legs' angles, rates and accelerations by inverse
    /// kinematics and the Jacobian. The joint angles in `out.q` on entry seed the numeric legs.
    fn evaluate_exact(
        &self,
        t: f64,
        scratch: &mut PlanScratch,
        out: &mut PlanSample,
    ) -> Result<(), PlanError> {
        self.base_and_feet(t, out);
        let rt = self.ground.rot.transpose();
        let model = &self.model;
        let at = |i: usize, e: String, out: &PlanSample| {
            PlanError(format!(
                "foot '{}' at t = {t:.4} s ({}): {e}; {}",
                self.legs.leg(i).foot(),
                if out.stance[i] {
                    "in stance"
                } else {
                    "swinging"
                },
                self.hint(out.stance[i])
            ))
        };
        for &k in &self.free_joints {
            out.q[7 + k] = self.joint_nominal[k];
            out.v[6 + k] = 0.0;
            out.a[6 + k] = 0.0;
        }
        for i in 0..self.legs.len() {
            let leg = self.legs.leg(i);
            let joints = leg.joints();
            let target = rt * (out.foot_pos[i] - out.base_pos);
            let seed: Vec<f64> = joints.iter().map(|&k| out.q[7 + k]).collect();
            let q = self
                .legs
                .solve(model, i, &target, &seed, &mut scratch.ik)
                .map_err(|e| at(i, e, out))?;
            for (k, &joint) in joints.iter().enumerate() {
                out.q[7 + joint] = q[k];
            }
        }
        let ws = &mut scratch.ws;
        forward_kinematics(model, ws, &out.q);
        // Rates: [J_leg; C] q̇_leg = [ṗ − J_base v_base; 0] (the other legs' columns are zero in
        // this foot's rows; C, a redundant leg's extra rows, is constant, so C q̇ = 0 and
        // C q̈ = 0).
        for i in 0..self.legs.len() {
            let leg = self.legs.leg(i);
            let n = leg.n();
            let found = frame_pose(model, ws, leg.frame()).trans;
            if (found - out.foot_pos[i]).norm() > FOOT_CHECK {
                return Err(at(
                    i,
                    format!(
                        "the leg's joint solution misses the planned foot by {:.2e} m",
                        (found - out.foot_pos[i]).norm()
                    ),
                    out,
                ));
            }
            frame_jacobian(model, ws, leg.frame(), &mut scratch.jac, 0, false);
            let cols: Vec<usize> = leg.joints().iter().map(|k| 6 + k).collect();
            let extra = leg.extra_rows();
            let square = DMatrix::from_fn(n, n, |r, c| {
                if r < 3 {
                    scratch.jac[(r, cols[c])]
                } else {
                    extra[(r - 3, c)]
                }
            });
            let mut base_v = Vec3::zeros();
            let mut base_a = Vec3::zeros();
            for r in 0..3 {
                for c in 0..6 {
                    base_v[r] += scratch.jac[(r, c)] * out.v[c];
                    base_a[r] += scratch.jac[(r, c)] * out.a[c];
                }
            }
            // Conditioning by Hadamard's ratio |det A| / Π |columns| (1 for orthogonal
            // columns, 0 when singular): cheaper than singular values on every knot.
            let columns: f64 = (0..n).map(|c| square.column(c).norm()).product();
            let det = square.determinant();
            // The ratio is blind to a column that shrinks to nothing (a joint whose axis
            // passes through the foot, e.g. a foot under a hip yaw axis), so such a column
            // counts as singular on its own.
            let longest = (0..n)
                .map(|c| square.column(c).norm())
                .fold(0.0f64, f64::max);
            let lost = (0..n).any(|c| square.column(c).norm() < SINGULAR_RATIO * longest);
            let inverse = match square.clone().try_inverse() {
                Some(inv) if det.abs() > SINGULAR_RATIO * columns && !lost => inv,
                _ => {
                    let j_leg = DMatrix::from_fn(3, n, |r, c| scratch.jac[(r, cols[c])]);
                    return Err(at(
                        i,
                        format!(
                            "the leg is singular{}: {}",
                            if lost {
                                String::new()
                            } else {
                                format!(
                                    " (|det J| / Π|columns of J| = {:.1e})",
                                    det.abs() / columns
                                )
                            },
                            legs::singular_reason(model, leg.joints(), &j_leg)
                        ),
                        out,
                    ));
                }
            };
            let mut rhs = DVector::zeros(n);
            let dv = out.foot_vel[i] - base_v;
            for r in 0..3 {
                rhs[r] = dv[r];
            }
            let qd = &inverse * rhs;
            for k in 0..n {
                out.v[cols[k]] = qd[k];
            }
            scratch.legs[i] = (inverse, out.foot_acc[i] - base_a);
        }
        // Accelerations: J_leg q̈_leg = p̈ − J_base v̇_base − J̇ v, J̇ v with the full v.
        velocities_and_bias(model, ws, &out.v);
        for i in 0..self.legs.len() {
            let leg = self.legs.leg(i);
            let n = leg.n();
            let bias = frame_bias_acceleration(model, ws, leg.frame());
            let (inverse, partial) = &scratch.legs[i];
            let mut rhs = DVector::zeros(n);
            let da = partial - bias;
            for r in 0..3 {
                rhs[r] = da[r];
            }
            let qdd = inverse * rhs;
            for k in 0..n {
                out.a[6 + leg.joints()[k]] = qdd[k];
            }
        }
        Ok(())
    }

    /// q and v at t = 0: the robot standing on the terrain, feet touching it.
    pub fn initial_state(&self) -> (DVector<f64>, DVector<f64>) {
        let mut s = self.new_sample();
        self.sample(0.0, &mut s);
        (s.q, s.v)
    }

    pub fn duration(&self) -> f64 {
        self.duration
    }

    /// Distance along the slope (uphill) the base is planned to make over the duration.
    pub fn planned_progress(&self) -> f64 {
        let p0 = self.base[0].eval(0.0).0;
        let last = &self.base[self.base.len() - 1];
        let p1 = last.eval(self.duration).0;
        (p1 - p0).dot(&self.ground.rot.column(0))
    }

    /// Whole gait cycles in the plan (crawl: each foot stepped `cycles` times and the base made
    /// cycles × step_length; trot: the base made (cycles − 1) × step_length, the first and last
    /// cycle ramping the speed; 0 for standing and weight shifting).
    pub fn cycles(&self) -> usize {
        self.cycles
    }

    /// Length of the first whole gait cycle, s (the crawl's with its paced shifts; the trot's
    /// cycle_period; 0 for standing and weight shifting).
    pub fn cycle_time(&self) -> f64 {
        self.first_cycle
    }

    /// Crawl only: the centre-of-mass margin the plan keeps (the gait's, or the one derived
    /// from the robot's footprint when the gait leaves it open), m.
    pub fn crawl_margin(&self) -> f64 {
        self.crawl_margin
    }

    /// Crawl only: how many rounds the centre-of-mass correction took (1: the approximation
    /// already kept the margin) and the largest widening of a support edge it applied, m.
    pub fn crawl_correction(&self) -> (usize, f64) {
        (self.crawl_rounds, self.crawl_widening)
    }

    /// Start times of the stance phases (the first is 0).
    pub fn phase_starts(&self) -> &[f64] {
        &self.phase_starts
    }

    /// Times where a base or foot piece or the stance set changes: the plan is analytic
    /// between them and has continuous acceleration across them.
    pub fn breakpoints(&self) -> &[f64] {
        &self.breakpoints
    }

    /// Knot chunks this plan keeps now (at most [`CACHE_CHUNKS`]).
    pub fn knot_chunks_kept(&self) -> usize {
        self.knot_cache.0.lock().map(|g| g.0.len()).unwrap_or(0)
    }

    /// Times of the joint knots.
    pub fn knot_times(&self) -> Vec<f64> {
        (0..self.knots.count).map(|k| self.knots.time(k)).collect()
    }

    /// Radius of the sphere feet, m (a foot touches the ground `radius` below its centre along
    /// the normal).
    pub fn foot_radius(&self) -> f64 {
        self.foot_radius
    }

    pub fn legs(&self) -> &Legs {
        &self.legs
    }

    pub fn model(&self) -> &Model {
        &self.model
    }

    /// The ground plane the plan is laid out in: origin and axes (uphill, left, normal) as the
    /// columns of the rotation; the trunk's orientation.
    pub fn ground_frame(&self) -> Pose {
        Pose::new(self.ground.rot, self.ground.origin)
    }
}

/// Share of the smallest inscribed radius of the crawl's swing-support polygons (nominal
/// footprint, one foot lifted) that the crawl keeps as its centre-of-mass margin when the gait
/// does not set one.
pub const CRAWL_MARGIN_SHARE: f64 = 0.25;

/// The crawl's default margin, from the robot: [`CRAWL_MARGIN_SHARE`] × the largest margin the
/// tightest swing-support polygon of the nominal footprint allows (its inscribed radius for a
/// triangle). A quarter leaves the centre of mass room to move between polygons without long
/// shifts, and scales with the robot's size; the plan's friction need hardly depends on it
/// (README, "The planner"), a law that does not spread its forces well does.
fn derived_margin(setup: &Setup) -> Result<f64, PlanError> {
    let n = setup.footprint.len();
    let mut tightest = f64::INFINITY;
    for f in 0..n {
        let points: Vec<P2> = (0..n)
            .filter(|&i| i != f)
            .map(|i| setup.footprint[i])
            .collect();
        let poly = support::SupportPolygon::hull(&points).ok_or_else(|| {
            PlanError(format!(
                "Crawl: with foot '{}' lifted the other feet lie on one line: no support polygon",
                setup.foot_names[f]
            ))
        })?;
        tightest = tightest.min(poly.largest_margin(&vec![0.0; poly.edges.len()]));
    }
    Ok(CRAWL_MARGIN_SHARE * tightest.max(0.0))
}

/// The crawl order (one foot at a time: right side hind to fore, then left side hind to fore;
/// for four feet hind-right, fore-right, hind-left, fore-left) and the trot groups (alternate
/// along each side from the front, opposite on the two sides: diagonal pairs on four feet,
/// tripods on six). Sides by the sign of the nominal y.
fn foot_order(footprint: &[P2]) -> (Vec<usize>, Vec<usize>) {
    let side = |left: bool| {
        let mut s: Vec<usize> = (0..footprint.len())
            .filter(|&i| (footprint[i].y >= 0.0) == left)
            .collect();
        s.sort_by(|&a, &b| footprint[a].x.total_cmp(&footprint[b].x));
        s
    };
    let (right, left) = (side(false), side(true));
    let order: Vec<usize> = right.iter().chain(left.iter()).copied().collect();
    let mut group = vec![0; footprint.len()];
    for (i, &f) in left.iter().rev().enumerate() {
        group[f] = i % 2;
    }
    for (i, &f) in right.iter().rev().enumerate() {
        group[f] = (i + 1) % 2;
    }
    (order, group)
}

#[cfg(test)]
mod tests;
