"""Rigid-body motions the supports leave free, found before any solve.

A support set restrains the part when no rigid-body displacement field (2D: two
translations and the rotation about z; 3D: three translations and three rotations)
vanishes on every fixed dof. The free ones are the null space of the rigid-body
basis restricted to the fixed dofs, named by the basis vector each lies on. The six
(2D: three) modes are known in closed form, so their rows at the fixed dofs are made
block by block and reduced to a modes × modes triangle: memory O(n), where an SVD of
the restricted basis with its full left factor took (fixed dofs)² (7 GiB for a face
support on 100×100×25 elements).
"""

from __future__ import annotations

import numpy as np

NAMES_2D = ("translation along x", "translation along y", "rotation about z")
NAMES_3D = (
    "translation along x",
    "translation along y",
    "translation along z",
    "rotation about x",
    "rotation about y",
    "rotation about z",
)


def rigid_modes(coords: np.ndarray) -> np.ndarray:
    """(n_nodes·dim, modes) rigid-body displacement fields about the centroid,
    each column scaled to unit length."""
    n, dim = coords.shape
    c = coords - coords.mean(axis=0)
    if dim == 2:
        modes = np.zeros((n, 2, 3))
        modes[:, 0, 0] = 1.0
        modes[:, 1, 1] = 1.0
        modes[:, 0, 2], modes[:, 1, 2] = -c[:, 1], c[:, 0]
    else:
        modes = np.zeros((n, 3, 6))
        for a in range(3):
            modes[:, a, a] = 1.0
        x, y, z = c[:, 0], c[:, 1], c[:, 2]
        modes[:, 1, 3], modes[:, 2, 3] = -z, y  # about x
        modes[:, 0, 4], modes[:, 2, 4] = z, -x  # about y
        modes[:, 0, 5], modes[:, 1, 5] = -y, x  # about z
    modes = modes.reshape(n * dim, -1)
    return modes / np.linalg.norm(modes, axis=0)


def free_motions(coords: np.ndarray, fixed_dofs: np.ndarray) -> list[str]:
    """Names of the rigid-body motions the fixed dofs do not prevent. A rotation is
    named when the part can rotate about some axis of that direction (through any
    point, e.g. a single pinned node)."""
    dim = coords.shape[1]
    names = NAMES_2D if dim == 2 else NAMES_3D
    n_modes = len(names)
    if len(fixed_dofs) == 0:
        return list(names)
    r = restricted_r(coords, np.asarray(fixed_dofs))
    _, s, vt = np.linalg.svd(r, full_matrices=True)
    s = np.concatenate([s, np.zeros(n_modes - len(s))])
    null = vt[s < 1e-9 * max(1.0, s.max())]  # rows: free combinations, in mode coordinates
    if len(null) == 0:
        return []

    def in_span(rows: np.ndarray, target: np.ndarray) -> bool:
        coef, *_ = np.linalg.lstsq(rows.T, target, rcond=None)
        return bool(np.linalg.norm(rows.T @ coef - target) < 1e-6)

    out = []
    rot = slice(dim, n_modes)
    for i, name in enumerate(names):
        e = np.eye(n_modes)[i]
        if i < dim:  # a translation: the pure mode must be free
            free = in_span(null, e)
        else:  # a rotation about some parallel axis: its rotation part must be free
            free = in_span(null[:, rot], e[rot])
        if free:
            out.append(name)
    if not out:  # only coupled motions (a screw, say)
        out.append("a combined rotation and translation")
    return out


CHUNK = 4096  # fixed dofs per block of the QR below


def restricted_r(coords: np.ndarray, fixed_dofs: np.ndarray) -> np.ndarray:
    """The triangular factor R (at most modes × modes) of a QR decomposition of
    rigid_modes(coords)[fixed_dofs], without forming that matrix: its rows are made a
    block of fixed dofs at a time and folded into R (a tall-skinny QR), so memory
    is O(nodes) for the coordinates and O(CHUNK) besides. R has the singular values
    and right singular vectors of the restricted modes, which is all the test needs."""
    n, dim = coords.shape
    c = coords - coords.mean(axis=0)
    norms = _mode_norms(c)
    r = np.zeros((0, len(norms)))
    for start in range(0, len(fixed_dofs), CHUNK):
        dofs = fixed_dofs[start : start + CHUNK]
        rows = _mode_rows(c[dofs // dim], dofs % dim) / norms
        r = np.linalg.qr(np.vstack([r, rows]), mode="r")
    return r


def _mode_rows(c: np.ndarray, comp: np.ndarray) -> np.ndarray:
    """Rows of the rigid-body modes (as rigid_modes, before scaling) at the dofs of
    component `comp` of nodes at centred positions `c`."""
    dim = c.shape[1]
    rows = np.zeros((len(comp), 3 if dim == 2 else 6))
    rows[np.arange(len(comp)), comp] = 1.0  # translations
    if dim == 2:
        x, y = c[:, 0], c[:, 1]
        rows[:, 2] = np.where(comp == 0, -y, x)
        return rows
    x, y, z = c[:, 0], c[:, 1], c[:, 2]
    rows[:, 3] = np.select([comp == 1, comp == 2], [-z, y], 0.0)  # about x
    rows[:, 4] = np.select([comp == 0, comp == 2], [z, -x], 0.0)  # about y
    rows[:, 5] = np.select([comp == 0, comp == 1], [-y, x], 0.0)  # about z
    return rows


def _mode_norms(c: np.ndarray) -> np.ndarray:
    """Length of each rigid-body mode over every dof (the scaling of rigid_modes)."""
    n, dim = c.shape
    sq = (c**2).sum(axis=0)
    if dim == 2:
        return np.sqrt([n, n, sq[0] + sq[1]])
    return np.sqrt([n, n, n, sq[1] + sq[2], sq[0] + sq[2], sq[0] + sq[1]])
