"""Relaxed von Mises stress, its p-norm aggregate and the aggregate's sensitivity.

Relaxation (qp-approach, Bruggi 2008, Struct. Multidisc. Optim. 36:125; the form of
Le et al. 2010, Struct. Multidisc. Optim. 41:605): the stress measure of element e
is s_e = ρ_e^q · σ_vm(D0 B u_e), the solid-material von Mises stress at the element
centre scaled by ρ^q with q = 0.5 < p, so that void elements, which carry no
material, show no spurious peaks, while solid ones keep their true stress.

Aggregate: the p-norm σ_PN = (Σ_{e,l} s_el^P)^(1/P) over elements and load cases,
P = 8. It over-estimates nothing and under-estimates the peak; the design loop
multiplies it by the adaptive correction of Le et al. (2010),
c_k = α (max s / σ_PN)_{k−1} + (1 − α) c_{k−1}, α = 0.5, so that the constraint
c·σ_PN ≤ σ_limit acts on an estimate of the true peak. With one limit per load case
(responses.StressLimit) each case's stresses are first divided by its limit,
s_el = ρ_e^q σ_vm,el / L_l, and the constraint reads c·σ_PN ≤ 1.

Sensitivity by the adjoint method: with w_el = ∂σ_PN/∂s_el and v = σ_vm,
dσ_PN/dρ_e = Σ_l [ w_el q ρ_e^(q−1) v_el − E'(ρ_e) λ_l,eᵀ k0 u_l,e ],
where K λ_l = Σ_e w_el ρ_e^q (D0 B)ᵀ M σ_el / v_el (M: σ_vm² = σᵀ M σ).
"""

from __future__ import annotations

import numpy as np

from .elementfields import block_dofs, scatter_to_nodes, slabs
from .elements import centre_strain_displacement, elasticity_matrix

RELAXATION_EXPONENT = 0.5  # q of the qp-relaxation


def relax(density: np.ndarray, von_mises: np.ndarray, q: float = RELAXATION_EXPONENT) -> np.ndarray:
    """s = ρ^q σ_vm for element densities (n,) and stresses (n, n_cases)."""
    return density[:, None] ** q * von_mises


def von_mises_matrix(dim: int) -> np.ndarray:
    if dim == 2:
        return np.array([[1.0, -0.5, 0.0], [-0.5, 1.0, 0.0], [0.0, 0.0, 3.0]])
    m = np.full((3, 3), -0.5)
    np.fill_diagonal(m, 1.0)
    out = np.zeros((6, 6))
    out[:3, :3] = m
    out[3:, 3:] = 3.0 * np.eye(3)
    return out


def centre_stresses(model, displacements: np.ndarray) -> np.ndarray:
    """Solid-material stress tensors at element centres, Voigt rows (n_elements,
    n_cases, 3 or 6): 2D [σx, σy, τxy], 3D [σx, σy, σz, τyz, τxz, τxy], MPa."""
    mat, grid = model.problem.material, model.grid
    c = elasticity_matrix(grid.dim, mat.youngs_modulus, mat.poissons_ratio)
    c = c @ centre_strain_displacement(grid.dim, grid.h)
    return np.einsum("sn,enc->ecs", c, displacements[grid.element_dofs])


