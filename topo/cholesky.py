"""Sparse Cholesky factorisation of a symmetric positive-definite matrix.

CHOLMOD (SuiteSparse, through scikit-sparse) does its symbolic analysis once and
only refactorises numerically afterwards, as long as the sparsity pattern stays
the same; without it, or if CHOLMOD finds the matrix not positive definite,
scipy's SuperLU serves.
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


class SparseCholesky:
    """Factorises the lower triangle of a symmetric matrix (CSC, sorted indices,
    the same pattern every call) and solves with the factor."""

    def __init__(self, prefer_cholmod: bool = True):
        global _warned
        self.use_cholmod = prefer_cholmod and cholmod_available()
        if prefer_cholmod and not cholmod_available() and not _warned:
            warnings.warn(
                "CHOLMOD (scikit-sparse) cannot be imported; using scipy's SuperLU, "
                "which is slower. Install libsuitesparse-dev and scikit-sparse 0.4.x.",
                RuntimeWarning,
                stacklevel=3,
            )
            _warned = True
        self._factor = None
        self._lu = None
        self.name = "cholmod" if self.use_cholmod else "superlu"

    def factorize(self, k_lower: sp.csc_matrix) -> None:
        if self.use_cholmod:
            try:
                if self._factor is None:
                    self._factor = _cholmod.analyze(k_lower, mode="supernodal")
                self._factor.cholesky_inplace(k_lower)
                self._lu = None
                return
            except _cholmod.CholmodNotPositiveDefiniteError:
                warnings.warn(
                    "the stiffness matrix is not positive definite (CHOLMOD); "
                    "falling back to a general sparse LU solve",
                    RuntimeWarning,
                    stacklevel=2,
                )
        self._lu = spla.splu(_full(k_lower), permc_spec="MMD_AT_PLUS_A")

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """Solve with the last factorisation."""
        rhs = np.asarray(rhs, dtype=float)
        if self._lu is not None:
            return self._lu.solve(rhs)
        return np.asarray(self._factor(rhs))


class CoarseCholesky:
    """SparseCholesky of a symmetric matrix given in full whose pattern may change
    between calls (a multigrid's coarsest operator: sparse products drop entries
    that come out zero): its lower triangle is factorised, with a new symbolic
    analysis only when the pattern has changed."""

    def __init__(self):
        self._factor: SparseCholesky | None = None
        self._pattern: tuple = ()

    def factorize(self, a: sp.spmatrix) -> None:
        lower = sp.tril(a).tocsc()
        lower.sum_duplicates()  # stencil layouts repeat columns at the grid edge
        pattern = (lower.indptr, lower.indices)
        if self._factor is None or not all(
            np.array_equal(x, y) for x, y in zip(pattern, self._pattern)
        ):
            self._factor = SparseCholesky()
            self._pattern = (pattern[0].copy(), pattern[1].copy())
        self._factor.factorize(lower)

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        return self._factor.solve(rhs)
