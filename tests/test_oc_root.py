"""The optimality-criteria multiplier on a nonlinear material budget: the exact
root search started from the linearised budget (optimizers._bracketed_root with a
model), against scipy's brentq as the outside reference."""

import numpy as np
import pytest
from scipy.optimize import brentq

from topo.optimizers import OptimalityCriteria, _bracketed_root

ATOL = 1e-7


def _budget(seed: int = 0, n: int = 4000):
    """An OC step's budget as a function of the multiplier: the linearised one
    (volume of the step) and an exact one whose projection sharpens it (smoothed
    Heaviside of the step, Wang et al. 2011 form, β = 4, η = 0.5), as the design
    chain of a projected run does."""
    rng = np.random.default_rng(seed)
    xa = rng.uniform(0.05, 0.95, n)
    ratio = rng.lognormal(0.0, 1.0, n)
    lo, hi = np.maximum(0.0, xa - 0.2), np.minimum(1.0, xa + 0.2)

    def step(lam):
        return np.clip(xa * (ratio / lam) ** 0.5, lo, hi)

    beta, eta = 4.0, 0.5
    t = np.tanh(beta * eta)

    def project(v):
        return (t + np.tanh(beta * (v - eta))) / (t + np.tanh(beta * (1 - eta)))

    target = 0.5
    linear = lambda lam: step(lam).mean() - target
    exact = lambda lam: project(step(lam)).mean() - target
    return linear, exact


class Counted:
    def __init__(self, f):
        self.f, self.calls = f, 0

    def __call__(self, lam):
        self.calls += 1
        return self.f(lam)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_model_started_root_matches_brentq_in_few_evaluations(seed):
    linear, exact = _budget(seed)
    guess = brentq(linear, 1e-6, 1e6, xtol=1e-14)
    reference = brentq(exact, 1e-6, 1e6, xtol=1e-14)
    f = Counted(exact)
    lam = _bracketed_root(f, guess, atol=ATOL, model=linear)
    assert abs(exact(lam)) < ATOL
    assert abs(np.log(lam / reference)) < 1e-4
    # without the model the same search needs more evaluations of the exact budget
    g = Counted(exact)
    plain = _bracketed_root(g, guess, atol=ATOL)
    assert abs(exact(plain)) < ATOL
    assert f.calls <= 6 and f.calls < g.calls


def test_model_of_a_different_slope_still_finds_the_root():
    # the model ten times flatter than f (its shifted root lands far away) and
    # ten times steeper (it barely moves): the search still meets the tolerance
    linear, exact = _budget(3)
    guess = brentq(linear, 1e-6, 1e6, xtol=1e-14)
    for scale in (0.1, 10.0):
        model = lambda lam, s=scale: s * linear(lam)
        lam = _bracketed_root(exact, guess, atol=ATOL, model=model)
        assert abs(exact(lam)) < ATOL


def test_budget_out_of_reach_returns_the_floor():
    # every element at its upper move limit still leaves the budget unmet: the
    # search returns the floor multiplier instead of stepping down 60 times
    f = Counted(lambda lam: min(lam, 1.0) - 2.0)  # negative everywhere, flat below 1
    lam = _bracketed_root(f, 3.0, atol=ATOL, floor=1.0, model=lambda lam: -lam)
    assert lam == 1.0
    assert f.calls < 10


def test_oc_step_meets_the_exact_budget():
    # the OC update with an exact evaluation holds the nonlinear budget to the
    # tolerance at the step it returns
    rng = np.random.default_rng(4)
    n = 3000
    x = rng.uniform(0.2, 0.8, n)
    dc = -rng.lognormal(0.0, 1.0, n)
    dv = np.full(n, 1.0 / n)
    beta, eta = 8.0, 0.5
    t = np.tanh(beta * eta)
    project = lambda v: (t + np.tanh(beta * (v - eta))) / (t + np.tanh(beta * (1 - eta)))
    volume = lambda xn: float(dv @ project(xn))
    oc = OptimalityCriteria(np.ones(n, bool), move=0.2)
    xn = oc.update(x, dc, float(dv @ x), dv, 0.45, exact_volume=volume)
    assert abs(volume(xn) - 0.45) < ATOL
    assert np.all(np.abs(xn - x) <= 0.2 + 1e-12)


def _saturating(floor: float, value_below: float, slope: float = 0.05):
    """A decreasing budget that is constant below `floor` (every element at its
    upper move limit there) and falls slowly above it, as when elements of tiny
    sensitivity put the floor many decades below the linearised multiplier."""

    def f(lam):
        return value_below - slope * np.log(max(lam, floor) / floor)

    return f


def test_far_floor_out_of_reach_is_found_in_few_evaluations():
    # the exact budget is negative down to a floor 15 decades down while the
    # model (wrongly) promises a root near the guess: the floor is tried after
    # SEARCH_STEPS steps instead of stepping down by 4 to the evaluation limit
    floor = 1e-15
    f = Counted(lambda lam: -0.01 - 0.001 * np.log(max(lam, floor) / floor))
    lam = _bracketed_root(f, 1.0, atol=ATOL, floor=floor, model=lambda lam: -0.2 * np.log(lam))
    assert lam == floor
    assert f.calls <= 12


def test_root_just_above_a_far_floor_is_bracketed_from_the_floor():
    # f(floor) > 0 and the root lies a little above the floor: the floor's value
    # becomes the lower end of the bracket; checked against brentq
    floor = 1e-12
    g = _saturating(floor, 0.02)
    reference = brentq(g, floor, 1.0, xtol=1e-30)
    f = Counted(g)
    lam = _bracketed_root(f, 1.0, atol=ATOL, floor=floor, model=lambda lam: -0.2 * np.log(lam))
    assert abs(g(lam)) < ATOL
    assert abs(np.log(lam / reference)) < 1e-4
    assert f.calls <= 25


def test_too_much_material_at_every_multiplier_ends_in_bounded_evaluations():
    # the budget stays exceeded even with every element at its lower limit
    # (f > 0 for all λ): the search stops after SEARCH_STEPS widenings and one
    # try far above, instead of using all 60 evaluations
    f = Counted(lambda lam: 0.05 + 0.1 / (1.0 + lam))
    lam = _bracketed_root(f, 1.0, atol=ATOL, floor=1e-3, model=lambda lam: -np.log(lam))
    assert f(lam) > 0 and lam > 1e6
    assert f.calls <= 15


def test_oc_step_with_no_element_able_to_grow_skips_the_search():
    # every design element at zero density: no λ changes the step (each stays at
    # its lower move limit), so the exact budget is not evaluated at all
    n = 50
    x = np.zeros(n)
    calls = []
    volume = lambda xn: calls.append(1) or float(xn.mean())
    oc = OptimalityCriteria(np.ones(n, bool), move=0.2)
    xn = oc.update(x, -np.ones(n), 0.0, np.full(n, 1.0 / n), 0.3, exact_volume=volume)
    assert np.all(xn == 0.0) and not calls
