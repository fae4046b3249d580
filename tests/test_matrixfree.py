"""The matrix-free operator, its coarse Galerkin stencils and grid transfers against
assembled sparse matrices (scipy), and the kernels' element figures against plain
numpy products."""

import numpy as np
import pytest

from problems import add_point_load, bars_in_void, beam_problem
from topo import kernels
from topo.coarsening import CoarseLevel
from topo.fem import Model
from topo.grid import Grid
from topo.matrixfree import StencilOperator
from topo.multigrid import Hierarchy, prolongation, prolongation_1d
from topo.problem import problem_from_dict
from topo.stencil import StencilAssembly


def model_with_point_support(size):
    # a face support and a point support on a fine node that is not a coarse node
    d = beam_problem(3, size, 1.0, solver="iterative")
    d["support"].append({"region": {"point": [3.0, 1.0, 1.0]}, "fix": ["y"]})
    return Model(problem_from_dict(d))


def stencil_matrix(node_shape, stencil):
    grid = Grid(tuple(n - 1 for n in node_shape), 1.0)
    return StencilAssembly(grid, None, np.zeros(grid.n_dofs, bool))._csr(
        np.ascontiguousarray(stencil, dtype=float).reshape(grid.n_dofs, -1).copy()
    )


@pytest.mark.parametrize(
    "shape",
    # even and odd slab counts (the two colours, the last node plane), a single
    # slab, a single element along z
    [(6, 5, 4), (7, 3, 5), (5, 7, 3), (1, 2, 3), (4, 3, 1)],
)
# node positions per run: one line at a time, several lines with a partial last
# run (ny not a multiple of the lines per run), every line of a slab in one run
@pytest.mark.parametrize("positions", [1, 7, 13, 200])
def test_element_product_equals_the_assembled_matrix(shape, positions, monkeypatch):
    # scipy's CSR product with the node-stencil matrix (supports as identity rows)
    monkeypatch.setattr(kernels, "BLOCK_POSITIONS", positions)
    grid = Grid(shape, 1.0)
    from topo.elements import element_stiffness

    ke = element_stiffness(3, 1.0, 0.3)
    rng = np.random.default_rng(0)
    e = rng.uniform(1e-3, 1.0, grid.n_elements)
    fixed = np.zeros(grid.n_dofs, bool)
    fixed[rng.choice(grid.n_dofs, 20, replace=False)] = True
    a = StencilAssembly(grid, ke, fixed).matrix(e)
    u = rng.standard_normal((grid.n_dofs, 2))
    free = (~fixed).astype(float)
    y = kernels.element_product(u, e, ke, free, shape, np.empty_like(u))
    assert np.abs(y - a @ u).max() <= 1e-13 * np.abs(a @ u).max()
    d = kernels.element_diagonal(e, ke, free, shape, np.empty(grid.n_dofs))
    assert np.abs(d - a.diagonal()).max() <= 1e-14 * np.abs(d).max()
    # single precision: to its round-off
    f = np.float32
    y32 = kernels.element_product(
        u.astype(f), e.astype(f), ke.astype(f), free.astype(f), shape, np.empty(u.shape, f)
    )
    assert np.abs(y32 - a @ u).max() <= 1e-5 * np.abs(a @ u).max()


def test_modal_form_rebuilds_the_element_matrix_and_is_sparse():
    # k0 = B C Bᵀ with B the ±1 corner values of the eight modes (the Walsh–
    # Hadamard basis of the trilinear element). For the isotropic cube the
    # constant modes are rigid and the linear, bilinear and trilinear modes
    # decouple (their derivatives are orthogonal polynomials on the cube), so C
    # is block-diagonal and mostly zero: at most 48 of its 576 entries.
    from topo.elements import element_stiffness
    from topo.grid import H8_CORNERS

    for nu in (0.0, 0.3, 0.45):
        ke = element_stiffness(3, 2.0, nu, 7.0)
        ptr, idx, val = kernels.modal_form(ke)
        c = np.zeros((24, 24))
        for r in range(24):
            c[r, idx[ptr[r] : ptr[r + 1]]] = val[ptr[r] : ptr[r + 1]]
        sign = 2.0 * H8_CORNERS - 1.0
        powers = [((q >> 2) & 1, (q >> 1) & 1, q & 1) for q in range(8)]
        phi = np.array([[np.prod(sign[a] ** np.array(p)) for p in powers] for a in range(8)])
        b = np.kron(phi, np.eye(3))
        assert np.abs(b @ c @ b.T - ke).max() <= 1e-13 * np.abs(ke).max()
        assert len(val) <= 48
        assert np.all(c[:3] == 0) and np.all(c[:, :3] == 0)  # translations are rigid


