"""The coarse operators Pᵀ A P of the multigrid hierarchy, element by element.

On nested grids the trilinear prolongation is local: the nodes of a fine element
interpolate from the corners of the one coarse element (2×2×2 fine elements, or
fewer at the end of an odd-sized axis) that contains it. So Pᵀ A P is an assembly
of coarse element matrices

    K_C = Σ_{e ⊂ C} P_sᵀ K_e P_s,

where P_s is the local interpolation of e's sub-position s in C: one of 3^dim
matrices known in advance (per axis: first or second half of a coarse element, or
the only element of a short one). On the first coarse level K_e = E_e k0, so K_C is
one dense product of the moduli with the 3^dim matrices P_sᵀ k0 P_s; further levels
repeat the rule on the coarse element matrices with batched small products. Each
refresh costs a few dense products and stencil assemblies, instead of sparse triple
products over the fine matrix (most of the hierarchy update before; measured:
DEVELOPERS.md, "Coarse operators"), and every level keeps one sparsity pattern, so
the coarsest Cholesky reuses its symbolic analysis.

Supports: the fine matrix is A = D K D + (I − D) with D the 0/1 mask of the free
dofs, so Pᵀ A P = (DP)ᵀ K (DP) + Pᵀ(I − D)P. Elements touching a fixed dof get
their masked local interpolation individually, and each fixed dof's p_f p_fᵀ (its
row of P, which lives on one coarse element) joins that coarse element's matrix.
The operators equal the sparse triple products to round-off
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
_AXIS_WEIGHTS = np.array(
    [[[1.0, 0.0], [0.5, 0.5]], [[0.5, 0.5], [0.0, 1.0]], [[1.0, 0.0], [0.0, 1.0]]]
)


def _axis_codes(n: int) -> np.ndarray:
    codes = np.arange(n) % 2
    if n % 2:
        codes[-1] = 2
    return codes


class _Coarsening:
    """Maps of one coarsening step: each fine element's coarse element and code."""

    def __init__(self, shape: tuple[int, ...]):
        dim = len(shape)
        self.coarse_shape = tuple(-(-n // 2) for n in shape)
        idx = np.indices(shape).reshape(dim, -1)
        codes = [_axis_codes(n)[idx[ax]] for ax, n in enumerate(shape)]
        self.combo = np.ravel_multi_index(tuple(codes), (3,) * dim)
        self.parent = np.ravel_multi_index(tuple(idx // 2), self.coarse_shape)
        self.groups = [np.flatnonzero(self.combo == c) for c in range(3**dim)]


class ElementGalerkin:
    """The `levels` coarse operators of multigrid.Hierarchy for the stencil-assembled
    fine matrix of element moduli E on `grid`, with the supports `fixed`."""

    def __init__(self, grid: Grid, ke: np.ndarray, fixed: np.ndarray, levels: int):
        dim, corners = grid.dim, grid.corners
        nde = ke.shape[0]
        self._ke, self._nde = ke, nde
        combos = list(itertools.product(range(3), repeat=dim))
        local_p = np.empty((len(combos), nde, nde))  # (fine element dofs, coarse element dofs)
        for c, combo in enumerate(combos):
            w = np.ones((len(corners), len(corners)))
            for ax, code in enumerate(combo):
                w *= _AXIS_WEIGHTS[code][np.ix_(corners[:, ax], corners[:, ax])]
            local_p[c] = np.kron(w, np.eye(dim))
        self._local_p = local_p
        local_k = np.einsum("cai,ab,cbj->cij", local_p, ke, local_p)
        self._local_k = (0.5 * (local_k + local_k.transpose(0, 2, 1))).reshape(len(combos), -1)

        self._steps: list[_Coarsening] = []
        self._assemblies: list[StencilAssembly] = []
        shape = grid.shape
        for _ in range(levels):
            step = _Coarsening(shape)
            self._steps.append(step)
            coarse = Grid(step.coarse_shape, 1.0)
            self._assemblies.append(
                StencilAssembly(coarse, None, np.zeros(coarse.n_dofs, dtype=bool))
            )
            shape = step.coarse_shape
        if levels:
            self._first_level_supports(grid, fixed)

    def _first_level_supports(self, grid: Grid, fixed: np.ndarray) -> None:
        step, dim = self._steps[0], grid.dim
        # elements with a fixed dof: their own masked interpolation
        free = (~fixed[grid.element_dofs]).astype(float)
        self._touched = np.flatnonzero(free.min(axis=1) < 1.0)
        self._masked_p = free[self._touched][:, :, None] * self._local_p[step.combo[self._touched]]
        # p_f p_fᵀ of every fixed dof, on the coarse element that holds its node
        coarse_shape = np.array(step.coarse_shape)
        fixed_dofs = np.flatnonzero(fixed)
        node = np.stack(np.unravel_index(fixed_dofs // dim, grid.node_shape), axis=1)
        element = np.minimum(node // 2, coarse_shape - 1)
        local = node - 2 * element  # 0, 1 or 2 along each axis
        short = 2 * element + 1 == np.array(grid.shape)  # the coarse element spans one fine element
        corners = grid.corners
        w = np.ones((len(fixed_dofs), len(corners)))
        for ax in range(dim):
            t = np.where(short[:, ax], 2 * local[:, ax], local[:, ax]).astype(float) / 2.0
            w *= np.where(corners[None, :, ax] == 1, t[:, None], 1.0 - t[:, None])
        nde = self._nde
        p_rows = np.zeros((len(fixed_dofs), nde))
        comp = fixed_dofs % dim
        for a in range(len(corners)):
            p_rows[np.arange(len(fixed_dofs)), dim * a + comp] = w[:, a]
        fixed_part = p_rows[:, :, None] * p_rows[:, None, :]
        fixed_coarse = np.ravel_multi_index(tuple(element.T), step.coarse_shape)
        # one list of coarse elements with extra terms: touched ones and supports
        self._extra_coarse, slots = np.unique(
            np.concatenate([step.parent[self._touched], fixed_coarse]), return_inverse=True
        )
        self._touched_slot, fixed_slot = slots[: len(self._touched)], slots[len(self._touched) :]
        self._fixed_sum = np.zeros((len(self._extra_coarse), nde * nde))
        np.add.at(self._fixed_sum, fixed_slot, fixed_part.reshape(len(fixed_dofs), -1))

    def matrices(self, moduli: np.ndarray) -> list[sp.csr_matrix]:
        """The coarse operators, first coarse level first."""
        if not self._steps:
            return []
        step = self._steps[0]
        n_coarse = int(np.prod(step.coarse_shape))
        weights = np.zeros((n_coarse, self._local_k.shape[0]))
        e = moduli.copy()
        e[self._touched] = 0.0
        weights[step.parent, step.combo] = e  # one fine element per (coarse, code)
        kc = weights @ self._local_k  # (coarse elements, nde²)
        pm = self._masked_p
        touched = (pm.transpose(0, 2, 1) @ self._ke @ pm) * moduli[self._touched][:, None, None]
        extra = self._fixed_sum.copy()
        np.add.at(extra, self._touched_slot, touched.reshape(len(touched), -1))
        kc[self._extra_coarse] += extra
        nde = self._nde
        kc = kc.reshape(-1, nde, nde)
        out = [self._assemblies[0].from_elements(kc)]
        for step, assembly in zip(self._steps[1:], self._assemblies[1:]):
            coarser = np.zeros((int(np.prod(step.coarse_shape)), nde, nde))
            for c, members in enumerate(step.groups):
                if len(members):
                    p = self._local_p[c]
                    # each coarse element has at most one child per code
                    coarser[step.parent[members]] += p.T @ kc[members] @ p
            kc = coarser
            out.append(assembly.from_elements(kc))
        return out
