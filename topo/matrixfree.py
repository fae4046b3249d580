"""Matrix-free multigrid-CG for 3D structured grids.

The fine operator is never assembled: K u = Σ_e E_e k0 u_e is applied element by
element (kernels.element_product, with k0 in the element's modal basis, where it
is mostly zero), and its diagonal, all that the smoother needs, comes the same
way. The coarse levels are the Galerkin operators Pᵀ A P, written as node
stencils straight from the fine moduli (coarsening.py); the coarsest is
factorised by sparse Cholesky. Grid transfers are applied as tensor products of
1D interpolations, never stored as matrices. Memory is O(nodes) with a small
constant: the fine level holds moduli and vectors only.

Methods, each with its source:
- Multigrid-preconditioned CG for topology optimisation on nested structured
  grids with Galerkin coarse operators: Amir, Aage & Lazarov 2014, Struct.
  Multidisc. Optim. 49:815 (multigrid.py follows it with assembled matrices).
- Smoothing by Chebyshev polynomials in D⁻¹A (Jacobi-preconditioned), which needs
  only the diagonal and an estimate of the largest eigenvalue: Adams, Brezina,
  Hu & Tuminaro 2003, "Parallel multigrid smoothing: polynomial versus
  Gauss–Seidel", J. Comput. Phys. 188:593. The recurrence is the Chebyshev
  iteration of Saad, Iterative Methods for Sparse Linear Systems, 2nd ed.,
  Algorithm 12.1.
- Coarse levels solved by Krylov-accelerated cycles (the K-cycle: two steps of
  flexible CG preconditioned by the next cycle, the second skipped when the first
  reduced the residual enough): Notay & Vassilevski 2008, "Recursive
  Krylov-based multigrid cycles", Numer. Linear Algebra Appl. 15:473. It keeps
  the outer iteration count nearly flat as levels are added, where a plain
  V-cycle's grows (DEVELOPERS.md, "Matrix-free multigrid").
- The outer iteration is flexible CG (Polak–Ribière β), as the K-cycle makes the
  preconditioner vary slightly from one application to the next: Notay 2000,
  "Flexible conjugate gradients", SIAM J. Sci. Comput. 22:1444.
- The preconditioner runs in single precision (half the memory traffic); the
  outer CG, its operator and its residuals stay in double precision, so the
  solution is as accurate as with a double-precision preconditioner.
"""

from __future__ import annotations

import numpy as np

from . import kernels, vectorkernels
from .cholesky import CoarseCholesky
from .coarsening import CoarseLevel
from .grid import Grid
from .linear import LinearSystem, check_state_keys
from .multigrid import COARSE_DOFS, MAX_CG_ITERATIONS, RTOL, _lambda_max, pcg, prolongation_1d
from .stencil import StencilAssembly
from .timing import Timer

# Chebyshev smoothing: degree and the ratio λmax / λmin of the interval of D⁻¹A it
# damps. Measured: DEVELOPERS.md, "Matrix-free multigrid".
CHEBYSHEV_DEGREE = 2
CHEBYSHEV_RATIO = 10.0
# The power iteration approaches λmax from below; Chebyshev amplifies modes above
# its interval, so the estimate is raised by this factor.
LAMBDA_SAFETY = 1.1
# K-cycle: levels from this one down are solved by two flexible-CG steps (the fine
# and first coarse levels, the costly ones, by one plain cycle), and the second
# step is skipped when the first left less than this share of the residual
# (Notay & Vassilevski 2008 use 0.25).
KRYLOV_FROM_LEVEL = 1
KRYLOV_SKIP = 0.25
# A power iteration warm-started from the last design's eigenvector can stay far
# below λmax when the design changes where its stiffest modes sit (measured: 3.59
# against 4.72 on a 100×50×50 cantilever at its 15th design, where CG then stalled
# at the 2,000-iteration limit). A solve that has not converged after this many
# iterations is restarted once from where it stands with the spectra re-estimated
# cold (RETRY_POWER_STEPS steps, RETRY_SAFETY margin).
RETRY_AFTER = 150
RETRY_POWER_STEPS = 40
RETRY_SAFETY = 1.25