def test_element_energies_and_values_equal_dense_products():
    from topo.elements import centre_strain_displacement, element_stiffness

    shape = (4, 3, 5)
    grid = Grid(shape, 2.0)
    ke = element_stiffness(3, 2.0, 0.3)
    u = np.random.default_rng(1).standard_normal((grid.n_dofs, 2))
    ue = u[grid.element_dofs]  # (ne, 24, 2), numpy fancy indexing
    energies = kernels.element_energies(u, ke, shape, np.empty((grid.n_elements, 2)))
    assert np.allclose(energies, np.einsum("eic,ij,ejc->ec", ue, ke, ue), rtol=1e-13)
    b = centre_strain_displacement(3, 2.0)
    values = kernels.element_values(u, b, shape, np.empty((grid.n_elements, 6, 2)))
    assert np.allclose(values, np.einsum("si,eic->esc", b, ue), rtol=1e-13, atol=1e-15)


@pytest.mark.parametrize("shape", [(6, 4, 5), (9, 5, 7), (1, 3, 2), (7, 3, 1), (1, 1, 1)])
@pytest.mark.parametrize("columns", [1, 3])
@pytest.mark.parametrize("dtype, tol", [(np.float64, 1e-13), (np.float32, 1e-6)])
def test_transfers_equal_the_sparse_prolongation(shape, columns, dtype, tol):
    # against scipy's assembled prolongation P (Kronecker products)
    p, coarse = prolongation(shape)
    factors = [prolongation_1d(n).astype(dtype) for n in shape]
    rows = [f.T.tocsr() for f in factors]
    rng = np.random.default_rng(2)
    uc = rng.standard_normal((p.shape[1], columns))
    uf = rng.standard_normal((p.shape[0], columns))
    ff = rng.standard_normal(uf.shape)

    def close(ours, ref):
        return np.abs(ours - ref).max() <= tol * max(np.abs(ref).max(), 1.0)

    fine = kernels.tensor_apply(factors, uc.astype(dtype), np.empty((p.shape[0], columns), dtype))
    assert close(fine, p @ uc)
    back = kernels.tensor_apply(rows, uf.astype(dtype), np.empty((p.shape[1], columns), dtype))
    assert close(back, p.T @ uf)
    # one kept pair of work arrays, filled with NaN first (a value read before it
    # is written shows), serves both directions; the residual formed in the
    # restriction's first pass and the prolongation added to a vector
    scratch = tuple(
        np.full_like(a, np.nan) for a in kernels.transfer_scratch(factors, columns, dtype)
    )
    restricted = kernels.tensor_apply(
        rows, uf.astype(dtype), np.empty((p.shape[1], columns), dtype), scratch, ff.astype(dtype)
    )
    assert close(restricted, p.T @ (uf - ff))
    start = ff.astype(dtype)
    kernels.tensor_apply(factors, uc.astype(dtype), start, scratch, add=True)
    assert close(start, ff + p @ uc)
    with pytest.raises(ValueError, match="C-contiguous"):
        kernels.tensor_apply(factors, uc, np.empty((p.shape[0], columns + 1))[:, :columns])


def test_every_level_transfer_halves_each_axis():
    # tensor_apply tells a restriction from a prolongation by size, and the
    # scratch sizes assume the coarse grid is the smaller one along every axis
    from topo.matrixfree import level_shapes

    for shape in [(n, m, k) for n in range(1, 20, 3) for m in range(1, 12, 2) for k in (1, 2, 7)]:
        for coarse_dofs in (30, 300, 3000):
            shapes = level_shapes(shape, coarse_dofs)
            for fine, coarse in zip(shapes, shapes[1:]):
                assert all(c < f for c, f in zip(coarse, fine)), (shape, fine, coarse)


