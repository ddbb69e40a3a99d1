//! Our model against Pinocchio (PyPI package `pin`, version pinned in
//! tests/reference/requirements.txt, 4.1.0 when written), a general-purpose rigid-body dynamics
//! library we did not write. `tests/reference/pin_reference.py` computes M, h, RNEA τ, the
//! centre of mass, and every link frame's position, world-aligned translational Jacobian and
//! J̇v for 20 random states of each demo robot; `.ci/run` regenerates that fixture and fails if
//! it drifts from the committed one. Tolerance: 1e-9 relative to the norm of each quantity.

use gripsweep_controllers::algorithms::{
    Workspace, center_of_mass, crba_after_fk, forward_kinematics, frame_bias_acceleration,
    frame_jacobian, frame_pose, rnea_after_fk, velocities_and_bias,
};
use gripsweep_controllers::{Model, RootKind};
use nalgebra::{DMatrix, DVector};
use serde_json::Value;
use std::path::Path;

fn vec_of(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect()
}

fn rel_err(ours: &[f64], theirs: &[f64]) -> f64 {
    assert_eq!(ours.len(), theirs.len());
    let norm = theirs.iter().map(|x| x * x).sum::<f64>().sqrt().max(1.0);
    let diff = ours
        .iter()
        .zip(theirs)
        .map(|(a, b)| (a - b) * (a - b))
        .sum::<f64>()
        .sqrt();
    diff / norm
}

#[test]
fn dynamics_match_pinocchio_on_both_demo_robots() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text =
        std::fs::read_to_string(root.join("tests/reference/pinocchio_fixture.json")).unwrap();
    let fixture: Value = serde_json::from_str(&text).unwrap();
    let robots = fixture["robots"].as_array().unwrap();
    assert_eq!(robots.len(), 2);
    let mut worst = 0.0f64;
    for robot in robots {
        let urdf = std::fs::read_to_string(root.join(robot["urdf"].as_str().unwrap())).unwrap();
        let model = Model::from_urdf_str(&urdf, RootKind::Floating).unwrap();
        let mut ws = Workspace::new(&model);
        // Permutation from Pinocchio's joint order to ours, by name.
        let their_names: Vec<&str> = robot["joint_names"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| n.as_str().unwrap())
            .collect();
        assert_eq!(their_names.len(), model.n_joints());
        let ours_of_theirs: Vec<usize> = their_names
            .iter()
            .map(|n| model.joint_index(n).expect("joint in both"))
            .collect();
        let nv = model.nv();
        // Index in their v of our v entry.
        let mut v_map: Vec<usize> = (0..nv).collect();
        for (t, &o) in ours_of_theirs.iter().enumerate() {
            v_map[6 + o] = 6 + t;
        }
        let to_ours_v = |theirs: &[f64]| DVector::from_fn(nv, |i, _| theirs[v_map[i]]);
        let to_ours_q = |theirs: &[f64]| {
            DVector::from_fn(model.nq(), |i, _| {
                theirs[if i < 7 { i } else { v_map[i - 1] + 1 }]
            })
        };
        assert!((model.total_mass() - robot["total_mass"].as_f64().unwrap()).abs() < 1e-12);
        let states = robot["states"].as_array().unwrap();
        assert!(states.len() >= 20);
        let mut jac = DMatrix::zeros(3, nv);
        for s in states {
            let q = to_ours_q(&vec_of(&s["q"]));
            let v = to_ours_v(&vec_of(&s["v"]));
            let a = to_ours_v(&vec_of(&s["a"]));
            forward_kinematics(&model, &mut ws, &q);
            crba_after_fk(&model, &mut ws);
            let their_m: Vec<Vec<f64>> = s["M"].as_array().unwrap().iter().map(vec_of).collect();
            let m_ours: Vec<f64> = (0..nv)
                .flat_map(|r| (0..nv).map(move |c| (r, c)))
                .map(|(r, c)| ws.mass_matrix[(r, c)])
                .collect();
            let m_theirs: Vec<f64> = (0..nv)
                .flat_map(|r| (0..nv).map(move |c| (r, c)))
                .map(|(r, c)| their_m[v_map[r]][v_map[c]])
                .collect();
            let e_m = rel_err(&m_ours, &m_theirs);
            rnea_after_fk(&model, &mut ws, &v, &DVector::zeros(nv));
            let e_h = rel_err(ws.tau.as_slice(), to_ours_v(&vec_of(&s["h"])).as_slice());
            rnea_after_fk(&model, &mut ws, &v, &a);
            let e_tau = rel_err(ws.tau.as_slice(), to_ours_v(&vec_of(&s["rnea"])).as_slice());
            let e_com = rel_err(center_of_mass(&model, &ws).as_slice(), &vec_of(&s["com"]));
            velocities_and_bias(&model, &mut ws, &v);
            let frames = s["frames"].as_object().unwrap();
            assert_eq!(frames.len(), model.frames.len(), "one frame per link");
            let mut e_frames = 0.0f64;
            for (name, f) in frames {
                let k = model
                    .frame_index(name)
                    .unwrap_or_else(|| panic!("frame {name} missing"));
                let p = frame_pose(&model, &ws, k).trans;
                e_frames = e_frames.max(rel_err(p.as_slice(), &vec_of(&f["position"])));
                frame_jacobian(&model, &ws, k, &mut jac, 0, false);
                let their_j: Vec<Vec<f64>> = f["jacobian"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(vec_of)
                    .collect();
                let j_ours: Vec<f64> = (0..3)
                    .flat_map(|r| (0..nv).map(move |c| (r, c)))
                    .map(|(r, c)| jac[(r, c)])
                    .collect();
                let j_theirs: Vec<f64> = (0..3)
                    .flat_map(|r| (0..nv).map(move |c| (r, c)))
                    .map(|(r, c)| their_j[r][v_map[c]])
                    .collect();
                e_frames = e_frames.max(rel_err(&j_ours, &j_theirs));
                let bias = frame_bias_acceleration(&model, &ws, k);
                e_frames = e_frames.max(rel_err(bias.as_slice(), &vec_of(&f["bias"])));
            }
            for (what, e) in [
                ("M", e_m),
                ("h", e_h),
                ("rnea", e_tau),
                ("com", e_com),
                ("frames", e_frames),
            ] {
                assert!(
                    e < 1e-9,
                    "{}: {what} differs from Pinocchio by {e:e} (relative)",
                    model.name
                );
                worst = worst.max(e);
            }
        }
    }
    eprintln!("worst relative difference to Pinocchio: {worst:e}");
}

