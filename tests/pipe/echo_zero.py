#!/usr/bin/env python3
"""The smallest piped law (tests/pipe_law.rs): zero torques, status solved, speaking protocol
version 1 with its own few lines of struct code (no gspipe), as a check that the protocol
document is enough to write a program from."""

import struct
import sys

inp, out = sys.stdin.buffer, sys.stdout.buffer
nj = 0
while True:
    head = inp.read(4)
    if len(head) < 4:
        break
    (n,) = struct.unpack("<I", head)
    body = inp.read(n)
    kind = body[0]
    if kind == 0x01:  # HELLO: count the joints (after magic, version, name, dt, root, nq, nv, g)
        p = 4 + 2
        (ln,) = struct.unpack_from("<I", body, 1 + p)
        p += 4 + ln + 8 + 1 + 4 + 4 + 24
        (ln,) = struct.unpack_from("<I", body, 1 + p)
        p += 4 + ln
        (nj,) = struct.unpack_from("<I", body, 1 + p)
        out.write(struct.pack("<IBH", 3 + 4, 0x81, 1) + struct.pack("<I", 0))
    elif kind == 0x02:  # CELL
        out.write(struct.pack("<IB", 1, 0x82))
    elif kind == 0x03:  # STEP: echo the step index, zero torques, no forces
        (step,) = struct.unpack_from("<Q", body, 1)
        payload = struct.pack("<QBdI", step, 0, 0.0, nj) + bytes(8 * nj) + struct.pack("<I", 0)
        out.write(struct.pack("<IB", len(payload) + 1, 0x83) + payload)
    else:  # BYE
        break
    out.flush()
