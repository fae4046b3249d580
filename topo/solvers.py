"""Linear solvers for the reduced stiffness system K u = f behind one interface.

`solve(K_lower, F)` takes the lower triangle of the symmetric positive-definite
stiffness matrix (CSC, sorted indices, the same pattern every call) and a block of
right-hand sides (one column per load case), and returns the displacements.
CHOLMOD (SuiteSparse, through scikit-sparse) does its symbolic analysis once and
only refactorises numerically afterwards; without it scipy's SuperLU serves.
"""
from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

try:  # scikit-sparse wraps CHOLMOD; it needs libsuitesparse-dev at build time
    from sksparse import cholmod as _cholmod
except ImportError:  # pragma: no cover - depends on the machine
    _cholmod = None

_warned = False


def cholmod_available() -> bool:
    return _cholmod is not None


def _full(k_lower: sp.csc_matrix) -> sp.csc_matrix:
    return (k_lower + sp.triu(k_lower.T, k=1)).tocsc()


class DirectSolver:
    """Sparse Cholesky (CHOLMOD) with a reused symbolic analysis, or SuperLU."""

    def __init__(self, prefer_cholmod: bool = True):
        global _warned
        self.use_cholmod = prefer_cholmod and cholmod_available()
        if prefer_cholmod and not cholmod_available() and not _warned:
            warnings.warn("CHOLMOD (scikit-sparse) cannot be imported; using scipy's SuperLU, "
                          "which is slower. Install libsuitesparse-dev and scikit-sparse 0.4.x.",
                          RuntimeWarning, stacklevel=2)
            _warned = True
        self._factor = None
        self.name = "cholmod" if self.use_cholmod else "superlu"

    def solve(self, k_lower: sp.csc_matrix, rhs: np.ndarray) -> np.ndarray:
        if self.use_cholmod:
            try:
                if self._factor is None:
                    self._factor = _cholmod.analyze(k_lower, mode="supernodal")
                self._factor.cholesky_inplace(k_lower)
                return np.asarray(self._factor(rhs))
            except _cholmod.CholmodNotPositiveDefiniteError:
                warnings.warn("the stiffness matrix is not positive definite (CHOLMOD); "
                              "falling back to a general sparse LU solve", RuntimeWarning, stacklevel=2)
        lu = spla.splu(_full(k_lower), permc_spec="MMD_AT_PLUS_A")
        return lu.solve(np.asarray(rhs, dtype=float))


def make_solver(kind: str = "auto") -> DirectSolver:
    """The solver for `optimization.solver`; 'auto' and 'direct' pick the direct solver."""
    if kind not in ("auto", "direct"):
        raise ValueError(f"unknown solver {kind!r}")
    return DirectSolver()