/// The laws' contact at the point where the sphere foot touches the ground (centre − r n):
/// each foot's ground-point Jacobian, and the contact forces the minimum-torque law predicts
/// standing on 0/10/20° slopes on all feet and on all but the first, against Pinocchio
/// (an operational frame at that point; the statics min ‖τ‖² s.t. Sᵀτ + J_cᵀλ = g(q) solved
/// from its KKT system in `pin_reference.py`). Tolerance 1e-9 relative to each quantity's norm.
#[test]
fn contact_point_jacobians_and_statics_forces_match_pinocchio_on_slopes() {
    use gripsweep::robot::LoadedRobot;
    use gripsweep_controllers::algorithms::point_jacobian;
    use gripsweep_controllers::laws::{LawSettings, Observation, Target, build_law};
    use gripsweep_controllers::spatial::Vec3;

    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text =
        std::fs::read_to_string(root.join("tests/reference/pinocchio_fixture.json")).unwrap();
    let fixture: Value = serde_json::from_str(&text).unwrap();
    let mut worst = 0.0f64;
    for robot in fixture["robots"].as_array().unwrap() {
        let urdf_rel = robot["urdf"].as_str().unwrap();
        let facts_path = root.join(urdf_rel.replace(".urdf", ".toml"));
        let loaded = LoadedRobot::from_facts_file(&facts_path).unwrap();
        let model = &loaded.model;
        let feet = loaded.foot_frames();
        let nv = model.nv();
        let their_names: Vec<&str> = robot["joint_names"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| n.as_str().unwrap())
            .collect();
        let mut v_map: Vec<usize> = (0..nv).collect();
        for (t, name) in their_names.iter().enumerate() {
            v_map[6 + model.joint_index(name).unwrap()] = 6 + t;
        }
        let to_ours_q = |theirs: &[f64]| {
            DVector::from_fn(model.nq(), |i, _| {
                theirs[if i < 7 { i } else { v_map[i - 1] + 1 }]
            })
        };
        let mut ws = Workspace::new(model);
        let mut scratch = DMatrix::zeros(6, nv);
        let mut jac = DMatrix::zeros(3, nv);
        let standing = robot["standing"].as_array().unwrap();
        assert_eq!(standing.len(), 3);
        for s in standing {
            let deg = s["slope_deg"].as_f64().unwrap();
            let n = Vec3::from_column_slice(&vec_of(&s["normal"]));
            let r = s["radius"].as_f64().unwrap();
            assert_eq!(r, loaded.facts.feet.radius);
            let q = to_ours_q(&vec_of(&s["q"]));
            forward_kinematics(model, &mut ws, &q);
            let d = -n * r;
            for (i, &f) in feet.iter().enumerate() {
                let p = frame_pose(model, &ws, f).trans + d;
                let e_p = rel_err(p.as_slice(), &vec_of(&s["points"][i]));
                point_jacobian(model, &ws, f, &d, &mut scratch, &mut jac, 0);
                let theirs: Vec<Vec<f64>> = s["jacobians"][i]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(vec_of)
                    .collect();
                let ours: Vec<f64> = (0..3)
                    .flat_map(|row| (0..nv).map(move |c| (row, c)))
                    .map(|(row, c)| jac[(row, c)])
                    .collect();
                let their: Vec<f64> = (0..3)
                    .flat_map(|row| (0..nv).map(move |c| (row, c)))
                    .map(|(row, c)| theirs[row][v_map[c]])
                    .collect();
                let e_j = rel_err(&ours, &their);
                assert!(
                    e_p < 1e-9 && e_j < 1e-9,
                    "{urdf_rel} {deg}° foot {i}: {e_p:e} {e_j:e}"
                );
                worst = worst.max(e_p).max(e_j);
            }
            for (key, skip) in [("all", None), ("all_but_first", Some(0))] {
                let stance: Vec<bool> = (0..feet.len()).map(|i| Some(i) != skip).collect();
                let mut ratios = Vec::new();
                for radius in [r, 0.0] {
                    let settings = LawSettings {
                        ground_normal: n,
                        foot_radius: radius,
                        ..LawSettings::default()
                    };
                    let mut law =
                        build_law("min-torque-id", model.clone(), feet.clone(), &settings).unwrap();
                    let zero = DVector::zeros(nv);
                    let mut tau = vec![0.0; model.n_joints()];
                    law.compute(
                        &Observation { q: &q, v: &zero },
                        &Target {
                            q: &q,
                            v: &zero,
                            a: &zero,
                            stance: &stance,
                        },
                        &mut tau,
                    );
                    let forces = law.predicted_forces().to_vec();
                    let mut max_ratio = 0.0f64;
                    for (i, f) in forces.iter().enumerate() {
                        if stance[i] {
                            let fn_ = f.dot(&n);
                            max_ratio = max_ratio.max((f - n * fn_).norm() / fn_.abs());
                        }
                    }
                    ratios.push(max_ratio);
                    if radius > 0.0 {
                        let ours: Vec<f64> = forces.iter().flat_map(|f| [f.x, f.y, f.z]).collect();
                        let theirs: Vec<f64> = s["min_torque_forces"][key]
                            .as_array()
                            .unwrap()
                            .iter()
                            .flat_map(vec_of)
                            .collect();
                        let e = rel_err(&ours, &theirs);
                        assert!(e < 1e-9, "{urdf_rel} {deg}° {key}: forces differ by {e:e}");
                        worst = worst.max(e);
                    }
                }
                eprintln!(
                    "{urdf_rel} {deg}° {key}: largest ‖f_t‖/f_n at the contact point {:.4}, at the sphere centre {:.4} (tan θ {:.4})",
                    ratios[0],
                    ratios[1],
                    deg.to_radians().tan()
                );
            }
        }
    }
    eprintln!("worst relative difference to Pinocchio at the contact points: {worst:e}");
}