@pytest.mark.parametrize("skip", [0.0, 1e9])  # the K-cycle's second step always / never
def test_kept_cycle_arrays_give_what_fresh_ones_give(monkeypatch, skip):
    # Every vector of the cycles is kept and reused. A cycle that overwrote one
    # still in use would not match one handed fresh NaN-filled arrays (where a
    # value read before it is written shows as NaN). Four levels, so the K-cycle
    # nests; column counts change between calls, as between load-case and
    # adjoint solves and as pcg drops converged columns; arrays kept for more
    # columns serve fewer. Flexible CG would absorb such a fault in a solve (only
    # more iterations), so the cycle itself is compared, bit for bit.
    from topo import matrixfree
    from topo.matrixfree import MatrixFreeCG

    monkeypatch.setattr(matrixfree, "KRYLOV_SKIP", skip)
    d = beam_problem(3, [16.0, 8.0, 8.0], 1.0)
    model = Model(
        problem_from_dict(d),
        system_factory=lambda g, ke, f: MatrixFreeCG(g, ke, f, rtol=1e-6, coarse_dofs=30),
    )
    model.analyze(bars_in_void())
    system = model.system
    assert system.levels >= 4
    rng = np.random.default_rng(1)
    rhs = [rng.standard_normal((system.fine.shape[0], c)) for c in (3, 1, 3, 2)]
    kept = [np.array(system.precondition(r), dtype=float) for r in rhs]
    # the levels' vectors and the fine product's work arrays (fronts of kept arrays)
    monkeypatch.setattr(
        matrixfree, "_front", lambda kept, key, shape, dtype: np.full(shape, np.nan, dtype)
    )
    for t in system.transfers:
        monkeypatch.setattr(
            t,
            "_work",
            lambda x, t=t: tuple(
                np.full_like(a, np.nan)
                for a in kernels.transfer_scratch(t._p32, x.shape[1], x.dtype)
            ),
        )
    fresh = [np.array(system.precondition(r), dtype=float) for r in rhs]
    for a, b in zip(kept, fresh):
        assert np.all(np.isfinite(b)) and np.array_equal(a, b)


@pytest.mark.parametrize("size", [[16.0, 8.0, 8.0], [15.0, 7.0, 9.0]])
def test_coarse_stencils_equal_the_sparse_triple_products(size):
    # every level against scipy's Pᵀ A P one level at a time (multigrid.Hierarchy
    # without the element-by-element shortcut), odd sizes and a point support
    m = model_with_point_support(size)
    e = m.moduli(np.random.default_rng(4).uniform(1e-3, 1.0, m.grid.n_elements))
    sparse = Hierarchy(m.grid.shape, coarse_dofs=100)
    assert sparse.levels >= 3
    sparse.update(StencilAssembly(m.grid, m.ke, m._fixed).matrix(e))
    for level, ref in enumerate(sparse.operators[1:], start=1):
        coarse = CoarseLevel(m.grid.shape, m.ke, m._fixed, level)
        ours = stencil_matrix(coarse.node_shape, coarse.stencil(e))
        assert abs(ours - ref).max() <= 1e-12 * abs(ref).max()
        # the stencil product equals the CSR product, for one and three columns,
        # in double and (to its round-off) single precision; the diagonal too
        stencil = coarse.stencil(e)
        op = StencilOperator(stencil, coarse.node_shape)
        assert np.abs(op.diagonal() - ref.diagonal()).max() <= 1e-12 * abs(ref).max()
        single = StencilOperator(stencil.astype(np.float32), coarse.node_shape)
        for columns in (1, 3):
            u = np.random.default_rng(level).standard_normal((ref.shape[0], columns))
            y = kernels.stencil_product(stencil, u, coarse.node_shape, np.empty_like(u))
            assert np.allclose(y, ref @ u, rtol=0, atol=1e-12 * np.abs(ref @ u).max())
            y32 = single @ u.astype(np.float32)
            assert np.abs(y32 - ref @ u).max() <= 1e-5 * np.abs(ref @ u).max()


def test_chebyshev_smoother_follows_the_chebyshev_polynomial():
    # On A = diag(λ) with D = I, the smoother started from zero leaves the error
    # e = p(A) e0 with p(λ) = T_k((θ − λ)/δ) / T_k(θ/δ) on [λmax/ratio, λmax]
    # (Saad, Iterative Methods for Sparse Linear Systems, §12.1); T_k from numpy's
    # Chebyshev module.
    from numpy.polynomial import chebyshev as cheb

    from topo.matrixfree import chebyshev

    lam = np.linspace(0.01, 2.0, 40).astype(np.float32)
    a = np.diag(lam)
    x_true = np.random.default_rng(0).standard_normal((40, 1)).astype(np.float32)
    r = a @ x_true
    ones = np.ones((40, 1), np.float32)
    for degree in (1, 2, 3, 4):
        x = chebyshev(a, ones, r, None, 2.0, degree, 10.0)
        upper, lower = 2.0, 0.2
        theta, delta = (upper + lower) / 2, (upper - lower) / 2
        t_k = [0] * degree + [1]
        p = cheb.chebval((theta - lam) / delta, t_k) / cheb.chebval(theta / delta, t_k)
        assert np.allclose((x_true - x)[:, 0], p * x_true[:, 0], atol=1e-5)
    # from a start: the same polynomial acts on the start's error
    x0 = np.zeros_like(x_true) + 0.5
    x = chebyshev(a, ones, r, x0.copy(), 2.0, 2, 10.0)  # updates its start in place
    p = cheb.chebval((theta - lam) / delta, [0, 0, 1]) / cheb.chebval(theta / delta, [0, 0, 1])
    assert np.allclose((x_true - x)[:, 0], p * (x_true - x0)[:, 0], atol=1e-5)


