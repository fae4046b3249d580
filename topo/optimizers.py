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

Every optimizer the loop uses has `step(x, ev) → x_new`, with `ev` a responses
Evaluation (objective, constraints g = v/L − 1 ≤ 0, worst-case bounds; gradients
with respect to the full design vector x), and `state()` / `restore()` for
checkpoints. `make_optimizer` builds the one the problem names: OC, MMA, GCMMA, or
the bound formulation of the worst case on MMA.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

SHRINK, GROW, MIN_FRACTION = 0.7, 1.2, 0.05


class OptimalityCriteria:
    def __init__(
        self, active: np.ndarray, move: float = 0.2, damping: float = 0.5, adaptive: bool = True
    ):
        self.active = active
        self.move = move
        self.damping = damping
        self.adaptive = adaptive
        n = int(active.sum())
        self.limits = np.full(n, move)
        self.last_step = np.zeros(n)

    def state(self) -> dict:
        # the next update reads only the sign of the last step (flip or not): one
        # byte per element in the checkpoint instead of eight
        return {"limits": self.limits, "last_step": np.sign(self.last_step).astype(np.int8)}

    def restore(self, state: dict) -> None:
        self.limits = state["limits"].copy()
        self.last_step = state["last_step"].astype(float)

    def step(self, x: np.ndarray, ev) -> np.ndarray:
        """One update from a responses evaluation: OC handles one constraint, the
        material budget, met exactly when it carries an `exact` evaluation."""
        if len(ev.constraints) != 1:
            raise ValueError("the optimality-criteria update handles the material budget only")
        (budget,) = ev.constraints
        return self.update(
            x, ev.objective.gradient, budget.value, budget.gradient, budget.limit, budget.exact
        )

    def update(
        self,
        x: np.ndarray,
        dc: np.ndarray,
        volume: float,
        dv: np.ndarray,
        target: float,
        exact_volume: Callable[[np.ndarray], float] | None = None,
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

        # xa (ratio/λ)^η = base · λ^(−η): one product and one clip per trial λ
        base = xa * ratio**self.damping
        held = float(dva @ xa)

        def step(lam: float) -> np.ndarray:
            return np.clip(base * lam ** (-self.damping), lo, hi)

        def full(xn: np.ndarray) -> np.ndarray:
            out = x.copy()
            out[act] = xn
            return out

        linear = lambda lam: volume + float(dva @ step(lam)) - held - target
        if exact_volume is None:  # the linearised budget is the budget: meet it exactly
            lam = _bisect(linear, 1e-12, 1e12, rtol=1e-12)
        else:  # it is the model of the exact search: its root to the model's tolerance
            floor = _all_at_upper(xa, ratio, hi, self.damping)
            if not np.any((ratio > 0) & (xa > 0)):  # no element can grow: every λ
                lam = 1.0  # gives the same step (a floor of 0 may also be underflow)
            else:
                guess = _bracketed_root(linear, 1.0, MODEL_ATOL, floor=floor)
                exact = lambda lam_: exact_volume(full(step(lam_))) - target
                lam = _bracketed_root(exact, guess, floor=floor, model=linear)
        xn = step(lam)
        if self.adaptive:
            delta = xn - xa
            flip = delta * self.last_step < 0
            self.limits = np.where(
                flip,
                np.maximum(self.limits * SHRINK, MIN_FRACTION * self.move),
                np.minimum(self.limits * GROW, self.move),
            )
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


def _all_at_upper(xa: np.ndarray, ratio: np.ndarray, hi: np.ndarray, damping: float) -> float:
    """The multiplier at and below which every element of the OC step sits at its
    upper move limit (xa (ratio/λ)^damping ≥ hi; elements with xa = 0 or ratio = 0
    stay at their lower limit whatever λ), so the step no longer changes; 0 when no
    element moves up."""
    moving = (ratio > 0) & (xa > 0)
    if not moving.any():
        return 0.0
    reach = ratio[moving] * (xa[moving] / hi[moving]) ** (1.0 / damping)
    return float(reach.min()) * (1.0 - 1e-9)  # strictly inside: clipped despite round-off


# evaluations away from the guess (after the first two) before the floor
# (downwards) or the all-at-lower-limit multiplier (upwards) is tried
SEARCH_STEPS = 6
# The shifted linear model's root is only a trial point of the exact search, so it
# needs no more accuracy than the exact one's tolerance.
MODEL_ATOL = 1e-8


def _remembered(f: Callable[[float], float]) -> Callable[[float], float]:
    seen: dict[float, float] = {}

    def once(lam: float) -> float:
        key = float(lam)
        if key not in seen:
            seen[key] = f(key)
        return seen[key]

    return once


def _bracketed_root(
    f: Callable[[float], float],
    guess: float,
    atol: float = 1e-7,
    max_evals: int = 60,
    floor: float = 0.0,
    model: Callable[[float], float] | None = None,
) -> float:
    """Root of a decreasing f near `guess`: bracket, then Illinois regula falsi in log λ.
    f is constant below `floor` (the step saturates there): when f(floor) is still
    negative no λ reaches the root and `floor` is returned, instead of stepping
    down to the evaluation limit (each evaluation runs the whole transform chain).

    `model`: a cheap function that differs from f by nearly a constant (the
    linearised budget, whose root is `guess`). Then f(guess) gives that offset,
    the shifted model's root is the second trial, and the two usually bracket the
    root closely; when they do not, the secant through them reaches past it, and
    regula falsi ends in a few evaluations of f (measured: DEVELOPERS.md,
    "Estimates of memory and time"); otherwise the search widens as without a
    model."""
    f = _remembered(f)  # the search may come back to a λ (the floor): one evaluation
    if model is None:
        a, b = guess / 1.5, guess * 1.5
        fa, fb = f(a), f(b)
        evals = 2
    else:
        fg = f(guess)
        if abs(fg) < atol:
            return float(guess)
        offset = fg - model(guess)
        shifted = lambda lam: model(lam) + offset
        trial = max(_bracketed_root(shifted, guess, MODEL_ATOL, floor=floor), floor)
        ft = f(trial)
        evals = 2
        if abs(ft) < atol:
            return float(trial)
        # Both on one side: step on along the secant through the last two trials
        # (in log λ), a fifth further so as to pass the root, at most ×4 at a time.
        (l0, f0), (l1, f1) = (np.log(guess), fg), (np.log(trial), ft)
        while (f0 > 0) == (f1 > 0) and f0 != f1 and evals < SEARCH_STEPS + 2:
            reach = np.clip(-1.2 * f1 * (l1 - l0) / (f1 - f0), -np.log(4.0), np.log(4.0))
            l_next = max(l1 + reach, np.log(floor) if floor > 0 else -np.inf)
            if l_next == l1:
                break
            (l0, f0), (l1, f1) = (l1, f1), (l_next, f(np.exp(l_next)))
            evals += 1
            if abs(f1) < atol:
                return float(np.exp(l1))
        (a, fa), (b, fb) = sorted([(np.exp(l0), f0), (np.exp(l1), f1)])
        if fa > 0 and fb > 0:  # still both below the root: widen upwards from the upper
            a, fa = b, fb
            b = a * 1.5
            fb = f(b)
            evals += 1
        elif fa < 0 and fb < 0:  # both above it: widen downwards from the lower one
            b, fb = a, fa
            a = max(b / 1.5, floor)
            fa = f(a)
            evals += 1
    while fa < 0 and evals < max_evals:  # root lies below a
        if a <= floor:
            return float(floor)  # f(floor) < 0: no multiplier meets the budget
        b, fb = a, fa
        # the next step passes the floor, or the search has gone far from the
        # guess already (elements of tiny sensitivity put the floor many decades down
        # while f barely moves on the way): try the floor, once
        if floor > 0 and (a / 4 <= floor or evals >= SEARCH_STEPS + 2):
            a, fa = floor, f(floor)  # = f(λ) for every λ below the floor
            evals += 1
            if fa < 0:
                return float(floor)
            break
        a, fa = a / 4, f(a / 4)
        evals += 1
    while fb > 0 and evals < max_evals:  # root lies above b
        a, fa = b, fb
        if evals >= SEARCH_STEPS + 2:
            # far from the guess: try where every element sits at (or, with a
            # zero lower limit, within a millionth of) its lower limit, once
            b, fb = b * 1e12, f(b * 1e12)
            evals += 1
            if fb > 0:
                return float(b)  # too much material even there: the least reachable
            break
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


class MMA:
    """Method of Moving Asymptotes (Svanberg 1987, Int. J. Numer. Meth. Eng.
    24:359-373), for min f0(x) s.t. f_i(x) ≤ 0, i = 1..m, xmin ≤ x ≤ xmax.

    Each step builds the convex separable approximation with asymptotes l < x < u,
    adapted from the last two iterates (factors 0.7 / 1.2, Svanberg's usual
    choice), and solves its dual — a concave maximisation over λ ≥ 0 in m
    variables with x(λ) in closed form — by L-BFGS-B. Infeasible subproblems are
    made solvable with the elastic variables y_i (cost c_i y_i + ½ y_i², c = 1000)
    of the 1987 paper's extended form; with a_i = 0 the z variable drops out.

    With `globally_convergent` the step is GCMMA (Svanberg 2002, SIAM J. Optim.
    12:555-573): the approximations carry a convexity term ρ_i/(xmax − xmin) each,
    and inner iterations re-solve with larger ρ_i until every approximation is
    conservative (f̃_i(x̂) ≥ f_i(x̂)) at the candidate, which needs one more
    evaluation of the functions per inner iteration (`evaluate`).
    """

    def __init__(
        self,
        n: int,
        m: int,
        xmin: np.ndarray,
        xmax: np.ndarray,
        move: float = 0.2,
        asy_init: float = 0.5,
        asy_incr: float = 1.2,
        asy_decr: float = 0.7,
        globally_convergent: bool = False,
        max_inner: int = 15,
    ):
        self.n, self.m = n, m
        self.xmin, self.xmax = np.asarray(xmin, float), np.asarray(xmax, float)
        self.move, self.asy_init, self.asy_incr, self.asy_decr = move, asy_init, asy_incr, asy_decr
        self.globally_convergent, self.max_inner = globally_convergent, max_inner
        self.xold1 = self.xold2 = None
        self.low = self.upp = None
        self.iteration = 0
        self.c = np.full(m, 1000.0)
        self.d = np.ones(m)
        self.lam = np.zeros(m)
        self.inner_iterations = 0

    _STATE = ("xold1", "xold2", "low", "upp", "lam")

    def state(self) -> dict:
        out = {k: getattr(self, k) for k in self._STATE if getattr(self, k) is not None}
        out["iteration"] = np.array(self.iteration)
        return out

    def restore(self, state: dict) -> None:
        for k in self._STATE:
            setattr(self, k, state[k].copy() if k in state else None)
        self.iteration = int(state["iteration"])

    def _asymptotes(self, x: np.ndarray) -> None:
        span = self.xmax - self.xmin
        if self.iteration <= 2:
            self.low = x - self.asy_init * span
            self.upp = x + self.asy_init * span
        else:
            sign = (x - self.xold1) * (self.xold1 - self.xold2)
            factor = np.where(sign > 0, self.asy_incr, np.where(sign < 0, self.asy_decr, 1.0))
            self.low = x - factor * (self.xold1 - self.low)
            self.upp = x + factor * (self.upp - self.xold1)
            self.low = np.clip(self.low, x - 10 * span, x - 0.01 * span)
            self.upp = np.clip(self.upp, x + 0.01 * span, x + 10 * span)

    def _approximation(self, x, g, rho):
        """p, q of one function: MMA's form with the convexity term ρ/(xmax − xmin)."""
        span = np.maximum(self.xmax - self.xmin, 1e-12)
        ux, xl = self.upp - x, x - self.low
        if self.globally_convergent:
            p = ux**2 * (1.001 * np.maximum(g, 0) + 0.001 * np.maximum(-g, 0) + rho / span)
            q = xl**2 * (0.001 * np.maximum(g, 0) + 1.001 * np.maximum(-g, 0) + rho / span)
        else:
            p = ux**2 * (np.maximum(g, 0) + 0.001 * np.abs(g) + rho / span)
            q = xl**2 * (np.maximum(-g, 0) + 0.001 * np.abs(g) + rho / span)
        return p, q

    def _subproblem(self, x, df0, f0, f, df, rho):
        """Solve the approximate subproblem; returns x̂ and the approximations' values
        there (objective first)."""
        span = self.xmax - self.xmin
        alpha = np.maximum.reduce(
            [self.low + 0.1 * (x - self.low), x - self.move * span, self.xmin]
        )
        beta = np.minimum.reduce([self.upp - 0.1 * (self.upp - x), x + self.move * span, self.xmax])
        ux, xl = self.upp - x, x - self.low
        p0, q0 = self._approximation(x, df0, rho[0])
        pq_i = [self._approximation(x, g, r) for g, r in zip(np.atleast_2d(df), rho[1:])]
        P = np.array([p for p, _ in pq_i])  # (m, n)
        Q = np.array([q for _, q in pq_i])
        b = (P / ux).sum(axis=1) + (Q / xl).sum(axis=1) - np.asarray(f, float)
        r0 = f0 - (p0 / ux).sum() - (q0 / xl).sum()

        def primal(lam):
            pl, ql = p0 + lam @ P, q0 + lam @ Q
            sp_, sq = np.sqrt(pl), np.sqrt(ql)
            xs = np.clip((sp_ * self.low + sq * self.upp) / (sp_ + sq), alpha, beta)
            return xs, pl, ql

        def neg_dual(lam):
            xs, pl, ql = primal(lam)
            y = np.maximum(0.0, (lam - self.c) / self.d)
            w = (
                (pl / (self.upp - xs)).sum()
                + (ql / (xs - self.low)).sum()
                + (self.c * y + 0.5 * self.d * y**2 - lam * y).sum()
                - lam @ b
            )
            g_i = (P / (self.upp - xs)).sum(axis=1) + (Q / (xs - self.low)).sum(axis=1)
            grad = g_i - y - b
            return -w, -grad

        from scipy.optimize import minimize

        res = minimize(
            neg_dual,
            self.lam,
            jac=True,
            method="L-BFGS-B",
            bounds=[(0.0, None)] * self.m,
            options={"maxiter": 500, "gtol": 1e-10},
        )
        self.lam = np.maximum(res.x, 0.0)
        xs = primal(self.lam)[0]
        approx0 = (p0 / (self.upp - xs)).sum() + (q0 / (xs - self.low)).sum() + r0
        approx = (P / (self.upp - xs)).sum(axis=1) + (Q / (xs - self.low)).sum(axis=1) - b
        return xs, np.concatenate([[approx0], approx])

    def update(
        self,
        x: np.ndarray,
        df0: np.ndarray,
        f: np.ndarray,
        df: np.ndarray,
        f0: float = 0.0,
        evaluate=None,
    ) -> np.ndarray:
        """x (n,), df0 (n,), constraint values f (m,), gradients df (m, n) → new x.
        GCMMA also needs the objective value f0 and evaluate(x̂) → (f0, f)."""
        self.iteration += 1
        self._asymptotes(x)
        span = self.xmax - self.xmin
        if not self.globally_convergent:
            rho = np.full(self.m + 1, 1e-5)
            x_new = self._subproblem(x, df0, f0, f, df, rho)[0]
        else:
            if evaluate is None:
                raise ValueError("GCMMA needs evaluate(x) for its inner iterations")
            grads = np.vstack([df0, np.atleast_2d(df)])
            # initial ρ_i = 0.1/n Σ_j |∂f_i/∂x_j| (xmax_j − xmin_j) (Svanberg 2002, §5)
            rho = np.maximum(0.1 / self.n * (np.abs(grads) * span).sum(axis=1), 1e-6)
            self.inner_iterations = 0
            for inner in range(self.max_inner + 1):
                x_new, approx = self._subproblem(x, df0, f0, f, df, rho)
                true0, true = evaluate(x_new)
                values = np.concatenate([[true0], np.asarray(true, float)])
                slack = values - approx
                if (
                    np.all(slack <= 1e-9 * np.maximum(1.0, np.abs(values)))
                    or inner == self.max_inner
                ):
                    break
                self.inner_iterations += 1
                # d(x̂) = Σ (u − l)(x̂ − x)² / ((u − x̂)(x̂ − l)(xmax − xmin))
                dist = (
                    (self.upp - self.low)
                    * (x_new - x) ** 2
                    / ((self.upp - x_new) * (x_new - self.low) * np.maximum(span, 1e-12))
                ).sum()
                grow = np.where(
                    slack > 0, np.minimum(1.1 * (rho + slack / max(dist, 1e-12)), 10 * rho), rho
                )
                rho = grow
        self.xold2, self.xold1 = self.xold1, x.copy()
        if self.xold2 is None:
            self.xold2 = x.copy()
        return x_new


def _constraint_arrays(constraints, active: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values g_i and gradients ∂g_i/∂x on the design elements."""
    g = np.array([r.value / r.limit - 1.0 for r in constraints])
    dg = np.array([r.gradient[active] / r.limit for r in constraints])
    return g, dg


class _MMAOnDesign:
    """MMA on the design elements, with the objective scaled by its first value."""

    def __init__(
        self,
        active: np.ndarray,
        n_extra: int,
        m: int,
        move: float,
        globally_convergent: bool = False,
    ):
        n = int(active.sum()) + n_extra
        lo, hi = np.zeros(n), np.ones(n)
        if n_extra:
            hi[-1] = 100.0  # t, in units of the first iteration's largest compliance
        self.mma = MMA(n, m, lo, hi, move=move, globally_convergent=globally_convergent)
        self.active, self.scale, self.t = active, None, None

    def state(self) -> dict:
        out = {f"mma_{k}": v for k, v in self.mma.state().items()}
        out["scale"] = np.array(self.scale if self.scale is not None else np.nan)
        out["t"] = np.array(self.t if self.t is not None else np.nan)
        return out

    def restore(self, state: dict) -> None:
        self.mma.restore({k[4:]: v for k, v in state.items() if k.startswith("mma_")})
        self.scale = None if np.isnan(state["scale"]) else float(state["scale"])
        self.t = None if np.isnan(state["t"]) else float(state["t"])


class MMAStep(_MMAOnDesign):
    """min f/f₁ s.t. g_i ≤ 0 with f₁ = |∂f/∂x · x| at the first iteration; with
    `globally_convergent`, GCMMA, whose inner iterations call `ev.probe`."""

    def __init__(
        self, active: np.ndarray, n_constraints: int, move: float, globally_convergent: bool = False
    ):
        super().__init__(active, 0, n_constraints, move, globally_convergent)

    def step(self, x: np.ndarray, ev) -> np.ndarray:
        act, objective = self.active, ev.objective
        if self.scale is None:
            self.scale = float(abs(objective.gradient[act] @ x[act])) or 1.0
        g, dg = _constraint_arrays(ev.constraints, act)
        probe = None
        if self.mma.globally_convergent:

            def probe(xa: np.ndarray) -> tuple[float, np.ndarray]:
                full = x.copy()
                full[act] = xa
                value, values = ev.probe(full)
                return value / self.scale, values

        out = x.copy()
        out[act] = self.mma.update(
            x[act], objective.gradient[act] / self.scale, g, dg, objective.value / self.scale, probe
        )
        return out


class BoundFormulation(_MMAOnDesign):
    """Worst case by the bound formulation: min t over (x, t) s.t. c_l/c₁ ≤ t for
    every bound term and g_i ≤ 0; c₁ is the first iteration's largest c_l."""

    def __init__(self, active: np.ndarray, n_bounds: int, n_constraints: int, move: float):
        super().__init__(active, 1, n_bounds + n_constraints, move)

    def step(self, x: np.ndarray, ev) -> np.ndarray:
        act, n = self.active, int(self.active.sum())
        c = np.array([b.value for b in ev.bounds])
        if self.scale is None:
            self.scale, self.t = float(c.max()), 1.0
        g, dg = _constraint_arrays(ev.constraints, act)
        df0 = np.zeros(n + 1)
        df0[-1] = 1.0
        df = np.zeros((len(c) + len(g), n + 1))
        for i, b in enumerate(ev.bounds):
            df[i, :n], df[i, -1] = b.gradient[act] / self.scale, -1.0
        df[len(c) :, :n] = dg
        z = self.mma.update(
            np.append(x[act], self.t), df0, np.concatenate([c / self.scale - self.t, g]), df
        )
        self.t = float(z[-1])
        out = x.copy()
        out[act] = z[:n]
        return out


def make_optimizer(settings, active: np.ndarray, n_bounds: int = 0, n_constraints: int = 1):
    """The optimizer the problem's `optimization` settings name, sized for the design
    elements `active`, `n_bounds` worst-case bounds and `n_constraints` constraints.
    Any callable of these arguments returning an object with `step` can stand in."""
    if n_bounds:
        return BoundFormulation(active, n_bounds, n_constraints, settings.move_limit)
    if settings.optimizer in ("mma", "gcmma"):
        return MMAStep(
            active,
            n_constraints,
            settings.move_limit,
            globally_convergent=settings.optimizer == "gcmma",
        )
    return OptimalityCriteria(active, settings.move_limit)
