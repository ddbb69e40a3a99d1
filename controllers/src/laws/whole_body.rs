//! What the model-based laws share: the dynamics terms at the observed state, the stance
//! contact Jacobian and its orthogonal decomposition, the reference acceleration with feedback
//! on the plan, and the low-gain joint PD. They differ only in how they pick τ (and so the
//! contact forces) among the torques consistent with the constrained dynamics: a model-based
//! law implements [`Distribution`] (that choice alone) and gets [`ControlLaw`] from the one
//! skeleton here (prepare → distribute → predict the forces → joint feedback).
//!
//! Floating-base dynamics M v̇ + h = Sᵀτ + J_cᵀλ with stance feet held: J_c v̇ + J̇_c v = 0.
//! QR of J_cᵀ = Q [R; 0], Q = [Q_c Q_u] (Mistry, Buchli & Schaal, "Inverse dynamics control of
//! floating base systems using orthogonal decomposition", ICRA 2010): the rows Q_uᵀ remove the
//! unknown contact forces, Q_uᵀ (M v̇ + h) = Q_uᵀ Sᵀ τ, and λ = R⁻¹ Q_cᵀ (M v̇ + h − Sᵀτ).

use super::{ControlLaw, LawSettings, LawStatus, Observation, Target};
use crate::algorithms::{
    Workspace, contact_point_bias_acceleration, crba_after_fk, forward_kinematics, frame_support,
    point_jacobian_transposed, rnea_after_fk, velocities_and_bias,
};
use crate::configuration::difference_into;
use crate::dense::{
    cholesky_in_place, cholesky_in_place_at, cholesky_solve, cholesky_solve_at, householder_qr,
    min_pivot,
};
use crate::model::{Model, RootKind};
use crate::spatial::{Mat3, Vec3};
use nalgebra::{DMatrix, DVector};

pub struct WholeBody {
    pub model: Model,
    pub ws: Workspace,
    /// Frame index of each foot.
    pub feet: Vec<usize>,
    pub settings: LawSettings,
    pub nv: usize,
    pub nj: usize,
    /// Feet in stance this step (indices into `feet`), and their count.
    pub stance: Vec<usize>,
    pub k: usize,
    /// The v columns each foot's Jacobian can touch (base, then its chain; ascending): the
    /// sums below run over these only, skipping terms that are exactly zero, so they equal the
    /// dense sums bit for bit.
    rows: Vec<Vec<usize>>,
    /// Whether no two feet share a joint: then H of [`WholeBody::solve_in_forces`] is block
    /// diagonal (one 3 × 3 block per stance foot) and is factorised and solved by blocks.
    legs_disjoint: bool,
    /// Offset from each foot frame (the sphere centre) to its ground contact, −r n (world).
    contact_offset: Vec3,
    /// J_cᵀ of the stance feet (nv × 3k, world-aligned translational rows of each foot's
    /// ground contact point, centre − r n).
    pub jct: DMatrix<f64>,
    /// After the QR: R in the top 3k × 3k triangle.
    qr: DMatrix<f64>,
    /// The full orthogonal factor Q (nv × nv).
    pub q: DMatrix<f64>,
    householder: DMatrix<f64>,
    /// J̇_c v of the stance feet.
    pub jdot_v: DVector<f64>,
    /// Configuration error q_plan ⊖ q.
    err: DVector<f64>,
    /// Reference acceleration before and after projection onto the contact constraint.
    pub vdot_ref: DVector<f64>,
    pub vdot: DVector<f64>,
    /// h(q, v) and M v̇ + h.
    pub h: DVector<f64>,
    pub rhs: DVector<f64>,
    /// Torques from the law's contact-force distribution (before the joint PD).
    pub tau_id: DVector<f64>,
    /// Predicted contact forces of the stance feet, stacked (3k).
    pub lambda: DVector<f64>,
    /// Predicted force per foot (world), zero in swing.
    pub forces: Vec<Vec3>,
    /// Each foot's normal load predicted at the last step it was in stance (NaN otherwise): the
    /// expected load f̂_n of the load-normalised weights.
    pub expected_load: Vec<f64>,
    scratch_n: DMatrix<f64>,
    scratch_v: Vec<f64>,
    /// J_c⁺ correction of the reference acceleration, per v row.
    corr: Vec<f64>,
    scratch_c: Vec<f64>,
    /// Whether `qr` and `q` hold this step's decomposition (computed only when a law needs
    /// it: see [`WholeBody::ensure_qr`]).
    qr_valid: bool,
    /// Cholesky factor (lower) of J_c J_cᵀ (3k × 3k), every step.
    gram: DMatrix<f64>,
    /// The force-space KKT data: H (3k × 3k, then its factor), H⁻¹ J_b (3k × 6), the Schur
    /// complement J_bᵀ H⁻¹ J_b (6 × 6, then its factor), and two 3k vectors.
    hess: DMatrix<f64>,
    hinv_jb: DMatrix<f64>,
    schur: DMatrix<f64>,
    force_g: Vec<f64>,
    force_y: Vec<f64>,
}

