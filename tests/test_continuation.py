"""β continuation and the stopping rules, each outcome."""

import numpy as np
import pytest

from topo.checkpoint import LoopState
from topo.continuation import (
    SETTLED_RTOL,
    SETTLED_WINDOW,
    Continuation,
    density_change,
    objective_settled,
    stop_reason,
)
from topo.transforms import HeavisideProjection


def rows(values):
    return [{"objective": v} for v in values]


def test_beta_doubles_every_interval_up_to_its_maximum():
    projection = HeavisideProjection(1.0, 0.5)
    c = Continuation(projection, beta_max=4.0, interval=3, tolerance=0.01)
    state, betas = LoopState(x=None), []
    for _ in range(9):
        state.history.append({"objective": 1.0})
        assert c.after(state, change=0.5) is None
        betas.append(state.beta)
    assert betas == [1, 1, 2, 2, 2, 4, 4, 4, 4]
    assert c.at_max


def test_beta_doubles_early_once_the_design_settles():
    c = Continuation(HeavisideProjection(1.0, 0.5), beta_max=8.0, interval=50, tolerance=0.01)
    state = LoopState(x=None, history=rows([1.0]))
    assert c.after(state, change=0.001) is None
    assert state.beta == 2.0 and state.since_beta == 0


def test_resumed_beta_is_set_on_the_projection():
    projection = HeavisideProjection(1.0, 0.5)
    c = Continuation(projection, beta_max=8.0, interval=5, tolerance=0.01, beta=4.0)
    assert projection.beta == 4.0 and c.beta == 4.0


def test_without_projection_the_run_is_at_its_final_beta():
    c = Continuation(None, beta_max=32.0, interval=5, tolerance=0.01)
    state = LoopState(x=None, history=rows([1.0]))
    assert c.beta is None and c.at_max
    assert c.after(state, change=0.001) == "design change below tolerance"
    assert state.beta == 1.0
    assert c.after(state, change=0.5) is None


def test_stop_reasons():
    steady = rows([100.0] * SETTLED_WINDOW)
    moving = rows([100.0 + i for i in range(SETTLED_WINDOW)])
    assert stop_reason(moving, SETTLED_WINDOW, 0.001, 0.01) == "design change below tolerance"
    assert stop_reason(steady, SETTLED_WINDOW, 0.5, 0.01).startswith("objective settled")
    assert stop_reason(moving, SETTLED_WINDOW, 0.5, 0.01) is None


@pytest.mark.parametrize(
    "spread,since,expected",
    [
        (0.5 * SETTLED_RTOL, SETTLED_WINDOW, True),  # within the band
        (2.0 * SETTLED_RTOL, SETTLED_WINDOW, False),  # outside it
        (0.5 * SETTLED_RTOL, SETTLED_WINDOW - 1, False),  # too soon after a β step
    ],
)
def test_objective_settled(spread, since, expected):
    values = [100.0] * (SETTLED_WINDOW - 1) + [100.0 * (1 + spread)]
    assert objective_settled(rows(values), since) is expected


def test_density_change_is_the_relative_l2_norm_over_design_elements():
    # by hand: one of three solid design elements goes void, ‖Δρ‖ = 1, ‖ρ‖ = √3; the
    # last element is passive and its change is not counted
    rho = np.array([1.0, 0.0, 1.0, 1.0, 0.0])
    new = np.array([1.0, 0.0, 0.0, 1.0, 1.0])
    active = np.array([True, True, True, True, False])
    assert density_change(new, rho, active) == pytest.approx(1 / np.sqrt(3))
    assert density_change(rho, rho, active) == 0.0
    # no material yet: the absolute norm
    assert density_change(new, np.zeros(5), active) == pytest.approx(np.sqrt(2))