class StressMeasure:
    def __init__(self, model, q: float = RELAXATION_EXPONENT, p_norm: float = 8.0):
        self.model, self.q, self.p = model, q, p_norm
        mat, grid = model.problem.material, model.grid
        self.c = elasticity_matrix(
            grid.dim, mat.youngs_modulus, mat.poissons_ratio
        ) @ centre_strain_displacement(grid.dim, grid.h)  # σ = C u_e
        self.m = von_mises_matrix(grid.dim)

    def _von_mises(self, u: np.ndarray) -> np.ndarray:
        """Centre von Mises stresses (ne, nc), a slab of elements at a time."""
        grid = self.model.grid
        nc = u.shape[1]
        vm = np.empty((grid.n_elements, nc))
        for _, _, start, stop in slabs(grid):
            flat = _gather(u, grid, start, stop)  # (b·nc, nde)
            sig = flat @ self.c.T
            vm[start:stop] = np.sqrt(
                np.maximum(np.einsum("is,st,it->i", sig, self.m, sig), 0.0)
            ).reshape(-1, nc)
        return vm

    def relaxed(self, rho: np.ndarray, analysis) -> np.ndarray:
        """s_el = ρ_e^q σ_vm,el (MPa), shape (n_elements, n_cases)."""
        return relax(rho, self._von_mises(analysis.displacements), self.q)

    def aggregate(self, rho: np.ndarray, analysis, gradient: bool = True, scale=None):
        """(σ_PN, dσ_PN/dρ or None, max s): the aggregate, with `gradient` its
        derivative (one adjoint solve per load case), and the true peak it estimates.
        `scale` (n_cases,) weighs each load case's stress, s_el = k_l ρ_e^q σ_vm,el
        (k_l = 1/limit of case l: one aggregate of the stresses over their own
        limits; k_l = 0 leaves case l out); None weighs every case by 1. Element
        quantities are formed a slab of elements at a time (elementfields.py), so no
        (n_elements, 24, n_cases) array is held."""
        model = self.model
        u = analysis.displacements
        vm = self._von_mises(u)
        k = np.ones(vm.shape[1]) if scale is None else np.asarray(scale, dtype=float)
        rq = rho[:, None] ** self.q
        s = rq * vm * k
        smax = float(s.max())
        if smax <= 0:
            return 0.0, np.zeros_like(rho) if gradient else None, 0.0
        # scaled by smax so that s^P cannot overflow or underflow
        ratio = s / smax
        total = float((ratio**self.p).sum())
        value = smax * total ** (1.0 / self.p)
        if not gradient:
            return value, None, smax
        w = total ** (1.0 / self.p - 1.0) * ratio ** (self.p - 1.0)  # ∂σ_PN/∂s
        safe = np.where(vm > 0, vm, 1.0)
        # d(ρ^q)/dρ is unbounded at ρ = 0 (void passive elements); there s = 0 and
        # so w = 0, and a floor on ρ keeps the product finite
        floor = np.maximum(rho, 1e-9)[:, None]
        explicit = (w * self.q * floor ** (self.q - 1.0) * vm * k).sum(axis=1)
        # adjoint loads: Σ_e w k ρ^q Cᵀ M σ / v, assembled over element dofs
        coef = np.where(vm > 0, w * k * rq / safe, 0.0)  # (ne, nc)
        grid, nc = model.grid, u.shape[1]
        back = self.m @ self.c  # σ ↦ M σ ↦ Cᵀ M σ, as rows: σ @ (M C)
        f_adj = np.zeros((grid.n_dofs, nc))
        for i0, i1, start, stop in slabs(grid):
            flat = _gather(u, grid, start, stop)
            local = (flat @ self.c.T) @ back * coef[start:stop].reshape(-1, 1)
            scatter_to_nodes(
                f_adj, grid, i0, i1, local.reshape(stop - start, nc, -1).transpose(0, 2, 1)
            )
        lam = model.resolve(f_adj)
        coupling = np.empty(grid.n_elements)
        for _, _, start, stop in slabs(grid):
            le, ue = _gather(lam, grid, start, stop), _gather(u, grid, start, stop)
            coupling[start:stop] = (
                np.einsum("ij,ij->i", le @ model.ke, ue).reshape(-1, nc).sum(axis=1)
            )
        return value, explicit - model.moduli_derivative(rho) * coupling, smax


def _gather(u: np.ndarray, grid, start: int, stop: int) -> np.ndarray:
    """Element displacements of elements start..stop−1 as rows (b·nc, nde), element
    major then load case."""
    ue = u[block_dofs(grid, start, stop)]  # (b, nde, nc)
    return ue.transpose(0, 2, 1).reshape(-1, ue.shape[1])