impl WholeBody {
    pub fn new(model: Model, feet: Vec<usize>, settings: &LawSettings) -> Self {
        assert_eq!(
            model.root,
            RootKind::Floating,
            "the whole-body laws need a floating base"
        );
        let nv = model.nv();
        let nj = model.n_joints();
        let nf = feet.len();
        let ws = Workspace::new(&model);
        let rows: Vec<Vec<usize>> = feet.iter().map(|&f| frame_support(&model, f)).collect();
        let nvb = model.nv_base();
        let legs_disjoint = (0..nf)
            .all(|a| (0..a).all(|b| rows[a][nvb..].iter().all(|r| !rows[b][nvb..].contains(r))));
        WholeBody {
            rows,
            legs_disjoint,
            ws,
            nv,
            nj,
            stance: Vec::with_capacity(nf),
            k: 0,
            contact_offset: -settings.ground_normal.normalize() * settings.foot_radius,
            jct: DMatrix::zeros(nv, 3 * nf),
            qr: DMatrix::zeros(nv, 3 * nf),
            q: DMatrix::zeros(nv, nv),
            householder: DMatrix::zeros(nv, 3 * nf),
            jdot_v: DVector::zeros(3 * nf),
            err: DVector::zeros(nv),
            vdot_ref: DVector::zeros(nv),
            vdot: DVector::zeros(nv),
            h: DVector::zeros(nv),
            rhs: DVector::zeros(nv),
            tau_id: DVector::zeros(nj),
            lambda: DVector::zeros(3 * nf),
            forces: vec![Vec3::zeros(); nf],
            expected_load: vec![f64::NAN; nf],
            scratch_n: DMatrix::zeros(nv.max(nj), nv.max(nj)),
            scratch_v: vec![0.0; nv.max(nj)],
            corr: vec![0.0; nv],
            scratch_c: vec![0.0; 3 * nf],
            qr_valid: false,
            gram: DMatrix::zeros(3 * nf, 3 * nf),
            hess: DMatrix::zeros(3 * nf, 3 * nf),
            hinv_jb: DMatrix::zeros(3 * nf, 6),
            schur: DMatrix::zeros(6, 6),
            force_g: vec![0.0; 3 * nf],
            force_y: vec![0.0; 3 * nf],
            feet,
            settings: settings.clone(),
            model,
        }
    }

    /// Rows of the projected dynamics, nv − 3k.
    pub fn free_rows(&self) -> usize {
        self.nv - 3 * self.k
    }

    /// Entry (i, j) of A = Q_uᵀ Sᵀ: row i of the contact-free dynamics, joint j.
    #[inline]
    pub fn a_entry(&self, i: usize, j: usize) -> f64 {
        self.q[(6 + j, 3 * self.k + i)]
    }

    /// Upper-triangular R of J_cᵀ = Q [R; 0].
    pub fn r(&self) -> &DMatrix<f64> {
        &self.qr
    }

