//! The gaits as schedules: base path, foot paths and stance phases, all in the ground plane's
//! coordinates (a uphill, b to the left, c along the normal) and turned into world pieces.
//! Joint angles are not made here; the plan solves them from these paths.

use super::PlanError;
use super::pieces::Piece;
use super::support::{P2, SupportPolygon, closest_point};
use crate::plant::terrain::Terrain;
use gripsweep_controllers::spatial::{Mat3, Vec3};

/// Fraction of a crawl slot (cycle / feet) spent shifting the base with all feet down; the
/// rest is the swing, with the base at rest.
pub(crate) const CRAWL_SHIFT_FRACTION: f64 = 0.5;
/// Fraction of a trot half-cycle a diagonal pair spends in the air; the rest is double
/// support (duty factor 1 − 0.8 / 2 = 0.6).
pub(crate) const TROT_SWING_FRACTION: f64 = 0.8;

/// The ground plane the plan is laid out in: the terrain's tangent plane at the start,
/// through `origin` with axes `rot` = [t1 t2 n] (uphill, left, normal).
#[derive(Clone, Debug)]
pub(crate) struct Ground {
    pub origin: Vec3,
    pub rot: Mat3,
}

impl Ground {
    /// World point at plane coordinates (a, b, c).
    pub fn world(&self, a: f64, b: f64, c: f64) -> Vec3 {
        self.origin + self.rot * Vec3::new(a, b, c)
    }
    /// Plane coordinates of a world point.
    pub fn local(&self, p: &Vec3) -> Vec3 {
        self.rot.transpose() * (p - self.origin)
    }
}

/// Everything the gaits need to know about the robot and the ground.
pub(crate) struct Setup<'a> {
    pub terrain: &'a dyn Terrain,
    pub ground: Ground,
    pub radius: f64,
    pub duration: f64,
    pub foot_names: Vec<String>,
    /// Each foot's (a, b) relative to the base in the nominal stance.
    pub footprint: Vec<P2>,
    /// Base height above the plane.
    pub height: f64,
    /// Projected centre of mass minus the base's (a, b), in the starting posture.
    pub com_offset: P2,
    /// One foot at a time, right side hind to fore, then left side hind to fore.
    pub crawl_order: Vec<usize>,
    /// Trot group (0 or 1) of each foot: alternate along each side, opposite on the two sides.
    pub trot_group: Vec<usize>,
}

impl Setup<'_> {
    /// Centre of the foot resting on the terrain at plane coordinates (a, b): the terrain point
    /// under the plane point, plus the radius along the terrain normal there (for a plane
    /// terrain, exactly the plane point lifted by the radius).
    pub fn foot_at(&self, ab: &P2) -> Vec3 {
        let p = self.ground.world(ab.x, ab.y, 0.0);
        let ground = Vec3::new(p.x, p.y, self.terrain.height_at(p.x, p.y));
        ground + self.terrain.normal_at(p.x, p.y).normalize() * self.radius
    }
    /// Direction a foot lifts in while swinging between two spots: the mean normal.
    fn lift_between(&self, a: &P2, b: &P2) -> Vec3 {
        let pa = self.ground.world(a.x, a.y, 0.0);
        let pb = self.ground.world(b.x, b.y, 0.0);
        (self.terrain.normal_at(pa.x, pa.y).normalize()
            + self.terrain.normal_at(pb.x, pb.y).normalize())
        .normalize()
    }
    /// Base origin at plane coordinates (a, b).
    pub fn base_at(&self, ab: &P2) -> Vec3 {
        self.ground.world(ab.x, ab.y, self.height)
    }
    fn all_feet(&self) -> Vec<bool> {
        vec![true; self.footprint.len()]
    }
    fn centroid(points: &[P2]) -> P2 {
        points.iter().fold(P2::zeros(), |s, p| s + p) / points.len() as f64
    }
}

/// One swing of the static crawl, for the margin check.
#[derive(Clone, Debug)]
pub(crate) struct CrawlSwing {
    pub t0: f64,
    pub t1: f64,
    /// Support polygon of the stance feet, plane coordinates.
    pub support: SupportPolygon,
    /// Where the (approximate) projected centre of mass was put.
    pub target: P2,
}

