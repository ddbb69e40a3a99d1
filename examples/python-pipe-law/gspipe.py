"""gspipe: the program side of gripsweep's piped-law protocol, version 1 (docs/pipe-protocol.md).

A controller program imports this module, writes a class with `start_cell(session, cell)` and
`step(session, cell, obs)` and calls `serve(MyLaw)`. `serve` answers the harness's HELLO, CELL,
STEP and BYE messages on stdin/stdout until BYE or end of input. Anything the program prints goes
to stderr (stdout is taken for the protocol), and the harness shows the last stderr lines when a
cell ends in error.

Rules a law must keep (the harness relies on them for reproducible studies):
* start every cell from the CELL message alone (no state carried over from an earlier cell);
* be deterministic: the same messages give the same replies, bit for bit.
"""

import os
import struct
import sys
import time

PROTOCOL_VERSION = 1
MAGIC = b"GSWP"

HELLO, CELL, STEP, BYE = 0x01, 0x02, 0x03, 0x04
READY, CELL_READY, TORQUES, REFUSE = 0x81, 0x82, 0x83, 0xEE

SOLVED, INFEASIBLE, UNDERACTUATED, FAILED = 0, 1, 2, 3


class ProtocolError(Exception):
    pass


class _Payload:
    """Little-endian reader over one message's payload."""

    def __init__(self, data):
        self.data = data
        self.at = 0

    def take(self, n):
        if self.at + n > len(self.data):
            raise ProtocolError("message too short")
        b = self.data[self.at:self.at + n]
        self.at += n
        return b

    def u8(self):
        return self.take(1)[0]

    def u16(self):
        return struct.unpack("<H", self.take(2))[0]

    def u32(self):
        return struct.unpack("<I", self.take(4))[0]

    def u64(self):
        return struct.unpack("<Q", self.take(8))[0]

    def f64(self):
        return struct.unpack("<d", self.take(8))[0]

    def f64s(self, n):
        return list(struct.unpack("<%dd" % n, self.take(8 * n)))

    def string(self):
        n = self.u32()
        return self.take(n).decode("utf-8", "replace")

    def pose(self):
        """Rotation (row-major 3x3, as nested lists) and translation."""
        r = self.f64s(9)
        return [r[0:3], r[3:6], r[6:9]], self.f64s(3)


class Joint:
    def __init__(self, p):
        self.name = p.string()
        self.prismatic = p.u8() == 1
        self.parent = p.u32()
        self.axis = p.f64s(3)
        self.rot, self.trans = p.pose()
        self.lower, self.upper, self.velocity_limit, self.effort_limit = p.f64s(4)


class Foot:
    def __init__(self, p):
        self.name = p.string()
        self.body = p.u32()
        self.rot, self.trans = p.pose()


class Session:
    """What HELLO says: the robot's structure (joint order, feet), the plant step, settings."""

    def __init__(self, payload):
        p = _Payload(payload)
        if p.take(4) != MAGIC:
            raise ProtocolError("HELLO without the magic bytes")
        self.version = p.u16()
        self.law_name = p.string()
        self.dt = p.f64()
        self.floating = p.u8() == 1
        self.nq = p.u32()
        self.nv = p.u32()
        self.gravity = p.f64s(3)
        self.base_name = p.string()
        self.joints = [Joint(p) for _ in range(p.u32())]
        self.feet = [Foot(p) for _ in range(p.u32())]
        self.foot_radius = p.f64()
        self.settings = {}
        for _ in range(p.u32()):
            key = p.string()
            tag = p.u8()
            if tag == 0:
                self.settings[key] = p.f64()
            elif tag == 1:
                self.settings[key] = p.string()
            elif tag == 2:
                self.settings[key] = p.u8() == 1
            elif tag == 3:
                self.settings[key] = p.f64s(p.u32())
            else:
                raise ProtocolError("unknown setting type %d" % tag)
        self.nj = len(self.joints)

    def setting(self, key, default):
        return self.settings.get(key, default)


class Body:
    def __init__(self, p):
        self.mass = p.f64()
        self.com = p.f64s(3)
        i = p.f64s(9)
        self.inertia = [i[0:3], i[3:6], i[6:9]]


