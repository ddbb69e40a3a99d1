//! The plan's own friction limit: the least friction coefficient with which *any* distribution
//! of contact forces could realise the planned motion on the true model, and the share of the
//! joint torque limits that distribution needs. A floor no control law can go below: on ground
//! with μ below it, the plan itself asks for more than friction can give.
//!
//! # What is computed
//!
//! At an instant t the plan gives q, v and v̇. The whole-body equation
//! M v̇ + h = Sᵀτ + J_cᵀλ has six unactuated rows (the floating base: the centroidal momentum
//! balance); with rhs = M v̇ + h from inverse dynamics (RNEA with the planned v̇), those rows are
//! equalities on the contact forces alone, (J_cᵀλ)_base = rhs_base, and the joint rows give
//! τ = rhs_joints − (J_cᵀλ)_joints. λ holds one force per stance foot, applied where the sphere
//! foot touches the ground (centre − r·n, n the terrain normal there), in that foot's surface
//! frame (normal, two tangents). The instant's friction need is
//!
//!   μ(t) = min over λ of max_f ‖λ_t,f‖ / λ_n,f   s.t. (J_cᵀλ)_base = rhs_base, λ_n,f ≥ 0.
//!
//! For fixed μ, "some λ has every ‖λ_t,f‖ ≤ μ λ_n,f" is a second-order cone feasibility
//! program, and the feasible set grows with μ, so μ(t) is found by bisection on μ (the
//! quasi-convex recipe of Boyd & Vandenberghe, "Convex Optimization", Cambridge 2004, §4.2.5),
//! each test solved by Clarabel (Goulart & Chen, "Clarabel: An interior-point solver for conic
//! programs with quadratic objectives", arXiv 2405.12762, 2024), to [`MU_TOL_ABS`] +
//! [`MU_TOL_REL`]·μ. The plan's μ_required is the largest μ(t) over the sampled instants.
//!
//! The torque share at an instant is the least max_j |τ_j| / τ_limit,j over the distributions
//! that stay inside cones of the plan's μ_required (a linear objective on the same cones: one
//! program); the plan's torque share is its largest value. The torque-limited μ_required
//! repeats the bisection with |τ_j| ≤ τ_limit,j as constraints (infinite when no friction
//! makes the torques fit).
//!
//! # Sampling
//!
//! Every [`SAMPLE_STEP`] from 0 to the duration, every breakpoint of the plan (where a piece or
//! the stance set changes), and [`BEFORE_PHASE`] before every phase start, so each stance set is
//! checked at both ends of its phase (the accelerations are continuous across breakpoints, but
//! the stance set is not).

use super::Plan;
use crate::plant::terrain::Terrain;
use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettings, DefaultSettingsBuilder, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
};
use gripsweep_controllers::algorithms::{Workspace, frame_jacobian, frame_pose, rnea};
use gripsweep_controllers::spatial::{Mat3, Vec3, skew};
use nalgebra::DMatrix;

/// Spacing of the sampled instants, s.
pub const SAMPLE_STEP: f64 = 0.01;
/// Offset of the extra instant before each phase start, s (the old stance set, same motion).
pub const BEFORE_PHASE: f64 = 1e-6;
/// Absolute and relative resolution of the bisection on μ.
pub const MU_TOL_ABS: f64 = 1e-6;
pub const MU_TOL_REL: f64 = 1e-5;
/// Beyond this friction coefficient the bisection stops: the plan needs "no friction is enough"
/// (μ_required is then reported as infinite).
pub const MU_CEILING: f64 = 1e3;

/// The plan's limit.
#[derive(Clone, Debug, PartialEq)]
pub struct PlanLimit {
    /// Least friction coefficient any force distribution needs, max over the instants
    /// (infinite when none can realise the motion).
    pub mu_required: f64,
    /// Where the maximum was reached, s.
    pub at_s: f64,
    /// Largest over the instants of the least max_j |τ_j| / τ_limit,j among the distributions
    /// inside cones of `mu_required` (above 1: the plan needs more torque than the joints have).
    pub torque_share: f64,
    /// μ_required with |τ_j| ≤ τ_limit,j imposed as constraints (≥ `mu_required`).
    pub mu_required_torque_limited: f64,
    /// Instants checked.
    pub instants: usize,
}

/// One instant's data: G = J_cᵀ·(surface frames) (nv × 3k) and rhs = M v̇ + h.
struct Instant {
    g: DMatrix<f64>,
    rhs: Vec<f64>,
    k: usize,
}

