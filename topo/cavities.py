"""Enclosed voids kept out of the design: the virtual temperature method.

Powder left in a void that does not reach the outside cannot be removed after
the build. Following Liu, Li, Chen, Tong & Cheng (2015, "An identification
method for enclosed voids restriction in manufacturability design for additive
manufacturing structures", Front. Mech. Eng. 10:126–137) and Li, Chen, Liu &
Tong (2016, "Structural topology optimization considering connectivity
constraint", Struct. Multidisc. Optim. 54:971–984) — both recalled from memory —
a fictitious steady heat-conduction problem is solved on the design grid, with
void a good conductor that carries a heat source and solid a poor conductor
without one:

    κ_e = ε + (1 − ε)(1 − ρ_e)^q,     s_e = 1 − ρ_e,

(ε = CONTRAST/n² for n elements along the longest axis, q = PENALTY), and T = 0
outside the domain, where powder escapes. Heat made in a void joined to the
outside through void flows out easily; heat made in a void closed in by solid
must cross the solid, so that void heats up by a factor of about 1/ε. The
constraint bounds the p-norm of the temperatures against that of the reference
design with every design element empty (open by construction; passive regions
as they are):

    P(ρ) / P_ref ≤ bound,   P = (Σ_e T_e^p)^(1/p).

Discretisation: one temperature per element (cell-centred finite volumes with
two-point fluxes), so heat passes only through the faces elements share, as
powder does, and as the flood fill of the enclosed-cavity check joins voids
(integrity.py). A nodal (Q4/H8) discretisation lets two voids that touch at a
single edge share nodes and exchange heat freely, and a closed cavity with such
an edge contact reads as open. The conductance of a face between elements e and
f of unit size is the harmonic mean 2κ_eκ_f/(κ_e + κ_f); a face on the domain
boundary conducts 2κ_e to T = 0 half an element away. A passive solid on a face
of the domain therefore blocks the escape there, as it does for powder.

The matrix is symmetric, so the gradient takes one adjoint solve, K λ = ∂P/∂T:

    dP/dρ_e = λ_e ∂s_e/∂ρ_e − λᵀ (∂K/∂ρ_e) T.

Up to DIRECT_CELLS elements the scalar system is solved by sparse Cholesky
(CHOLMOD); beyond, by CG preconditioned with an aggregation multigrid V-cycle
(blocks of 2×2×2 cells, Galerkin coarse matrices), warm-started. Plain Jacobi-CG
was tried and dropped: a closed cavity is a near-null mode of the matrix
(eigenvalue of order ε), and with ‖r‖/‖b‖ < 1e-9 the p-norm of a design with
closed pockets was still 2–12 % off; the coarse levels carry those modes
(DEVELOPERS.md, "Virtual temperature solve").
Temperatures are nondimensional: lengths in elements, unit source, unit void
conductivity.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .cholesky import SparseCholesky

# ε = κ_solid / κ_void = CONTRAST / n², n the most elements along an axis: a closed
# void of one element runs about 1/(4dε) hot, the open reference at most about n²/8
# (the Poisson solution of a slab), so scaling ε with n² keeps a closed void at
# least ~500 times hotter than the reference on any grid
CONTRAST = 1e-3
PENALTY = 3.0  # q, as SIMP's exponent, on the void fraction 1 − ρ
P_NORM = 8.0  # the aggregate sees a small hot cavity among many cool elements
# more elements: multigrid-CG (measured: DEVELOPERS.md, "Virtual temperature solve")
DIRECT_CELLS = 10_000
COARSE_CELLS = 8_000  # the coarsest aggregation level, solved by Cholesky
CG_RTOL = 1e-10  # a closed cavity is a near-null mode: a loose residual misses its heat
CG_LIMIT = 2000


class FaceConduction:
    """K(κ) = Σ_faces G_ef (e_e − e_f)(e_e − e_f)ᵀ + Σ_boundary faces 2κ_e e_e e_eᵀ on
    a structured grid of `shape` unit cells, with a fixed sparsity pattern."""

    def __init__(self, shape: tuple[int, ...]):
        self.shape = tuple(shape)
        n = int(np.prod(shape))
        index = np.arange(n).reshape(shape)
        pairs = []
        for axis in range(len(shape)):
            lo = np.take(index, range(shape[axis] - 1), axis=axis).ravel()
            hi = np.take(index, range(1, shape[axis]), axis=axis).ravel()
            pairs.append((lo, hi))
        self.left = np.concatenate([p[0] for p in pairs])
        self.right = np.concatenate([p[1] for p in pairs])
        # boundary faces per element: 2 per axis along which the grid is one cell
        # thick, else 1 on the first and last layers
        idx = np.indices(shape).reshape(len(shape), -1)
        last = np.array(shape)[:, None] - 1
        self.boundary_faces = ((idx == 0).astype(int) + (idx == last)).sum(axis=0)
        rows = np.concatenate([self.left, self.right, np.arange(n)])
        cols = np.concatenate([self.right, self.left, np.arange(n)])
        pattern = sp.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
        pattern.sort_indices()
        self.indptr, self.indices = pattern.indptr, pattern.indices
        # where each face's off-diagonal entries and each diagonal sit in the data
        self._off_lr = self._slot(self.left, self.right)
        self._off_rl = self._slot(self.right, self.left)
        self._diag = self._slot(np.arange(n), np.arange(n))
        self.n = n

    def _slot(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        starts = self.indptr[rows]
        width = self.indptr[rows + 1] - starts
        out = np.empty(len(rows), dtype=np.int64)
        for k in range(int(width.max(initial=0))):  # at most 2·dim + 1 entries a row
            at = np.minimum(starts + k, len(self.indices) - 1)
            hit = (k < width) & (self.indices[at] == cols)
            out[hit] = (starts + k)[hit]
        return out

    def conductances(self, kappa: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Face conductances G (harmonic means) and their derivatives with respect to
        the left and the right element's κ."""
        a, b = kappa[self.left], kappa[self.right]
        s = a + b
        return 2.0 * a * b / s, 2.0 * b**2 / s**2, 2.0 * a**2 / s**2

    def matrix(self, kappa: np.ndarray) -> sp.csr_matrix:
        g = self.conductances(kappa)[0]
        diag = 2.0 * kappa * self.boundary_faces
        diag += np.bincount(self.left, g, self.n) + np.bincount(self.right, g, self.n)
        data = np.zeros(len(self.indices))
        data[self._off_lr] = -g
        data[self._off_rl] = -g
        data[self._diag] = diag
        return sp.csr_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))

    def product_derivative(self, kappa: np.ndarray, lam: np.ndarray, t: np.ndarray) -> np.ndarray:
        """λᵀ (∂K/∂κ_e) T for every element e."""
        _, d_left, d_right = self.conductances(kappa)
        jump = (lam[self.left] - lam[self.right]) * (t[self.left] - t[self.right])
        out = 2.0 * self.boundary_faces * lam * t
        out += np.bincount(self.left, d_left * jump, self.n)
        out += np.bincount(self.right, d_right * jump, self.n)
        return out


