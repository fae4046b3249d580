"""Design-variable updates.

`OptimalityCriteria` is the optimality-criteria update with a move limit and a
bisection on the Lagrange multiplier of one volume constraint (Bendsøe 1995; as
written in Andreassen et al. 2011, Struct. Multidisc. Optim. 43:1, eq. 4).

The multiplier is first found on the linearised constraint (exact for a linear
filter); when a nonlinear projection follows, it is then refined on the exact
constraint by evaluating the volume of the candidate design, so the volume budget
holds at every iteration, not only at convergence.

Per-element move limits adapt: an element whose step changes sign from one
iteration to the next has its limit shrunk, one moving steadily has it restored
towards the nominal value. This damps the flip-flopping that OC shows with a sharp
Heaviside projection (the same idea as the asymptote adaptation of MMA, Svanberg
1987, Int. J. Numer. Meth. Eng. 24:359). With ``adaptive=False`` the update is the
classical fixed-move OC.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

SHRINK, GROW, MIN_FRACTION = 0.7, 1.2, 0.05


class OptimalityCriteria:
    def __init__(self, active: np.ndarray, move: float = 0.2, damping: float = 0.5,
                 adaptive: bool = True):
        self.active = active
        self.move = move
        self.damping = damping
        self.adaptive = adaptive
        n = int(active.sum())
        self.limits = np.full(n, move)
        self.last_step = np.zeros(n)

    def update(self, x: np.ndarray, dc: np.ndarray, volume: float, dv: np.ndarray,
               target: float, exact_volume: Callable[[np.ndarray], float] | None = None
               ) -> np.ndarray:
        """One OC step. x, dc, dv are full vectors; only active entries change.

        volume: the current constraint value; exact_volume(x_full) → volume of a
        candidate, used to meet a nonlinear constraint exactly (None: linear).
        """
        act = self.active
        xa, dva = x[act], dv[act]
        # Descent needs dc ≤ 0 and dv > 0 (true for compliance and volume under SIMP
        # with positive filter weights); guard rounding noise.
        ratio = np.maximum(-dc[act], 0.0) / np.maximum(dva, 1e-300)
        mean = ratio.mean()
        ratio /= mean if mean > 0 else 1.0
        lo, hi = np.maximum(0.0, xa - self.limits), np.minimum(1.0, xa + self.limits)

        def step(lam: float) -> np.ndarray:
            return np.clip(xa * (ratio / lam) ** self.damping, lo, hi)

        def full(xn: np.ndarray) -> np.ndarray:
            out = x.copy()
            out[act] = xn
            return out

        linear = lambda lam: volume + float(dva @ (step(lam) - xa)) - target  # noqa: E731
        lam = _bisect(linear, 1e-12, 1e12, rtol=1e-12)
        if exact_volume is not None:
            exact = lambda l: exact_volume(full(step(l))) - target  # noqa: E731
            lam = _bracketed_root(exact, lam)
        xn = step(lam)
        if self.adaptive:
            delta = xn - xa
            flip = delta * self.last_step < 0
            self.limits = np.where(flip, np.maximum(self.limits * SHRINK, MIN_FRACTION * self.move),
                                   np.minimum(self.limits * GROW, self.move))
            self.last_step = delta
        return full(xn)


def _bisect(f: Callable[[float], float], lo: float, hi: float, rtol: float) -> float:
    """Root of a decreasing f by bisection in log space."""
    while hi / lo > 1.0 + rtol:
        mid = np.sqrt(lo * hi)
        if f(mid) > 0:
            lo = mid
        else:
            hi = mid
    return np.sqrt(lo * hi)


def _bracketed_root(f: Callable[[float], float], guess: float, atol: float = 1e-7,
                    max_evals: int = 60) -> float:
    """Root of a decreasing f near `guess`: bracket, then Illinois regula falsi in log λ."""
    a, b = guess / 1.5, guess * 1.5
    fa, fb = f(a), f(b)
    evals = 2
    while fa < 0 and evals < max_evals:  # root lies below a
        a, fa = a / 4, f(a / 4)
        evals += 1
    while fb > 0 and evals < max_evals:
        b, fb = b * 4, f(b * 4)
        evals += 1
    la, lb = np.log(a), np.log(b)
    side = 0
    while evals < max_evals:
        if fa == fb:
            break
        lc = (la * fb - lb * fa) / (fb - fa)
        fc = f(np.exp(lc))
        evals += 1
        if abs(fc) < atol:
            return float(np.exp(lc))
        if fc > 0:
            la, fa = lc, fc
            if side == 1:
                fb /= 2
            side = 1
        else:
            lb, fb = lc, fc
            if side == -1:
                fa /= 2
            side = -1
    return float(np.exp(0.5 * (la + lb)))