@pytest.mark.parametrize("rtol", [1e-6, 1e-4])
def test_matrix_free_and_direct_agree_with_high_contrast(rtol):
    # solid bars in void (ρ = 1 or 1e-3), two load cases, several levels
    from topo.matrixfree import MatrixFreeCG

    d = beam_problem(3, [16.0, 8.0, 8.0], 1.0)
    add_point_load(d, "twist", [16.0, 8.0, 8.0], [0.0, 1.0, 0.5])
    rho = bars_in_void()
    direct = Model(problem_from_dict(d, {"optimization.solver": "direct"})).analyze(rho)
    model = Model(
        problem_from_dict(d),
        system_factory=lambda g, ke, f: MatrixFreeCG(g, ke, f, rtol=rtol, coarse_dofs=300),
    )
    ours = model.analyze(rho)
    assert model.system.levels >= 3 and model.system.iterations > 1
    err = np.linalg.norm(ours.displacements - direct.displacements, axis=0)
    ref = np.linalg.norm(direct.displacements, axis=0)
    c_err = np.abs(ours.compliances - direct.compliances) / direct.compliances
    # The error in u stays below the residual tolerance; flexible CG is not
    # exactly a Galerkin method, so its compliance error is not held to rtol² as
    # plain CG's is (test_multigrid.py), only to rtol.
    assert np.all(err / ref < rtol)
    assert np.all(c_err < rtol)
    # element energies and stresses of the compiled loops against numpy's
    ue = ours.displacements[model.grid.element_dofs]
    assert np.allclose(ours.energies, np.einsum("eic,ij,ejc->ec", ue, model.ke, ue), rtol=1e-12)
    assert np.allclose(ours.von_mises, model._von_mises(ue), rtol=1e-12)


def _product_sum(queue=None):
    from topo.elements import element_stiffness

    shape = (4, 3, 2)
    n = 3 * 5 * 4 * 3
    u = np.linspace(0.0, 1.0, n)[:, None]
    y = kernels.element_product(
        u, np.ones(24), element_stiffness(3, 1.0, 0.3), np.ones(n), shape, np.empty_like(u)
    )
    total = float(np.abs(y).sum())
    if queue is not None:
        queue.put(total)
    return total


def test_a_process_forked_after_a_parallel_kernel_can_run_kernels():
    # GNU OpenMP aborts such a child; sweeps and benchmarks fork
    import multiprocessing as mp

    here = _product_sum()
    ctx = mp.get_context("fork")
    queue = ctx.Queue()
    child = ctx.Process(target=_product_sum, args=(queue,))
    child.start()
    there = queue.get(timeout=300)
    child.join(timeout=60)
    assert child.exitcode == 0
    assert there == here


def test_gershgorin_bound_lies_above_the_largest_eigenvalue():
    """FineOperator.gershgorin_bound against the dense eigenvalues of D⁻¹A (numpy),
    on a 0/1-like design with void at 1e-9 and a clamped face; Gershgorin's circle
    theorem makes it an upper bound, and on the hexahedral element it is close."""
    from topo.elements import element_stiffness
    from topo.matrixfree import FineOperator

    shape = (4, 3, 3)
    grid = Grid(shape, 1.0)
    ke = element_stiffness(3, 1.0, 0.3, 1.0, 1.0)
    fixed = np.zeros(grid.n_dofs, bool)
    fixed[: 3 * 4 * 4] = True  # the x = 0 face
    rng = np.random.default_rng(3)
    op = FineOperator(shape, ke, fixed)
    op.set_moduli(np.where(rng.random(grid.n_elements) < 0.5, 1.0, 1e-9))
    a = op @ np.eye(grid.n_dofs)
    d = op.diagonal(float)
    lam = np.linalg.eigvalsh(a / np.sqrt(np.outer(d, d))).max()
    bound = op.gershgorin_bound()
    assert lam <= bound * (1 + 1e-12)
    assert bound < 2.0 * lam


