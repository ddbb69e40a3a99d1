#!/usr/bin/env python3
"""A piped law for tests/pipe_law.rs only: its "torques" are the joint rows of the generalized
gravity force g(q) that the Python example (examples/python-pipe-law/controller.py) computes from
the HELLO and CELL messages, and its "predicted forces" are the feet frames' world positions.
The test compares both with the harness's own model (RNEA and forward kinematics, themselves
checked against Pinocchio in tests/pinocchio_reference.rs)."""

import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "examples", "python-pipe-law"))

import numpy as np  # noqa: E402

import controller  # noqa: E402
import gspipe  # noqa: E402


class GravityCheck:
    def __init__(self, s):
        self.kin = controller.Kinematics(s)
        self.g = np.array(s.gravity)

    def start_cell(self, s, cell):
        self.mass = [b.mass for b in cell.bodies]
        self.com = [np.array(b.com) for b in cell.bodies]

    def step(self, s, cell, st):
        kin = self.kin
        rot, org = kin.poses(st.q)
        gq = np.zeros(kin.nvb + s.nj)
        for b in range(kin.nb):
            p = rot[b] @ self.com[b] + org[b]
            gq -= kin.point_jacobian(rot, org, b, p).T @ (self.mass[b] * self.g)
        feet = [rot[f.body] @ np.array(f.trans) + org[f.body] for f in s.feet]
        return gq[kin.nvb:], gspipe.SOLVED, feet


if __name__ == "__main__":
    gspipe.serve(GravityCheck, "gravity check")
