#!/usr/bin/env python3
"""Reference values for the Rust rigid-body model, computed with Pinocchio.

    python tests/reference/pin_reference.py           # (re)write pinocchio_fixture.json
    python tests/reference/pin_reference.py --check   # regenerate in memory, compare, exit 1 on a difference

Both demo robots are loaded with a free-flyer root, and for each a fixed set of random states
is drawn; for every state the fixture holds the joint-space mass matrix M (CRBA), the bias
forces h (nonLinearEffects), inverse dynamics (RNEA), the centre of mass, and for every URDF
link (including the ones merged through fixed joints, e.g. the toes) its world position, the
first three rows of its LOCAL_WORLD_ALIGNED frame Jacobian, and its classical bias acceleration
J̇v (origin acceleration at a = 0, world-aligned).

Conventions (those of Pinocchio's free flyer, which the project adopts):
  q = [base position in world (3), base quaternion x y z w (4), one angle per joint]
  v = [base linear velocity in base frame (3), base angular velocity in base frame (3), joint rates]
  gravity (0, 0, -9.81), no armature.
Pinocchio stores a continuous joint as a (cos, sin) pair; the fixture writes its angle instead
(atan2(sin, cos)), so q has exactly one entry per joint. Vectors follow Pinocchio's joint order,
listed in each robot's "joint_names"; the Rust side permutes by name.

For each robot standing in its nominal posture (the facts file's [nominal]) with the trunk
parallel to a slope of 0, 10 and 20 degrees, the fixture also holds, per sphere foot, the
LOCAL_WORLD_ALIGNED Jacobian of the point where the sphere touches the ground (an operational
frame placed on the foot frame's joint at offset -r n from the sphere centre, r the facts'
foot radius, n the slope normal), and the contact forces of the minimum-torque statics at those
points: min |tau|^2 subject to S^T tau + J_c^T lambda = g(q) (zero velocity and acceleration),
solved from its KKT system, for all feet in stance and for all feet but the first.

Before generating or checking, every link's inertia in the URDFs is checked for physical
validity, independently of Pinocchio (a plain XML read).
"""

import argparse
import json
import math
import sys
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pinocchio as pin

ROOT = Path(__file__).resolve().parents[2]
FIXTURE = ROOT / "tests" / "reference" / "pinocchio_fixture.json"
ROBOTS = ["scenarios/robots/brindle.urdf", "scenarios/robots/skitter.urdf"]
FACTS = {"scenarios/robots/brindle.urdf": "scenarios/robots/brindle.toml",
         "scenarios/robots/skitter.urdf": "scenarios/robots/skitter.toml"}
SLOPES_DEG = [0.0, 10.0, 20.0]
SEED = 7411
STATES_PER_ROBOT = 20
RTOL = 1e-12  # relative to the larger magnitude of the two numbers
ATOL = 1e-12  # floor for numbers near zero
WLA = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED


# ----------------------------------------------------------------------------- URDF checks

def check_link_inertias(urdf_path):
    """Assert every link's inertia is physically valid; return {link name: mass}.

    A rigid body's inertia tensor about its COM is positive definite and its principal moments
    satisfy the triangle inequality I1 <= I2 + I3 (each moment is a sum of two of the three
    second moments of mass, e.g. Ixx = Syy + Szz). Simulators silently misbehave on tensors
    that violate either, so the demo robots must not.
    """
    masses = {}
    for link in ET.parse(urdf_path).getroot().iter("link"):
        name = link.get("name")
        inertial = link.find("inertial")
        assert inertial is not None, f"{urdf_path.name}: link {name} has no <inertial>"
        mass = float(inertial.find("mass").get("value"))
        assert mass > 0.0, f"{urdf_path.name}: link {name} has mass {mass}"
        e = inertial.find("inertia")
        g = lambda k: float(e.get(k, "0"))
        inertia = np.array([[g("ixx"), g("ixy"), g("ixz")],
                            [g("ixy"), g("iyy"), g("iyz")],
                            [g("ixz"), g("iyz"), g("izz")]])
        moments = np.linalg.eigvalsh(inertia)
        assert moments[0] > 0.0, f"{urdf_path.name}: link {name} inertia not positive definite: {moments}"
        # Sorted ascending, so the largest moment is the only one that can break the inequality.
        assert moments[2] <= moments[0] + moments[1] + 1e-15, \
            f"{urdf_path.name}: link {name} principal moments {moments} break the triangle inequality"
        masses[name] = mass
    return masses