def aggregation(shape: tuple[int, ...]) -> tuple[sp.csr_matrix, tuple[int, ...]]:
    """Piecewise-constant prolongation from blocks of 2×2(×2) cells (one cell at
    the end of an odd axis) to the cells of a grid of `shape`, and the block grid."""
    p = None
    for n in shape:
        axis = sp.csr_matrix((np.ones(n), (np.arange(n), np.arange(n) // 2)))
        p = axis if p is None else sp.kron(p, axis, format="csr")
    return p, tuple(-(-n // 2) for n in shape)


class AggregationMultigrid:
    """A symmetric V-cycle as the preconditioner of CG: nested aggregates of 2×2(×2)
    cells, coarse matrices PᵀAP (Galerkin), one damped Jacobi sweep before and after
    each coarse correction, Cholesky on the coarsest level. The Galerkin matrices
    of an M-matrix stay M-matrices with λmax(D⁻¹A) ≤ 2, so ω = 2/3 smooths safely
    (Trottenberg, Oosterlee & Schüller, Multigrid, 2001, §2.1 and §A.4: damped
    Jacobi and algebraic aggregation; from memory)."""

    def __init__(self, shape: tuple[int, ...], coarse_cells: int | None = None):
        coarse_cells = coarse_cells or COARSE_CELLS
        self.transfers = []
        while int(np.prod(shape)) > coarse_cells and min(shape) >= 2:
            p, shape = aggregation(shape)
            self.transfers.append(p)
        self.coarse = SparseCholesky()

    def update(self, a: sp.csr_matrix) -> None:
        self.operators = [a]
        for p in self.transfers:
            self.operators.append((p.T @ self.operators[-1] @ p).tocsr())
        self.weights = [(2.0 / 3.0) / op.diagonal()[:, None] for op in self.operators[:-1]]
        lower = sp.tril(self.operators[-1]).tocsc()
        lower.sort_indices()
        self.coarse.factorize(lower)  # the pattern is the same for every design

    def vcycle(self, r: np.ndarray, level: int = 0) -> np.ndarray:
        if level == len(self.transfers):
            return self.coarse.solve(r)
        a, w, p = self.operators[level], self.weights[level], self.transfers[level]
        z = w * r
        z += p @ self.vcycle(p.T @ (r - a @ z), level + 1)
        return z + w * (r - a @ z)


class ThermalSystem:
    """K T = b for one design: sparse Cholesky (CHOLMOD, its symbolic analysis reused:
    the pattern is the same for every design) up to DIRECT_CELLS unknowns, CG with
    the aggregation V-cycle beyond, warm-started from the last temperatures."""

    def __init__(self, conduction: FaceConduction, method: str = "auto"):
        self.conduction = conduction
        if method == "auto":
            method = "direct" if conduction.n <= DIRECT_CELLS else "iterative"
        self.method = method
        self.iterations: int | None = None
        self._warm: np.ndarray | None = None
        if method == "direct":
            self._cholesky = SparseCholesky()
        else:
            self.multigrid = AggregationMultigrid(conduction.shape)

    def assemble(self, kappa: np.ndarray) -> None:
        a = self.conduction.matrix(kappa)
        if self.method == "direct":
            lower = sp.tril(a).tocsc()
            lower.sort_indices()
            self._cholesky.factorize(lower)
            return
        self.multigrid.update(a)
        self._first = True

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        if self.method == "direct":
            return self._cholesky.solve(rhs)
        from .multigrid import pcg

        start = self._warm if self._first and self._warm is not None else None
        a = self.multigrid.operators[0]
        x, iterations = pcg(a, rhs[:, None], self.multigrid.vcycle, start, CG_RTOL, CG_LIMIT)
        if iterations >= CG_LIMIT:
            raise FloatingPointError(
                f"the virtual-temperature CG did not converge in {CG_LIMIT} iterations"
            )
        if self._first:
            self._warm, self.iterations, self._first = x.copy(), iterations, False
        return x[:, 0]

    def state(self) -> dict:
        return {} if self._warm is None else {"warm": self._warm.copy()}

    def restore(self, state: dict) -> None:
        warm = state.get("warm")
        self._warm = None if warm is None else np.array(warm, dtype=float)


def p_norm(t: np.ndarray, p: float = P_NORM) -> tuple[float, np.ndarray]:
    """(Σ |t_i|^p)^(1/p) and its gradient, scaled by the largest |t_i| so that a
    hot cavity does not overflow."""
    top = float(np.max(np.abs(t)))
    if top == 0.0:
        return 0.0, np.zeros_like(t)
    value = top * float(np.sum((np.abs(t) / top) ** p)) ** (1.0 / p)
    return value, np.sign(t) * (np.abs(t) / value) ** (p - 1.0)


class VirtualTemperature:
    """The virtual temperature field of a design on a grid of `shape` elements and
    its p-norm aggregate P(ρ)."""

    def __init__(self, shape: tuple[int, ...], method: str = "auto"):
        self.conduction = FaceConduction(shape)
        self.system = ThermalSystem(self.conduction, method)
        self.contrast = CONTRAST / max(shape) ** 2

    def conductivity(self, rho: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """κ(ρ) and dκ/dρ."""
        void, eps = np.clip(1.0 - rho, 0.0, 1.0), self.contrast
        kappa = eps + (1.0 - eps) * void**PENALTY
        return kappa, -PENALTY * (1.0 - eps) * void ** (PENALTY - 1.0)

    def temperature(self, rho: np.ndarray) -> np.ndarray:
        """Temperatures of the design ρ, one per element (flat, C order)."""
        rho = np.asarray(rho, dtype=float).ravel()
        self.system.assemble(self.conductivity(rho)[0])
        return self.system.solve(np.clip(1.0 - rho, 0.0, 1.0))

    def aggregate(
        self, rho: np.ndarray, gradient: bool = True
    ) -> tuple[float, np.ndarray | None, np.ndarray]:
        """P(ρ), dP/dρ (None without `gradient`) and the temperatures."""
        rho = np.asarray(rho, dtype=float).ravel()
        t = self.temperature(rho)
        value, dp_dt = p_norm(t)
        if not gradient:
            return value, None, t
        lam = self.system.solve(dp_dt)
        kappa, dkappa = self.conductivity(rho)
        # ∂s_e/∂ρ_e = −1 and ∂K/∂ρ_e = κ'(ρ_e) ∂K/∂κ_e (ρ stays within [0, 1])
        return value, -lam - dkappa * self.conduction.product_derivative(kappa, lam, t), t


def unavoidable_cavities(solid: np.ndarray) -> np.ndarray:
    """Mask of the elements (grid shape) that no design can open: regions closed in
    by `solid` (the passive solids) alone, found by a face-connected flood fill of
    everything else from the domain boundary."""
    from scipy import ndimage

    free = ~np.asarray(solid, dtype=bool)
    labels, _ = ndimage.label(free)
    border = np.zeros_like(free)
    for axis in range(free.ndim):
        index = [slice(None)] * free.ndim
        for end in (0, -1):
            index[axis] = end
            border[tuple(index)] = True
    return free & ~np.isin(labels, np.unique(labels[border & free]))
