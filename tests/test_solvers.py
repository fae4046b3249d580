"""Linear systems: the back ends agree with each other and with a dense solve, and
every implementation keeps the same contract."""

import warnings

import numpy as np
import pytest

from problems import add_point_load, beam_problem, dense_stiffness
from topo import cholesky, solvers
from topo.fem import Model
from topo.matrixfree import MatrixFreeCG
from topo.multigrid import MultigridCG
from topo.problem import problem_from_dict
from topo.solvers import DirectSystem, make_system


def dense_reference(m, e):
    """K from plain loops over the elements, and its free-dof block."""
    return dense_stiffness(m.grid, m.ke, e)[np.ix_(m.free, m.free)]


def test_cholmod_superlu_and_dense_agree(monkeypatch):
    m = Model(problem_from_dict(beam_problem(3, [5.0, 3.0, 2.0], 1.0)))
    rho = np.random.default_rng(3).uniform(1e-3, 1.0, m.grid.n_elements)
    k = DirectSystem(m.grid, m.ke, m._fixed).lower(m.moduli(rho))
    f = m.loads[m.free]
    full = k.toarray()
    full = full + np.tril(full, -1).T
    dense = np.linalg.solve(full, f)
    if cholesky.cholmod_available():
        chol = cholesky.SparseCholesky()
        assert chol.name == "cholmod"
        # two factorisations: the second reuses the symbolic analysis
        chol.factorize(k)
        chol.factorize(k)
        assert np.allclose(chol.solve(f), dense, rtol=1e-8)
    monkeypatch.setattr(cholesky, "_cholmod", None)
    monkeypatch.setattr(cholesky, "_warned", False)
    with pytest.warns(RuntimeWarning, match="CHOLMOD"):
        lu = cholesky.SparseCholesky()
    assert lu.name == "superlu"
    lu.factorize(k)
    assert np.allclose(lu.solve(f), dense, rtol=1e-8)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the warning is given once only
        cholesky.SparseCholesky()
        assert DirectSystem(m.grid, m.ke, m._fixed).name == "superlu"


def systems():
    """Every implementation, with tight tolerances: CHOLMOD (when present),
    SuperLU, and multigrid-CG with a coarse grid small enough for three levels."""
    out = [
        ("superlu", lambda g, ke, f: DirectSystem(g, ke, f, prefer_cholmod=False)),
        ("multigrid-cg", lambda g, ke, f: MultigridCG(g, ke, f, rtol=1e-12, coarse_dofs=100)),
        (
            "matrix-free multigrid-cg",
            lambda g, ke, f: MatrixFreeCG(g, ke, f, rtol=1e-12, coarse_dofs=100),
        ),
    ]
    if cholesky.cholmod_available():
        out.append(("cholmod", DirectSystem))
    return out


@pytest.mark.parametrize("name,factory", systems(), ids=[n for n, _ in systems()])
def test_every_linear_system_keeps_the_contract(name, factory):
    d = beam_problem(3, [8.0, 4.0, 4.0], 1.0)
    add_point_load(d, "side", [8.0, 4.0, 4.0], [0.0, 1.0, 0.5])
    m = Model(problem_from_dict(d))
    rng = np.random.default_rng(5)
    e = m.moduli(rng.uniform(0.05, 1.0, m.grid.n_elements))
    reference = np.zeros_like(m.loads)
    reference[m.free] = np.linalg.solve(dense_reference(m, e), m.loads[m.free])

    system = factory(m.grid, m.ke, m._fixed)
    assert system.name.startswith(name)
    system.assemble(e)
    rhs = m.loads.copy()
    rhs[m.fixed_dofs] = rng.normal(size=(len(m.fixed_dofs), 2))  # loads on supports go to them
    u = system.solve(rhs)
    assert u.shape == rhs.shape
    assert not u[m.fixed_dofs].any()
    # numpy's dense solve as the independent reference; CG to ‖r‖ < 1e-12‖b‖
    assert np.linalg.norm(u - reference) <= 1e-8 * np.linalg.norm(reference)
    if "multigrid-cg" in name:
        assert system.iterations > 0
    else:
        assert system.iterations is None
    # one column alone, and an adjoint-style solve after it, leave the state alone
    state = system.state()
    one = system.solve(rhs[:, 1])
    assert one.shape == (m.grid.n_dofs,)
    assert np.linalg.norm(one - reference[:, 1]) <= 1e-8 * np.linalg.norm(reference[:, 1])
    assert state.keys() == system.state().keys()
    assert all(np.array_equal(state[k], system.state()[k]) for k in state)

    # state/restore: a new system given the state makes the next design's solve
    # exactly as the original does
    e2 = e * rng.uniform(0.9, 1.1, len(e))
    twin = factory(m.grid, m.ke, m._fixed)
    twin.restore(state)
    for s in (system, twin):
        s.assemble(e2)
    a, b = system.solve(m.loads), twin.solve(m.loads)
    assert np.array_equal(a, b)
    assert system.iterations == twin.iterations
    if name == "multigrid-cg":
        assert set(state) == {"warm"} | {f"power_{i}" for i in range(system.hierarchy.levels - 1)}
    elif name.startswith("matrix-free"):
        assert system.levels >= 3
        # the fine level takes its Gershgorin bound: power vectors of the coarse
        # smoothed levels only
        assert set(state) == {"warm"} | {f"power_{i}" for i in range(1, system.levels - 1)}
    else:
        assert state == {}
    with pytest.raises(ValueError, match="unknown linear-system state"):
        twin.restore({"bogus": np.zeros(3)})


def test_make_system_follows_the_solver_choice(monkeypatch):
    d = beam_problem(3, [8.0, 4.0, 4.0], 1.0)
    m = Model(problem_from_dict(d))
    assert isinstance(make_system("direct", m.grid, m.ke, m._fixed), DirectSystem)
    # iterative: assembled below solvers.AUTO_MATRIX_FREE_DOFS and in 2D,
    # matrix-free above it in 3D
    assert isinstance(make_system("iterative", m.grid, m.ke, m._fixed), MultigridCG)
    monkeypatch.setattr(solvers, "AUTO_MATRIX_FREE_DOFS", 100)
    assert isinstance(make_system("iterative", m.grid, m.ke, m._fixed), MatrixFreeCG)
    m2 = Model(problem_from_dict(beam_problem(2, [8.0, 4.0], 1.0)))
    assert isinstance(make_system("iterative", m2.grid, m2.ke, m2._fixed), MultigridCG)
    # auto: direct below solvers.AUTO_ITERATIVE_DOFS free dofs
    assert isinstance(make_system("auto", m.grid, m.ke, m._fixed), DirectSystem)
    with pytest.raises(ValueError, match="unknown solver"):
        make_system("fastest", m.grid, m.ke, m._fixed)
