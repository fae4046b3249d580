"""Coarse Galerkin operators of the matrix-free hierarchy, straight from the fine
element moduli, as node stencils.

The prolongation from level L to the fine grid is a composition of trilinear
interpolations on nested grids, a tensor product of 1D interpolations; on nested
1D meshes each fine node interpolates from the two ends of the one level-L element
that holds it. So every fine element e inside a level-L element C interpolates from
C's eight corners with weights known in advance, P_e (products of the composed 1D
weights), and the level-L Galerkin operator Pᵀ A P is an assembly of element
matrices

    K_C = Σ_{e ⊂ C} E_e P_eᵀ k0 P_e,

one table entry P_eᵀ k0 P_e per position of e in C (galerkin.py does the same one
level at a time with stored element matrices). kernels.coarse_stencil sums the
table entries with the moduli and writes the coarse node stencils directly, so no
element matrices and no fine matrix are ever stored.

Supports: the fine operator is A = D K D + (I − D) with D the 0/1 mask of free
dofs, so Pᵀ A P = (DP)ᵀ K (DP) + Pᵀ (I − D) P. The few fine elements touching a
fixed dof take their masked P_e (their modulus is left out of the kernel's sum and
their term added as an extra matrix of C), and each fixed dof adds p_f p_fᵀ, its
row of P, which lives on one coarse element. The operators equal scipy's sparse
triple products to round-off (tests/test_matrixfree.py).
"""

from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp

from . import kernels
from .grid import H8_CORNERS
from .multigrid import prolongation_1d


def composed_prolongation_1d(n: int, levels: int) -> np.ndarray:
    """Dense interpolation from the level-`levels` nodes to the n + 1 fine nodes
    of one axis: the product of multigrid.prolongation_1d over the levels."""
    p = np.eye(n + 1)
    m = n
    for _ in range(levels):
        step = prolongation_1d(m)
        p = p @ step.toarray()
        m = step.shape[1] - 1
    return p