/// The sampled instants of a plan (see the module notes).
pub fn sample_times(plan: &Plan) -> Vec<f64> {
    let d = plan.duration();
    let n = (d / SAMPLE_STEP).floor() as usize;
    let mut t: Vec<f64> = (0..=n).map(|i| i as f64 * SAMPLE_STEP).collect();
    t.extend(plan.breakpoints().iter().copied());
    t.extend(
        plan.phase_starts()
            .iter()
            .filter(|&&s| s > BEFORE_PHASE)
            .map(|s| s - BEFORE_PHASE),
    );
    t.retain(|x| (0.0..=d).contains(x));
    t.sort_by(f64::total_cmp);
    t.dedup_by(|a, b| (*a - *b).abs() < 1e-12);
    t
}

/// The limit of a plan on its terrain, sampled at [`sample_times`]. Errors (a solver that cannot
/// be set up) name the instant.
pub fn plan_limit(plan: &Plan, terrain: &dyn Terrain) -> Result<PlanLimit, String> {
    limit_at_times(plan, terrain, &sample_times(plan))
}

/// The limit over the given instants (for checks on a single instant).
pub fn limit_at_times(
    plan: &Plan,
    terrain: &dyn Terrain,
    times: &[f64],
) -> Result<PlanLimit, String> {
    let limits: Vec<f64> = plan.model().joints.iter().map(|j| j.effort_limit).collect();
    let mut builder = InstantBuilder::new(plan);
    let settings = solver_settings();
    let mut mu_required = 0.0;
    let mut at_s = times.first().copied().unwrap_or(0.0);
    let mut mu_limited = 0.0;
    for &t in times {
        let inst = builder.at(plan, terrain, t);
        let m = raise(&inst, &limits, false, mu_required, &settings)
            .map_err(|e| format!("t = {t:.4} s: {e}"))?;
        if m > mu_required {
            mu_required = m;
            at_s = t;
        }
        if mu_limited < f64::INFINITY {
            mu_limited = raise(&inst, &limits, true, mu_limited, &settings)
                .map_err(|e| format!("t = {t:.4} s: {e}"))?;
        }
    }
    // The torque share at the plan's friction budget (a hair above it, so the cones are not
    // exactly at the bisection's boundary).
    let mut torque_share = f64::NAN;
    if mu_required.is_finite() {
        let budget = mu_required * (1.0 + MU_TOL_REL) + MU_TOL_ABS;
        torque_share = 0.0;
        for &t in times {
            let inst = builder.at(plan, terrain, t);
            let s = least_torque_share(&inst, &limits, budget, &settings)
                .map_err(|e| format!("t = {t:.4} s: {e}"))?;
            torque_share = f64::max(torque_share, s);
        }
    }
    Ok(PlanLimit {
        mu_required,
        at_s,
        torque_share,
        mu_required_torque_limited: mu_limited.max(mu_required),
        instants: times.len(),
    })
}

/// Builds an instant's G and rhs from the plan.
struct InstantBuilder {
    ws: Workspace,
    jac: DMatrix<f64>,
    sample: super::PlanSample,
}

impl InstantBuilder {
    fn new(plan: &Plan) -> Self {
        InstantBuilder {
            ws: Workspace::new(plan.model()),
            jac: DMatrix::zeros(6, plan.model().nv()),
            sample: plan.new_sample(),
        }
    }

    fn at(&mut self, plan: &Plan, terrain: &dyn Terrain, t: f64) -> Instant {
        let model = plan.model();
        let nv = model.nv();
        let s = &mut self.sample;
        plan.sample(t, s);
        // rhs = M v̇ + h = RNEA(q, v, v̇) (Featherstone, "Rigid Body Dynamics Algorithms",
        // Springer 2008, table 5.1); it also leaves the placements for the Jacobians.
        let rhs: Vec<f64> = rnea(model, &mut self.ws, &s.q, &s.v, &s.a)
            .iter()
            .copied()
            .collect();
        let stance: Vec<usize> = (0..s.stance.len()).filter(|&i| s.stance[i]).collect();
        let k = stance.len();
        let r = plan.foot_radius();
        let mut g = DMatrix::zeros(nv, 3 * k);
        for (c, &i) in stance.iter().enumerate() {
            let frame = plan.legs().leg(i).frame();
            let centre = frame_pose(model, &self.ws, frame).trans;
            // The contact point: centre − r·n, with n the normal under the contact point.
            let n0 = terrain.normal_at(centre.x, centre.y).normalize();
            let under = centre - n0 * r;
            let (n, t1, t2) = terrain.surface_frame(under.x, under.y);
            let n = n.normalize();
            let surface = Mat3::from_columns(&[n, t1, t2]);
            frame_jacobian(model, &self.ws, frame, &mut self.jac, 0, true);
            // A point d = −r n from the frame origin moves with v + ω × d:
            // J_p = J_lin − [d]× J_ang = J_lin + r [n]× J_ang.
            let rn = skew(&n) * r;
            for col in 0..nv {
                let lin = Vec3::new(self.jac[(0, col)], self.jac[(1, col)], self.jac[(2, col)]);
                let ang = Vec3::new(self.jac[(3, col)], self.jac[(4, col)], self.jac[(5, col)]);
                let jp = lin + rn * ang;
                // Generalized force of a surface-frame force: J_pᵀ · surface.
                let row = surface.transpose() * jp;
                for a in 0..3 {
                    g[(col, 3 * c + a)] = row[a];
                }
            }
        }
        Instant { g, rhs, k }
    }
}

