#!/usr/bin/env python3
"""An example piped law for gripsweep, in Python with numpy, speaking protocol version 1 through
gspipe.py. Two laws, chosen by the setting `law`:

* "joint-pd": τ = kp (q_ref − q) + kd (v_ref − v) per joint (model-free).
* "static-support": the same joint PD plus a model-based feed-forward that holds the robot up in
  the planned stance: from the law's own model of the robot (the structure from HELLO, the masses
  from CELL) it computes the generalized gravity force g(q), finds stance-foot forces f that carry
  the base's share of it (the six base rows of g(q) = Sᵀτ + J_cᵀ f, solved as a weighted
  least-norm problem that prefers normal over tangential force), and adds the joint rows
  τ_ff = g_j(q) − J_cjᵀ f. This is quasi-static force distribution with a weighted
  pseudo-inverse (common practice; see Featherstone, "Rigid Body Dynamics Algorithms", 2008,
  ch. 5 for g(q) as inverse dynamics at rest, and ch. 3 for the contact Jacobian conventions).

Settings ([external.<name>.settings] in the scenario): law, full_error_rad (default 0.1: kp of
each joint is its torque limit / this), damping_s (default 0.02: kd = kp · this), or kp
(N·m/rad) and kd (N·m·s/rad) for every joint, tangent_weight and normal_weight (per N², the force
cost; defaults 1 and 0.001), and for the tests only `misbehave`
("sleep", "exit", "garbage") with `misbehave_at` (the control step index).
"""

import os

# One BLAS thread: results must not depend on how a library splits its work.
for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import sys
import time

import numpy as np

import gspipe


def skew(a):
    return np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])


def axis_rotation(axis, angle):
    """Rodrigues' formula: R = cos θ I + sin θ [a]× + (1 − cos θ) a aᵀ."""
    a = np.asarray(axis)
    c, s = np.cos(angle), np.sin(angle)
    return c * np.eye(3) + s * skew(a) + (1.0 - c) * np.outer(a, a)


def quat_to_rot(x, y, z, w):
    """Unit quaternion (x y z w) to a rotation matrix (standard formula)."""
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)],
        [2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)],
        [2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)],
    ])


class Kinematics:
    """Forward kinematics and point Jacobians in gripsweep's model conventions (HELLO)."""

    def __init__(self, s):
        self.s = s
        self.nb = s.nj + 1
        self.parent = [-1] + [j.parent for j in s.joints]
        self.tree_rot = [np.array(j.rot) for j in s.joints]
        self.tree_trans = [np.array(j.trans) for j in s.joints]
        self.axis = [np.array(j.axis) for j in s.joints]
        # ancestors[b]: bodies on b's path to the root, b included.
        self.ancestors = []
        for b in range(self.nb):
            chain, k = set(), b
            while k >= 0:
                chain.add(k)
                k = self.parent[k]
            self.ancestors.append(chain)
        self.nqb = 7 if s.floating else 0
        self.nvb = 6 if s.floating else 0

    def poses(self, q):
        """World rotation and origin of every body."""
        q = np.asarray(q)
        if self.s.floating:
            rot = [quat_to_rot(*q[3:7])]
            org = [q[0:3].copy()]
        else:
            rot, org = [np.eye(3)], [np.zeros(3)]
        for k in range(self.s.nj):
            p = self.parent[k + 1]
            if self.s.joints[k].prismatic:
                r_j, t_j = np.eye(3), self.axis[k] * q[self.nqb + k]
            else:
                r_j, t_j = axis_rotation(self.axis[k], q[self.nqb + k]), np.zeros(3)
            r_up = self.tree_rot[k] @ r_j
            t_up = self.tree_rot[k] @ t_j + self.tree_trans[k]
            rot.append(rot[p] @ r_up)
            org.append(rot[p] @ t_up + org[p])
        return rot, org

    def point_jacobian(self, rot, org, body, point):
        """3 × nv: world velocity of a world point fixed to `body`, from v."""
        nv = self.nvb + self.s.nj
        J = np.zeros((3, nv))
        if self.s.floating:
            r_base = rot[0].T @ (point - org[0])
            J[:, 0:3] = rot[0]
            J[:, 3:6] = -rot[0] @ skew(r_base)
        for b in self.ancestors[body]:
            if b == 0:
                continue
            k = b - 1
            z = rot[b] @ self.axis[k]
            if self.s.joints[k].prismatic:
                J[:, self.nvb + k] = z
            else:
                J[:, self.nvb + k] = np.cross(z, point - org[b])
        return J