# ----------------------------------------------------------------------------- generation

def continuous_joints(model):
    """Joint ids of unbounded revolute joints (nq 2 = cos/sin, nv 1)."""
    return {jid for jid in range(2, model.njoints)
            if model.joints[jid].nq == 2 and model.joints[jid].nv == 1}


def random_state(model, rng, unbounded):
    """One random state: Pinocchio q (nq), our q (one angle per joint), v, a."""
    q = np.zeros(model.nq)
    q[0:3] = rng.uniform(-1.0, 1.0, 3)
    quat = rng.standard_normal(4)  # isotropic Gaussian, normalised = uniform on the unit sphere
    q[3:7] = quat / np.linalg.norm(quat)
    for jid in range(2, model.njoints):
        j = model.joints[jid]
        if jid in unbounded:
            angle = rng.uniform(-math.pi, math.pi)
            q[j.idx_q:j.idx_q + 2] = (math.cos(angle), math.sin(angle))
        else:
            lo = model.lowerPositionLimit[j.idx_q]
            hi = model.upperPositionLimit[j.idx_q]
            q[j.idx_q] = rng.uniform(lo, hi)
    v = rng.uniform(-2.0, 2.0, model.nv)
    a = rng.uniform(-2.0, 2.0, model.nv)

    ours = list(q[0:7])
    for jid in range(2, model.njoints):
        j = model.joints[jid]
        if jid in unbounded:
            ours.append(math.atan2(q[j.idx_q + 1], q[j.idx_q]))
        else:
            ours.append(q[j.idx_q])
    return q, np.array(ours), v, a


def state_values(model, data, frames, q, q_ours, v, a):
    # The C++ crba fills only the upper triangle (the Python binding mirrors it today); mirror it
    # here so the fixture does not depend on that.
    m_upper = np.triu(pin.crba(model, data, q))
    mass_matrix = m_upper + np.triu(m_upper, 1).T
    h = pin.nonLinearEffects(model, data, q, v).copy()
    tau = pin.rnea(model, data, q, v, a).copy()
    com = pin.centerOfMass(model, data, q).copy()
    # Internal consistency of the three dynamics quantities (catches a wrong symmetrisation).
    assert np.allclose(mass_matrix @ a + h, tau, rtol=0, atol=1e-9), "rnea != M a + h"

    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    out_frames = {}
    for name, fid in frames:
        out_frames[name] = {
            "position": data.oMf[fid].translation.tolist(),
            "jacobian": pin.getFrameJacobian(model, data, fid, WLA)[:3].tolist(),
        }
    # Bias accelerations: forward kinematics with a = 0 leaves J̇v in the frame accelerations.
    pin.forwardKinematics(model, data, q, v, np.zeros(model.nv))
    for name, fid in frames:
        out_frames[name]["bias"] = pin.getFrameClassicalAcceleration(model, data, fid, WLA).linear.tolist()

    return {
        "q": q_ours.tolist(), "v": v.tolist(), "a": a.tolist(),
        "M": mass_matrix.tolist(), "h": h.tolist(), "rnea": tau.tolist(), "com": com.tolist(),
        "frames": out_frames,
    }


