//! Compute time of the rigid-body model on the brindle quadruped (floating base, 18 DOF, no
//! armature), cycling through fixed random states. `tests/reference/compare_bench.py` reads the
//! medians criterion writes and sets them against Pinocchio; BENCHMARKS.md has the commands and
//! the figures.
//!
//!     cargo bench --bench model -- --warm-up-time 1 --measurement-time 3

use criterion::{Criterion, criterion_group, criterion_main};
use gripsweep_controllers::algorithms::{
    Workspace, crba, crba_after_fk, forward_kinematics, frame_bias_acceleration, frame_jacobian,
    nonlinear_effects, rnea, rnea_after_fk, velocities_and_bias,
};
use gripsweep_controllers::spatial::Vec3;
use gripsweep_controllers::{Model, RootKind};
use nalgebra::{DMatrix, DVector, Vector4};
use std::hint::black_box;

const URDF: &str = include_str!("../scenarios/robots/brindle.urdf");
const FEET: [&str; 4] = ["fl_toe", "fr_toe", "hl_toe", "hr_toe"];
/// Enough states that branch prediction cannot learn one; few enough to stay in cache, as a
/// control loop's single state does.
const STATES: usize = 64;

/// splitmix64: deterministic states without a dependency.
struct Rng(u64);
impl Rng {
    fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        lo + (hi - lo) * ((z >> 11) as f64 / (1u64 << 53) as f64)
    }
}

struct State {
    q: DVector<f64>,
    v: DVector<f64>,
    a: DVector<f64>,
}

/// Random states like pin_bench.py's: base position in [-1, 1]³, a uniformly random unit
/// quaternion, joints within their limits, v and a in [-2, 2].
fn states(model: &Model) -> Vec<State> {
    let mut rng = Rng(7412);
    (0..STATES)
        .map(|_| {
            let mut q = model.neutral();
            for k in 0..3 {
                q[k] = rng.uniform(-1.0, 1.0);
            }
            let quat = loop {
                let c = Vector4::from_fn(|_, _| rng.uniform(-1.0, 1.0));
                if c.norm() > 0.1 && c.norm() <= 1.0 {
                    break c.normalize();
                }
            };
            for k in 0..4 {
                q[3 + k] = quat[k];
            }
            for (k, j) in model.joints.iter().enumerate() {
                q[7 + k] = rng.uniform(j.lower, j.upper);
            }
            State {
                q,
                v: DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0)),
                a: DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0)),
            }
        })
        .collect()
}

fn model_benches(c: &mut Criterion) {
    let model = Model::from_urdf_str(URDF, RootKind::Floating).expect("brindle loads");
    assert!(model.joints.iter().all(|j| j.armature == 0.0));
    let feet: Vec<usize> = FEET
        .iter()
        .map(|f| model.frame_index(f).expect("foot frame"))
        .collect();
    let states = states(&model);
    let mut ws = Workspace::new(&model);
    let nv = model.nv();

    let mut k = 0;
    c.bench_function("brindle_rnea", |b| {
        b.iter(|| {
            let s = &states[k % STATES];
            k += 1;
            black_box(rnea(&model, &mut ws, &s.q, &s.v, &s.a)[0])
        })
    });
    // Shared by all of the above; its share says where the rest of the time goes.
    c.bench_function("brindle_forward_kinematics", |b| {
        b.iter(|| {
            let s = &states[k % STATES];
            k += 1;
            forward_kinematics(&model, &mut ws, &s.q);
            black_box(ws.o_m[1].trans.x)
        })
    });
    c.bench_function("brindle_crba", |b| {
        b.iter(|| {
            let s = &states[k % STATES];
            k += 1;
            black_box(crba(&model, &mut ws, &s.q)[(0, 0)])
        })
    });
    c.bench_function("brindle_nonlinear_effects", |b| {
        b.iter(|| {
            let s = &states[k % STATES];
            k += 1;
            black_box(nonlinear_effects(&model, &mut ws, &s.q, &s.v)[0])
        })
    });
    // What one model-based control step needs: M, h, the stacked 12 × 18 translational
    // Jacobian of the four feet and their J̇v, from one forward-kinematics pass.
    let zero = DVector::zeros(nv);
    let mut jac = DMatrix::zeros(3 * FEET.len(), nv);
    let mut jdot_v = [Vec3::zeros(); 4];
    c.bench_function("brindle_m_h_4_foot_jacobians", |b| {
        b.iter(|| {
            let s = &states[k % STATES];
            k += 1;
            forward_kinematics(&model, &mut ws, &s.q);
            crba_after_fk(&model, &mut ws);
            rnea_after_fk(&model, &mut ws, &s.v, &zero);
            velocities_and_bias(&model, &mut ws, &s.v);
            for (i, &f) in feet.iter().enumerate() {
                frame_jacobian(&model, &ws, f, &mut jac, 3 * i, false);
                jdot_v[i] = frame_bias_acceleration(&model, &ws, f);
            }
            black_box((&ws.mass_matrix, &ws.tau, &jac, &jdot_v));
        })
    });
}

criterion_group!(benches, model_benches);
criterion_main!(benches);