fn solver_settings() -> DefaultSettings<f64> {
    DefaultSettingsBuilder::default()
        .verbose(false)
        .max_iter(200)
        .build()
        .expect("valid solver settings")
}

/// Compressed-column form of a dense matrix (structural zeros dropped).
fn csc(m: &DMatrix<f64>) -> CscMatrix<f64> {
    let (mut colptr, mut rowval, mut nzval) = (vec![0], Vec::new(), Vec::new());
    for c in 0..m.ncols() {
        for r in 0..m.nrows() {
            if m[(r, c)] != 0.0 {
                rowval.push(r);
                nzval.push(m[(r, c)]);
            }
        }
        colptr.push(rowval.len());
    }
    CscMatrix::new(m.nrows(), m.ncols(), colptr, rowval, nzval)
}

/// The extra variable of a cone program besides the forces λ.
#[derive(Clone, Copy, PartialEq)]
enum Extra {
    /// ε: the cones are widened to ‖λ_t,f‖ ≤ μ λ_n,f + ε W (W the size of the base demand) and
    /// ε ≥ −1 is minimised. The program is always strictly feasible, so the solver answers
    /// cleanly, and "feasible at μ" is ε* ≤ 0 (a phase-I program: Boyd & Vandenberghe,
    /// "Convex Optimization", Cambridge 2004, §11.4.1). A bare feasibility program at the
    /// boundary of feasibility made the solver stop with numerical errors.
    Margin,
    /// s: |τ_j| ≤ s τ_limit,j, s minimised (the torque share).
    Share,
}

/// The cone program over x = (λ, extra): base-row equalities, λ_n ≥ 0, the torque rows
/// (|τ_j| ≤ τ_limit,j when `hard`, |τ_j| ≤ s τ_limit,j for [`Extra::Share`]) and the cones of
/// `mu`, minimising the extra variable. Returns the solver status and the objective value.
fn solve(
    inst: &Instant,
    limits: &[f64],
    mu: f64,
    hard: bool,
    extra: Extra,
    settings: &DefaultSettings<f64>,
) -> Result<(SolverStatus, f64), String> {
    let k = inst.k;
    let nv = inst.g.nrows();
    let nj = nv - 6;
    let joints: Vec<usize> = (0..nj)
        .filter(|&j| limits[j].is_finite() && limits[j] > 0.0)
        .collect();
    let share = extra == Extra::Share;
    let e = 3 * k;
    let nx = 3 * k + 1;
    let n_lim = if hard || share { 2 * joints.len() } else { 0 };
    let n_floor = usize::from(extra == Extra::Margin);
    let m = 6 + k + n_floor + n_lim + 3 * k;
    let weight = (0..3)
        .map(|r| inst.rhs[r] * inst.rhs[r])
        .sum::<f64>()
        .sqrt()
        .max(1.0);
    let mut a = DMatrix::zeros(m, nx);
    let mut b = vec![0.0; m];
    // s = b − A x in the cones.
    for r in 0..6 {
        for x in 0..3 * k {
            a[(r, x)] = inst.g[(r, x)];
        }
        b[r] = inst.rhs[r];
    }
    let mut row = 6;
    for c in 0..k {
        a[(row, 3 * c)] = -1.0;
        row += 1;
    }
    if n_floor == 1 {
        // ε ≥ −1.
        a[(row, e)] = -1.0;
        b[row] = 1.0;
        row += 1;
    }
    if n_lim > 0 {
        for &j in &joints {
            // τ_j = rhs_j − G_j λ;  L s − τ_j ≥ 0 and L s + τ_j ≥ 0 (s = 1 when limits are hard).
            for x in 0..3 * k {
                a[(row, x)] = -inst.g[(6 + j, x)];
                a[(row + 1, x)] = inst.g[(6 + j, x)];
            }
            if share {
                a[(row, e)] = -limits[j];
                a[(row + 1, e)] = -limits[j];
                b[row] = -inst.rhs[6 + j];
                b[row + 1] = inst.rhs[6 + j];
            } else {
                b[row] = limits[j] - inst.rhs[6 + j];
                b[row + 1] = limits[j] + inst.rhs[6 + j];
            }
            row += 2;
        }
    }
    for c in 0..k {
        a[(row, 3 * c)] = -mu;
        if extra == Extra::Margin {
            a[(row, e)] = -weight;
        }
        a[(row + 1, 3 * c + 1)] = -1.0;
        a[(row + 2, 3 * c + 2)] = -1.0;
        row += 3;
    }
    debug_assert_eq!(row, m);
    let mut q = vec![0.0; nx];
    q[e] = 1.0;
    let p = CscMatrix::zeros((nx, nx));
    let mut cones = vec![
        SupportedConeT::ZeroConeT(6),
        SupportedConeT::NonnegativeConeT(k + n_floor + n_lim),
    ];
    cones.extend((0..k).map(|_| SupportedConeT::SecondOrderConeT(3)));
    let mut solver = DefaultSolver::new(&p, &q, &csc(&a), &b, &cones, settings.clone())
        .map_err(|e| format!("the cone program could not be set up: {e:?}"))?;
    solver.solve();
    Ok((solver.solution.status, solver.solution.obj_val))
}