class Cell:
    """What CELL says: the cell's id and seed, control rate, μ̂, ground normal, the law's model
    of each body's mass (these differ between cells on the model-error axes)."""

    def __init__(self, payload):
        p = _Payload(payload)
        self.cell_id = p.string()
        self.seed = p.u64()
        self.rate_hz = p.f64()
        self.duration = p.f64()
        self.mu_estimate = p.f64()
        self.ground_normal = p.f64s(3)
        self.bodies = [Body(p) for _ in range(p.u32())]


class Step:
    """One STEP: time, observed state, measured joint torques (None when absent), the plan."""

    __slots__ = ("index", "t", "q", "v", "tau_measured", "q_ref", "v_ref", "a_ref", "stance")

    def __init__(self, payload, s):
        p = _Payload(payload)
        self.index = p.u64()
        self.t = p.f64()
        self.q = p.f64s(s.nq)
        self.v = p.f64s(s.nv)
        self.tau_measured = p.f64s(s.nj) if p.u8() == 1 else None
        self.q_ref = p.f64s(s.nq)
        self.v_ref = p.f64s(s.nv)
        self.a_ref = p.f64s(s.nv)
        self.stance = [b == 1 for b in p.take(len(s.feet))]


class _Wire:
    def __init__(self):
        # Keep the real stdout for the protocol; everything printed goes to stderr instead.
        self.inp = os.fdopen(os.dup(0), "rb", buffering=0)
        self.out = os.fdopen(os.dup(1), "wb", buffering=0)
        os.dup2(2, 1)
        sys.stdout = sys.stderr

    def _exact(self, n):
        chunks = []
        while n > 0:
            b = self.inp.read(n)
            if not b:
                return None
            chunks.append(b)
            n -= len(b)
        return b"".join(chunks)

    def receive(self):
        head = self._exact(4)
        if head is None:
            return None, None
        (n,) = struct.unpack("<I", head)
        body = self._exact(n)
        if body is None or n == 0:
            return None, None
        return body[0], body[1:]

    def send(self, kind, payload=b""):
        self.out.write(struct.pack("<IB", len(payload) + 1, kind) + payload)


def _pack_torques(index, status, compute_us, tau, forces):
    parts = [struct.pack("<QBdI", index, status, compute_us, len(tau)),
             struct.pack("<%dd" % len(tau), *tau)]
    if forces is None:
        parts.append(struct.pack("<I", 0))
    else:
        flat = [float(x) for f in forces for x in f]
        parts.append(struct.pack("<I", len(forces)))
        parts.append(struct.pack("<%dd" % len(flat), *flat))
    return b"".join(parts)


_wire = None


def write_raw(data):
    """Write bytes straight to the protocol stream (for testing a harness's error handling)."""
    _wire.out.write(data)


def serve(law_class, description="gspipe controller"):
    """Answer the harness until BYE or end of input. `law_class(session)` builds the law once per
    process; `law.start_cell(session, cell)` resets it for a cell; `law.step(session, cell, step)`
    returns (torques, status) or (torques, status, predicted foot forces, world N)."""
    global _wire
    wire = _wire = _Wire()
    session = None
    law = None
    cell = None
    while True:
        kind, payload = wire.receive()
        if kind is None or kind == BYE:
            return
        try:
            if kind == HELLO:
                session = Session(payload)
                if session.version != PROTOCOL_VERSION:
                    wire.send(REFUSE, _str(
                        "this program speaks protocol version %d, the harness %d"
                        % (PROTOCOL_VERSION, session.version)))
                    return
                law = law_class(session)
                wire.send(READY, struct.pack("<H", PROTOCOL_VERSION) + _str(description))
            elif kind == CELL:
                cell = Cell(payload)
                law.start_cell(session, cell)
                wire.send(CELL_READY)
            elif kind == STEP:
                step = Step(payload, session)
                t0 = time.perf_counter()
                out = law.step(session, cell, step)
                took = (time.perf_counter() - t0) * 1e6
                tau, status = out[0], out[1]
                forces = out[2] if len(out) > 2 else None
                wire.send(TORQUES, _pack_torques(step.index, status, took,
                                                 [float(x) for x in tau], forces))
            else:
                wire.send(REFUSE, _str("unknown message kind 0x%02x" % kind))
                return
        except ProtocolError as e:
            wire.send(REFUSE, _str(str(e)))
            return


def _str(s):
    b = s.encode("utf-8")
    return struct.pack("<I", len(b)) + b
