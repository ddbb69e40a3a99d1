#!/usr/bin/env python3
"""Writes the collision meshes of the heavy quadruped `dray` (scenarios/robots/dray.urdf) and of
the mesh-trunk test robot (tests/robots/): simple convex solids, so their convex hulls are the
solids themselves. Standard library only; run from this folder: python3 make_meshes.py

- dray_trunk.stl   (binary STL) a box 0.80 x 0.40 x 0.18 m with its vertical edges chamfered
                   by 0.04 m (an octagonal prism), centred on the origin.
- dray_thigh.obj   (OBJ) a hexagonal prism of circumradius 0.045 m from z = 0 down to z = -0.30.
- dray_shank.stl   (ASCII STL) a hexagonal prism of circumradius 0.03 m, z = -0.03 to -0.25.
- ../../../tests/robots/boxy_trunk.stl (ASCII STL) a box 0.40 x 0.24 x 0.10 m with its
                   vertical edges chamfered by 0.02 m.
"""
import math
import struct


def prism(outline, z0, z1):
    """Triangles of a closed prism over a convex outline (counter-clockwise seen from +z)."""
    n = len(outline)
    bottom = [(x, y, z0) for x, y in outline]
    top = [(x, y, z1) for x, y in outline]
    tris = []
    for i in range(1, n - 1):
        tris.append((top[0], top[i], top[i + 1]))
        tris.append((bottom[0], bottom[i + 1], bottom[i]))
    for i in range(n):
        j = (i + 1) % n
        tris.append((bottom[i], bottom[j], top[j]))
        tris.append((bottom[i], top[j], top[i]))
    return tris


def chamfered_box(lx, ly, c):
    hx, hy = lx / 2, ly / 2
    return [(hx, -hy + c), (hx, hy - c), (hx - c, hy), (-hx + c, hy),
            (-hx, hy - c), (-hx, -hy + c), (-hx + c, -hy), (hx - c, -hy)]


def hexagon(r):
    return [(r * math.cos(k * math.pi / 3), r * math.sin(k * math.pi / 3)) for k in range(6)]


def normal(t):
    a, b, c = t
    u = [b[i] - a[i] for i in range(3)]
    v = [c[i] - a[i] for i in range(3)]
    n = [u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]]
    length = math.sqrt(sum(x * x for x in n)) or 1.0
    return [x / length for x in n]


def write_binary_stl(path, tris):
    with open(path, "wb") as f:
        f.write(b"gripsweep collision mesh".ljust(80, b" "))
        f.write(struct.pack("<I", len(tris)))
        for t in tris:
            f.write(struct.pack("<3f", *normal(t)))
            for p in t:
                f.write(struct.pack("<3f", *p))
            f.write(struct.pack("<H", 0))


def write_ascii_stl(path, name, tris):
    with open(path, "w") as f:
        f.write(f"solid {name}\n")
        for t in tris:
            f.write("  facet normal {:.6g} {:.6g} {:.6g}\n    outer loop\n".format(*normal(t)))
            for p in t:
                f.write("      vertex {:.6g} {:.6g} {:.6g}\n".format(*p))
            f.write("    endloop\n  endfacet\n")
        f.write(f"endsolid {name}\n")


def write_obj(path, tris):
    verts, index, faces = [], {}, []
    for t in tris:
        face = []
        for p in t:
            if p not in index:
                index[p] = len(verts) + 1
                verts.append(p)
            face.append(index[p])
        faces.append(face)
    with open(path, "w") as f:
        f.write("# gripsweep collision mesh\n")
        for v in verts:
            f.write("v {:.6g} {:.6g} {:.6g}\n".format(*v))
        for a, b, c in faces:
            f.write(f"f {a} {b} {c}\n")


if __name__ == "__main__":
    write_binary_stl("dray_trunk.stl", prism(chamfered_box(0.80, 0.40, 0.04), -0.09, 0.09))
    write_obj("dray_thigh.obj", prism(hexagon(0.045), -0.30, 0.0))
    write_ascii_stl("dray_shank.stl", "dray_shank", prism(hexagon(0.03), -0.25, -0.03))
    write_ascii_stl("../../../tests/robots/boxy_trunk.stl", "boxy_trunk",
                    prism(chamfered_box(0.40, 0.24, 0.02), -0.05, 0.05))