    /// Dynamics terms, stance Jacobian, its decomposition, the projected reference
    /// acceleration and rhs = M v̇ + h. `Err(Failed)` if the stance Jacobian is singular.
    pub fn prepare(&mut self, obs: &Observation, target: &Target) -> Result<(), LawStatus> {
        let model = &self.model;
        let ws = &mut self.ws;
        forward_kinematics(model, ws, obs.q);
        crba_after_fk(model, ws);
        // h = RNEA(q, v, 0): the workspace's τ with a zero acceleration (vdot as zero buffer).
        self.vdot.fill(0.0);
        rnea_after_fk(model, ws, obs.v, &self.vdot);
        self.h.copy_from(&ws.tau);
        velocities_and_bias(model, ws, obs.v);

        self.stance.clear();
        for (i, &s) in target.stance.iter().enumerate() {
            if s {
                self.stance.push(i);
            }
        }
        self.k = self.stance.len();
        let k = self.k;
        for (c, &i) in self.stance.iter().enumerate() {
            let frame = self.feet[i];
            // Contact where the sphere touches the ground, not at its centre: forces there
            // carry no moment about the contact, and on a slope the lever arms differ.
            let d = self.contact_offset;
            let nv = self.nv;
            let block = &mut self.jct.as_mut_slice()[3 * c * nv..(3 * c + 3) * nv];
            point_jacobian_transposed(model, ws, frame, &d, block);
            let b = contact_point_bias_acceleration(model, ws, frame, &d);
            for r in 0..3 {
                self.jdot_v[3 * c + r] = b[r];
            }
        }
        // Gram matrix J_c J_cᵀ and its Cholesky factor: the projection below and the force
        // prediction need only this; the full QR is formed on demand (`ensure_qr`).
        self.qr_valid = false;
        let k3 = 3 * k;
        for a in 0..k3 {
            let ca = &self.jct.as_slice()[a * self.nv..(a + 1) * self.nv];
            let rows_a = &self.rows[self.stance[a / 3]];
            for b in 0..=a {
                let cb = &self.jct.as_slice()[b * self.nv..(b + 1) * self.nv];
                let v: f64 = rows_a.iter().map(|&r| ca[r] * cb[r]).sum();
                self.gram[(a, b)] = v;
                self.gram[(b, a)] = v;
            }
        }
        // Rank check as before (smallest |R_jj| ≥ 1e-9, R_jj² = the Cholesky pivots²).
        if k > 0 && !(cholesky_in_place(&mut self.gram, k3) && min_pivot(&self.gram, k3) >= 1e-9) {
            return Err(LawStatus::Failed);
        }

        // v̇_ref = v̇_plan + K_d (v_plan − v) + K_p (q_plan ⊖ q)
        difference_into(model, obs.q, target.q, &mut self.err);
        let s = &self.settings;
        for i in 0..self.nv {
            let (kp, kd) = match i {
                0..3 => (s.base_kp, s.base_kd),
                3..6 => (s.orient_kp, s.orient_kd),
                _ => (s.posture_kp, s.posture_kd),
            };
            self.vdot_ref[i] = target.a[i] + kd * (target.v[i] - obs.v[i]) + kp * self.err[i];
        }
        // Least-change projection onto J_c v̇ = −J̇_c v: v̇ = v̇_ref − J_c⁺ (J_c v̇_ref + J̇_c v),
        // J_c⁺ = J_cᵀ (J_c J_cᵀ)⁻¹.
        let c = &mut self.scratch_c;
        let nv = self.nv;
        let jct = self.jct.as_slice();
        for col in 0..3 * k {
            let jc = &jct[col * nv..(col + 1) * nv];
            let mut sum = self.jdot_v[col];
            for &r in &self.rows[self.stance[col / 3]] {
                sum += jc[r] * self.vdot_ref[r];
            }
            c[col] = sum;
        }
        cholesky_solve(&self.gram, 3 * k, c);
        self.corr.fill(0.0);
        for col in 0..3 * k {
            let jc = &jct[col * nv..(col + 1) * nv];
            for &r in &self.rows[self.stance[col / 3]] {
                self.corr[r] += jc[r] * c[col];
            }
        }
        for r in 0..nv {
            self.vdot[r] = self.vdot_ref[r] - self.corr[r];
        }
        // rhs = M v̇ + h, by columns of M (contiguous).
        self.rhs.copy_from(&self.h);
        let m = ws.mass_matrix.as_slice();
        let ldm = ws.mass_matrix.nrows();
        for col in 0..nv {
            let x = self.vdot[col];
            if x != 0.0 {
                self.rhs
                    .as_mut_slice()
                    .iter_mut()
                    .zip(&m[col * ldm..col * ldm + nv])
                    .for_each(|(y, a)| *y += a * x);
            }
        }
        Ok(())
    }

