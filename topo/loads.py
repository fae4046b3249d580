"""A force and a moment given at a point, carried to the selected nodes as a rigid
connection carries them.

The force is shared equally; the moment about the selection's centroid is carried by
nodal forces g_i = θ × r_i (r_i from the centroid), the elastic method for
eccentrically loaded bolt groups: in the plane each node takes M·r_i / Σ r_j²,
perpendicular to its radius (Shigley's Mechanical Engineering Design, "shear of bolted
and riveted joints due to eccentric loading"; AISC Steel Construction Manual, elastic
method for eccentric bolt groups; both recalled from memory). In 3D θ solves J θ = M
with J = Σ (|r_i|² I − r_i r_iᵀ), the polar inertia tensor of the nodes; this is the
least-squares (smallest Σ|g_i|²) set of nodal forces with zero sum and moment M, and
reduces to the planar rule for nodes in a plane loaded about its normal.
"""

from __future__ import annotations

import numpy as np


class LoadError(ValueError):
    """The selection cannot carry the given moment."""


def cross(r: np.ndarray, f: np.ndarray) -> np.ndarray:
    """r × f row by row; 2D: the z component only, shape (n, 1)."""
    if r.shape[-1] == 2:
        return (r[..., 0] * f[..., 1] - r[..., 1] * f[..., 0])[..., None]
    return np.cross(r, f)


def moment_about(points: np.ndarray, forces: np.ndarray, at) -> np.ndarray:
    """Σ (p_i − at) × f_i: 2D a length-1 array (about z), 3D [Mx, My, Mz]."""
    return cross(points - np.asarray(at, float), forces).sum(axis=0)


def rigid_distribution(points: np.ndarray, total, moment=None, at=None) -> np.ndarray:
    """Nodal forces (n, dim) whose sum is `total` and whose moment about `at` is
    `moment` (2D: [Mz]); `at` None is the centroid. Raises LoadError when the nodes
    cannot carry the moment (all on one point, or on a line for a moment about it)."""
    points = np.asarray(points, float)
    n, dim = points.shape
    total = np.asarray(total, float)
    centroid = points.mean(axis=0)
    m = np.zeros(1 if dim == 2 else 3) if moment is None else np.asarray(moment, float)
    if at is not None:  # the same loads seen from the centroid: M_c = M + (a − c) × F
        m = m + cross(np.asarray(at, float) - centroid, total[None, :])[0]
    forces = np.tile(total / n, (n, 1))
    if not np.any(m):
        return forces
    r = points - centroid
    if dim == 2:
        polar = float(np.sum(r * r))
        if polar <= 1e-24 * max(1.0, float(np.abs(points).max()) ** 2):
            raise LoadError(
                f"the selection is one point ({n} node{'s' * (n > 1)}), which cannot carry "
                f"a moment ({m[0]:g} N·mm about z at its centroid); select a region "
                "with nodes spread out, or give the moment as forces"
            )
        theta = m[0] / polar
        return forces + theta * np.column_stack([-r[:, 1], r[:, 0]])
    inertia = np.sum(r * r) * np.eye(3) - r.T @ r
    values, vectors = np.linalg.eigh(inertia)
    scale = max(values[-1], 1e-300)
    weak = values <= 1e-10 * scale
    size = np.linalg.norm(m)
    stray = vectors[:, weak].T @ m if weak.any() else np.zeros(0)
    if values[-1] <= 1e-24 or np.any(np.abs(stray) > 1e-9 * size):
        if values[-1] <= 1e-24 or weak.sum() > 1:
            what = f"one point ({n} node{'s' * (n > 1)})"
        else:
            axis = vectors[:, weak][:, 0]
            what = f"one line (along [{', '.join(f'{a:.3g}' for a in axis)}])"
        raise LoadError(
            f"the selection is {what}, which cannot carry the moment about it "
            f"([{', '.join(f'{v:g}' for v in m)}] N·mm at its centroid); select a region "
            "with nodes spread out"
        )
    keep = ~weak
    theta = vectors[:, keep] @ ((vectors[:, keep].T @ m) / values[keep])
    return forces + np.cross(theta, r)
