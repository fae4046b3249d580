"""Closed triangle surfaces from CAD (STL, OBJ, PLY through meshio) as regions: the
file read and checked, and a robust inside test.

Inside means a generalised winding number above one half (Jacobson, Kavan and
Sorkine-Hornung 2013, "Robust inside-outside segmentation using generalized winding
numbers", ACM TOG 32(4)): the sum of the solid angles the triangles subtend at the
point over 4π, each by the formula of Van Oosterom and Strackee (1983, IEEE Trans.
Biomed. Eng. 30:125). On a closed surface it is 1 inside, 0 outside, whatever the
shape, and it does not depend on casting rays that may graze an edge.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np


class SurfaceError(ValueError):
    """A mesh file that cannot serve as a region: the message says why."""


def load_surface(path: str) -> tuple[np.ndarray, np.ndarray]:
    """(vertices (n, 3) mm, triangles (m, 3)) of the closed surface in `path`."""
    p = Path(path)
    try:
        stat = p.stat()
    except OSError:
        raise SurfaceError(f"no such file: {path}") from None
    return _load(str(p.resolve()), stat.st_mtime_ns, stat.st_size)


@functools.lru_cache(maxsize=16)
def _load(path: str, mtime: int, size: int) -> tuple[np.ndarray, np.ndarray]:
    import meshio

    try:
        # meshio tests for binary STL with a uint32 product that overflows on ASCII files
        with np.errstate(over="ignore"):
            mesh = meshio.read(path)
    except Exception as exc:  # meshio raises many kinds on a bad file
        raise SurfaceError(f"cannot read {path} as STL, OBJ or PLY ({exc})") from None
    vertices = np.asarray(mesh.points, float)
    tris = [c.data for c in mesh.cells if c.type == "triangle"]
    quads = [c.data for c in mesh.cells if c.type == "quad"]
    tris += [q[:, [0, 1, 2]] for q in quads] + [q[:, [0, 2, 3]] for q in quads]
    if not tris or vertices.ndim != 2 or vertices.shape[1] != 3:
        raise SurfaceError(f"{path} holds no triangles in 3D")
    faces = np.concatenate(tris).astype(np.int64)
    vertices, faces = _merge_vertices(vertices, faces)
    fault = closed_fault(faces)
    if fault:
        raise SurfaceError(f"{path} is not a closed surface: {fault}")
    return vertices, faces


def _merge_vertices(vertices, faces):
    """STL repeats each corner per triangle: merge equal corners."""
    unique, inverse = np.unique(vertices, axis=0, return_inverse=True)
    faces = inverse.reshape(-1)[faces]
    keep = (
        (faces[:, 0] != faces[:, 1]) & (faces[:, 1] != faces[:, 2]) & (faces[:, 0] != faces[:, 2])
    )
    return unique, faces[keep]


def closed_fault(faces: np.ndarray) -> str | None:
    """Why the triangles are not a closed, consistently oriented surface, or None:
    every directed edge must appear once and its reverse once."""
    edges = np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
    directed, count = np.unique(edges, axis=0, return_counts=True)
    if np.any(count > 1):
        return (
            f"{int(np.sum(count > 1))} edges are used twice in one direction "
            "(triangles flipped against their neighbours, or more than two at an edge)"
        )
    have = {tuple(e) for e in directed.tolist()}
    open_edges = sum((b, a) not in have for a, b in have)
    if open_edges:
        return f"{open_edges} edges border one triangle only (holes in the surface)"
    return None


def winding_numbers(points: np.ndarray, vertices: np.ndarray, faces: np.ndarray) -> np.ndarray:
    """The generalised winding number of the surface at each point."""
    out = np.zeros(len(points))
    tri = vertices[faces]  # (m, 3, 3)
    chunk = max(1, 2_000_000 // max(1, len(faces)))
    for start in range(0, len(points), chunk):
        r = tri[None, :, :, :] - points[start : start + chunk, None, None, :]
        a, b, c = r[:, :, 0], r[:, :, 1], r[:, :, 2]
        la, lb, lc = (np.linalg.norm(v, axis=-1) for v in (a, b, c))
        det = np.einsum("ptk,ptk->pt", a, np.cross(b, c))
        dots = (
            la * lb * lc
            + np.einsum("ptk,ptk->pt", a, b) * lc
            + np.einsum("ptk,ptk->pt", b, c) * la
            + np.einsum("ptk,ptk->pt", c, a) * lb
        )
        angle = np.arctan2(det, dots)
        # a point in a triangle's plane and inside it lies on the surface: that
        # triangle's ±2π is a matter of rounding; leave it out, so that a point on a
        # face gets ½, on an edge its dihedral share, deterministically
        angle[(np.abs(det) <= 1e-12 * la * lb * lc) & (dots < 0)] = 0.0
        out[start : start + chunk] = 2 * angle.sum(axis=1) / (4 * np.pi)
    return out


def inside(points: np.ndarray, vertices: np.ndarray, faces: np.ndarray, on: bool) -> np.ndarray:
    """Points inside the surface (`on`: or on it). Orientation-free: |w| is used.
    Only points in the surface's bounding box are evaluated."""
    lo, hi = vertices.min(axis=0), vertices.max(axis=0)
    pad = 1e-9 * max(1.0, float(np.abs(vertices).max()))
    box = np.all((points >= lo - pad) & (points <= hi + pad), axis=1)
    result = np.zeros(len(points), dtype=bool)
    w = np.abs(winding_numbers(points[box], vertices, faces))
    # a point on a face sees half the solid angle, on an edge a quarter or less
    result[box] = w > (0.1 if on else 0.5)
    return result