    /// b = Q_uᵀ rhs into `out` (nv − 3k entries).
    pub fn projected_rhs(&self, out: &mut [f64]) {
        let k3 = 3 * self.k;
        for (i, o) in out.iter_mut().enumerate().take(self.nv - k3) {
            let mut sum = 0.0;
            for r in 0..self.nv {
                sum += self.q[(r, k3 + i)] * self.rhs[r];
            }
            *o = sum;
        }
    }

    /// The QR of J_cᵀ for this step ([`WholeBody::a_entry`], [`WholeBody::r`], `q`): formed
    /// only by the paths that need it.
    pub fn ensure_qr(&mut self) {
        if self.qr_valid {
            return;
        }
        let k3 = 3 * self.k;
        for c in 0..k3 {
            for r in 0..self.nv {
                self.qr[(r, c)] = self.jct[(r, c)];
            }
        }
        householder_qr(
            &mut self.qr,
            self.nv,
            k3,
            &mut self.q,
            &mut self.householder,
        );
        self.qr_valid = true;
    }

    /// The consistent torque that minimises ½ Σ_f λ_fᵀ W_f λ_f + ½ w_τ ‖τ‖², solved in the
    /// contact forces: the consistent torques are exactly τ = rhs_j − J_jᵀλ with J_bᵀλ = rhs_b
    /// (the six base rows of M v̇ + h = Sᵀτ + J_cᵀλ), so λ solves the equality-constrained
    /// least squares
    ///   [H    J_b] [λ]   [w_τ J_j rhs_j]
    ///   [J_bᵀ 0  ] [ν] = [rhs_b        ],  H = blkdiag(W_f) + w_τ J_j J_jᵀ,
    /// by Cholesky of H (SPD; block diagonal when each foot's rows touch only its own leg's
    /// joints) and of the 6 × 6 Schur complement J_bᵀ H⁻¹ J_b (range-space method: Nocedal &
    /// Wright, "Numerical Optimization", 2nd ed., Springer 2006, §16.2). `weight(c)` gives W_f
    /// of stance foot c (world axes), `None` for W = 0 (the minimum-norm torque). Returns false
    /// (nothing written) when H or the Schur complement is not positive definite; the caller
    /// then takes the orthogonal-decomposition path.
    pub fn solve_in_forces(&mut self, wt: f64, weight: Option<&dyn Fn(usize) -> Mat3>) -> bool {
        let (nv, k3) = (self.nv, 3 * self.k);
        if k3 < 6 {
            return false;
        }
        let jct = self.jct.as_slice();
        let rhs = self.rhs.as_slice();
        for a in 0..k3 {
            let ca = &jct[a * nv..(a + 1) * nv];
            // The joint rows of this foot's chain (the base rows are not in H).
            let leg = &self.rows[self.stance[a / 3]][6..];
            for b in 0..=a {
                let cb = &jct[b * nv..(b + 1) * nv];
                let v = wt * leg.iter().map(|&r| ca[r] * cb[r]).sum::<f64>();
                self.hess[(a, b)] = v;
                self.hess[(b, a)] = v;
            }
            self.force_g[a] = wt * leg.iter().map(|&r| ca[r] * rhs[r]).sum::<f64>();
        }
        if let Some(w) = weight {
            for c in 0..self.k {
                let wc = w(c);
                for r in 0..3 {
                    for m in 0..3 {
                        self.hess[(3 * c + r, 3 * c + m)] += wc[(r, m)];
                    }
                }
            }
        }
        // Block diagonal H (no shared joints): each foot's 3 × 3 block on its own, the same
        // operations as the whole factorisation and solve spend on it.
        let blocks = self.legs_disjoint;
        let factored = if blocks {
            (0..self.k).all(|c| cholesky_in_place_at(&mut self.hess, 3 * c, 3))
        } else {
            cholesky_in_place(&mut self.hess, k3)
        };
        if !factored {
            return false;
        }
        let (hess, k) = (&self.hess, self.k);
        let h_solve = |b: &mut [f64]| {
            if blocks {
                for c in 0..k {
                    cholesky_solve_at(hess, 3 * c, 3, &mut b[3 * c..3 * c + 3]);
                }
            } else {
                cholesky_solve(hess, k3, b);
            }
        };
        // H⁻¹ J_b column by column (J_b[a, i] = J_cᵀ[i, a]), then S = J_bᵀ H⁻¹ J_b.
        for i in 0..6 {
            let col = &mut self.force_y;
            for a in 0..k3 {
                col[a] = jct[a * nv + i];
            }
            h_solve(&mut col[..k3]);
            for a in 0..k3 {
                self.hinv_jb[(a, i)] = col[a];
            }
        }
        for i in 0..6 {
            for j in 0..=i {
                let mut v = 0.0;
                for a in 0..k3 {
                    v += jct[a * nv + i] * self.hinv_jb[(a, j)];
                }
                self.schur[(i, j)] = v;
                self.schur[(j, i)] = v;
            }
        }
        if !cholesky_in_place(&mut self.schur, 6) {
            return false;
        }
        // y = H⁻¹ g; ν = S⁻¹ (J_bᵀ y − rhs_b); λ = y − H⁻¹J_b ν.
        let y = &mut self.force_y;
        y[..k3].copy_from_slice(&self.force_g[..k3]);
        h_solve(&mut y[..k3]);
        let mut nu = [0.0; 6];
        for (i, n) in nu.iter_mut().enumerate() {
            let mut v = -self.rhs[i];
            for a in 0..k3 {
                v += jct[a * nv + i] * y[a];
            }
            *n = v;
        }
        let schur = &self.schur;
        for i in 0..6 {
            let mut v = nu[i];
            for m in 0..i {
                v -= schur[(i, m)] * nu[m];
            }
            nu[i] = v / schur[(i, i)];
        }
        for i in (0..6).rev() {
            let mut v = nu[i];
            for m in i + 1..6 {
                v -= schur[(m, i)] * nu[m];
            }
            nu[i] = v / schur[(i, i)];
        }
        for a in 0..k3 {
            let mut v = y[a];
            for (i, n) in nu.iter().enumerate() {
                v -= self.hinv_jb[(a, i)] * n;
            }
            self.lambda[a] = v;
        }
        // τ = rhs_j − J_jᵀ λ (each λ entry reaches its own foot's chain only).
        for j in 0..self.nj {
            self.tau_id[j] = self.rhs[6 + j];
        }
        for a in 0..k3 {
            let ca = &jct[a * nv..(a + 1) * nv];
            for &r in &self.rows[self.stance[a / 3]][6..] {
                self.tau_id[r - 6] -= ca[r] * self.lambda[a];
            }
        }
        true
    }

