"""The linear-system interface the finite-element model solves through.

A system belongs to one grid, element matrix k0 and set of supports. Each design
`assemble`s K = Σ_e E_e k0 from the element modulus factors E_e/E0 (and factorises
it, or refreshes the preconditioner); `solve` then takes full-size right-hand
sides, the load cases first and adjoint loads after, and returns full-size
solutions that are zero on the fixed dofs. Implementations: solvers.DirectSystem
(sparse Cholesky) and multigrid.MultigridCG; solvers.make_system picks one.
"""

from __future__ import annotations

from abc import ABC, abstractmethod

import numpy as np


class LinearSystem(ABC):
    name: str  # "cholmod" | "superlu" | "multigrid-cg (n levels)"
    iterations: int | None  # of the last load-case solve; None for a direct solver

    @abstractmethod
    def assemble(self, moduli: np.ndarray, timer=None) -> None:
        """The matrix for element modulus factors E_e/E0, factorised or with its
        preconditioner refreshed. `timer` (a timing.Timer) splits the time into
        'assembly' (the matrix) and 'solve' (the rest)."""

    @abstractmethod
    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """K⁻¹ rhs with the last assembled matrix for rhs of shape (n_dofs,) or
        (n_dofs, k); the solution has rhs's shape and is zero on the fixed dofs (a
        load there goes straight to the support)."""

    @abstractmethod
    def state(self) -> dict[str, np.ndarray]:
        """What a checkpoint needs to continue exactly (empty when nothing)."""

    @abstractmethod
    def restore(self, state: dict[str, np.ndarray]) -> None:
        """Take back a `state()`; before the next assemble."""


def check_state_keys(state: dict, known: tuple[str, ...]) -> None:
    """A clear error for a checkpoint entry this system does not know."""
    unknown = sorted(set(state) - set(known))
    if unknown:
        raise ValueError(f"unknown linear-system state {unknown}; expected some of {list(known)}")
