"""β continuation of the Heaviside projection and the stopping rules of the loop.

With projection on, β starts at 1 and doubles every `beta_interval` iterations, or
earlier once the design change falls below the tolerance, until `beta_max`. The run
counts as converged only with β at its maximum (or without projection), when the
design change is below the tolerance or the objective has settled.
"""

from __future__ import annotations

SETTLED_WINDOW, SETTLED_RTOL = 10, 1e-4


def objective_settled(history: list[dict], since_beta: int) -> bool:
    """True when the objective moved less than SETTLED_RTOL (relative) over the last
    SETTLED_WINDOW iterations at the current β. With a sharp projection a few
    elements on the boundary can keep flipping in x long after the layout and the
    compliance have settled; this rule ends such runs and says so in the summary."""
    if since_beta < SETTLED_WINDOW or len(history) < SETTLED_WINDOW:
        return False
    recent = [h["objective"] for h in history[-SETTLED_WINDOW:]]
    return (max(recent) - min(recent)) <= SETTLED_RTOL * abs(recent[-1])


def stop_reason(
    history: list[dict], since_beta: int, change: float, tolerance: float
) -> str | None:
    """Why a run at its final β has converged, or None."""
    if change < tolerance:
        return "design change below tolerance"
    if objective_settled(history, since_beta):
        return (
            f"objective settled (relative change below {SETTLED_RTOL:g} over "
            f"{SETTLED_WINDOW} iterations)"
        )
    return None


class Continuation:
    """Steps β of `projection` (None: no projection, nothing to continue)."""

    def __init__(
        self, projection, beta_max: float, interval: int, tolerance: float, beta: float = 1.0
    ):
        self.projection, self.beta_max = projection, beta_max
        self.interval, self.tolerance = interval, tolerance
        if projection:
            projection.beta = beta

    @property
    def beta(self) -> float | None:
        return self.projection.beta if self.projection else None

    @property
    def at_max(self) -> bool:
        return self.projection is None or self.projection.beta >= self.beta_max

    def after(self, state, change: float) -> str | None:
        """After an iteration (its row already in state.history): the reason to stop,
        or None, raising β when it is due. Keeps state.since_beta and state.beta."""
        state.since_beta += 1
        reason = None
        if self.at_max:
            reason = stop_reason(state.history, state.since_beta, change, self.tolerance)
        elif state.since_beta >= self.interval or change < self.tolerance:
            self.projection.beta = min(2 * self.projection.beta, self.beta_max)
            state.since_beta = 0
        state.beta = self.beta or 1.0
        return reason
