//! Contact-force-cost inverse dynamics and its load-normalised variant: floating-base inverse
//! dynamics that distributes the contact forces by a quadratic cost on
//! the predicted forces in each foot's surface frame plus a small torque cost (Righetti, Buchli,
//! Mistry, Kalakrishnan & Schaal, "Optimal distribution of contact forces with inverse-dynamics
//! control", IJRR 2013). The consistent torques are τ with A τ = b (A = Q_uᵀSᵀ, b = Q_uᵀ(M v̇ +
//! h)) and the predicted forces are affine in τ, λ = λ₀ − B τ (B = R⁻¹Q_cᵀSᵀ,
//! λ₀ = R⁻¹Q_cᵀ(M v̇ + h)), so the law is an equality-constrained least-squares problem solved
//! exactly by its KKT system:
//!   [BᵀWB + w_τ I  Aᵀ] [τ]   [BᵀWλ₀]
//!   [A             0 ] [ν] = [b    ].
//! W weights tangential components far above normal ones. Two registered variants:
//! * as published: the same weights at every foot;
//! * load-normalised: each foot's tangential weight × (f_ref / f̂_n)², f̂_n that foot's
//!   expected normal load (last step's prediction, floored), so the cost evens out the
//!   tangential/normal ratios instead of the newtons. On a slope the uphill feet carry less;
//!   the published weighting spreads tangential newtons evenly and so gives the light feet the
//!   worst ratio.
//!
//! Only this distribution lives here; the rest of the control step is the shared skeleton
//! ([`super::whole_body`]).

use super::whole_body::{Distribution, WholeBody};
use super::{ControlLaw, LawSettings, LawStatus};
use crate::dense::{lu_solve_in_place, solve_upper};
use crate::model::Model;
use crate::spatial::Mat3;
use nalgebra::DMatrix;

pub struct ForceCostId {
    pub body: WholeBody,
    load_normalised: bool,
    /// B = R⁻¹ Q_cᵀ Sᵀ (3k × nj) and λ₀.
    b_mat: DMatrix<f64>,
    lambda0: Vec<f64>,
    /// W B (3k × nj).
    wb: DMatrix<f64>,
    kkt: DMatrix<f64>,
    kkt_rhs: Vec<f64>,
    col: Vec<f64>,
    /// Each stance foot's weight this step (world axes).
    weights: Vec<Mat3>,
}

impl ForceCostId {
    /// The registered names: as published, and load-normalised.
    pub const NAME: &'static str = "force-cost-id";
    pub const NAME_LOAD: &'static str = "force-cost-id-load";
    pub fn new(
        model: Model,
        feet: Vec<usize>,
        settings: &LawSettings,
        load_normalised: bool,
    ) -> Self {
        let nf = feet.len();
        let nj = model.n_joints();
        let nv = model.nv();
        let body = WholeBody::new(model, feet, settings);
        ForceCostId {
            body,
            load_normalised,
            b_mat: DMatrix::zeros(3 * nf, nj),
            lambda0: vec![0.0; 3 * nf],
            wb: DMatrix::zeros(3 * nf, nj),
            kkt: DMatrix::zeros(nj + nv, nj + nv),
            kkt_rhs: vec![0.0; nj + nv],
            col: vec![0.0; 3 * nf],
            weights: Vec::with_capacity(nf),
        }
    }
    pub fn boxed_published(
        model: Model,
        feet: Vec<usize>,
        settings: &LawSettings,
    ) -> Box<dyn ControlLaw> {
        Box::new(Self::new(model, feet, settings, false))
    }
    pub fn boxed_load_normalised(
        model: Model,
        feet: Vec<usize>,
        settings: &LawSettings,
    ) -> Box<dyn ControlLaw> {
        Box::new(Self::new(model, feet, settings, true))
    }