def test_a_stalled_solve_restarts_with_cold_spectra(monkeypatch):
    """A smoother whose λmax estimate is far too low (as a warm power iteration can
    leave it when the design moves its stiffest modes) makes the cycle a poor
    preconditioner; the solve must notice, re-estimate cold and still agree with
    the direct solution (scipy/CHOLMOD through the direct path). A sound estimate
    must not trigger the re-estimate."""
    from topo import matrixfree
    from topo.matrixfree import MatrixFreeCG

    d = beam_problem(3, [16.0, 8.0, 8.0], 1.0)
    rho = bars_in_void()
    rho2 = np.where(rho > 0.5, 1.0, 0.3)  # a second design: no warm start at its solution
    direct = Model(problem_from_dict(d, {"optimization.solver": "direct"})).analyze(rho2)
    calls = []
    estimate = MatrixFreeCG._estimate_spectra

    def spy(self, cold_steps=0, safety=matrixfree.LAMBDA_SAFETY):
        estimate(self, cold_steps, safety)
        calls.append(cold_steps)
        if not cold_steps and spoil[0]:  # the too-low warm estimate
            self.lam = [0.3 * lam for lam in self.lam]

    monkeypatch.setattr(MatrixFreeCG, "_estimate_spectra", spy)
    monkeypatch.setattr(matrixfree, "RETRY_AFTER", 100)
    model = Model(
        problem_from_dict(d),
        system_factory=lambda g, ke, f: MatrixFreeCG(g, ke, f, rtol=1e-6, coarse_dofs=300),
    )
    spoil = [False]
    model.analyze(rho)
    assert calls == [0] and model.system.iterations < 100  # sound: no re-estimate (73)
    spoil[0] = True
    ours = model.analyze(rho2)
    assert calls == [0, 0, matrixfree.RETRY_POWER_STEPS]
    assert model.system.iterations > 100
    err = np.linalg.norm(ours.displacements - direct.displacements, axis=0)
    assert np.all(err / np.linalg.norm(direct.displacements, axis=0) < 1e-6)


def test_power_iteration_keeps_single_precision_clear_of_subnormals():
    """A warm power vector concentrated on one end of the grid (its tail decaying into
    single precision's subnormal range, as on the bracket's coarse levels after
    many designs) comes back with no subnormal entry and the same estimate as
    the unflushed iteration in double precision. The operator is the 1D
    Laplacian tridiag(−1, 2, −1), whose D⁻¹A has the closed-form largest
    eigenvalue 1 + cos(π/(n+1)) (eigenvalues of a tridiagonal Toeplitz matrix,
    e.g. Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., §2.2.5)."""
    import scipy.sparse as sp

    from topo.multigrid import _lambda_max

    n = 400
    a = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]).tocsr()
    inv_diag = np.full(n, 0.5)
    tail = np.exp(-0.5 * np.arange(n))  # reaches 1e-45 near entry 200
    start = tail.astype(np.float32)
    tiny = np.finfo(np.float32).tiny
    assert np.any((start > 0) & (start < tiny))  # the input holds subnormals

    def in_double(v, steps):  # the same iteration, unflushed, in double precision
        for _ in range(steps):
            w = inv_diag * (a @ v)
            lam = np.linalg.norm(w) / np.linalg.norm(v)
            v = w / np.linalg.norm(w)
        return 1.05 * lam

    a32 = a.astype(np.float32)

    class Spy:  # every product must see a vector clear of subnormals
        shape = a.shape

        def __matmul__(self, v):
            assert not np.any((v != 0) & (np.abs(v) < tiny))
            return a32 @ v

    unflushed = in_double(tail, 6)
    lam, v = _lambda_max(Spy(), inv_diag.astype(np.float32), start.copy())
    assert v.dtype == np.float32
    assert not np.any((v != 0) & (np.abs(v) < tiny))
    assert lam == pytest.approx(unflushed, rel=1e-5)
    # in double precision the flush leaves the estimate as it was to round-off
    assert _lambda_max(a, inv_diag, tail.copy())[0] == pytest.approx(unflushed, rel=1e-13)
    lam_cold, _ = _lambda_max(a, inv_diag, None, cold=3000)
    assert lam_cold / 1.05 == pytest.approx(1 + np.cos(np.pi / (n + 1)), rel=1e-4)