def standing_contacts(model, facts):
    """Contact-point Jacobians and minimum-torque statics forces standing on each slope."""
    radius = float(facts["feet"]["radius"])
    feet = list(facts["feet"]["frames"])
    nominal = facts.get("nominal", {})
    out = []
    for deg in SLOPES_DEG:
        th = math.radians(deg)
        normal = np.array([-math.sin(th), 0.0, math.cos(th)])
        q = pin.neutral(model)
        q[0:3] = normal * 0.3
        # Trunk parallel to the slope: rotation about y by -theta (x axis uphill).
        q[3:7] = pin.Quaternion(pin.utils.rotate("y", -th)).coeffs()
        q_ours = list(q[0:7])
        for jid in range(2, model.njoints):
            j = model.joints[jid]
            angle = float(nominal.get(model.names[jid], 0.0))
            if j.nq == 2:
                q[j.idx_q:j.idx_q + 2] = (math.cos(angle), math.sin(angle))
            else:
                q[j.idx_q] = angle
            q_ours.append(angle)
        # Operational frames at the contact points, on a copy of the model.
        m2 = pin.Model(model)
        d2 = m2.createData()
        pin.framesForwardKinematics(m2, d2, q)
        ids = []
        for name in feet:
            fid = m2.getFrameId(name)
            f = m2.frames[fid]
            offset_local = d2.oMf[fid].rotation.T @ (-radius * normal)
            placement = f.placement * pin.SE3(np.eye(3), offset_local)
            ids.append(m2.addFrame(pin.Frame(name + "_ground", f.parentJoint, fid, placement,
                                             pin.FrameType.OP_FRAME)))
        d2 = m2.createData()
        pin.computeJointJacobians(m2, d2, q)
        pin.updateFramePlacements(m2, d2)
        jacs = [pin.getFrameJacobian(m2, d2, fid, WLA)[:3] for fid in ids]
        g = pin.computeGeneralizedGravity(m2, d2, q)
        nv, nj = model.nv, model.nv - 6
        stances = {"all": list(range(len(feet))), "all_but_first": list(range(1, len(feet)))}
        forces = {}
        for key, stance in stances.items():
            k = len(stance)
            jc = np.vstack([jacs[i] for i in stance])          # 3k x nv
            a = np.hstack([np.vstack([np.zeros((6, nj)), np.eye(nj)]), jc.T])  # nv x (nj + 3k)
            w = np.zeros((nj + 3 * k, nj + 3 * k))
            w[:nj, :nj] = np.eye(nj)
            kkt = np.block([[w, a.T], [a, np.zeros((nv, nv))]])
            rhs = np.concatenate([np.zeros(nj + 3 * k), g])
            x = np.linalg.solve(kkt, rhs)
            lam = x[nj:nj + 3 * k].reshape(k, 3)
            assert np.allclose(a @ x[:nj + 3 * k], g, atol=1e-9)
            per_foot = [[0.0, 0.0, 0.0] for _ in feet]
            for c, i in enumerate(stance):
                per_foot[i] = lam[c].tolist()
            forces[key] = per_foot
        out.append({
            "slope_deg": deg, "normal": normal.tolist(), "radius": radius, "q": q_ours,
            "points": [d2.oMf[fid].translation.tolist() for fid in ids],
            "jacobians": [j.tolist() for j in jacs],
            "min_torque_forces": forces,
        })
    return out


def generate():
    rng = np.random.default_rng(SEED)
    robots = []
    for rel in ROBOTS:
        path = ROOT / rel
        link_masses = check_link_inertias(path)
        model = pin.buildModelFromUrdf(str(path), pin.JointModelFreeFlyer())
        data = model.createData()
        assert not model.armature.any()  # the fixture is armature-free
        assert np.allclose(model.gravity.linear, [0.0, 0.0, -9.81])

        # One BODY frame per URDF link; fixed-joint children become BODY frames on their
        # parent's joint (Pinocchio merges their inertia into that joint's body).
        frames = [(f.name, fid) for fid, f in enumerate(model.frames)
                  if f.type == pin.FrameType.BODY and f.name != "universe"]
        assert sorted(n for n, _ in frames) == sorted(link_masses), \
            f"{rel}: BODY frames {sorted(n for n, _ in frames)} != URDF links {sorted(link_masses)}"
        total_mass = pin.computeTotalMass(model)
        assert abs(total_mass - sum(link_masses.values())) < 1e-12
        print(f"{rel}: {len(link_masses)} links, inertias valid, total mass {total_mass:.6f} kg, "
              f"nq {model.nq} (pinocchio) / {model.nv + 1} (ours), nv {model.nv}")

        unbounded = continuous_joints(model)
        states = []
        for _ in range(STATES_PER_ROBOT):
            q, q_ours, v, a = random_state(model, rng, unbounded)
            states.append(state_values(model, data, frames, q, q_ours, v, a))
        facts = tomllib.loads((ROOT / FACTS[rel]).read_text())
        robots.append({
            "urdf": rel,
            "joint_names": list(model.names)[2:],
            "total_mass": total_mass,
            "standing": standing_contacts(model, facts),
            "states": states,
        })
    return {
        "generator": f"tests/reference/pin_reference.py with pin {pin.__version__}, numpy {np.__version__}",
        "robots": robots,
    }