    /// The minimum-norm τ with Q_uᵀ Sᵀ τ = Q_uᵀ (M v̇ + h): τ = (Q_uᵀSᵀ)⁺ Q_uᵀ (M v̇ + h).
    /// With two or more stance feet it is solved in the contact forces
    /// ([`WholeBody::solve_in_forces`] with W = 0, w_τ = 1); with fewer the system is
    /// overdetermined: least squares, reported as underactuated.
    pub fn min_torque(&mut self) -> LawStatus {
        if self.solve_in_forces(1.0, None) {
            return LawStatus::Solved;
        }
        self.ensure_qr();
        let rows = self.free_rows();
        let nj = self.nj;
        let mut b = std::mem::take(&mut self.scratch_v);
        self.projected_rhs(&mut b);
        let status;
        if rows <= nj {
            // τ = Aᵀ (A Aᵀ)⁻¹ b
            for i in 0..rows {
                for j in 0..=i {
                    let mut s = 0.0;
                    for c in 0..nj {
                        s += self.a_entry(i, c) * self.a_entry(j, c);
                    }
                    self.scratch_n[(i, j)] = s;
                    self.scratch_n[(j, i)] = s;
                }
            }
            if !cholesky_in_place(&mut self.scratch_n, rows) {
                self.scratch_v = b;
                self.tau_id.fill(0.0);
                return LawStatus::Failed;
            }
            cholesky_solve(&self.scratch_n, rows, &mut b[..rows]);
            for c in 0..nj {
                let mut s = 0.0;
                for i in 0..rows {
                    s += self.a_entry(i, c) * b[i];
                }
                self.tau_id[c] = s;
            }
            status = LawStatus::Solved;
        } else {
            // τ = (AᵀA)⁻¹ Aᵀ b, a whisker of regularisation for a foot-less flight phase.
            let mut atb = [0.0; 64];
            for c in 0..nj {
                let mut s = 0.0;
                for i in 0..rows {
                    s += self.a_entry(i, c) * b[i];
                }
                atb[c] = s;
                for d in 0..=c {
                    let mut s = 0.0;
                    for i in 0..rows {
                        s += self.a_entry(i, c) * self.a_entry(i, d);
                    }
                    let reg = if c == d { 1e-9 } else { 0.0 };
                    self.scratch_n[(c, d)] = s + reg;
                    self.scratch_n[(d, c)] = s + reg;
                }
            }
            if !cholesky_in_place(&mut self.scratch_n, nj) {
                self.scratch_v = b;
                self.tau_id.fill(0.0);
                return LawStatus::Failed;
            }
            cholesky_solve(&self.scratch_n, nj, &mut atb[..nj]);
            for c in 0..nj {
                self.tau_id[c] = atb[c];
            }
            status = LawStatus::Underactuated;
        }
        self.scratch_v = b;
        status
    }