class _Axis:
    """One axis at level L: each fine element's coarse element, its position code,
    and the 2 × 2 interpolation weights (fine corner, coarse corner) per code.
    The composed weights are linear in each level's own node index, not in the
    fine position, where an odd-sized axis leaves a short element at its end."""

    def __init__(self, n: int, levels: int):
        p = self.p = composed_prolongation_1d(n, levels)
        # coarse node m sits on the fine node whose row of P is the unit vector e_m
        pos = self.pos = np.array(
            [int(np.flatnonzero(np.isclose(p[:, m], 1.0))[0]) for m in range(p.shape[1])]
        )
        fine = np.arange(n)
        parent = np.searchsorted(pos, fine, side="right") - 1
        w = np.stack(
            [
                np.stack([p[fine, parent], p[fine, parent + 1]], axis=1),
                np.stack([p[fine + 1, parent], p[fine + 1, parent + 1]], axis=1),
            ],
            axis=1,
        )  # (fine elements, fine corner, coarse corner)
        uniq, code = np.unique(np.round(w.reshape(n, 4), 12), axis=0, return_inverse=True)
        self.code = code.reshape(-1).astype(np.int64)
        self.weights = uniq.reshape(-1, 2, 2)
        self.starts = pos.astype(np.int64)

    def node_weights(self, node: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Coarse element and the weight of its upper corner for fine nodes."""
        pos = self.pos
        el = np.clip(np.searchsorted(pos, node, side="right") - 1, 0, len(pos) - 2)
        return el, self.p[node, el + 1]


def _local_prolongation(w3: list[np.ndarray]) -> np.ndarray:
    """24 × 24 interpolation (fine element dofs, coarse element dofs) from the three
    axes' 2 × 2 weights."""
    w = np.ones((8, 8))
    for ax in range(3):
        w *= w3[ax][np.ix_(H8_CORNERS[:, ax], H8_CORNERS[:, ax])]
    return np.kron(w, np.eye(3))


class CoarseLevel:
    """The level-`levels` Galerkin operator of a 3D grid of `shape` elements with
    element matrix k0 and supports `fixed` (per fine dof), as node stencils."""

    def __init__(self, shape: tuple[int, int, int], k0: np.ndarray, fixed: np.ndarray, levels: int):
        self.fine_shape = tuple(int(n) for n in shape)
        self.axes = [_Axis(n, levels) for n in shape]
        self.shape = tuple(len(a.pos) - 1 for a in self.axes)  # coarse elements
        self.node_shape = tuple(n + 1 for n in self.shape)
        n_codes = [len(a.weights) for a in self.axes]
        self.n_codes = tuple(n_codes)
        table = np.empty((int(np.prod(n_codes)), 24, 24))
        for cx, cy, cz in itertools.product(*(range(n) for n in n_codes)):
            p = _local_prolongation(
                [self.axes[0].weights[cx], self.axes[1].weights[cy], self.axes[2].weights[cz]]
            )
            t = (cx * n_codes[1] + cy) * n_codes[2] + cz
            m = p.T @ k0 @ p
            table[t] = 0.5 * (m + m.T)
        self.table = table
        offsets = list(itertools.product((-1, 0, 1), repeat=3))
        self.slot_of = np.array(
            [
                [offsets.index(tuple(H8_CORNERS[b] - H8_CORNERS[a])) for b in range(8)]
                for a in range(8)
            ],
            dtype=np.int64,
        )
        self._supports(k0, fixed)

    def _combo(self, idx: np.ndarray) -> np.ndarray:
        nc = self.n_codes
        codes = [self.axes[ax].code[idx[:, ax]] for ax in range(3)]
        return (codes[0] * nc[1] + codes[1]) * nc[2] + codes[2]

    def _parent(self, idx: np.ndarray) -> np.ndarray:
        parents = [
            np.searchsorted(self.axes[ax].pos, idx[:, ax], side="right") - 1 for ax in range(3)
        ]
        return np.ravel_multi_index(tuple(parents), self.shape)

    def _supports(self, k0: np.ndarray, fixed: np.ndarray) -> None:
        shape = self.fine_shape
        node_shape = tuple(n + 1 for n in shape)
        n_coarse = int(np.prod(self.shape))
        fixed_dofs = np.flatnonzero(fixed)
        # fine elements with a fixed dof, found from the fixed nodes' neighbours
        nodes = np.unique(fixed_dofs // 3)
        node_idx = np.stack(np.unravel_index(nodes, node_shape), axis=1)
        cand = []
        for corner in H8_CORNERS:
            el = node_idx - corner
            ok = np.all((el >= 0) & (el < np.array(shape)), axis=1)
            cand.append(np.ravel_multi_index(tuple(el[ok].T), shape))
        touched = np.unique(np.concatenate(cand)) if cand else np.zeros(0, np.int64)
        self.touched = touched
        el_idx = np.stack(np.unravel_index(touched, shape), axis=1)
        # masks of the touched elements' dofs
        ny1, nz1 = node_shape[1], node_shape[2]
        corner_off = (H8_CORNERS[:, 0] * ny1 + H8_CORNERS[:, 1]) * nz1 + H8_CORNERS[:, 2]
        base = np.ravel_multi_index(tuple(el_idx.T), node_shape)
        dofs = (3 * (base[:, None] + corner_off[None, :]))[:, :, None] + np.arange(3)
        free = (~fixed[dofs.reshape(len(touched), 24)]).astype(np.int64)
        combo = self._combo(el_idx)
        # distinct (position code, mask) pairs: one masked matrix each
        keys = np.concatenate([combo[:, None], free], axis=1)
        uniq, key_of = np.unique(keys, axis=0, return_inverse=True)
        key_of = key_of.reshape(-1)
        masked = np.empty((len(uniq), 24 * 24))
        for q, row in enumerate(uniq):
            c = int(row[0])
            cz = c % self.n_codes[2]
            cy = (c // self.n_codes[2]) % self.n_codes[1]
            cx = c // (self.n_codes[1] * self.n_codes[2])
            p = _local_prolongation(
                [self.axes[0].weights[cx], self.axes[1].weights[cy], self.axes[2].weights[cz]]
            )
            p = row[1:, None] * p
            m = p.T @ k0 @ p
            masked[q] = (0.5 * (m + m.T)).ravel()
        self._masked = masked
        # p_f p_fᵀ of every fixed dof, on the coarse element holding its node
        fnode = np.stack(np.unravel_index(fixed_dofs // 3, node_shape), axis=1)
        elems, ts = zip(*(self.axes[ax].node_weights(fnode[:, ax]) for ax in range(3)))
        w = np.ones((len(fixed_dofs), 8))
        for ax in range(3):
            w *= np.where(H8_CORNERS[None, :, ax] == 1, ts[ax][:, None], 1.0 - ts[ax][:, None])
        p_rows = np.zeros((len(fixed_dofs), 24))
        comp = fixed_dofs % 3
        for a in range(8):
            p_rows[np.arange(len(fixed_dofs)), 3 * a + comp] = w[:, a]
        fixed_coarse = np.ravel_multi_index(tuple(np.stack(elems)), self.shape)
        # one list of coarse elements with extra terms
        parents = self._parent(el_idx)
        self.extra_elements, slots = np.unique(
            np.concatenate([parents, fixed_coarse]), return_inverse=True
        )
        slots = slots.reshape(-1)
        n_extra = len(self.extra_elements)
        touched_slot, fixed_slot = slots[: len(touched)], slots[len(touched) :]
        self._fixed_sum = np.zeros((n_extra, 24 * 24))
        outer = (p_rows[:, :, None] * p_rows[:, None, :]).reshape(len(fixed_dofs), -1)
        sums = sp.csr_matrix(
            (np.ones(len(fixed_dofs)), (fixed_slot, np.arange(len(fixed_dofs)))),
            shape=(n_extra, len(fixed_dofs)),
        )
        self._fixed_sum = sums @ outer
        self._touched_slot, self._key_of = touched_slot, key_of
        self.extra_of = np.full(n_coarse, -1, dtype=np.int64)
        self.extra_of[self.extra_elements] = np.arange(n_extra)

    def stencil(self, moduli: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """(coarse nodes, 3, 27, 3) stencils of Pᵀ A P for fine element moduli."""
        n_extra = len(self.extra_elements)
        by_key = sp.csr_matrix(
            (moduli[self.touched], (self._touched_slot, self._key_of)),
            shape=(n_extra, len(self._masked)),
        )
        extra = (self._fixed_sum + by_key @ self._masked).reshape(n_extra, 24, 24)
        e = np.array(moduli, dtype=float)
        e[self.touched] = 0.0
        if out is None:
            out = np.empty((int(np.prod(self.node_shape)), 3, 27, 3))
        starts = [a.starts for a in self.axes]
        codes = [a.code for a in self.axes]
        return kernels.coarse_stencil(
            e,
            self.fine_shape,
            starts,
            codes,
            self.n_codes,
            self.table,
            self.extra_of,
            extra,
            self.slot_of,
            out,
        )