def dump(fixture):
    """JSON with one state per line: small diffs stay readable, floats round-trip (repr)."""
    compact = lambda x: json.dumps(x, separators=(",", ":"))
    out = ['{"generator":' + compact(fixture["generator"]) + ',\n"robots":[\n']
    for i, robot in enumerate(fixture["robots"]):
        head = {k: robot[k] for k in robot if k != "states"}
        out.append(compact(head)[:-1] + ',"states":[\n')
        out.append(",\n".join(compact(s) for s in robot["states"]))
        out.append("\n]}" + ("," if i + 1 < len(fixture["robots"]) else "") + "\n")
    out.append("]}\n")
    return "".join(out)


# ----------------------------------------------------------------------------- check

def compare(expected, actual, path, worst, problems):
    if isinstance(expected, dict):
        if not isinstance(actual, dict) or set(expected) != set(actual):
            problems.append(f"{path}: keys differ")
            return
        for k in expected:
            compare(expected[k], actual[k], f"{path}.{k}", worst, problems)
    elif isinstance(expected, list):
        if not isinstance(actual, list) or len(expected) != len(actual):
            problems.append(f"{path}: length differs")
            return
        for i, (e, a) in enumerate(zip(expected, actual)):
            compare(e, a, f"{path}[{i}]", worst, problems)
    elif isinstance(expected, str):
        if expected != actual:
            problems.append(f"{path}: {expected!r} != {actual!r}")
    else:
        if isinstance(actual, (str, list, dict)) or actual is None:
            problems.append(f"{path}: not a number")
            return
        diff = abs(expected - actual)
        allowed = max(ATOL, RTOL * max(abs(expected), abs(actual)))
        ratio = diff / allowed
        if ratio > worst[0]:
            worst[:] = [ratio, path, expected, actual]


def check():
    if not FIXTURE.exists():
        sys.exit(f"FAIL: {FIXTURE.relative_to(ROOT)} does not exist; run without --check to create it")
    committed = json.loads(FIXTURE.read_text())
    fresh = json.loads(dump(generate()))  # through JSON, exactly as a written fixture would read
    if committed.get("generator") != fresh["generator"]:
        print(f"note: fixture made by '{committed.get('generator')}', now '{fresh['generator']}'")
    committed["generator"] = fresh["generator"]
    worst, problems = [0.0, None, None, None], []
    compare(committed, fresh, "fixture", worst, problems)
    if worst[1] is not None:
        print(f"worst difference: {worst[1]}: committed {worst[2]!r}, regenerated {worst[3]!r} "
              f"({worst[0]:.3g} x the allowed {RTOL:g} relative / {ATOL:g} absolute)")
    else:
        print("worst difference: none (all numbers identical)")
    if problems:
        print("\n".join(problems[:20]))
    if problems or worst[0] > 1.0:
        sys.exit(f"FAIL: {FIXTURE.relative_to(ROOT)} differs from a regeneration; "
                 "rerun pin_reference.py without --check if the URDFs changed on purpose")
    print(f"OK: {FIXTURE.relative_to(ROOT)} matches a regeneration")


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--check", action="store_true",
                        help="regenerate in memory and compare with the committed fixture")
    args = parser.parse_args()
    if args.check:
        check()
    else:
        FIXTURE.write_text(dump(generate()))
        print(f"wrote {FIXTURE.relative_to(ROOT)} ({FIXTURE.stat().st_size / 1e6:.2f} MB)")


if __name__ == "__main__":
    main()