    /// λ = (J_c J_cᵀ)⁻¹ J_c (M v̇ + h − Sᵀ τ_id) (= R⁻¹ Q_cᵀ (…) of the QR), and the per-foot
    /// forces.
    pub fn predict_forces(&mut self) {
        let (nv, k3) = (self.nv, 3 * self.k);
        let jct = self.jct.as_slice();
        for col in 0..k3 {
            let c = &jct[col * nv..(col + 1) * nv];
            let mut s = 0.0;
            for &r in &self.rows[self.stance[col / 3]] {
                let st = if r >= 6 { self.tau_id[r - 6] } else { 0.0 };
                s += c[r] * (self.rhs[r] - st);
            }
            self.lambda[col] = s;
        }
        cholesky_solve(&self.gram, k3, &mut self.lambda.as_mut_slice()[..k3]);
        for f in self.forces.iter_mut() {
            *f = Vec3::zeros();
        }
        for (c, &i) in self.stance.iter().enumerate() {
            self.forces[i] = Vec3::new(
                self.lambda[3 * c],
                self.lambda[3 * c + 1],
                self.lambda[3 * c + 2],
            );
        }
    }

    /// Remember this step's predicted normal loads for the next step's load-normalised weights.
    pub fn remember_loads(&mut self, stance: &[bool]) {
        let n = self.settings.ground_normal.normalize();
        for (i, f) in self.forces.iter().enumerate() {
            self.expected_load[i] = if stance[i] { f.dot(&n) } else { f64::NAN };
        }
    }

