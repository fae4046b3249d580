"""Geometric multigrid on the structured grid, as a preconditioner for CG.

After Amir, Aage & Lazarov 2014 ("On multigrid-CG for efficient topology
optimization", Struct. Multidisc. Optim. 49:815): nested grids made by merging
2×2(×2) elements, prolongation P by bilinear/trilinear interpolation of the nodal
displacements, coarse operators by the Galerkin product A_c = Pᵀ A P (formed
element by element, galerkin.py), damped Jacobi smoothing, a sparse Cholesky solve
on the coarsest grid, and one V-cycle as the preconditioner of conjugate
gradients, warm-started from the last design's displacements. The constants below
were chosen by measurement (DEVELOPERS.md, "Tuning measurements").
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from . import vectorkernels
from .cholesky import CoarseCholesky
from .galerkin import ElementGalerkin
from .linear import LinearSystem, check_state_keys
from .parallel import RowBlocks
from .stencil import StencilAssembly
from .timing import Timer

# Coarsening stops at the first level with at most this many dofs. The coarsest
# grid trades its Cholesky factorisation, redone every design iteration, against CG
# iterations: too coarse, its elements cannot carry thin members and CG needs many
# more iterations; too fine, the factorisation costs more than it saves.
# Measured: DEVELOPERS.md, "Coarsest multigrid grid (COARSE_DOFS)".
COARSE_DOFS = 20_000
# Jacobi sweeps before and after the coarse correction: one needs a few more CG
# iterations than two but less time. Measured: DEVELOPERS.md, "Smoothing sweeps".
SMOOTHING_SWEEPS = 1
# CG stops at ‖r‖ < RTOL·‖b‖. Compliance is second order in the solution error, so
# designs made with this tolerance match those made with a tighter one or the
# direct solver, for fewer CG iterations. Measured: DEVELOPERS.md, "CG tolerance".
RTOL = 1e-4
# CG gives up after this many iterations. A design iteration takes 10–40; the
# re-analysis of a thresholded printed part (void at E_min, a cold-ish start) can
# take a few hundred on an unconverged design, and is not to fail for that.
MAX_CG_ITERATIONS = 2000


def prolongation_1d(n_elements: int) -> sp.csr_matrix:
    """Linear interpolation from the coarse nodes (every other fine node, the last
    one always kept) to the n_elements + 1 fine nodes."""
    n_coarse = -(-n_elements // 2)
    pos = np.minimum(2 * np.arange(n_coarse + 1), n_elements)
    fine = np.arange(n_elements + 1)
    right = np.clip(np.searchsorted(pos, fine, side="left"), 0, n_coarse)
    left = np.maximum(right - 1, 0)
    span = np.where(right > left, pos[right] - pos[left], 1)
    w_right = np.where(right > left, (fine - pos[left]) / span, 1.0)
    exact = pos[right] == fine
    w_right = np.where(exact, 1.0, w_right)
    rows = np.concatenate([fine, fine])
    cols = np.concatenate([right, left])
    vals = np.concatenate([w_right, np.where(exact, 0.0, 1.0 - w_right)])
    p = sp.csr_matrix((vals, (rows, cols)), shape=(n_elements + 1, n_coarse + 1))
    p.eliminate_zeros()
    return p


def prolongation(shape: tuple[int, ...]) -> tuple[sp.csr_matrix, tuple[int, ...]]:
    """Dof prolongation from the coarse grid to a grid of `shape` elements (C-order
    node numbering, dim components per node), and the coarse shape."""
    dim = len(shape)
    p = prolongation_1d(shape[0])
    for n in shape[1:]:
        p = sp.kron(p, prolongation_1d(n), format="csr")
    p = sp.kron(p, sp.identity(dim, format="csr"), format="csr")
    return p, tuple(-(-n // 2) for n in shape)


class Hierarchy:
    """Grid levels over the full dof space of a grid of `shape` elements (supports
    live in the matrix as identity rows); operators refreshed per design."""

    def __init__(
        self,
        shape: tuple[int, ...],
        coarse_dofs: int = COARSE_DOFS,
        smoothing: int = SMOOTHING_SWEEPS,
    ):
        self.smoothing = smoothing
        self.transfers: list[sp.csr_matrix] = []
        level_shape = tuple(shape)
        n_dofs = len(shape) * int(np.prod([n + 1 for n in shape]))
        while n_dofs > coarse_dofs and min(level_shape) >= 2:
            p, level_shape = prolongation(level_shape)
            self.transfers.append(p)
            n_dofs = p.shape[1]
        self.operators: list[sp.csr_matrix] = []
        self.products: list[RowBlocks] = []
        self.smoother_weights: list[np.ndarray] = []  # ω D⁻¹ per smoothed level
        self.coarse = CoarseCholesky()
        self.elementwise = None  # galerkin.ElementGalerkin for the coarse levels, if set
        self.power_vectors: list[np.ndarray] = []  # last λmax eigenvector per smoothed level

    @property
    def levels(self) -> int:
        return len(self.transfers) + 1

    def update(self, a: sp.csr_matrix, moduli: np.ndarray | None = None) -> None:
        """Galerkin operators and smoother diagonals for a new fine matrix; with the
        element moduli it was assembled from and `elementwise` set, the coarse
        operators come element by element (the same matrices, several times faster)."""
        self.operators = [a]
        if self.elementwise is not None and moduli is not None:
            self.operators += self.elementwise.matrices(moduli)
        else:
            for p in self.transfers:
                a = (p.T @ (a @ p)).tocsr()
                a = ((a + a.T) * 0.5).tocsr()  # remove round-off asymmetry before Cholesky
                self.operators.append(a)
        self.products = [RowBlocks(op) for op in self.operators]  # threaded a @ x
        # Jacobi damping ω = 4 / (3 λmax(D⁻¹A)) per smoothed level (all but the
        # coarsest, which is solved directly): it damps the upper half of the
        # spectrum evenly and keeps the smoother convergent whatever the contrast.
        # The power iteration starts from the last design's eigenvector, which
        # changes little from one design to the next (DEVELOPERS.md, "Smoother
        # damping").
        smoothed = self.products[:-1]
        inv_diag = [1.0 / op.diagonal() for op in self.operators[:-1]]
        warm = len(self.power_vectors) == len(smoothed)
        estimates = [
            _lambda_max(op, d, self.power_vectors[i] if warm else None)
            for i, (op, d) in enumerate(zip(smoothed, inv_diag))
        ]
        self.smoother_weights = [
            (4.0 / (3.0 * lam)) * d[:, None] for (lam, _), d in zip(estimates, inv_diag)
        ]
        self.power_vectors = [v for _, v in estimates]
        self.coarse.factorize(self.operators[-1])

    def vcycle(self, r: np.ndarray, level: int = 0) -> np.ndarray:
        """One V-cycle for A z = r (r has one column per load case)."""
        if level == len(self.transfers):
            return self.coarse.solve(r)
        a = self.products[level]
        wd = self.smoother_weights[level]
        z = wd * r
        for _ in range(self.smoothing - 1):
            z += wd * (r - a @ z)
        p = self.transfers[level]
        z += p @ self.vcycle(p.T @ (r - a @ z), level + 1)
        for _ in range(self.smoothing):
            z += wd * (r - a @ z)
        return z


def _lambda_max(
    a, inv_diag: np.ndarray, start: np.ndarray | None = None, cold: int = 12, warm: int = 6
) -> tuple[float, np.ndarray]:
    """Largest eigenvalue of D⁻¹A by power iteration, raised 5 % as the iteration
    approaches from below, and the last iterate (normalised). Without `start` it
    runs `cold` steps from a fixed random vector (so runs are repeatable), with it
    `warm` steps.

    Entries of the unit iterate below FLUSH_BELOW are set to zero at every step.
    Warm-started from design to design, the iterate concentrates where the
    stiffest mode sits and decays geometrically elsewhere, until in single
    precision much of it is subnormal, which the processor multiplies many times
    slower: on the 5.76-million-element bracket at its 90th design 276,000 of the
    first coarse level's 2.2 million entries were, and one product took 1.78 s
    instead of 0.17 s (11.5 s of power iteration per design instead of 1)."""
    v = np.random.default_rng(0).standard_normal(a.shape[0]) if start is None else start
    v = _flushed(v / np.linalg.norm(v))
    lam = 1.0
    for _ in range(cold if start is None else warm):
        w = inv_diag * (a @ v)
        norm_w = np.linalg.norm(w)
        lam = float(norm_w / np.linalg.norm(v))
        v = _flushed(w / norm_w)
    return 1.05 * lam, v


# A unit vector's entries below this carry nothing of a Rayleigh quotient
# (their squares are < 1e-60) and stay clear of single precision's subnormal
# range (below 1.2e-38) for a few power steps.
FLUSH_BELOW = 1e-30


def _flushed(v: np.ndarray) -> np.ndarray:
    v[np.abs(v) < FLUSH_BELOW] = 0.0
    return v


def pcg(
    a,
    b: np.ndarray,
    precondition,
    x0: np.ndarray | None = None,
    rtol: float = 1e-6,
    max_iter: int = 500,
    flexible: bool = False,
) -> tuple[np.ndarray, int]:
    """Preconditioned conjugate gradients on every column of b (n, columns) at once,
    each column with its own step lengths; stops when every ‖r‖/‖b‖ < rtol.
    Returns the solution and the iterations taken. `flexible` takes
    β = zᵀ(r − r_old)/(z_oldᵀ r_old) (Polak–Ribière), which keeps CG convergent
    when the preconditioner varies slightly between applications (Notay 2000,
    "Flexible conjugate gradients", SIAM J. Sci. Comput. 22:1444).

    Once a column has converged it leaves the iteration: the product and the
    preconditioner then work on the remaining columns only (the load cases of a
    bracket converge a few iterations apart, and a product costs nearly in
    proportion to its columns). A column's own arithmetic does not depend on the
    others', except through a preconditioner that couples them (the K-cycle's
    shared decision to skip its second step)."""
    solution = np.zeros_like(b) if x0 is None else x0.copy()
    columns = np.arange(b.shape[1])  # those of `solution` that x holds
    x = solution
    r = b - a @ x
    norm_b = np.linalg.norm(b, axis=0)
    norm_b[norm_b == 0] = 1.0
    z = precondition(r)
    p = np.array(z, dtype=b.dtype)
    rz = vectorkernels.column_dots(r, z)
    rr = vectorkernels.column_dots(r, r)
    # Vector work in fused compiled passes (vectorkernels.py): at millions of dofs
    # each numpy operation is a pass over memory and a fresh temporary. The
    # product goes into one kept array where the operator can write into one.
    product = getattr(a, "product_into", None)
    ap = np.empty(b.shape, b.dtype) if product else None  # C order: its fronts are views
    for it in range(max_iter + 1):
        active = np.sqrt(rr) / norm_b >= rtol
        if not active.any() or it == max_iter:
            break
        if not active.all():  # keep the unconverged columns only, contiguous
            solution[:, columns] = x
            columns = columns[active]
            x, r, p = (np.ascontiguousarray(v[:, active]) for v in (x, r, p))
            rz, rr, norm_b = rz[active], rr[active], norm_b[active]
            if product:  # the front of the kept product array: no fresh pages
                ap = ap.reshape(-1)[: x.size].reshape(x.shape)
            active = active[active]
        ap = product(p, ap) if product else a @ p
        pap = vectorkernels.column_dots(p, ap)
        alpha = np.where(active, rz / np.where(active, pap, 1.0), 0.0)
        rr = vectorkernels.cg_update(x, r, p, ap, alpha)
        z = precondition(r)
        rz_new, apz = vectorkernels.cg_dots(r, ap, z)
        # flexible: zᵀ(r − r_old) = −α (A p)ᵀ z, as r = r_old − α A p: no copy of r_old
        numerator = -alpha * apz if flexible else rz_new
        beta = np.where(active, numerator / np.where(active, rz, 1.0), 0.0)
        vectorkernels.cg_direction(p, z, beta)
        rz = rz_new
    solution[:, columns] = x
    return solution, it


class MultigridCG(LinearSystem):
    """CG preconditioned by one multigrid V-cycle on the full dof space (supports
    as identity rows, see stencil.py), so every level is a whole structured grid.
    The fine matrix comes by node stencils, the coarse ones element by element
    (galerkin.py).

    The first solve after an assemble is the load-case solve: it starts from the
    previous design's load-case solution and its CG iterations are `iterations`.
    Later solves with the same matrix (adjoint right-hand sides) start from zero.
    The state is that warm start and the smoothers' power-iteration vectors, so a
    run resumed from a checkpoint repeats the uninterrupted one exactly."""

    def __init__(
        self,
        grid,
        ke: np.ndarray,
        fixed: np.ndarray,
        rtol: float = RTOL,
        coarse_dofs: int = COARSE_DOFS,
    ):
        self._fixed = fixed
        self._assembly = StencilAssembly(grid, ke, fixed)
        self.hierarchy = Hierarchy(grid.shape, coarse_dofs)
        self.hierarchy.elementwise = ElementGalerkin(grid, ke, fixed, len(self.hierarchy.transfers))
        self.rtol = rtol
        self.iterations: int | None = None
        self.name = f"multigrid-cg ({self.hierarchy.levels} levels)"
        self._warm: np.ndarray | None = None
        self._first_solve = False

    def assemble(self, moduli: np.ndarray, timer: Timer | None = None) -> None:
        timer = timer or Timer()
        with timer("assembly"):
            a = self._assembly.matrix(moduli)
        with timer("solve"):
            self.hierarchy.update(a, moduli)
        self._first_solve = True

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        b = np.array(rhs, dtype=float).reshape(len(self._fixed), -1)
        b[self._fixed] = 0.0  # a load on a support goes to the support
        x0 = None
        if self._first_solve and self._warm is not None and self._warm.shape == b.shape:
            x0 = self._warm
        x, iterations = pcg(
            self.hierarchy.products[0], b, self.hierarchy.vcycle, x0, self.rtol, MAX_CG_ITERATIONS
        )
        if iterations >= MAX_CG_ITERATIONS:
            raise FloatingPointError(
                f"multigrid-CG did not converge in {MAX_CG_ITERATIONS} iterations"
            )
        if self._first_solve:
            self._warm, self.iterations, self._first_solve = x, iterations, False
        out = x.copy()  # the warm start keeps CG's own (near-zero) values on the supports
        out[self._fixed] = 0.0
        return out.reshape(np.shape(rhs))

    def state(self) -> dict[str, np.ndarray]:
        out = {f"power_{i}": v.copy() for i, v in enumerate(self.hierarchy.power_vectors)}
        if self._warm is not None:
            out["warm"] = self._warm.copy()
        return out

    def restore(self, state: dict[str, np.ndarray]) -> None:
        smoothed = self.hierarchy.levels - 1
        check_state_keys(state, ("warm",) + tuple(f"power_{i}" for i in range(smoothed)))
        self._warm = np.array(state["warm"], dtype=float) if "warm" in state else None
        power = [state.get(f"power_{i}") for i in range(smoothed)]
        self.hierarchy.power_vectors = (
            [] if any(v is None for v in power) else [np.array(v) for v in power]
        )