    /// The 3 × 3 weight of one stance foot in world axes: w_t (I − n nᵀ) + w_n n nᵀ.
    fn foot_weight(&self, foot: usize, k: usize) -> Mat3 {
        let s = &self.body.settings;
        let n = s.ground_normal.normalize();
        let nnt = n * n.transpose();
        let w_t = if self.load_normalised {
            self.body.load_weight(foot, k, s.tangent_weight, 2)
        } else {
            s.tangent_weight
        };
        (Mat3::identity() - nnt) * w_t + nnt * s.normal_weight
    }

    fn solve_kkt(&mut self) -> LawStatus {
        let body = &self.body;
        let (k, nj) = (body.k, body.nj);
        let k3 = 3 * k;
        let rows = body.free_rows();
        // B columns: R⁻¹ (Q_cᵀ Sᵀ)_j, Q_cᵀ Sᵀ (c, j) = Q(6 + j, c).
        for j in 0..nj {
            for c in 0..k3 {
                self.col[c] = body.q[(6 + j, c)];
            }
            solve_upper(body.r(), k3, &mut self.col[..k3]);
            for c in 0..k3 {
                self.b_mat[(c, j)] = self.col[c];
            }
        }
        for c in 0..k3 {
            let mut s = 0.0;
            for r in 0..body.nv {
                s += body.q[(r, c)] * body.rhs[r];
            }
            self.lambda0[c] = s;
        }
        solve_upper(body.r(), k3, &mut self.lambda0[..k3]);
        // W B, block by block.
        for (c, &foot) in body.stance.iter().enumerate() {
            let w = self.foot_weight(foot, k);
            for j in 0..nj {
                for r in 0..3 {
                    let mut s = 0.0;
                    for m in 0..3 {
                        s += w[(r, m)] * self.b_mat[(3 * c + m, j)];
                    }
                    self.wb[(3 * c + r, j)] = s;
                }
            }
        }
        let n = nj + rows;
        let wt = self.body.settings.torque_weight;
        for i in 0..nj {
            for j in 0..=i {
                let mut s = 0.0;
                for c in 0..k3 {
                    s += self.b_mat[(c, i)] * self.wb[(c, j)];
                }
                if i == j {
                    s += wt;
                }
                self.kkt[(i, j)] = s;
                self.kkt[(j, i)] = s;
            }
            let mut g = 0.0;
            for c in 0..k3 {
                g += self.wb[(c, i)] * self.lambda0[c];
            }
            self.kkt_rhs[i] = g;
        }
        for r in 0..rows {
            for j in 0..nj {
                let a = self.body.a_entry(r, j);
                self.kkt[(nj + r, j)] = a;
                self.kkt[(j, nj + r)] = a;
            }
            for c in 0..rows {
                self.kkt[(nj + r, nj + c)] = 0.0;
            }
        }
        self.body.projected_rhs(&mut self.kkt_rhs[nj..n]);
        if !lu_solve_in_place(&mut self.kkt, n, &mut self.kkt_rhs[..n]) {
            return LawStatus::Failed;
        }
        for j in 0..nj {
            self.body.tau_id[j] = self.kkt_rhs[j];
        }
        LawStatus::Solved
    }
}

impl Distribution for ForceCostId {
    fn name(&self) -> &str {
        if self.load_normalised {
            Self::NAME_LOAD
        } else {
            Self::NAME
        }
    }
    fn body(&self) -> &WholeBody {
        &self.body
    }
    fn body_mut(&mut self) -> &mut WholeBody {
        &mut self.body
    }
    /// Solved in the contact forces (Cholesky of the SPD force-space system, see
    /// [`WholeBody::solve_in_forces`]); the torque-space KKT system by LU when that system is
    /// not positive definite (e.g. a zero normal weight and a singular leg).
    fn distribute(&mut self) -> LawStatus {
        let k = self.body.k;
        let mut weights = std::mem::take(&mut self.weights);
        weights.clear();
        for c in 0..k {
            weights.push(self.foot_weight(self.body.stance[c], k));
        }
        let wt = self.body.settings.torque_weight;
        let done = self.body.solve_in_forces(wt, Some(&|c| weights[c]));
        self.weights = weights;
        if done {
            LawStatus::Solved
        } else {
            self.body.ensure_qr();
            self.solve_kkt()
        }
    }
}