/// A gait laid out in time.
#[derive(Clone, Debug)]
pub(crate) struct Schedule {
    pub base: Vec<Piece>,
    pub feet: Vec<Vec<Piece>>,
    /// (start time, stance flag per foot); the first starts at 0.
    pub phases: Vec<(f64, Vec<bool>)>,
    pub swings: Vec<CrawlSwing>,
    /// Number of whole gait cycles (0 for standing and weight shifting).
    pub cycles: usize,
    /// Length of the first whole cycle, s (crawl; 0 for the others).
    pub first_cycle: f64,
}

/// A path assembled piece by piece, holding still between moves.
struct Track {
    pieces: Vec<Piece>,
    at: Vec3,
    t: f64,
}

impl Track {
    fn new(at: Vec3) -> Track {
        Track {
            pieces: Vec::new(),
            at,
            t: 0.0,
        }
    }
    fn hold_until(&mut self, t: f64) {
        if t > self.t {
            self.pieces.push(Piece::hold(self.t, t, self.at));
            self.t = t;
        }
    }
    fn push(&mut self, piece: Piece) {
        self.hold_until(piece.t0);
        self.at = piece.end();
        self.t = piece.t1;
        self.pieces.push(piece);
    }
    fn finish(mut self, duration: f64) -> Vec<Piece> {
        self.hold_until(duration);
        if self.pieces.is_empty() {
            self.pieces.push(Piece::hold(0.0, duration, self.at));
        }
        self.pieces
    }
}

pub(crate) fn stand(s: &Setup) -> Schedule {
    let base = Track::new(s.base_at(&P2::zeros())).finish(s.duration);
    let feet = s
        .footprint
        .iter()
        .map(|f| Track::new(s.foot_at(f)).finish(s.duration))
        .collect();
    Schedule {
        base,
        feet,
        phases: vec![(0.0, s.all_feet())],
        swings: Vec::new(),
        cycles: 0,
        first_cycle: 0.0,
    }
}

/// Weight shifting: rest-to-rest moves of the base by `amplitude` towards each foot in turn
/// (crawl order), one round per `period`, then back to the centre and rest.
pub(crate) fn weight_shift(s: &Setup, amplitude: f64, period: f64) -> Result<Schedule, PlanError> {
    let n = s.footprint.len();
    let segment = period / n as f64;
    let moves = (s.duration / segment).floor() as usize;
    if moves < 2 {
        return Err(PlanError(format!(
            "WeightShift: duration {} s is shorter than two moves of period / feet = {segment:.3} s; allowed: a duration ≥ {:.3} s or a shorter period",
            s.duration,
            2.0 * segment
        )));
    }
    let centroid = Setup::centroid(&s.footprint);
    let support = SupportPolygon::hull(&s.footprint).ok_or_else(|| {
        PlanError("WeightShift: the feet do not span a support polygon (fewer than three, or all on one line)".into())
    })?;
    let mut waypoints = Vec::with_capacity(moves);
    for k in 0..moves - 1 {
        let f = s.crawl_order[k % n];
        let dir = (s.footprint[f] - centroid).normalize();
        waypoints.push(dir * amplitude);
    }
    waypoints.push(P2::zeros());
    for w in &waypoints {
        // All feet stay down: the projected centre of mass must stay over the feet.
        let com = w + s.com_offset;
        if support.margin_of(&com) <= 0.0 {
            return Err(PlanError(format!(
                "WeightShift: amplitude = {amplitude} m moves the centre of mass (projected along gravity) outside the polygon of the feet; allowed: a smaller amplitude (the centre of mass sits {:.4} m inside at rest)",
                support.margin_of(&s.com_offset)
            )));
        }
    }
    let mut base = Track::new(s.base_at(&P2::zeros()));
    for (k, w) in waypoints.iter().enumerate() {
        let (t0, t1) = (k as f64 * segment, (k + 1) as f64 * segment);
        base.push(Piece::min_jerk(t0, t1, base.at, s.base_at(w)));
    }
    let feet = s
        .footprint
        .iter()
        .map(|f| Track::new(s.foot_at(f)).finish(s.duration))
        .collect();
    Ok(Schedule {
        base: base.finish(s.duration),
        feet,
        phases: vec![(0.0, s.all_feet())],
        swings: Vec::new(),
        cycles: 0,
        first_cycle: 0.0,
    })
}