    /// The load-normalised tangential weight of stance foot `foot` among `k`: `base` ×
    /// (f_ref / f̂_n)^power, f_ref the robot's weight over k, f̂_n its expected load floored at
    /// `load_floor_share` of f_ref (f_ref until known).
    pub fn load_weight(&self, foot: usize, k: usize, base: f64, power: i32) -> f64 {
        let weight = self.model.total_mass() * self.model.gravity.norm();
        let f_ref = weight / k.max(1) as f64;
        let expected = self.expected_load[foot];
        let f_hat = if expected.is_finite() {
            expected.max(self.settings.load_floor_share * f_ref)
        } else {
            f_ref
        };
        base * (f_ref / f_hat).powi(power)
    }

    /// τ_out = τ_id + K_p (q_plan − q) + K_d (v_plan − v) on the joints: the low-gain joint
    /// feedback every model-based law carries (inverse dynamics alone cannot push a slipping
    /// foot back).
    pub fn output_with_joint_pd(&self, obs: &Observation, target: &Target, tau: &mut [f64]) {
        let s = &self.settings;
        for j in 0..self.nj {
            tau[j] = self.tau_id[j]
                + s.joint_kp * (target.q[7 + j] - obs.q[7 + j])
                + s.joint_kd * (target.v[6 + j] - obs.v[6 + j]);
        }
    }

    /// On failure: the joint feedback alone, forces unknown (zero).
    pub fn fallback(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) {
        self.tau_id.fill(0.0);
        for f in self.forces.iter_mut() {
            *f = Vec3::zeros();
        }
        self.output_with_joint_pd(obs, target, tau);
    }
}

/// What a model-based law decides: τ (and so the contact forces) among the torques consistent
/// with the constrained dynamics that [`WholeBody::prepare`] set up. Everything else of the
/// control step — dynamics terms, stance Jacobian, reference acceleration, the force
/// prediction, the joint feedback, the fallbacks — is the shared skeleton, so implementing this
/// trait makes a [`ControlLaw`].
pub trait Distribution: Send {
    /// The registered name.
    fn name(&self) -> &str;
    fn body(&self) -> &WholeBody;
    fn body_mut(&mut self) -> &mut WholeBody;
    /// Fill `body.tau_id` for a stance set with at least two feet (with fewer, no contact-force
    /// freedom is left and the skeleton uses the minimum-norm torque).
    fn distribute(&mut self) -> LawStatus;
    /// Whether [`Distribution::distribute`] already filled `body.forces` and `body.lambda`
    /// (otherwise the skeleton predicts them from τ).
    fn fills_forces(&self) -> bool {
        false
    }
    /// On a failed distribution: apply the minimum-norm consistent torque (reported as failed)
    /// instead of the joint feedback alone.
    fn min_torque_on_failure(&self) -> bool {
        false
    }
}

impl<D: Distribution> ControlLaw for D {
    fn name(&self) -> &str {
        Distribution::name(self)
    }
    fn compute(&mut self, obs: &Observation, target: &Target, tau: &mut [f64]) -> LawStatus {
        if let Err(status) = self.body_mut().prepare(obs, target) {
            self.body_mut().fallback(obs, target, tau);
            return status;
        }
        // With fewer than two stance feet no contact-force freedom is left: the minimum-norm
        // consistent torque is the only one.
        let few = 3 * self.body().k < 6;
        let status = if few {
            self.body_mut().min_torque()
        } else {
            self.distribute()
        };
        if status == LawStatus::Failed {
            let retry = !few && self.min_torque_on_failure();
            let body = self.body_mut();
            if retry && body.min_torque() != LawStatus::Failed {
                body.predict_forces();
                body.output_with_joint_pd(obs, target, tau);
            } else {
                body.fallback(obs, target, tau);
            }
            return LawStatus::Failed;
        }
        if few || !self.fills_forces() {
            self.body_mut().predict_forces();
        }
        let body = self.body_mut();
        body.remember_loads(target.stance);
        body.output_with_joint_pd(obs, target, tau);
        status
    }
    fn predicted_forces(&self) -> &[Vec3] {
        &self.body().forces
    }
}
