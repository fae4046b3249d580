"""Writes the closed STL surfaces of the CAD demo (bracket-cad-3d.toml): each a
convex prism, a profile in x-z swept along y. Run from this folder:

    python make_meshes.py
"""

import meshio
import numpy as np


def prism(profile, y0, y1):
    """Closed, outward-oriented triangles of the convex x-z `profile` (clockwise in
    the x-z plane, as drawn with x right and z up) swept from y0 to y1."""
    xz = np.asarray(profile, float)
    n = len(xz)
    near = np.column_stack([xz[:, 0], np.full(n, y0), xz[:, 1]])
    far = np.column_stack([xz[:, 0], np.full(n, y1), xz[:, 1]])
    faces = [(0, i + 1, i) for i in range(1, n - 1)]  # the near cap faces −y
    faces += [(n, n + i, n + i + 1) for i in range(1, n - 1)]
    for i in range(n):
        j = (i + 1) % n
        faces += [(i, j, n + j), (i, n + j, n + i)]
    return np.concatenate([near, far]), np.array(faces)


def box(lo, hi):
    (x0, y0, z0), (x1, y1, z1) = lo, hi
    return prism([(x0, z0), (x0, z1), (x1, z1), (x1, z0)], y0, y1)


PARTS = {
    # what the bracket must stay within: deep at the wall, tapering to the tip
    "envelope.stl": prism([(0, 0), (0, 60), (90, 45), (90, 25)], 0, 40),
    # the wall plate the bracket bolts to, and the camera's mounting pad
    "wall-pad.stl": box((0, 5, 5), (5, 35, 55)),
    "camera-pad.stl": box((80, 10, 28), (90, 30, 42)),
    # a cable duct that runs across under the arm
    "duct.stl": box((35, 0, 8), (50, 40, 20)),
}

if __name__ == "__main__":
    for name, (points, faces) in PARTS.items():
        meshio.write(name, meshio.Mesh(points, [("triangle", faces)]), file_format="stl")