/// Parameters of the static crawl.
pub(crate) struct CrawlParams {
    pub step_length: f64,
    pub swing_height: f64,
    pub cycle_period: f64,
    pub margin: f64,
    /// Peak base acceleration of a shift, m/s² (`None`: every shift takes the even share of
    /// its slot, whatever its length).
    pub shift_accel: Option<f64>,
}

/// Peak acceleration of a minimum-jerk move of length d in time T is (10/√3) d/T² (the
/// quintic's second derivative peaks at s = 1/2 ∓ √3/6; Flash & Hogan, "The coordination of
/// arm movements", J. Neuroscience 1985), so the shortest move within a bound a takes
/// T = √((10/√3) d / a).
pub(crate) fn min_jerk_time(distance: f64, accel: f64) -> f64 {
    (10.0 / 3f64.sqrt() * distance / accel).sqrt()
}

/// Static crawl: per slot, shift the base (all feet down) so that the projected centre of mass
/// sits inside the support polygon of the other feet with the margin, then swing that foot
/// one step uphill with the base at rest. The wish for each shift is the base centred over the
/// current footholds; it moves the least distance that meets the margin. `extra[k][e]` widens
/// the margin of edge e during swing k (the correction for the real, moving centre of mass,
/// found by the plan). After the last whole cycle the base returns to the centre of its feet.
///
/// Timing: a slot is cycle_period / feet; a swing takes (1 − [`CRAWL_SHIFT_FRACTION`]) of it.
/// Without `shift_accel` a shift takes the rest of the slot (even timing); with it, a shift
/// takes at least that and as long as its length needs for its peak acceleration to stay
/// within the bound ([`min_jerk_time`]), so the cycle lengthens with the shifts.
pub(crate) fn crawl(s: &Setup, p: &CrawlParams, extra: &[Vec<f64>]) -> Result<Schedule, PlanError> {
    let n = s.footprint.len();
    let slot = p.cycle_period / n as f64;
    let even_shift = CRAWL_SHIFT_FRACTION * slot;
    let swing_time = slot - even_shift;
    let shift_time = |from: &P2, to: &P2| match p.shift_accel {
        None => even_shift,
        Some(a) => even_shift.max(min_jerk_time((to - from).norm(), a)),
    };
    let home = Setup::centroid(&s.footprint);
    let step = P2::new(p.step_length, 0.0);
    let mut holds = s.footprint.clone();
    let mut base_ab = P2::zeros();
    let mut base = Track::new(s.base_at(&base_ab));
    let mut feet: Vec<Track> = holds.iter().map(|f| Track::new(s.foot_at(f))).collect();
    let mut phases = Vec::new();
    let mut swings = Vec::new();
    let mut t = 0.0;
    let mut cycles = 0;
    let mut first_cycle = 0.0;
    loop {
        // Lay out one more cycle; keep it only if it and the final shift fit the duration.
        let k = cycles;
        let (mut c_holds, mut c_base_ab, mut c_t) = (holds.clone(), base_ab, t);
        let mut c_base: Vec<Piece> = Vec::new();
        let mut c_feet: Vec<(usize, Piece)> = Vec::new();
        let mut c_phases = Vec::new();
        let mut c_swings = Vec::new();
        for (j, &f) in s.crawl_order.iter().enumerate() {
            let stance: Vec<usize> = (0..n).filter(|&i| i != f).collect();
            let points: Vec<P2> = stance.iter().map(|&i| c_holds[i]).collect();
            let names = || {
                stance
                    .iter()
                    .map(|&i| format!("'{}'", s.foot_names[i]))
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            let support = SupportPolygon::hull(&points).ok_or_else(|| {
                PlanError(format!(
                    "Crawl: while foot '{}' swings (t = {c_t:.3} s) the stance feet {} lie on one line: no support polygon",
                    s.foot_names[f],
                    names()
                ))
            })?;
            let index = swings.len() + c_swings.len();
            let widen = |e: usize| {
                extra
                    .get(index)
                    .and_then(|x| x.get(e))
                    .copied()
                    .unwrap_or(0.0)
            };
            let inset: Vec<f64> = (0..support.edges.len())
                .map(|e| p.margin + widen(e))
                .collect();
            let room = support.inset(&inset);
            let wish = Setup::centroid(&c_holds) - home + s.com_offset;
            let Some(target) = closest_point(&room, &wish) else {
                let extra_edges: Vec<f64> = (0..support.edges.len()).map(widen).collect();
                let best = support.largest_margin(&extra_edges);
                return Err(PlanError(format!(
                    "Crawl: margin = {} m cannot be met while foot '{}' swings (from t = {c_t:.3} s): the support polygon of {} leaves room for a margin of at most {:.4} m{}; allowed: a smaller margin (or a shorter step_length)",
                    p.margin,
                    s.foot_names[f],
                    names(),
                    best.max(0.0),
                    if extra_edges.iter().any(|e| *e != 0.0) {
                        " once the swinging leg's own weight is counted"
                    } else {
                        ""
                    }
                )));
            };
            let next_base = target - s.com_offset;
            // Even timing keeps the slot grid exactly (k × period + j × slot).
            let t_shift = if p.shift_accel.is_none() {
                k as f64 * p.cycle_period + j as f64 * slot
            } else {
                c_t
            };
            let t_lift = t_shift + shift_time(&c_base_ab, &next_base);
            let t_down = if p.shift_accel.is_none() {
                t_shift + slot
            } else {
                t_lift + swing_time
            };
            c_base.push(Piece::min_jerk(
                t_shift,
                t_lift,
                s.base_at(&c_base_ab),
                s.base_at(&next_base),
            ));
            c_base_ab = next_base;
            let landing = c_holds[f] + step;
            c_feet.push((
                f,
                Piece::swing(
                    t_lift,
                    t_down,
                    s.foot_at(&c_holds[f]),
                    s.foot_at(&landing),
                    s.lift_between(&c_holds[f], &landing),
                    p.swing_height,
                ),
            ));
            c_holds[f] = landing;
            c_phases.push((t_shift, s.all_feet()));
            let mut flags = s.all_feet();
            flags[f] = false;
            c_phases.push((t_lift, flags));
            c_swings.push(CrawlSwing {
                t0: t_lift,
                t1: t_down,
                support,
                target,
            });
            c_t = t_down;
        }
        let final_ab = P2::new((k + 1) as f64 * p.step_length, 0.0);
        let end = c_t + shift_time(&c_base_ab, &final_ab);
        if end > s.duration + 1e-9 {
            if cycles == 0 {
                return Err(PlanError(format!(
                    "Crawl: duration {} s is shorter than one cycle and the final shift ({end:.3} s with this timing); allowed: a duration ≥ {end:.3} s",
                    s.duration
                )));
            }
            break;
        }
        for piece in c_base {
            base.push(piece);
        }
        for (f, piece) in c_feet {
            feet[f].push(piece);
        }
        phases.extend(c_phases);
        swings.extend(c_swings);
        holds = c_holds;
        base_ab = c_base_ab;
        t = c_t;
        if cycles == 0 {
            first_cycle = t;
        }
        cycles += 1;
    }
    // Back to the centre of the feet: the same stance as at the start, cycles × step further.
    let t_end = if p.shift_accel.is_none() {
        cycles as f64 * p.cycle_period
    } else {
        t
    };
    let final_ab = P2::new(cycles as f64 * p.step_length, 0.0);
    base.push(Piece::min_jerk(
        t_end,
        t_end + shift_time(&base_ab, &final_ab),
        s.base_at(&base_ab),
        s.base_at(&final_ab),
    ));
    phases.push((t_end, s.all_feet()));
    Ok(Schedule {
        base: base.finish(s.duration),
        feet: feet.into_iter().map(|f| f.finish(s.duration)).collect(),
        phases,
        swings,
        cycles,
        first_cycle,
    })
}

/// Parameters of the trot.
pub(crate) struct TrotParams {
    pub step_length: f64,
    pub swing_height: f64,
    pub cycle_period: f64,
}

/// Trot: the two groups swing in turn, each for [`TROT_SWING_FRACTION`] of a half-cycle, with
/// double support between. The base speeds up from rest over the first cycle (smoothstep speed
/// profile), runs at step_length / cycle_period, and slows to rest over the last cycle, so it
/// makes (cycles − 1) × step_length. Each foot lands at its nominal place relative to where the
/// base will be halfway through the coming stance (the neutral point of Raibert, "Legged Robots
/// That Balance", MIT Press 1986, ch. 2), or relative to the final base for its last step.
pub(crate) fn trot(s: &Setup, p: &TrotParams) -> Result<Schedule, PlanError> {
    let n = s.footprint.len();
    let period = p.cycle_period;
    let cycles = (s.duration / period).floor();
    if cycles < 2.0 {
        return Err(PlanError(format!(
            "Trot: duration {} s is shorter than two cycles of {} s (one to speed up, one to slow down); allowed: a duration ≥ {} s",
            s.duration,
            period,
            2.0 * period
        )));
    }
    let cycles = cycles as usize;
    let speed = s.ground.rot.column(0) * (p.step_length / period);
    let t_end = cycles as f64 * period;
    let mut base = Track::new(s.base_at(&P2::zeros()));
    base.push(Piece::ramp_up(0.0, period, base.at, speed));
    if cycles > 2 {
        base.push(Piece::cruise(period, t_end - period, base.at, speed));
    }
    base.push(Piece::ramp_down(t_end - period, t_end, base.at, speed));
    let base = base.finish(s.duration);
    let base_ab = |t: f64| {
        let k = super::pieces::piece_at(&base, t);
        let local = s.ground.local(&base[k].eval(t).0);
        P2::new(local.x, local.y)
    };
    let half = 0.5 * period;
    let airborne = TROT_SWING_FRACTION * half;
    // Swing intervals of each group, in time order.
    let mut intervals: Vec<(usize, f64, f64)> = Vec::new();
    for k in 0..cycles {
        for g in 0..2 {
            let t1 = k as f64 * period + (g + 1) as f64 * half;
            intervals.push((g, t1 - airborne, t1));
        }
    }
    let mut feet = Vec::with_capacity(n);
    for f in 0..n {
        let mine: Vec<(f64, f64)> = intervals
            .iter()
            .filter(|(g, _, _)| *g == s.trot_group[f])
            .map(|&(_, a, b)| (a, b))
            .collect();
        let mut hold = s.footprint[f];
        let mut track = Track::new(s.foot_at(&hold));
        for (m, &(t_lift, t_down)) in mine.iter().enumerate() {
            let anchor = match mine.get(m + 1) {
                Some(&(next_lift, _)) => base_ab(0.5 * (t_down + next_lift)),
                None => base_ab(s.duration),
            };
            let landing = anchor + s.footprint[f];
            track.push(Piece::swing(
                t_lift,
                t_down,
                s.foot_at(&hold),
                s.foot_at(&landing),
                s.lift_between(&hold, &landing),
                p.swing_height,
            ));
            hold = landing;
        }
        feet.push(track.finish(s.duration));
    }
    let mut phases = vec![(0.0, s.all_feet())];
    for &(g, t_lift, t_down) in &intervals {
        phases.push((t_lift, (0..n).map(|f| s.trot_group[f] != g).collect()));
        phases.push((t_down, s.all_feet()));
    }
    Ok(Schedule {
        base,
        feet,
        phases,
        swings: Vec::new(),
        cycles,
        first_cycle: period,
    })
}
