"""Solver back ends agree with each other and with a dense solve."""
import warnings

import numpy as np
import pytest

from topo import solvers
from topo.fem import Model
from topo.problem import problem_from_dict
from conftest import beam_problem


def test_cholmod_superlu_and_dense_agree(monkeypatch):
    m = Model(problem_from_dict(beam_problem(3, [5.0, 3.0, 2.0], 1.0)))
    rho = np.random.default_rng(3).uniform(1e-3, 1.0, m.grid.n_elements)
    k = m.stiffness(m.moduli(rho))
    f = m.loads[m.free]
    full = k.toarray()
    full = full + np.tril(full, -1).T
    dense = np.linalg.solve(full, f)
    if solvers.cholmod_available():
        chol = solvers.DirectSolver()
        assert chol.name == "cholmod"
        # two calls: the second reuses the symbolic analysis
        chol.solve(k, f)
        assert np.allclose(chol.solve(k, f), dense, rtol=1e-8)
    monkeypatch.setattr(solvers, "_cholmod", None)
    monkeypatch.setattr(solvers, "_warned", False)
    with pytest.warns(RuntimeWarning, match="CHOLMOD"):
        lu = solvers.DirectSolver()
    assert lu.name == "superlu"
    assert np.allclose(lu.solve(k, f), dense, rtol=1e-8)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the warning is given once only
        solvers.DirectSolver()
