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

use super::whole_body::WholeBody;
use super::{ControlLaw, LawSettings, LawStatus, Observation, Target};
use crate::model::Model;
use crate::spatial::{Mat3, Vec3};
use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettings, DefaultSettingsBuilder, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
};
use nalgebra::DMatrix;

/// Penalty on the base-wrench slack, per N² (far above every other weight).
const SLACK_WEIGHT: f64 = 1e6;

/// One solver per (number of stance feet, strict or relaxed): the problem's sparsity pattern
/// depends only on those, so later steps update the data in place instead of rebuilding.
struct CachedSolver {
    solver: DefaultSolver<f64>,
}

pub struct ConeMargin {
    pub body: WholeBody,
    solvers: Vec<Option<CachedSolver>>,
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

impl ConeMargin {
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
            .tol_gap_abs(1e-7)
            .tol_gap_rel(1e-7)
            .tol_feas(1e-8)
            .build()
            .expect("valid solver settings");
        ConeMargin {
            body,
            solvers: (0..2 * (nf + 1)).map(|_| None).collect(),
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
    fn assemble(&mut self, relaxed: bool) {
        let body = &self.body;
        let (k, nj, nv) = (body.k, body.nj, body.nv);
        let nx = 3 * k + if relaxed { 6 } else { 0 };
        let m = 6 + k + 2 * nj + 3 * k;
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
        for j in 0..nj {
            for a in 0..3 * k {
                self.a_dense[(row, a)] = -self.g[(6 + j, a)];
                self.a_dense[(row + 1, a)] = self.g[(6 + j, a)];
            }
            self.b_vec[row] = self.tau_limit[j] - body.rhs[6 + j];
            self.b_vec[row + 1] = self.tau_limit[j] + body.rhs[6 + j];
            row += 2;
        }
        let mu = set.mu_estimate * (1.0 - set.cone_margin);
        for c in 0..k {
            self.a_dense[(row, 3 * c)] = -mu;
            self.a_dense[(row + 1, 3 * c + 1)] = -1.0;
            self.a_dense[(row + 2, 3 * c + 2)] = -1.0;
            for r in 0..3 {
                self.b_vec[row + r] = 0.0;
            }
            row += 3;
        }
        debug_assert_eq!(row, m);
        // Values in the fixed dense patterns: P upper triangle by columns, A all entries.
        self.p_vals.clear();
        for c in 0..nx {
            for r in 0..=c {
                self.p_vals.push(self.p_dense[(r, c)]);
            }
        }
        self.a_vals.clear();
        for c in 0..nx {
            for r in 0..m {
                self.a_vals.push(self.a_dense[(r, c)]);
            }
        }
    }

    fn pattern(
        nx: usize,
        k: usize,
        nj: usize,
        p_vals: &[f64],
        a_vals: &[f64],
    ) -> (CscMatrix<f64>, CscMatrix<f64>) {
        let m = 6 + k + 2 * nj + 3 * k;
        let mut colptr = vec![0];
        let mut rowval = Vec::new();
        for c in 0..nx {
            for r in 0..=c {
                rowval.push(r);
            }
            colptr.push(rowval.len());
        }
        let p = CscMatrix::new(nx, nx, colptr, rowval, p_vals.to_vec());
        let mut colptr = vec![0];
        let mut rowval = Vec::new();
        for _ in 0..nx {
            rowval.extend(0..m);
            colptr.push(rowval.len());
        }
        let a = CscMatrix::new(m, nx, colptr, rowval, a_vals.to_vec());
        (p, a)
    }

    /// Solve the strict program (no slack) or the relaxed one for the current stance set.
    /// Returns the solver's status and leaves the solution in the cached solver.
    fn solve_program(&mut self, relaxed: bool) -> Result<SolverStatus, ()> {
        let (k, nj) = (self.body.k, self.body.nj);
        let nx = 3 * k + if relaxed { 6 } else { 0 };
        let m = 6 + k + 2 * nj + 3 * k;
        self.assemble(relaxed);
        let slot = &mut self.solvers[2 * k + relaxed as usize];
        let reuse = match slot {
            Some(cached) => {
                cached.solver.update_P(&self.p_vals).is_ok()
                    && cached.solver.update_A(&self.a_vals).is_ok()
                    && cached.solver.update_q(&self.q_vec).is_ok()
                    && cached.solver.update_b(&self.b_vec).is_ok()
            }
            None => false,
        };
        if !reuse {
            let (p, a) = Self::pattern(nx, k, nj, &self.p_vals, &self.a_vals);
            debug_assert_eq!((self.q_vec.len(), self.b_vec.len()), (nx, m));
            let mut cones = vec![
                SupportedConeT::ZeroConeT(6),
                SupportedConeT::NonnegativeConeT(k + 2 * nj),
            ];
            for _ in 0..k {
                cones.push(SupportedConeT::SecondOrderConeT(3));
            }
            match DefaultSolver::new(
                &p,
                &self.q_vec,
                &a,
                &self.b_vec,
                &cones,
                self.settings_solver.clone(),
            ) {
                Ok(solver) => *slot = Some(CachedSolver { solver }),
                Err(_) => return Err(()),
            }
        }
        let solver = &mut slot.as_mut().expect("just set").solver;
        solver.solve();
        Ok(solver.solution.status)
    }

    /// The strict program; when the demand cannot be met inside the cones, the relaxed one
    /// (reported infeasible). Fills `tau_id` and the forces.
    fn solve(&mut self) -> LawStatus {
        let (k, nj) = (self.body.k, self.body.nj);
        let (relaxed, status) = match self.solve_program(false) {
            Ok(SolverStatus::Solved | SolverStatus::AlmostSolved) => (false, LawStatus::Solved),
            Ok(SolverStatus::PrimalInfeasible | SolverStatus::AlmostPrimalInfeasible) => {
                match self.solve_program(true) {
                    Ok(SolverStatus::Solved | SolverStatus::AlmostSolved) => {
                        (true, LawStatus::Infeasible)
                    }
                    _ => return LawStatus::Failed,
                }
            }
            _ => return LawStatus::Failed,
        };
        let frame = self.surface();
        let x = &self.solvers[2 * k + relaxed as usize]
            .as_ref()
            .expect("solved")
            .solver
            .solution
            .x;
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

impl ControlLaw for ConeMargin {
    fn name(&self) -> &'static str {
        "cone-margin"
    }
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        if let Err(status) = self.body.prepare(obs, target) {
            self.body.fallback(obs, target, tau);
            return status;
        }
        let status = if 3 * self.body.k < 6 {
            // No contact-force freedom: the consistent torque is unique.
            let s = self.body.min_torque();
            self.body.predict_forces();
            s
        } else {
            self.solve()
        };
        if status == LawStatus::Failed {
            // Solver trouble: the minimum-norm consistent torque, reported as failed.
            if self.body.min_torque() != LawStatus::Failed {
                self.body.predict_forces();
                self.body.output_with_joint_pd(obs, target, tau);
            } else {
                self.body.fallback(obs, target, tau);
            }
            return LawStatus::Failed;
        }
        self.body.remember_loads(target.stance);
        self.body.output_with_joint_pd(obs, target, tau);
        status
    }
    fn predicted_forces(&self) -> &[Vec3] {
        &self.body.forces
    }
}
