"""Linear solvers for the reduced stiffness system K u = f behind one interface.

`solve(K_lower, F)` takes the lower triangle of the symmetric positive-definite
stiffness matrix (CSC, sorted indices, the same pattern every call) and a block of
right-hand sides (one column per load case), and returns the displacements.
CHOLMOD (SuiteSparse, through scikit-sparse) does its symbolic analysis once and
only refactorises numerically afterwards; without it scipy's SuperLU serves.
"""
from __future__ import annotations

import warnings
from contextlib import contextmanager

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

try:  # scikit-sparse wraps CHOLMOD; it needs libsuitesparse-dev at build time
    from sksparse import cholmod as _cholmod
except ImportError:  # pragma: no cover - depends on the machine
    _cholmod = None

_warned = False


@contextmanager
def blas_for_solver():
    """Within this block numpy's and scipy's bundled OpenBLAS run on one thread,
    while the system OpenBLAS that CHOLMOD calls keeps all cores. Two busy-waiting
    OpenBLAS thread pools on a 2-core machine otherwise slow the factorisation by
    about a third (measured with `topo bench`); the small dense products topo does
    itself gain nothing from threads."""
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - optional speed-up
        yield
        return
    controller = ThreadpoolController()
    bundled = [lib for lib in controller.lib_controllers
               if lib.internal_api == "openblas" and ("numpy.libs" in lib.filepath or "scipy.libs" in lib.filepath)]
    before = [lib.num_threads for lib in bundled]
    for lib in bundled:
        lib.set_num_threads(1)
    try:
        yield
    finally:
        for lib, n in zip(bundled, before):
            lib.set_num_threads(n)


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
        self._lu = None
        self.name = "cholmod" if self.use_cholmod else "superlu"

    iterations = 0

    def factorize(self, k_lower: sp.csc_matrix) -> None:
        if self.use_cholmod:
            try:
                if self._factor is None:
                    self._factor = _cholmod.analyze(k_lower, mode="supernodal")
                self._factor.cholesky_inplace(k_lower)
                self._lu = None
                return
            except _cholmod.CholmodNotPositiveDefiniteError:
                warnings.warn("the stiffness matrix is not positive definite (CHOLMOD); "
                              "falling back to a general sparse LU solve", RuntimeWarning, stacklevel=2)
        self._lu = spla.splu(_full(k_lower), permc_spec="MMD_AT_PLUS_A")

    def resolve(self, rhs: np.ndarray) -> np.ndarray:
        """Solve with the last factorisation."""
        rhs = np.asarray(rhs, dtype=float)
        if self._lu is not None:
            return self._lu.solve(rhs)
        return np.asarray(self._factor(rhs))

    def solve(self, k_lower: sp.csc_matrix, rhs: np.ndarray) -> np.ndarray:
        self.factorize(k_lower)
        return self.resolve(rhs)


# "auto" takes multigrid-CG for 3D problems above this many free dofs, where its
# hierarchy has a coarse level (multigrid.COARSE_DOFS). Measured on the 3D
# cantilever, seconds per iteration direct / multigrid-CG: 24×12×12 (12,675 dofs)
# 0.14 / 0.20; 32×16×16 (28,611) 0.47 / 0.15; 40×20×20 (54,243) 1.05 / 0.23.
AUTO_ITERATIVE_DOFS = 20_000


def choose(kind: str, dim: int, n_free: int) -> str:
    """'direct' or 'iterative' for `optimization.solver`."""
    if kind == "auto":
        return "iterative" if dim == 3 and n_free > AUTO_ITERATIVE_DOFS else "direct"
    if kind not in ("direct", "iterative"):
        raise ValueError(f"unknown solver {kind!r}")
    return kind


def make_solver(kind: str, shape: tuple[int, ...], free: np.ndarray):
    """The solver object for `optimization.solver` on a grid with these free dofs."""
    if choose(kind, len(shape), len(free)) == "iterative":
        from .multigrid import MultigridCG

        return MultigridCG(shape)
    return DirectSolver()
