#!/usr/bin/env python3
"""Time Pinocchio on the brindle quadruped (free-flyer root), as an outside yardstick for the
Rust model's compute time.

    python tests/reference/pin_bench.py          # table
    python tests/reference/pin_bench.py --json   # {"rnea_us": .., "crba_us": .., "nle_us": .., "mhj_us": ..}

Each figure is the median over BATCHES batches of the mean time per call in a batch of CALLS
calls, cycling through pre-drawn random states. The C++ functions are called from a Python
loop and nothing is subtracted, so every figure includes the Python call overhead (a few
hundred ns per binding call) and is an upper bound on Pinocchio's own time.

"mhj" is what a model-based control step needs from the model: M, h, the four foot frames'
Jacobians (LOCAL_WORLD_ALIGNED, translational rows) and their classical bias accelerations J̇v
(forward kinematics with a = 0, then getFrameClassicalAcceleration).
"""

import argparse
import json
import statistics
import time
from pathlib import Path

import numpy as np
import pinocchio as pin

ROOT = Path(__file__).resolve().parents[2]
URDF = ROOT / "scenarios" / "robots" / "brindle.urdf"
FEET = ["fl_toe", "fr_toe", "hl_toe", "hr_toe"]
BATCHES = 20
CALLS = 2000
SEED = 7412
WLA = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--json", action="store_true", help="print JSON on stdout instead of a table")
    args = parser.parse_args()

    model = pin.buildModelFromUrdf(str(URDF), pin.JointModelFreeFlyer())
    data = model.createData()
    feet = [model.getFrameId(name) for name in FEET]
    rng = np.random.default_rng(SEED)
    # randomConfiguration draws joints within limits but needs finite base bounds.
    model.lowerPositionLimit[:3] = -1.0
    model.upperPositionLimit[:3] = 1.0
    states = []
    for _ in range(CALLS):
        q = pin.randomConfiguration(model)
        states.append((q, rng.uniform(-2, 2, model.nv), rng.uniform(-2, 2, model.nv)))
    zero = np.zeros(model.nv)

    crba, nle, rnea = pin.crba, pin.nonLinearEffects, pin.rnea
    fk, jac = pin.forwardKinematics, pin.computeJointJacobians
    frame_jac, frame_acc = pin.getFrameJacobian, pin.getFrameClassicalAcceleration

    def mhj(q, v, _a):
        crba(model, data, q)
        nle(model, data, q, v)
        fk(model, data, q, v, zero)       # placements, velocities, accelerations at a = 0
        jac(model, data)                  # joint Jacobians from the placements just computed
        for fid in feet:
            frame_jac(model, data, fid, WLA)
            frame_acc(model, data, fid, WLA)

    cases = {
        "rnea_us": lambda q, v, a: rnea(model, data, q, v, a),
        "crba_us": lambda q, v, a: crba(model, data, q),
        "nle_us": lambda q, v, a: nle(model, data, q, v),
        "mhj_us": mhj,
    }
    results = {}
    for key, fn in cases.items():
        for q, v, a in states[:200]:  # warm-up
            fn(q, v, a)
        batch_us = []
        for _ in range(BATCHES):
            t0 = time.perf_counter()
            for q, v, a in states:
                fn(q, v, a)
            batch_us.append((time.perf_counter() - t0) / CALLS * 1e6)
        results[key] = statistics.median(batch_us)

    if args.json:
        print(json.dumps({k: round(x, 3) for k, x in results.items()}))
        return
    labels = {"rnea_us": "rnea", "crba_us": "crba", "nle_us": "nonLinearEffects",
              "mhj_us": "M + h + 4 foot J + 4 foot J̇v"}
    print(f"pinocchio {pin.__version__} on {URDF.name} (nq {model.nq}, nv {model.nv}), "
          f"median of {BATCHES} batches x {CALLS} calls, Python call overhead included")
    for key, label in labels.items():
        print(f"  {label:30s} {results[key]:8.2f} µs/call")


if __name__ == "__main__":
    main()
