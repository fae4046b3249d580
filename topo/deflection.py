"""Deflection at a point (or averaged over a small region) along a direction.

Engineers sign off how far a point moves in a stated direction, not compliance.
A probe is the linear functional δ = lᵀu, with l = d̂/n on the n selected nodes'
dofs along the unit direction d̂. Its derivative with respect to the element
densities follows from the adjoint K λ = l (K symmetric; Bendsøe & Sigmund 2003,
"Topology Optimization", §1.2.3 for the adjoint of a displacement):

    ∂δ/∂ρ_e = −(∂E_e/∂ρ_e / E0) · λ_eᵀ k0 u_e.

With a limit, the design loop constrains g = (δ/δ_lim)² − 1 ≤ 0, which bounds the
deflection in both senses along d̂.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Probe:
    name: str
    nodes: np.ndarray  # selected node numbers
    direction: np.ndarray  # unit vector, length dim
    cases: tuple[int, ...]  # load-case indices it is evaluated for
    limit: float | None  # mm, on |δ|

    def functional(self, n_dofs: int) -> np.ndarray:
        """l with δ = lᵀu (full dof vector)."""
        dim = len(self.direction)
        vec = np.zeros(n_dofs)
        for c in range(dim):
            vec[dim * self.nodes + c] += self.direction[c] / len(self.nodes)
        return vec


def unit_direction(direction, dim: int) -> np.ndarray:
    """'x', '-z' or a vector of dim numbers → unit vector."""
    if isinstance(direction, str):
        sign = -1.0 if direction.startswith("-") else 1.0
        axis = "xyz".index(direction.lstrip("+-"))
        vec = np.zeros(dim)
        vec[axis] = sign
        return vec
    vec = np.asarray(direction, dtype=float)
    return vec / np.linalg.norm(vec)


def deflections(probe: Probe, displacements: np.ndarray) -> np.ndarray:
    """δ of the probe for every load case (n_cases,), mm."""
    return probe.functional(displacements.shape[0]) @ displacements


def deflection_gradient(
    model, density: np.ndarray, analysis, probe: Probe, case: int
) -> tuple[float, np.ndarray]:
    """δ for one load case and ∂δ/∂ρ (flat densities), by one adjoint solve with the
    matrix of the last analysis."""
    load = probe.functional(model.grid.n_dofs)
    u = analysis.displacements[:, case]
    lam = model.resolve(load[:, None])[:, 0]
    edofs = model.grid.element_dofs
    mixed = np.einsum("ei,ij,ej->e", lam[edofs], model.ke, u[edofs])
    return float(load @ u), -model.moduli_derivative(density) * mixed