class Law:
    def __init__(self, s):
        self.kind = s.setting("law", "joint-pd")
        if self.kind not in ("joint-pd", "static-support"):
            raise gspipe.ProtocolError("setting `law`: '%s'; allowed: joint-pd, static-support"
                                       % self.kind)
        # Gains from the robot, not from one demo robot: per joint, kp puts the joint's torque
        # limit at an error of `full_error_rad` (0.1 rad), and kd = kp · damping_s. Both laws
        # use the same PD, so the feed-forward is the only difference between them (brindle,
        # weight shift on flat ground, 250 Hz, 2 s: base RMS 9.1 mm with the PD alone, 4.1 mm
        # with the feed-forward). `kp`/`kd` in the settings override them (one value for every
        # joint).
        limits = np.array([j.effort_limit for j in s.joints])
        full = float(s.setting("full_error_rad", 0.1))
        self.kp = np.full(s.nj, float(s.settings["kp"])) if "kp" in s.settings else limits / full
        damping = float(s.setting("damping_s", 0.02))
        self.kd = np.full(s.nj, float(s.settings["kd"])) if "kd" in s.settings else self.kp * damping
        self.w_t = float(s.setting("tangent_weight", 1.0))
        self.w_n = float(s.setting("normal_weight", 1e-3))
        self.misbehave = s.setting("misbehave", "")
        self.misbehave_at = int(s.setting("misbehave_at", 0))
        self.kin = Kinematics(s)
        self.g = np.array(s.gravity)

    def start_cell(self, s, cell):
        # Everything per cell comes from CELL: the model's masses and centres of mass, μ̂, n.
        self.mass = np.array([b.mass for b in cell.bodies])
        self.com = [np.array(b.com) for b in cell.bodies]
        self.n = np.array(cell.ground_normal)
        self.n /= np.linalg.norm(self.n)
        self.cell_steps = 0

    def step(self, s, cell, st):
        self.cell_steps += 1
        if self.misbehave and st.index == self.misbehave_at:
            self.act_badly(st)
        kin = self.kin
        q, v = np.asarray(st.q), np.asarray(st.v)
        q_ref, v_ref = np.asarray(st.q_ref), np.asarray(st.v_ref)
        tau = self.kp * (q_ref[kin.nqb:] - q[kin.nqb:]) + self.kd * (v_ref[kin.nvb:] - v[kin.nvb:])
        if self.kind == "joint-pd":
            return tau, gspipe.SOLVED
        rot, org = kin.poses(q)
        # g(q) = −Σ_b J_bᵀ m_b g: inverse dynamics at rest (Featherstone 2008, ch. 5).
        gq = np.zeros(kin.nvb + s.nj)
        for b in range(kin.nb):
            p = rot[b] @ self.com[b] + org[b]
            gq -= kin.point_jacobian(rot, org, b, p).T @ (self.mass[b] * self.g)
        stance = [i for i, on in enumerate(st.stance) if on]
        forces = [np.zeros(3) for _ in s.feet]
        if not stance or not s.floating:
            return tau + gq[kin.nvb:], gspipe.UNDERACTUATED, forces
        Jc = []
        for i in stance:
            f = s.feet[i]
            centre = rot[f.body] @ np.array(f.trans) + org[f.body]
            Jc.append(kin.point_jacobian(rot, org, f.body, centre - s.foot_radius * self.n))
        Jc = np.vstack(Jc)                       # 3k × nv
        A = Jc[:, :6].T                          # base rows: A f = g_b
        # Force cost fᵀ W f per foot: tangential w_t, normal w_n; min-norm under A f = g_b is
        # f = W⁻¹ Aᵀ (A W⁻¹ Aᵀ)⁺ g_b.
        nn = np.outer(self.n, self.n)
        w_inv_foot = (np.eye(3) - nn) / self.w_t + nn / self.w_n
        w_inv = np.kron(np.eye(len(stance)), w_inv_foot)
        lam, *_ = np.linalg.lstsq(A @ w_inv @ A.T, gq[:6], rcond=1e-10)
        f = w_inv @ A.T @ lam
        residual = np.linalg.norm(A @ f - gq[:6]) / max(np.linalg.norm(gq[:6]), 1e-9)
        tau = tau + gq[kin.nvb:] - Jc[:, kin.nvb:].T @ f
        for k, i in enumerate(stance):
            forces[i] = f[3 * k:3 * k + 3]
        # Two feet cannot carry a moment about the line through them: report it.
        status = gspipe.SOLVED if residual < 1e-3 else gspipe.UNDERACTUATED
        return tau, status, forces

    def act_badly(self, st):
        """For the tests of the harness's error handling only."""
        print("misbehaving on purpose: %s at step %d" % (self.misbehave, st.index), flush=True)
        if self.misbehave == "sleep":
            time.sleep(3600)
        elif self.misbehave == "exit":
            sys.exit(3)
        elif self.misbehave == "garbage":
            gspipe.write_raw(b"this is not a frame\n")
            time.sleep(3600)


if __name__ == "__main__":
    gspipe.serve(Law, "python example: joint-pd / static-support")
