"""The direct linear system and the choice between direct and iterative.

DirectSystem assembles K by node stencils (stencil.py, shared with multigrid-CG),
gathers the lower triangle of its free-dof block and factorises it with CHOLMOD,
reusing the symbolic analysis (cholesky.py; SuperLU without CHOLMOD).
`make_system` builds the system `optimization.solver` names.
"""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from .cholesky import SparseCholesky
from .linear import LinearSystem, check_state_keys
from .matrixfree import MatrixFreeCG
from .multigrid import MultigridCG
from .stencil import FreeLowerTriangle, StencilAssembly
from .timing import Timer


@contextmanager
def blas_for_solver():
    """Within this block numpy's and scipy's bundled OpenBLAS run on one thread,
    while the system OpenBLAS that CHOLMOD calls keeps all cores: two busy-waiting
    OpenBLAS thread pools otherwise fight over the cores and slow the
    factorisation, and the small dense products topo does itself gain nothing from
    threads. Measured: DEVELOPERS.md, "BLAS threads during a run"."""
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - optional speed-up
        yield
        return
    controller = ThreadpoolController()
    bundled = [
        lib
        for lib in controller.lib_controllers
        if lib.internal_api == "openblas"
        and ("numpy.libs" in lib.filepath or "scipy.libs" in lib.filepath)
    ]
    before = [lib.num_threads for lib in bundled]
    for lib in bundled:
        lib.set_num_threads(1)
    try:
        yield
    finally:
        for lib, n in zip(bundled, before):
            lib.set_num_threads(n)


class DirectSystem(LinearSystem):
    """Sparse Cholesky on the free dofs; one factorisation per assemble serves
    every right-hand side until the next."""

    iterations = None

    def __init__(self, grid, ke: np.ndarray, fixed: np.ndarray, prefer_cholmod: bool = True):
        self._fixed = fixed
        self._free = np.flatnonzero(~fixed)
        self._assembly = StencilAssembly(grid, ke, fixed)
        self._reduce = FreeLowerTriangle(self._assembly, fixed)
        self._factor = SparseCholesky(prefer_cholmod)
        self.name = self._factor.name

    def lower(self, moduli: np.ndarray):
        """The lower triangle of K on the free dofs (CSC), as factorised."""
        return self._reduce(self._assembly.matrix(moduli))

    def assemble(self, moduli: np.ndarray, timer: Timer | None = None) -> None:
        timer = timer or Timer()
        with timer("assembly"):
            k = self.lower(moduli)
        with timer("solve"):
            self._factor.factorize(k)

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        out = np.zeros(np.shape(rhs))
        out[self._free] = self._factor.solve(np.asarray(rhs, dtype=float)[self._free])
        return out

    def state(self) -> dict[str, np.ndarray]:
        return {}

    def restore(self, state: dict[str, np.ndarray]) -> None:
        check_state_keys(state, ())


# "auto" takes multigrid-CG for 3D problems above this many free dofs, where its
# hierarchy has a coarse level (multigrid.COARSE_DOFS) and it overtakes the direct
# solver. Measured: DEVELOPERS.md, "Direct or iterative (AUTO_ITERATIVE_DOFS)".
AUTO_ITERATIVE_DOFS = 20_000


# Above this many free dofs a 3D iterative solve is matrix-free (matrixfree.py),
# below it assembled. Since the blocked element product (2026-12-03) the
# matrix-free path is faster at every size where "auto" goes iterative: 1.55× at
# 30×15×15 (23,000 dofs), 2.2× at 40×20×20, 3.4× at 60×30×30. Measured:
# DEVELOPERS.md, "Matrix-free multigrid".
AUTO_MATRIX_FREE_DOFS = AUTO_ITERATIVE_DOFS


def iterative_kind(dim: int, n_free: int) -> str:
    """'matrix-free' or 'assembled' multigrid-CG for an iterative solve."""
    return "matrix-free" if dim == 3 and n_free > AUTO_MATRIX_FREE_DOFS else "assembled"


def choose(kind: str, dim: int, n_free: int) -> str:
    """'direct' or 'iterative' for `optimization.solver`."""
    if kind == "auto":
        return "iterative" if dim == 3 and n_free > AUTO_ITERATIVE_DOFS else "direct"
    if kind not in ("direct", "iterative"):
        raise ValueError(f"unknown solver {kind!r}")
    return kind


def make_system(kind: str, grid, ke: np.ndarray, fixed_mask: np.ndarray) -> LinearSystem:
    """The linear system for `optimization.solver` (auto | direct | iterative) on
    `grid` with element matrix `ke` and the supports `fixed_mask` (per dof). The
    iterative system is matrix-free for large 3D problems (matrixfree.py) and
    assembled otherwise (multigrid.py)."""
    n_free = int(np.count_nonzero(~fixed_mask))
    if choose(kind, grid.dim, n_free) == "iterative":
        if iterative_kind(grid.dim, n_free) == "matrix-free":
            return MatrixFreeCG(grid, ke, fixed_mask)
        return MultigridCG(grid, ke, fixed_mask)
    return DirectSystem(grid, ke, fixed_mask)
