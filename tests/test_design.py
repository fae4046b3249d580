"""The design loop: compliance sensitivities and the published MBB benchmark."""

import numpy as np
import pytest

from problems import add_point_load, beam_problem, central_difference, mbb
from topo.design import build_chain, optimize
from topo.fem import Model
from topo.problem import problem_from_dict
from topo.responses import compliance_gradient


@pytest.mark.parametrize("dim", [2, 3])
def test_compliance_sensitivity_matches_finite_differences(dim, rng):
    d = beam_problem(dim, [6.0, 3.0] if dim == 2 else [4.0, 2.0, 2.0], 1.0)
    corner = [6.0, 3.0] if dim == 2 else [4.0, 2.0, 2.0]
    add_point_load(d, "side", corner, [1.0, 0.5] + ([0.2] if dim == 3 else []), weight=0.7)
    problem = problem_from_dict(d)
    model = Model(problem)
    chain, projection = build_chain(problem, model)
    projection.beta = 3.0
    weights = np.array([1.0, 0.7])
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)

    def objective(xx):
        rho = chain.forward(xx)
        return compliance_gradient(model, rho, model.analyze(rho), weights)

    c, dc_drho = objective(x)
    grad = chain.backward(x, dc_drho)
    for _ in range(3):
        v = rng.normal(size=x.size)
        fd = central_difference(lambda xx: objective(xx)[0], x, v)
        assert np.isclose(grad @ v, fd, rtol=1e-5)


def test_mbb_half_beam_matches_published_compliance():
    # Andreassen, Clausen, Schevenels, Lazarov & Sigmund 2011, "Efficient topology
    # optimization in MATLAB using 88 lines of code", Struct. Multidisc. Optim.
    # 43:1-16: top88(60, 20, 0.5, 3, 2.4, 2) (density filter) ends at c = 233.71
    # (recalled from memory). Our OC adapts its move limits, so the path differs
    # slightly; the issue asks for 5 %.
    r = optimize(problem_from_dict(mbb()))
    assert r.converged
    assert abs(r.summary["optimizer"]["compliance_Nmm"] / 233.71 - 1) < 0.05
    assert abs(r.summary["optimizer"]["volume_fraction"] - 0.5) < 1e-3


def test_mbb_classical_fixed_move_oc_reproduces_88_line_result():
    # The same example with the classical fixed move limit: the update is then the
    # one of the 88-line paper step for step (recalled from memory: c = 233.71).
    # That code stops at the first max |Δx| below 0.01 and prints the compliance
    # of the design before that step; our rule is another, so the run goes on and
    # the row where the paper's rule holds is read from the history.
    from topo.optimizers import OptimalityCriteria

    def fixed_move_oc(settings, active, n_bounds, n_constraints):
        return OptimalityCriteria(active, settings.move_limit, adaptive=False)

    r = optimize(problem_from_dict(mbb(tolerance=1e-9)), optimizer=fixed_move_oc)
    paper_stop = next(row for row in r.history if row["max_design_change"] < 0.01)
    assert abs(paper_stop["objective"] / 233.71 - 1) < 0.005


def test_projected_mbb_run_stops_on_the_density_change():
    # With a sharp projection a few boundary elements keep flipping and max |Δx|
    # stays at the move limit; the density change must still end the run.
    d = mbb(projection=True, max_iterations=300, tolerance=0.01)
    r = optimize(problem_from_dict(d))
    assert r.converged and r.stop_reason == "design change below tolerance"
    assert len(r.history) < 300
    last = r.history[-1]
    assert last["beta"] == 32.0
    assert last["change"] < 0.01
    assert all(row["change"] >= 0.01 for row in r.history[:-1] if row["beta"] == 32.0)
    assert max(row["max_design_change"] for row in r.history[-5:]) > 0.01  # x still moving


def test_projection_run_meets_volume_and_is_nearly_black_and_white():
    d = mbb(projection=True, beta_interval=20, max_iterations=300)
    r = optimize(problem_from_dict(d))
    rho = r.density
    assert abs(rho.mean() - 0.5) < 1e-3
    grey = np.mean((rho > 0.05) & (rho < 0.95))
    assert grey < 0.05
    assert r.history[-1]["beta"] == 32.0


def test_passive_regions_are_held_and_outside_the_budget():
    d = mbb()
    d["passive"] = [
        {"kind": "solid", "region": {"box": {"min": [50, 0], "max": [60, 20]}}},
        {"kind": "void", "region": {"box": {"min": [20, 8], "max": [30, 14]}}},
    ]
    d["optimization"]["max_iterations"] = 40
    r = optimize(problem_from_dict(d))
    rho = r.density.ravel()
    model = r.model
    assert np.all(rho[model.solid] == 1.0) and np.all(rho[model.void] == 0.0)
    assert abs(rho[model.active].mean() - 0.5) < 1e-3
    mass = rho.sum() * 1.0 * 1e-9 * 1.0
    assert np.isclose(r.summary["optimizer"]["mass_kg"], mass)
