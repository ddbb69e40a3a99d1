//! A convex program over the contact forces that keeps every foot as deep inside its friction
//! cone as the motion allows, solved each step by a maintained interior-point conic solver
//! (Clarabel: Goulart & Chen, "Clarabel: An interior-point solver for conic programs with
//! quadratic objectives", arXiv 2405.12762, 2024).
//!
//! Reduced form (forces only): with v̇ fixed by the shared reference and projection, the six
//! unactuated rows of the dynamics M v̇ + h = Sᵀτ + J_cᵀλ are equalities on λ alone, and the
//! joint rows give τ = (M v̇ + h)_j − (J_cᵀλ)_j explicitly. Variables: λ in each stance foot's
//! surface frame (normal, two tangents). The strict program is solved first; when the solver
//! proves it infeasible (the demand exceeds friction, the torque limits or the minimum normal
//! force), a relaxed program adds a slack δ ∈ ℝ⁶ on the base rows — the motion "giving way" —
//! penalised heavily, and its solution, the closest feasible command, is applied and reported
//! as infeasible.
//!
//!   min  Σ_f w_f ‖λ_t,f‖² + w_n Σ_f λ_n,f² + w_τ ‖τ(λ)‖² + ρ ‖δ‖²
//!   s.t. (J_cᵀλ)_base + δ = (M v̇ + h)_base
//!        ‖λ_t,f‖ ≤ μ̂ (1 − margin) λ_n,f,  λ_n,f ≥ f_min,  |τ(λ)| ≤ τ_max
//!
//! w_f is the load-normalised tangential weight (tangential weight × f_ref / f̂_n, f̂_n the
//! previous solution's normal load): the objective evens out the friction ratios exactly.

use super::whole_body::{Distribution, WholeBody};
use super::{ControlLaw, LawSettings, LawStatus};
use crate::model::Model;
use crate::spatial::{Mat3, Vec3};
use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettings, DefaultSettingsBuilder, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
};
use nalgebra::DMatrix;

/// Penalty on the base-wrench slack, per N² (far above every other weight).
const SLACK_WEIGHT: f64 = 1e6;
/// A relaxed solution whose slack is below this (N, N·m) is taken as feasible: the strict
/// program is solved again for exact equalities.
const RELAXED_FEASIBLE_SLACK: f64 = 1e-3;

/// One solver per (number of stance feet, strict or relaxed): the problem's sparsity pattern
/// depends only on those, so later steps update the data in place instead of rebuilding.
/// A sparsity pattern in compressed-column form: (column pointers, row indices).
type Pattern = (Vec<usize>, Vec<usize>);

struct CachedSolver {
    /// Stance feet (bit per foot) and whether the program is the relaxed one.
    stance_mask: u64,
    relaxed: bool,
    /// Whether the torque-limit rows are in the program.
    limits: bool,
    solver: DefaultSolver<f64>,
    /// The structural sparsity (CSC) of P's upper triangle and of A for this stance set.
    p_pattern: Pattern,
    a_pattern: Pattern,
}

pub struct ConeProgram {
    pub body: WholeBody,
    solvers: Vec<CachedSolver>,
    /// Whether the last step's strict program was infeasible (then the relaxed one is tried
    /// first: proving infeasibility every step costs the most iterations).
    last_infeasible: bool,
    /// Dense problem data for the current k (column-major values in a fixed pattern).
    p_dense: DMatrix<f64>,
    a_dense: DMatrix<f64>,
    q_vec: Vec<f64>,
    b_vec: Vec<f64>,
    p_vals: Vec<f64>,
    a_vals: Vec<f64>,
    /// G = J_cᵀ · blkdiag(surface frames): generalized force of surface-frame foot forces.
    g: DMatrix<f64>,
    tau_limit: Vec<f64>,
    /// Last slack norm (for tests and traces).
    pub last_slack: f64,
    /// Solution forces in the surface frames, stacked.
    lambda_s: Vec<f64>,
    settings_solver: DefaultSettings<f64>,
}