SINGLE = np.float32


def _front(kept: dict, key, shape: tuple[int, ...], dtype) -> np.ndarray:
    """A C-contiguous array of `shape`: the front of a flat array kept under `key`,
    made anew only when a larger one is asked for, so that a drop in the column
    count (pcg leaves converged columns out) costs no fresh pages."""
    size = int(np.prod(shape))
    flat = kept.get(key)
    if flat is None or flat.size < size or flat.dtype != dtype:
        flat = kept[key] = np.empty(size, dtype)
    return flat[:size].reshape(shape)


def _columns(x: np.ndarray) -> np.ndarray:
    return x if x.ndim == 2 else x[:, None]


def _dots(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Column-wise dot products in double precision (one compiled pass, no
    double-precision copies of single-precision vectors)."""
    return vectorkernels.column_dots(a, b)


class FineOperator:
    """A = D K D + (I − D) on the fine grid, element by element; single- or
    double-precision products by the dtype of the argument."""

    def __init__(self, shape: tuple[int, int, int], ke: np.ndarray, fixed: np.ndarray):
        self.grid_shape = shape
        n = 3 * int(np.prod([s + 1 for s in shape]))
        self.shape = (n, n)
        self._k0 = {np.dtype(float): np.ascontiguousarray(ke, dtype=float)}
        self._k0[np.dtype(SINGLE)] = self._k0[np.dtype(float)].astype(SINGLE)
        free = (~fixed).astype(float)
        self._free = {np.dtype(float): free, np.dtype(SINGLE): free.astype(SINGLE)}
        self._moduli: dict = {}
        self._scratch: dict = {}  # (dtype, 0 or 1) -> element_product's two work arrays

    def _product(self, u: np.ndarray, k0: np.ndarray, out: np.ndarray) -> np.ndarray:
        dt = u.dtype
        scratch = tuple(_front(self._scratch, (dt, i), u.shape[::-1], dt) for i in range(2))
        return kernels.element_product(
            u, self._moduli[dt], k0, self._free[dt], self.grid_shape, out, scratch
        )

    def set_moduli(self, moduli: np.ndarray) -> None:
        e = np.ascontiguousarray(moduli, dtype=float)
        self._moduli = {np.dtype(float): e, np.dtype(SINGLE): e.astype(SINGLE)}

    def gershgorin_bound(self) -> float:
        """max_i Σ_j |a_ij| / a_ii, an upper bound of λmax(D⁻¹A) that no design
        change can undercut (Gershgorin's circle theorem): |k0| applied to ones."""
        dt = np.dtype(float)
        ones = np.ones((self.shape[0], 1))
        sums = np.empty_like(ones)
        # once per design: its work arrays are made for the call, not kept
        # (two double-precision vectors, 282 MB at 5.76 million elements)
        kernels.element_product(
            ones, self._moduli[dt], np.abs(self._k0[dt]), self._free[dt], self.grid_shape, sums
        )
        return float((sums[:, 0] / self.diagonal(float)).max())

    def diagonal(self, dtype=float) -> np.ndarray:
        dt = np.dtype(dtype)
        out = np.empty(self.shape[0], dtype=dt)
        return kernels.element_diagonal(
            self._moduli[dt], self._k0[dt], self._free[dt], self.grid_shape, out
        )

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        dt = np.dtype(SINGLE) if x.dtype == SINGLE else np.dtype(float)
        u = np.ascontiguousarray(_columns(x), dtype=dt)
        out = np.empty_like(u)
        self._product(u, self._k0[dt], out)
        return out.reshape(x.shape)

    def product_into(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """out = A x for contiguous (n, m) arrays of one precision (multigrid.pcg
        keeps its product array instead of a fresh one per iteration)."""
        return self._product(x, self._k0[x.dtype], out)


class StencilOperator:
    """A coarse operator held as node stencils (n_nodes, 3, 27, 3)."""

    def __init__(self, stencil: np.ndarray, node_shape: tuple[int, int, int]):
        self.stencil, self.node_shape = stencil, node_shape
        n = 3 * int(np.prod(node_shape))
        self.shape = (n, n)

    def diagonal(self) -> np.ndarray:
        i = np.arange(3)
        return self.stencil[:, i, 13, i].reshape(-1)  # slot 13 is the offset (0, 0, 0)

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        u = np.ascontiguousarray(_columns(x), dtype=self.stencil.dtype)
        out = np.empty_like(u)
        kernels.stencil_product(self.stencil, u, self.node_shape, out)
        return out.reshape(x.shape)

    def product_into(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """out = A x for contiguous (n, m) arrays of the stencil's precision."""
        return kernels.stencil_product(self.stencil, x, self.node_shape, out)


class Transfer:
    """Prolongation from a grid of `shape`'s coarse grid to it, and restriction
    (its transpose), as tensor products of 1D interpolations applied one axis at
    a time (kernels.tensor_apply) into kept work arrays."""

    def __init__(self, shape: tuple[int, int, int]):
        self._p = [prolongation_1d(n) for n in shape]
        self._p32 = [f.astype(SINGLE) for f in self._p]
        self._r32 = [f.T.tocsr() for f in self._p32]
        self.fine_n = 3 * int(np.prod([f.shape[0] for f in self._p]))
        self.coarse_n = 3 * int(np.prod([f.shape[1] for f in self._p]))
        self._scratch: dict = {}  # dtype -> (transfer_scratch's arrays, their columns)

    def _work(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The work arrays for x's column count; tensor_apply uses their fronts, so
        those kept for more columns serve fewer."""
        kept = self._scratch.get(x.dtype)
        if kept is None or kept[1] < x.shape[1]:
            arrays = kernels.transfer_scratch(self._p32, x.shape[1], x.dtype)
            kept = self._scratch[x.dtype] = (arrays, x.shape[1])
        return kept[0]

    def prolong(self, x: np.ndarray, out: np.ndarray | None = None, add: bool = False):
        """P x, into `out` (added to it with `add`)."""
        if out is None:
            out = np.empty((self.fine_n, x.shape[1]), x.dtype)
        return kernels.tensor_apply(self._p32, x, out, self._work(x), add=add)

    def restrict(self, x: np.ndarray, minus: np.ndarray | None = None, out=None):
        """Pᵀ x, or Pᵀ (x − minus) formed in the same pass."""
        if out is None:
            out = np.empty((self.coarse_n, x.shape[1]), x.dtype)
        return kernels.tensor_apply(self._r32, x, out, self._work(x), minus=minus)


def level_shapes(shape: tuple[int, ...], coarse_dofs: int) -> list[tuple[int, ...]]:
    """Element shapes of the levels, fine first: halved until a level has at most
    `coarse_dofs` dofs (multigrid.Hierarchy's rule)."""
    out = [tuple(shape)]
    while 3 * int(np.prod([n + 1 for n in out[-1]])) > coarse_dofs and min(out[-1]) >= 2:
        out.append(tuple(-(-n // 2) for n in out[-1]))
    return out


def _apply(a, x: np.ndarray, out: np.ndarray | None) -> np.ndarray:
    """A x, into `out` where the operator can write into a given array."""
    if out is not None and hasattr(a, "product_into"):
        return a.product_into(x, out)
    return a @ x


def chebyshev(a, inv_diag, r, x, lam_max, degree, ratio, work=None, out=None):
    """`degree` steps of the Chebyshev iteration for A x = r preconditioned by D⁻¹,
    on the interval [λmax/ratio, λmax] of D⁻¹A, from x (None: zero, into `out`
    or a fresh array; else x is updated in place and returned). Saad, Algorithm 12.1; as a
    smoother, Adams et al. 2003. The vector work runs in compiled single passes
    with no temporaries: at 5.76 million elements and three load cases each
    vector is 211 MB, and numpy's temporaries (fresh pages every time) took 30 %
    of its profile (DEVELOPERS.md, "Matrix-free multigrid"). `work`: three arrays
    shaped like r (the direction and two product arrays), kept by the caller so
    that no vector of the level is allocated per call."""
    upper = lam_max
    lower = lam_max / ratio
    theta, delta = 0.5 * (upper + lower), 0.5 * (upper - lower)
    sigma = theta / delta
    rho = 1.0 / sigma
    d, first, second = work if work is not None else (np.empty_like(r), None, None)
    if x is None:
        x = np.empty_like(r) if out is None else out
        res = kernels.chebyshev_start(r, None, inv_diag, 1.0 / theta, d, x)
    else:
        res = kernels.chebyshev_start(r, _apply(a, x, first), inv_diag, 1.0 / theta, d, x)
    for _ in range(degree - 1):
        rho_new = 1.0 / (2.0 * sigma - rho)
        # res −= A d; d = ρ'ρ d + (2ρ'/δ) D⁻¹ res; x += d, in one compiled pass;
        # the product goes into whichever work array does not hold res
        spare = second if res is first else first
        res = kernels.chebyshev_step(
            res, _apply(a, d, spare), d, x, inv_diag, rho_new * rho, 2.0 * rho_new / delta
        )
        rho = rho_new
    return x


class MatrixFreeCG(LinearSystem):
    """Flexible CG preconditioned by a single-precision multigrid cycle whose fine
    level is matrix-free; 3D structured grids. Same contract as
    multigrid.MultigridCG: the first solve after an assemble starts from the last
    design's load-case solution and its iterations are `iterations`; the state is
    that warm start and the smoothers' power-iteration vectors."""

    def __init__(
        self,
        grid: Grid,
        ke: np.ndarray,
        fixed: np.ndarray,
        rtol: float = RTOL,
        coarse_dofs: int = COARSE_DOFS,
        degree: int = CHEBYSHEV_DEGREE,
        ratio: float = CHEBYSHEV_RATIO,
        krylov_from: int = KRYLOV_FROM_LEVEL,
    ):
        if grid.dim != 3:
            raise ValueError("the matrix-free solver is for 3D grids")
        self._fixed = fixed
        self.rtol, self.degree, self.ratio, self.krylov_from = rtol, degree, ratio, krylov_from
        shapes = level_shapes(grid.shape, coarse_dofs)
        self.shapes = shapes
        self.levels = len(shapes)
        self.fine = FineOperator(grid.shape, ke, fixed)
        self.transfers = [Transfer(s) for s in shapes[:-1]]
        self.coarse_levels = [
            CoarseLevel(grid.shape, ke, fixed, lv) for lv in range(1, self.levels - 1)
        ]
        self.bottom = CoarseLevel(grid.shape, ke, fixed, self.levels - 1)
        self._bottom_layout = StencilAssembly(
            Grid(self.bottom.shape, 1.0),
            None,
            np.zeros(3 * int(np.prod(self.bottom.node_shape)), bool),
        )
        self._stencils = [
            np.empty((int(np.prod(c.node_shape)), 3, 27, 3), dtype=SINGLE)
            for c in self.coarse_levels
        ]
        self._bottom_stencil = np.empty((int(np.prod(self.bottom.node_shape)), 3, 27, 3))
        self.operators: list = []
        self.inv_diag: list[np.ndarray] = []
        self.lam: list[float] = []
        self.power_vectors: list[np.ndarray] = []
        self.coarse = CoarseCholesky()
        self.iterations: int | None = None
        self.name = f"matrix-free multigrid-cg ({self.levels} levels)"
        self._warm: np.ndarray | None = None
        self._first_solve = False
        self._buffers: dict = {}  # (level, name) -> work arrays of the cycles

    # ------------------------------------------------------------------ assemble
    def assemble(self, moduli: np.ndarray, timer: Timer | None = None) -> None:
        timer = timer or Timer()
        with timer("assembly"):
            self.fine.set_moduli(moduli)
            ops = [self.fine]
            for c, out in zip(self.coarse_levels, self._stencils):
                ops.append(StencilOperator(c.stencil(moduli, out), c.node_shape))
            bottom = self.bottom.stencil(moduli, self._bottom_stencil)
        with timer("solve"):
            self.operators = ops[: self.levels - 1]  # the smoothed levels
            diagonals = [self.fine.diagonal(SINGLE)] + [op.diagonal() for op in ops[1:]]
            self.inv_diag = [(1.0 / d).astype(SINGLE)[:, None] for d in diagonals]
            self.inv_diag = self.inv_diag[: len(self.operators)]
            self._estimate_spectra()
            self._factorize(bottom)
        self._first_solve = True

    def _estimate_spectra(self, cold_steps: int = 0, safety: float = LAMBDA_SAFETY) -> None:
        """λmax(D⁻¹A) per smoothed level. The fine level takes its Gershgorin
        bound, which no design change can undercut (1.14 × λmax measured on a
        100×50×50 cantilever design); a power iteration there (six products
        per design) only ever confirmed it. The coarse levels, whose Galerkin
        stencils make the bound loose, take a power iteration warm-started from
        the last design's eigenvector (multigrid._lambda_max), or from a fixed
        random vector for `cold_steps` steps. `power_vectors[i]` belongs to
        level i + 1."""
        coarse = list(zip(self.operators[1:], self.inv_diag[1:]))
        warm = len(self.power_vectors) == len(coarse) and not cold_steps
        lam, vectors = [self.fine.gershgorin_bound()], []
        for i, (op, d) in enumerate(coarse):
            if warm:
                value, v = _lambda_max(op, d[:, 0], self.power_vectors[i].astype(SINGLE))
            else:
                start = np.random.default_rng(0).standard_normal(op.shape[0]).astype(SINGLE)
                value, v = _lambda_max(op, d[:, 0], start, warm=cold_steps or 12)
            lam.append(value / 1.05 * safety)
            vectors.append(v.astype(SINGLE))
        self.lam, self.power_vectors = lam, vectors

    def _factorize(self, stencil: np.ndarray) -> None:
        n = self._bottom_layout.n
        a = self._bottom_layout._csr(stencil.reshape(n, -1))
        self.coarse.factorize(a)

    # ------------------------------------------------------------------ cycles
    def _buffer(self, level: int, name: str, shape: tuple[int, ...]) -> np.ndarray:
        """A kept single-precision work array of the level. Every array of a
        level is dead once the level's cycle has returned and its caller has
        used the result, so the cycles reuse them and no vector is allocated
        per cycle (fresh pages cost more than the pass that fills them: on the
        5.76-million-element bracket the first coarse level's Chebyshev start
        and K-cycle residual took 2.3 s per design iteration writing into fresh
        arrays, 0.6 s into kept ones). With fewer columns (pcg drops converged
        ones) they are the fronts of the same arrays."""
        return _front(self._buffers, (level, name), shape, SINGLE)

    def cycle(self, r: np.ndarray, level: int = 0, slot: int = 0) -> np.ndarray:
        """One multigrid cycle for A z = r at `level` (single precision). z is a
        kept array (one of two, by `slot`, so the K-cycle can hold both of its
        cycles' results), overwritten by the level's next cycle of that slot."""
        if level == self.levels - 1:
            x = self.coarse.solve(r.astype(float))  # CHOLMOD answers in Fortran order
            return np.ascontiguousarray(x, dtype=SINGLE).reshape(r.shape)
        a, d, lam = self.operators[level], self.inv_diag[level], self.lam[level]
        work = tuple(self._buffer(level, name, r.shape) for name in ("d", "first", "second"))
        out = self._buffer(level, f"z{slot}", r.shape)
        z = chebyshev(a, d, r, None, lam, self.degree, self.ratio, work, out)
        t = self.transfers[level]
        coarse_shape = (t.coarse_n, r.shape[1])
        rc = t.restrict(r, _apply(a, z, work[1]), self._buffer(level + 1, "b", coarse_shape))
        if self.krylov_from <= level + 1 < self.levels - 1:
            ec = self.kcycle(rc, level + 1)
        else:
            ec = self.cycle(rc, level + 1)
        t.prolong(ec, z, add=True)
        return chebyshev(a, d, r, z, lam, self.degree, self.ratio, work)

    def kcycle(self, b: np.ndarray, level: int) -> np.ndarray:
        """Two flexible-CG steps on A x = b preconditioned by `cycle` (Notay &
        Vassilevski 2008); the second is skipped once ‖r‖ ≤ KRYLOV_SKIP ‖b‖. The
        vector work is three fused passes (vectorkernels.py): r = b − α₁ v₁ with
        its norm, the three dot products of c₂, and x = (α₁ − α₂γ/ρ₁) c₁ + α₂ c₂."""
        a = self.operators[level]
        c1 = self.cycle(b, level, 0)
        v1 = _apply(a, c1, self._buffer(level, "v1", b.shape))
        rho1 = _dots(c1, v1)
        a1 = _dots(c1, b) / rho1
        r = self._buffer(level, "r", b.shape)
        rr = vectorkernels.scaled_difference(b, v1, a1, r)
        if np.all(rr <= KRYLOV_SKIP**2 * _dots(b, b)):
            c1 *= a1.astype(SINGLE)
            return c1
        c2 = self.cycle(r, level, 1)
        ac2 = _apply(a, c2, self._buffer(level, "ac2", b.shape))
        gamma, beta, alpha2 = vectorkernels.column_dots3(c2, v1, ac2, r)
        rho2 = beta - gamma**2 / rho1
        a2 = alpha2 / rho2
        vectorkernels.combine(c1, a1 - a2 * gamma / rho1, c2, a2)
        return c1

    def precondition(self, r: np.ndarray) -> np.ndarray:
        """One cycle on r; z stays in single precision (pcg's compiled passes
        read it as it is, so no double-precision copy is made)."""
        r32 = self._buffer(0, "residual", r.shape)
        np.copyto(r32, r)
        return self.cycle(r32)

    # ------------------------------------------------------------------ solve
    def solve(self, rhs: np.ndarray) -> np.ndarray:
        b = np.array(rhs, dtype=float).reshape(len(self._fixed), -1)
        b[self._fixed] = 0.0  # a load on a support goes to the support
        x0 = None
        if self._first_solve and self._warm is not None and self._warm.shape == b.shape:
            x0 = self._warm
        x, iterations = pcg(
            self.fine, b, self.precondition, x0, self.rtol, RETRY_AFTER, flexible=True
        )
        if iterations >= RETRY_AFTER:  # a smoother past its interval: see RETRY_AFTER
            self._estimate_spectra(RETRY_POWER_STEPS, RETRY_SAFETY)
            x, more = pcg(
                self.fine, b, self.precondition, x, self.rtol, MAX_CG_ITERATIONS, flexible=True
            )
            iterations += more
        if iterations >= RETRY_AFTER + MAX_CG_ITERATIONS:
            raise FloatingPointError(
                f"multigrid-CG did not converge in {iterations} iterations "
                f"(the spectra re-estimated after the first {RETRY_AFTER})"
            )
        if self._first_solve:
            self._warm, self.iterations, self._first_solve = x, iterations, False
        out = x.copy()
        out[self._fixed] = 0.0
        return out.reshape(np.shape(rhs))

    def state(self) -> dict[str, np.ndarray]:
        out = {f"power_{i + 1}": v.copy() for i, v in enumerate(self.power_vectors)}
        if self._warm is not None:
            out["warm"] = self._warm.copy()
        return out

    def restore(self, state: dict[str, np.ndarray]) -> None:
        smoothed = self.levels - 1
        # power_0 (the fine level's, from checkpoints written before the fine
        # level took its Gershgorin bound alone) is accepted and not needed
        check_state_keys(state, ("warm",) + tuple(f"power_{i}" for i in range(smoothed)))
        self._warm = np.array(state["warm"], dtype=float) if "warm" in state else None
        power = [state.get(f"power_{i}") for i in range(1, smoothed)]
        self.power_vectors = (
            [] if any(v is None for v in power) else [np.array(v, dtype=SINGLE) for v in power]
        )
