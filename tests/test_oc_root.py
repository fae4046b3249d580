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