impl ConeProgram {
    pub const NAME: &'static str = "cone-program";
    pub fn new(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Self {
        let nf = feet.len();
        let nv = model.nv();
        let nj = model.n_joints();
        let tau_limit = model.joints.iter().map(|j| j.effort_limit).collect();
        let body = WholeBody::new(model, feet, settings);
        let settings_solver = DefaultSettingsBuilder::default()
            .verbose(false)
            .presolve_enable(false)
            .max_iter(50)
            .tol_gap_abs(1e-6)
            .tol_gap_rel(1e-6)
            .tol_feas(1e-7)
            .build()
            .expect("valid solver settings");
        ConeProgram {
            body,
            solvers: Vec::new(),
            last_infeasible: false,
            p_dense: DMatrix::zeros(3 * nf + 6, 3 * nf + 6),
            a_dense: DMatrix::zeros(6 + nf + 2 * nj + 3 * nf, 3 * nf + 6),
            q_vec: vec![0.0; 3 * nf + 6],
            b_vec: vec![0.0; 6 + nf + 2 * nj + 3 * nf],
            p_vals: Vec::with_capacity((3 * nf + 6) * (3 * nf + 7) / 2),
            a_vals: Vec::with_capacity((6 + nf + 2 * nj + 3 * nf) * (3 * nf + 6)),
            g: DMatrix::zeros(nv, 3 * nf),
            tau_limit,
            last_slack: 0.0,
            lambda_s: Vec::with_capacity(3 * nf),
            settings_solver,
        }
    }
    pub fn boxed(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Box<dyn ControlLaw> {
        Box::new(Self::new(model, feet, settings))
    }

    /// The surface frame [n t1 t2] (columns, world) the controller assumes.
    fn surface(&self) -> Mat3 {
        let n = self.body.settings.ground_normal.normalize();
        let t1 = (Vec3::x() - n * n.x).normalize();
        let t2 = n.cross(&t1);
        Mat3::from_columns(&[n, t1, t2])
    }

    /// Fill the dense P, q, A, b of the program for the current stance set.
    fn assemble(&mut self, relaxed: bool, limits: bool) {
        let body = &self.body;
        let (k, nj, nv) = (body.k, body.nj, body.nv);
        let nx = 3 * k + if relaxed { 6 } else { 0 };
        let n_lim = if limits { 2 * nj } else { 0 };
        let m = 6 + k + n_lim + 3 * k;
        let frame = self.surface();
        // Exact lengths for the solver's data updates (within capacity: no allocation).
        self.q_vec.resize(nx, 0.0);
        self.b_vec.resize(m, 0.0);
        // G = J_cᵀ R_s per foot.
        for c in 0..k {
            for r in 0..nv {
                for s in 0..3 {
                    let mut v = 0.0;
                    for w in 0..3 {
                        v += body.jct[(r, 3 * c + w)] * frame[(w, s)];
                    }
                    self.g[(r, 3 * c + s)] = v;
                }
            }
        }
        let set = &body.settings;
        let wt = set.torque_weight;
        self.p_dense.view_mut((0, 0), (nx, nx)).fill(0.0);
        for c in 0..k {
            // Weight ∝ 1/f̂ (not 1/f̂²): minimising Σ w_f ‖λ_t,f‖² under a fixed total
            // tangential load gives λ_t,f ∝ 1/w_f = f̂_f, i.e. the same ‖λ_t‖/λ_n at every foot
            // once f̂ settles on the solution — the largest friction margin for that load.
            let w_t = body.load_weight(body.stance[c], k, set.tangent_weight, 1);
            self.p_dense[(3 * c, 3 * c)] = 2.0 * set.normal_weight;
            self.p_dense[(3 * c + 1, 3 * c + 1)] = 2.0 * w_t;
            self.p_dense[(3 * c + 2, 3 * c + 2)] = 2.0 * w_t;
        }
        // w_τ ‖rhs_j − G_j λ‖²: P += 2 w_τ G_jᵀG_j, q = −2 w_τ G_jᵀ rhs_j.
        for a in 0..3 * k {
            let mut qa = 0.0;
            for j in 0..nj {
                qa += self.g[(6 + j, a)] * body.rhs[6 + j];
            }
            self.q_vec[a] = -2.0 * wt * qa;
            for b in 0..=a {
                let mut s = 0.0;
                for j in 0..nj {
                    s += self.g[(6 + j, a)] * self.g[(6 + j, b)];
                }
                self.p_dense[(a, b)] += 2.0 * wt * s;
                if a != b {
                    self.p_dense[(b, a)] += 2.0 * wt * s;
                }
            }
        }
        if relaxed {
            for d in 0..6 {
                self.p_dense[(3 * k + d, 3 * k + d)] = 2.0 * SLACK_WEIGHT;
                self.q_vec[3 * k + d] = 0.0;
            }
        }
        // Constraints s = b − A x ∈ K.
        self.a_dense.view_mut((0, 0), (m, nx)).fill(0.0);
        let mut row = 0;
        for r in 0..6 {
            for a in 0..3 * k {
                self.a_dense[(row, a)] = self.g[(r, a)];
            }
            if relaxed {
                self.a_dense[(row, 3 * k + r)] = 1.0;
            }
            self.b_vec[row] = body.rhs[r];
            row += 1;
        }
        for c in 0..k {
            self.a_dense[(row, 3 * c)] = -1.0;
            self.b_vec[row] = -set.min_normal_force;
            row += 1;
        }
        for j in 0..n_lim / 2 {
            for a in 0..3 * k {
                self.a_dense[(row, a)] = -self.g[(6 + j, a)];
                self.a_dense[(row + 1, a)] = self.g[(6 + j, a)];
            }
            self.b_vec[row] = self.tau_limit[j] - body.rhs[6 + j];
            self.b_vec[row + 1] = self.tau_limit[j] + body.rhs[6 + j];
            row += 2;
        }
        for c in 0..k {
            // issue 14: a known friction patch gives its foot its own μ̂.
            let mu_hat = set
                .mu_estimate_feet
                .get(body.stance[c])
                .copied()
                .unwrap_or(set.mu_estimate);
            let mu = mu_hat * (1.0 - set.cone_margin);
            self.a_dense[(row, 3 * c)] = -mu;
            self.a_dense[(row + 1, 3 * c + 1)] = -1.0;
            self.a_dense[(row + 2, 3 * c + 2)] = -1.0;
            for r in 0..3 {
                self.b_vec[row + r] = 0.0;
            }
            row += 3;
        }
        debug_assert_eq!(row, m);
    }

    /// The structural nonzeros of the program for the current stance set, in CSC form: P (upper
    /// triangle) is block diagonal, one 3 × 3 block per stance foot (a joint torque depends only
    /// on the force of the foot at the end of its own leg), plus the slack diagonal; A's base
    /// rows are dense, a torque row touches only its own leg's foot, and every cone and
    /// minimum-force row one force component. A sparse KKT system is what makes the solver
    /// fast here (dense patterns measured ~5× slower).
    fn structure(&self, relaxed: bool, limits: bool) -> (Pattern, Pattern) {
        let body = &self.body;
        let k = body.k;
        let nj = if limits { body.nj } else { 0 };
        let nx = 3 * k + if relaxed { 6 } else { 0 };
        let drives = |joint: usize, c: usize| {
            let foot_body = body.model.frames[body.feet[body.stance[c]]].body;
            body.model.is_ancestor(joint + 1, foot_body)
        };
        let (mut pc, mut pr) = (vec![0], Vec::new());
        for col in 0..nx {
            if col < 3 * k {
                let c0 = 3 * (col / 3);
                pr.extend(c0..=col);
            } else {
                pr.push(col);
            }
            pc.push(pr.len());
        }
        let (mut ac, mut ar) = (vec![0], Vec::new());
        for col in 0..nx {
            if col < 3 * k {
                let (c, comp) = (col / 3, col % 3);
                ar.extend(0..6);
                if comp == 0 {
                    ar.push(6 + c);
                }
                for j in 0..nj {
                    if drives(j, c) {
                        ar.push(6 + k + 2 * j);
                        ar.push(6 + k + 2 * j + 1);
                    }
                }
                ar.push(6 + k + 2 * nj + col);
            } else {
                ar.push(col - 3 * k);
            }
            ac.push(ar.len());
        }
        ((pc, pr), (ac, ar))
    }

    /// Solve the strict program (no slack) or the relaxed one for the current stance set.
    /// Returns the solver's status; the solution stays in the cached solver `self.solvers[i]`.
    fn solve_program(&mut self, relaxed: bool, limits: bool) -> Result<(usize, SolverStatus), ()> {
        let k = self.body.k;
        let nj = if limits { self.body.nj } else { 0 };
        let mask = self.body.stance.iter().fold(0u64, |m, &f| m | (1 << f));
        self.assemble(relaxed, limits);
        let slot = self
            .solvers
            .iter()
            .position(|c| c.stance_mask == mask && c.relaxed == relaxed && c.limits == limits);
        // Values in the cached sparsity pattern (no allocation once the vectors have grown).
        let fill = |vals: &mut Vec<f64>, pattern: &Pattern, dense: &DMatrix<f64>| {
            vals.clear();
            for col in 0..pattern.0.len() - 1 {
                for &row in &pattern.1[pattern.0[col]..pattern.0[col + 1]] {
                    vals.push(dense[(row, col)]);
                }
            }
        };
        let i = match slot {
            Some(i) => {
                let c = &mut self.solvers[i];
                fill(&mut self.p_vals, &c.p_pattern, &self.p_dense);
                fill(&mut self.a_vals, &c.a_pattern, &self.a_dense);
                let ok = c.solver.update_P(&self.p_vals).is_ok()
                    && c.solver.update_A(&self.a_vals).is_ok()
                    && c.solver.update_q(&self.q_vec).is_ok()
                    && c.solver.update_b(&self.b_vec).is_ok();
                if !ok {
                    return Err(());
                }
                i
            }
            None => {
                let (p_pattern, a_pattern) = self.structure(relaxed, limits);
                fill(&mut self.p_vals, &p_pattern, &self.p_dense);
                fill(&mut self.a_vals, &a_pattern, &self.a_dense);
                let nx = p_pattern.0.len() - 1;
                let m = 6 + k + 2 * nj + 3 * k;
                let p = CscMatrix::new(
                    nx,
                    nx,
                    p_pattern.0.clone(),
                    p_pattern.1.clone(),
                    self.p_vals.clone(),
                );
                let a = CscMatrix::new(
                    m,
                    nx,
                    a_pattern.0.clone(),
                    a_pattern.1.clone(),
                    self.a_vals.clone(),
                );
                let mut cones = vec![
                    SupportedConeT::ZeroConeT(6),
                    SupportedConeT::NonnegativeConeT(k + 2 * nj),
                ];
                cones.extend((0..k).map(|_| SupportedConeT::SecondOrderConeT(3)));
                let solver = DefaultSolver::new(
                    &p,
                    &self.q_vec,
                    &a,
                    &self.b_vec,
                    &cones,
                    self.settings_solver.clone(),
                )
                .map_err(|_| ())?;
                self.solvers.push(CachedSolver {
                    stance_mask: mask,
                    relaxed,
                    limits,
                    solver,
                    p_pattern,
                    a_pattern,
                });
                self.solvers.len() - 1
            }
        };
        let solver = &mut self.solvers[i].solver;
        solver.solve();
        Ok((i, solver.solution.status))
    }

    /// The strict program; when the demand cannot be met inside the cones, the relaxed one
    /// (reported infeasible). Fills `tau_id` and the forces.
    fn solve(&mut self) -> LawStatus {
        let k = self.body.k;
        let nj = self.body.nj;
        // Torque limits enter lazily: the program is solved without their 2 × nj rows (most
        // steps are far from the limits, and the smaller KKT system solves about twice as
        // fast); if the resulting torques break a limit, it is solved again with them.
        let (i, relaxed) = match self.choose(false) {
            Ok((i, relaxed)) if self.within_limits(i) => (i, relaxed),
            Ok(_) => match self.choose(true) {
                Ok(c) => c,
                Err(status) => return status,
            },
            Err(status) => return status,
        };
        self.last_infeasible = relaxed;
        let status = if relaxed {
            LawStatus::Infeasible
        } else {
            LawStatus::Solved
        };
        let frame = self.surface();
        let x = &self.solvers[i].solver.solution.x;
        self.lambda_s.clear();
        self.lambda_s.extend_from_slice(&x[..3 * k]);
        self.last_slack = if relaxed {
            (0..6)
                .map(|d| x[3 * k + d] * x[3 * k + d])
                .sum::<f64>()
                .sqrt()
        } else {
            0.0
        };
        if !relaxed {
            self.polish_equalities();
        }
        let body = &mut self.body;
        // τ = rhs_j − G_j λ; forces back to world axes.
        for j in 0..nj {
            let mut s = body.rhs[6 + j];
            for a in 0..3 * k {
                s -= self.g[(6 + j, a)] * self.lambda_s[a];
            }
            body.tau_id[j] = s;
        }
        for f in body.forces.iter_mut() {
            *f = Vec3::zeros();
        }
        for c in 0..k {
            let local = Vec3::new(
                self.lambda_s[3 * c],
                self.lambda_s[3 * c + 1],
                self.lambda_s[3 * c + 2],
            );
            let world = frame * local;
            for r in 0..3 {
                body.lambda[3 * c + r] = world[r];
            }
            body.forces[body.stance[c]] = world;
        }
        status
    }

    /// Solve strict or relaxed (see [`ConeProgram::solve`]): the index of the cached solver that
    /// holds the answer and whether it is the relaxed program.
    fn choose(&mut self, limits: bool) -> Result<(usize, bool), LawStatus> {
        let k = self.body.k;
        let solved =
            |s: SolverStatus| matches!(s, SolverStatus::Solved | SolverStatus::AlmostSolved);
        let infeasible = |s: SolverStatus| {
            matches!(
                s,
                SolverStatus::PrimalInfeasible | SolverStatus::AlmostPrimalInfeasible
            )
        };
        // After an infeasible step the relaxed program goes first; a slack that has vanished
        // sends us back to the strict one (exact equalities), otherwise the step is infeasible.
        if self.last_infeasible
            && let Ok((i, st)) = self.solve_program(true, limits)
            && solved(st)
        {
            let x = &self.solvers[i].solver.solution.x;
            let slack = (0..6)
                .map(|d| x[3 * k + d] * x[3 * k + d])
                .sum::<f64>()
                .sqrt();
            if slack > RELAXED_FEASIBLE_SLACK {
                return Ok((i, true));
            }
        }
        match self.solve_program(false, limits) {
            Ok((i, st)) if solved(st) => Ok((i, false)),
            Ok((_, st)) if infeasible(st) => match self.solve_program(true, limits) {
                Ok((i, st)) if solved(st) => Ok((i, true)),
                _ => Err(LawStatus::Failed),
            },
            _ => Err(LawStatus::Failed),
        }
    }

    /// Whether the torques of the solution held by solver `i` respect every effort limit.
    fn within_limits(&self, i: usize) -> bool {
        let x = &self.solvers[i].solver.solution.x;
        let k3 = 3 * self.body.k;
        (0..self.body.nj).all(|j| {
            let tau =
                self.body.rhs[6 + j] - (0..k3).map(|a| self.g[(6 + j, a)] * x[a]).sum::<f64>();
            tau.abs() <= self.tau_limit[j] * (1.0 + 1e-6)
        })
    }

    /// The interior-point solution meets the base equalities to the solver's tolerance
    /// (~1e-8); the least-norm correction λ += G_bᵀ (G_b G_bᵀ)⁻¹ (rhs_b − G_b λ) makes them hold
    /// to rounding, moving λ by about that tolerance.
    fn polish_equalities(&mut self) {
        let k3 = 3 * self.body.k;
        let mut r = [0.0; 6];
        for (i, ri) in r.iter_mut().enumerate() {
            let mut s = self.body.rhs[i];
            for a in 0..k3 {
                s -= self.g[(i, a)] * self.lambda_s[a];
            }
            *ri = s;
        }
        let mut ggt = nalgebra::Matrix6::<f64>::zeros();
        for i in 0..6 {
            for j in 0..6 {
                ggt[(i, j)] = (0..k3).map(|a| self.g[(i, a)] * self.g[(j, a)]).sum();
            }
        }
        if let Some(chol) = ggt.cholesky() {
            let y = chol.solve(&nalgebra::Vector6::from_column_slice(&r));
            for a in 0..k3 {
                self.lambda_s[a] += (0..6).map(|i| self.g[(i, a)] * y[i]).sum::<f64>();
            }
        }
    }
}

impl Distribution for ConeProgram {
    fn name(&self) -> &str {
        Self::NAME
    }
    fn body(&self) -> &WholeBody {
        &self.body
    }
    fn body_mut(&mut self) -> &mut WholeBody {
        &mut self.body
    }
    fn distribute(&mut self) -> LawStatus {
        self.solve()
    }
    fn fills_forces(&self) -> bool {
        true
    }
    /// Solver trouble: the minimum-norm consistent torque, reported as failed.
    fn min_torque_on_failure(&self) -> bool {
        true
    }
}
