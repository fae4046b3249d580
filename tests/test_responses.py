"""The responses the optimizer sees: values, g = v/L − 1, and x-gradients checked
against central finite differences through the whole chain (projection on, so the
material budget is nonlinear in x)."""

import numpy as np
import pytest

from problems import add_point_load, beam_problem, central_difference
from topo.design import build_chain
from topo.fem import Model
from topo.problem import problem_from_dict
from topo.responses import Responses


def two_cases(**opt):
    d = beam_problem(2, [8.0, 4.0], 1.0, projection=True, filter_radius=1.5, **opt)
    d["material"]["yield_strength"] = 100.0
    return add_point_load(d, "side", [8.0, 4.0], [1.0, 0.3], weight=0.5)


def setup(d, beta=4.0):
    problem = problem_from_dict(d)
    model = Model(problem)
    chain, projection = build_chain(problem, model)
    projection.beta = beta
    return model, chain, Responses(problem, model, chain)


def at(model, chain, responses, x):
    rho = chain.forward(x)
    ev = responses.evaluate(rho, model.analyze(rho, stresses=False))
    responses.pull_back(x, ev)
    return ev


@pytest.mark.parametrize(
    "opt",
    [
        {},
        {"optimizer": "mma", "stress_limit": 5.0},
        {"optimizer": "mma", "objective": "worst_case"},
    ],
)
def test_every_response_gradient_matches_finite_differences(opt, rng):
    d = two_cases(**opt)
    limited = opt.get("optimizer") == "mma"
    if limited:  # a deflection limit at the tip along -y, every load case
        d["deflection"] = [
            {"name": "tip", "region": {"point": [8.0, 2.0]}, "direction": "-y", "limit": 0.1}
        ]
    model, chain, responses = setup(d)
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)
    ev = at(model, chain, responses, x)
    terms = [r for r in [ev.objective, *ev.bounds, *ev.constraints] if r.gradient is not None]
    assert [r.name for r in ev.constraints] == ["material"] + (
        ["stress"] if "stress_limit" in opt else []
    ) + (["deflection[tip, tip]", "deflection[tip, side]"] if limited else [])
    assert len(ev.bounds) == (2 if opt.get("objective") == "worst_case" else 0)

    def values(xx):
        # values only: the stress correction is held fixed, as the gradient assumes
        rho = chain.forward(xx)
        a = model.analyze(rho, stresses=False)
        objective, bounds = responses.objective.evaluate(rho, a, gradient=False)
        constraints = [t.evaluate(rho, a, gradient=False) for t in responses.constraints]
        return [
            r.value
            for r, t in zip(
                [objective, *bounds, *constraints], [ev.objective, *ev.bounds, *ev.constraints]
            )
            if t.gradient is not None
        ]

    for _ in range(2):
        v = rng.normal(size=x.size)
        fd = central_difference(lambda xx: np.array(values(xx)), x, v)
        for r, d in zip(terms, fd):
            assert r.gradient @ v == pytest.approx(d, rel=1e-5, abs=1e-9 * abs(r.value)), r.name


def test_constraint_value_reads_v_over_limit_minus_one_and_probe_agrees(rng):
    model, chain, responses = setup(two_cases(optimizer="gcmma", stress_limit=5.0))
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)
    ev = at(model, chain, responses, x)
    budget = ev.constraints[0]
    # the budget by hand: mean ρ over the design elements against the volume fraction
    rho = chain.forward(x)
    assert budget.g == pytest.approx(rho[model.active].mean() / 0.5 - 1.0, rel=1e-12)
    assert budget.exact(x) == pytest.approx(budget.value, rel=1e-14)  # projection: nonlinear
    c, g = ev.probe(x)
    assert c == pytest.approx(ev.objective.value, rel=1e-12)
    assert np.allclose(g, [r.g for r in ev.constraints], rtol=1e-12, atol=1e-14)


def test_linear_chain_has_no_exact_budget():
    d = two_cases()
    d["optimization"]["projection"] = False
    problem = problem_from_dict(d)
    model = Model(problem)
    chain, _ = build_chain(problem, model)
    rho = chain.forward(np.full(model.grid.n_elements, 0.5))
    ev = Responses(problem, model, chain).evaluate(rho, model.analyze(rho, stresses=False))
    assert ev.constraints[0].exact is None


def test_stress_correction_blends_ratios_and_survives_state_round_trip(rng):
    # Le et al. 2010: c_k = α r_k + (1 − α) c_{k−1}, α = 0.5, c_1 = r_1.
    model, chain, responses = setup(two_cases(optimizer="mma", stress_limit=5.0))
    stress = responses.constraints[1]
    ratios = []
    for _ in range(2):
        x = rng.uniform(0.2, 0.9, model.grid.n_elements)
        rho = chain.forward(x)
        a = model.analyze(rho, stresses=False)
        pn, _, peak = stress.measure.aggregate(rho, a, gradient=False)
        ratios.append(peak / pn)
        responses.evaluate(rho, a)
    assert stress.correction == pytest.approx(0.5 * ratios[1] + 0.5 * ratios[0], rel=1e-12)
    saved = responses.state()
    fresh = setup(two_cases(optimizer="mma", stress_limit=5.0))[2]
    fresh.restore(saved)
    assert fresh.constraints[1].correction == stress.correction
    fresh.restore({})
    assert fresh.constraints[1].correction is None


@pytest.mark.parametrize("opt", [{}, {"optimizer": "mma", "objective": "worst_case"}])
def test_interface_support_steering_gradient_matches_finite_differences(opt, rng):
    # Grown in +y with the overhang layer on, a solid pad hanging at the top right:
    # the objective is scaled by the pad's share left unsupported.
    d = two_cases(**opt)
    d["build"] = {"direction": "+y", "interface_support": 2.0}
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [6.0, 3.0], "max": [8.0, 4.0]}}}]
    model, chain, responses = setup(d)
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)
    ev = at(model, chain, responses, x)
    rho = chain.forward(x)
    plain = responses.objective.inner.evaluate(rho, model.analyze(rho, stresses=False), False)
    shortfall = (1 - rho[model.solid]).mean()
    assert shortfall > 0.05  # the pad is partly unsupported at this design
    assert ev.objective.value == pytest.approx(plain[0].value * (1 + 2.0 * shortfall), rel=1e-12)
    terms = [t for t in [ev.objective, *ev.bounds] if t.gradient is not None]
    assert len(terms) == (2 if opt else 1)  # worst case: the bounds carry the gradients

    def values(xx):
        r = chain.forward(xx)
        objective, bounds = responses.objective.evaluate(r, model.analyze(r, stresses=False), False)
        return [t.value for t in [objective, *bounds]][-len(terms) :]

    for _ in range(2):
        v = rng.normal(size=x.size)
        fd = central_difference(lambda xx: np.array(values(xx)), x, v)
        for r, g in zip(terms, fd):
            assert r.gradient @ v == pytest.approx(g, rel=1e-5), r.name