fn solved(status: SolverStatus) -> bool {
    matches!(status, SolverStatus::Solved | SolverStatus::AlmostSolved)
}

fn feasible(
    inst: &Instant,
    limits: &[f64],
    mu: f64,
    torque: bool,
    settings: &DefaultSettings<f64>,
) -> Result<bool, String> {
    if inst.k == 0 {
        // No stance foot: only a motion that needs no contact force is feasible.
        return Ok(inst.rhs[..6].iter().all(|x| x.abs() < 1e-9));
    }
    let (status, eps) = solve(inst, limits, mu, torque, Extra::Margin, settings)?;
    Ok(solved(status) && eps <= 0.0)
}

/// max(floor, this instant's μ): a single test when the instant needs no more than `floor`,
/// otherwise doubling then bisection above it. Infinite beyond [`MU_CEILING`].
fn raise(
    inst: &Instant,
    limits: &[f64],
    torque: bool,
    floor: f64,
    settings: &DefaultSettings<f64>,
) -> Result<f64, String> {
    if floor > 0.0 && feasible(inst, limits, floor, torque, settings)? {
        return Ok(floor);
    }
    let mut lo = floor;
    let mut hi = (2.0 * floor).max(0.05);
    while !feasible(inst, limits, hi, torque, settings)? {
        lo = hi;
        hi *= 2.0;
        if hi > MU_CEILING {
            return Ok(f64::INFINITY);
        }
    }
    while hi - lo > MU_TOL_ABS + MU_TOL_REL * hi {
        let mid = 0.5 * (lo + hi);
        if feasible(inst, limits, mid, torque, settings)? {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Ok(hi)
}

/// Least max_j |τ_j| / τ_limit,j over the distributions inside cones of `mu` (infinite when
/// none exists).
fn least_torque_share(
    inst: &Instant,
    limits: &[f64],
    mu: f64,
    settings: &DefaultSettings<f64>,
) -> Result<f64, String> {
    if inst.k == 0 {
        let nj = inst.rhs.len() - 6;
        return Ok((0..nj)
            .filter(|&j| limits[j].is_finite() && limits[j] > 0.0)
            .map(|j| inst.rhs[6 + j].abs() / limits[j])
            .fold(0.0, f64::max));
    }
    if !limits.iter().any(|l| l.is_finite() && *l > 0.0) {
        return Ok(0.0);
    }
    // At the plan's own budget the cones may be only just wide enough for the worst instant;
    // a solver stopped there short of an answer is asked again with a slightly wider budget.
    for widen in [1.0, 1.0 + 1e-3, 1.0 + 1e-2] {
        let (status, obj) = solve(inst, limits, mu * widen, false, Extra::Share, settings)?;
        if solved(status) {
            return Ok(obj.max(0.0));
        }
    }
    Ok(f64::INFINITY)
}
