"""The first coarse operator Pᵀ A P of the multigrid hierarchy, element by element.

On nested grids the trilinear prolongation is local: the nodes of a fine element
interpolate from the corners of the one coarse element (2×2×2 fine elements, or
fewer at the end of an odd-sized axis) that contains it. So Pᵀ A P is an assembly
of coarse element matrices

    K_C = Σ_{e ⊂ C} E_e · P_sᵀ k0 P_s,

where P_s is the local interpolation of e's sub-position s in C: one of 3^dim
matrices known in advance (per axis: first or second half of a coarse element, or
the only element of a short one). Each refresh is one small dense product and one
stencil assembly on the coarse grid, instead of the sparse triple product over the
fine matrix, which took 2.8 of every 3 s of hierarchy update on the 100×50×50 grid.

Supports: the fine matrix is A = D K D + (I − D) with D the 0/1 mask of the free
dofs, so Pᵀ A P = (DP)ᵀ K (DP) + Pᵀ(I − D)P. Elements touching a fixed dof get
their masked local interpolation individually; the second term is a sparse product
over the fixed dofs only. The result equals the global product to round-off
(tests/test_multigrid.py).
"""
from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp

from .grid import Grid
from .stencil import StencilAssembly

# Weights of a fine element's two corners (rows) on its coarse element's two
# corners (columns), along one axis, by position code: 0 first half, 1 second half
# of a coarse element of two, 2 the single element of a short coarse element.
_AXIS_WEIGHTS = np.array([[[1.0, 0.0], [0.5, 0.5]],
                          [[0.5, 0.5], [0.0, 1.0]],
                          [[1.0, 0.0], [0.0, 1.0]]])


def _axis_codes(n: int) -> np.ndarray:
    codes = np.arange(n) % 2
    if n % 2:
        codes[-1] = 2
    return codes


class ElementGalerkin:
    """Pᵀ A P for the stencil-assembled fine matrix A of element moduli E, with P
    the prolongation of multigrid.prolongation(grid.shape)."""

    def __init__(self, grid: Grid, ke: np.ndarray, fixed: np.ndarray, p_fine: sp.csr_matrix):
        dim, corners = grid.dim, grid.corners
        self.coarse_grid = Grid(tuple(-(-n // 2) for n in grid.shape), 2 * grid.h)
        nde = ke.shape[0]
        # local interpolation per combination of axis codes, (fine dofs, coarse dofs)
        combos = list(itertools.product(range(3), repeat=dim))
        local_p = np.empty((len(combos), nde, nde))
        for c, combo in enumerate(combos):
            w = np.ones((len(corners), len(corners)))
            for ax, code in enumerate(combo):
                w *= _AXIS_WEIGHTS[code][np.ix_(corners[:, ax], corners[:, ax])]
            local_p[c] = np.kron(w, np.eye(dim))
        local_k = np.einsum("cai,ab,cbj->cij", local_p, ke, local_p)
        self._local_k = (0.5 * (local_k + local_k.transpose(0, 2, 1))).reshape(len(combos), -1)

        idx = np.indices(grid.shape).reshape(dim, -1)
        codes = [_axis_codes(n)[idx[ax]] for ax, n in enumerate(grid.shape)]
        self._combo = np.ravel_multi_index(tuple(codes), (3,) * dim)
        self._coarse = np.ravel_multi_index(tuple(idx // 2), self.coarse_grid.shape)

        # elements with a fixed dof: their own masked interpolation
        free = (~fixed[grid.element_dofs]).astype(float)
        self._touched = np.flatnonzero(free.min(axis=1) < 1.0)
        self._masked_p = free[self._touched][:, :, None] * local_p[self._combo[self._touched]]
        self._touched_coarse, self._touched_slot = np.unique(self._coarse[self._touched],
                                                              return_inverse=True)
        self._ke = ke
        p_fixed = p_fine[np.flatnonzero(fixed)]
        self._fixed_part = (p_fixed.T @ p_fixed).tocsr()
        self._assembly = StencilAssembly(self.coarse_grid, None,
                                         np.zeros(self.coarse_grid.n_dofs, dtype=bool))

    def matrix(self, moduli: np.ndarray) -> sp.csr_matrix:
        n_coarse = self.coarse_grid.n_elements
        weights = np.zeros((n_coarse, self._local_k.shape[0]))
        e = moduli.copy()
        e[self._touched] = 0.0
        weights[self._coarse, self._combo] = e  # one fine element per (coarse, code)
        pm = self._masked_p
        touched = (pm.transpose(0, 2, 1) @ self._ke @ pm) * moduli[self._touched][:, None, None]
        touched_sum = np.zeros((len(self._touched_coarse), touched[0].size))
        np.add.at(touched_sum, self._touched_slot, touched.reshape(len(touched), -1))
        nde = self._ke.shape[0]
        shape = self.coarse_grid.shape

        def entry(r: int, c: int) -> np.ndarray:
            col = weights @ self._local_k[:, r * nde + c]
            col[self._touched_coarse] += touched_sum[:, r * nde + c]
            return col.reshape(shape)

        return (self._assembly.from_entries(entry) + self._fixed_part).tocsr()
