"""The responses the optimizer sees: the objective and the constraints g ≤ 0.

Each response is a named term with a value v, a limit L and the gradient of v, first
with respect to the physical density ρ (`Responses.evaluate`, the sensitivities) and
then, pulled back through the transform chain, with respect to the design variables
x (`Responses.pull_back`). A constraint reads g = v/L − 1 ≤ 0. A new constraint is
one more term in `constraint_terms`: an object with a `name` and
`evaluate(rho, analysis, gradient) → Response`; neither the loop nor the optimizers
change.

The worst-case objective (bound formulation) reports max_l c_l and hands the
optimizer one bound term per load case, c_l ≤ t, in `Evaluation.bounds`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .problem import Problem, ProblemError


@dataclass
class Response:
    name: str
    value: float
    limit: float = 1.0
    gradient: np.ndarray | None = None  # d value / dρ, after pull_back d value / dx
    exact: Callable[[np.ndarray], float] | None = None  # value at a candidate x without a solve
    # the chain the gradient is pulled back through when it is not the loop's (the
    # robust formulation's budget: the dilated design)
    through: object | None = None

    @property
    def g(self) -> float:
        """The constraint value v/L − 1 (≤ 0 when met)."""
        return self.value / self.limit - 1.0


@dataclass
class Evaluation:
    """The responses at one design; `probe(x)` → (objective, g values) at a candidate
    design, one solve each (the inner iterations of GCMMA)."""

    objective: Response
    constraints: list[Response]
    bounds: list[Response] = field(default_factory=list)
    probe: Callable[[np.ndarray], tuple[float, np.ndarray]] | None = None


def compliance_gradient(
    model, density: np.ndarray, analysis, weights: np.ndarray
) -> tuple[float, np.ndarray]:
    """Weighted compliance and its derivative with respect to ρ (adjoint: λ = −u)."""
    c = float(weights @ analysis.compliances)
    # ∂c_l/∂ρ_e = −(∂E_e/∂ρ_e / E0) · u_eᵀ k0 u_e  (k0 with the solid modulus)
    dc = -model.moduli_derivative(density) * (analysis.energies @ weights)
    return c, dc


class WeightedCompliance:
    """c = Σ w_l f_lᵀ u_l over the load cases."""

    name = "compliance"

    def __init__(self, model, weights: np.ndarray):
        self.model, self.weights = model, weights

    def evaluate(self, rho, analysis, gradient: bool = True) -> tuple[Response, list]:
        if not gradient:
            return Response(self.name, float(self.weights @ analysis.compliances)), []
        c, dc = compliance_gradient(self.model, rho, analysis, self.weights)
        return Response(self.name, c, gradient=dc), []


class WorstCaseCompliance:
    """max_l c_l, handed to the optimizer as one bound c_l ≤ t per load case
    (bound formulation, Bendsøe & Sigmund 2003, Topology Optimization, §2.5)."""

    name = "worst-case compliance"

    def __init__(self, model, case_names: list[str]):
        self.model, self.case_names = model, case_names

    def evaluate(self, rho, analysis, gradient: bool = True) -> tuple[Response, list]:
        worst = Response(self.name, float(analysis.compliances.max()))
        per_case = -self.model.moduli_derivative(rho)[:, None] * analysis.energies
        bounds = [
            Response(f"compliance[{name}]", float(c), gradient=g)
            for name, c, g in zip(self.case_names, analysis.compliances, per_case.T)
        ]
        return worst, bounds


class SupportedInterfaces:
    """Steers the optimiser to support the passive solid regions (interfaces) with
    design material when the overhang layer is on. The overhang layer gives an
    unsupported part of an interface a low density, and the printed part has the
    interface whole all the same (printed.py). Each compliance f is scaled by the
    share of the interfaces left unsupported,

        f̂ = f · (1 + w · m),   m = mean over the passive solid elements of (1 − ρ_e),

    so that supporting an interface lowers the objective in proportion to the
    compliance itself, whatever the units (our formulation; w =
    build.interface_support, 0 switches it off). A fully supported interface
    comes out of the overhang layer at about 0.994 (its smoothing), so m stays
    near 0.006 and the scaling near 1 on a design that supports them all."""

    def __init__(self, objective, model, weight: float):
        self.inner, self.weight, self.mask = objective, weight, model.solid
        self.name = objective.name

    def evaluate(self, rho, analysis, gradient: bool = True) -> tuple[Response, list]:
        objective, bounds = self.inner.evaluate(rho, analysis, gradient)
        shortfall = float((1.0 - rho[self.mask]).mean())
        factor = 1.0 + self.weight * shortfall
        d_factor = np.zeros_like(rho)
        d_factor[self.mask] = -self.weight / self.mask.sum()
        for r in [objective, *bounds]:
            if r.gradient is not None:
                r.gradient = r.gradient * factor + r.value * d_factor
            r.value *= factor
        return objective, bounds


class Term:
    """A constraint term; those that carry state between iterations (the stress
    correction) save and restore it for checkpoints."""

    name = "term"
    # True for a term that reads the design x itself (evaluate(..., design=x))
    needs_design = False

    def state(self) -> dict:
        return {}

    def restore(self, state: dict) -> None:
        """Nothing to restore."""


class MaterialBudget(Term):
    """w·ρ ≤ target. volume_fraction: w averages ρ over the design elements.
    mass_limit: w is each element's mass at full density, over all elements, so
    passive solids count (and so does any part of them the overhang layer removes).
    `start` is the starting density of the design elements."""

    name = "material"

    def __init__(self, problem: Problem, model, chain):
        opt, active = problem.optimization, model.active
        n_active = int(active.sum())
        self.chain = chain
        if opt.mass_limit is None:
            self.weights, self.target = active / n_active, opt.volume_fraction
            self.start = opt.volume_fraction
            return
        element_mass = problem.domain.element_volume * 1e-9 * problem.material.density  # kg
        passive = element_mass * int(model.solid.sum())
        if passive >= opt.mass_limit:
            raise ProblemError(
                problem.source,
                "optimization.mass_limit",
                f"{opt.mass_limit} kg is not more than the passive solid regions "
                f"alone ({passive:.4g} kg)",
            )
        self.weights = np.full(model.grid.n_elements, element_mass)
        self.target = opt.mass_limit
        self.start = float(
            np.clip((opt.mass_limit - passive) / (element_mass * n_active), 0.01, 1.0)
        )

    def at(self, x: np.ndarray) -> float:
        return float(self.weights @ self.chain.forward(x))

    def evaluate(self, rho, analysis, gradient: bool = True, design=None) -> Response:
        # A projection or an overhang layer makes the budget nonlinear in x: OC
        # meets it exactly at every step through `exact`.
        return Response(
            self.name,
            float(self.weights @ rho),
            self.target,
            self.weights if gradient else None,
            None if self.chain.linear else self.at,
        )


class DilatedBudget(MaterialBudget):
    """The material budget of the robust formulation (robust.py): the dilated design
    holds it, under a limit set at each accepted design to target · V_d / V_i, so that
    the intermediate design, the one printed, meets the budget (Wang, Lazarov &
    Sigmund 2011, Struct. Multidisc. Optim. 43:767). Evaluated at the design x
    (`design`), since ρ is the eroded design; its gradient is pulled back through
    the dilated chain."""

    def __init__(self, problem: Problem, model, chain):
        super().__init__(problem, model, chain.dilated)
        self.intermediate, self.budget = chain.intermediate, self.target

    def evaluate(self, rho, analysis, gradient: bool = True, design=None) -> Response:
        if design is None:
            raise ValueError("the robust formulation's budget needs the design x")
        value = self.at(design)
        if gradient:  # the accepted design sets the limit for its step and its probes
            blueprint = float(self.weights @ self.intermediate.forward(design))
            self.target = self.budget * value / blueprint if blueprint > 0 else self.budget
        return Response(
            self.name,
            value,
            self.target,
            self.weights if gradient else None,
            self.at,
            through=self.chain,
        )


class StressLimit(Term):
    """c_k·σ_PN − 1 ≤ 0 on the p-norm of the relaxed stress of each load case over
    that case's limit, s_el / L_l (one aggregate over elements and cases: the largest
    share of its limit any case reaches), with the adaptive correction c_k of Le et
    al. (2010, Struct. Multidisc. Optim. 41:605): the latest ratio of the true peak
    to the aggregate blended with the previous correction. Only the evaluation with
    gradient (the accepted design) updates c_k. `limits` is one value for every
    case, or one per case with inf for a case left unbounded."""

    name = "stress"

    def __init__(self, model, limits, alpha: float = 0.5):
        from .stress import StressMeasure

        n_cases = len(model.problem.load_cases)
        self.limits = np.broadcast_to(np.asarray(limits, dtype=float), (n_cases,)).copy()
        self.scale = 1.0 / self.limits  # 0 where a case has no bound
        self.measure, self.alpha = StressMeasure(model), alpha
        self.correction: float | None = None

    def evaluate(self, rho, analysis, gradient: bool = True) -> Response:
        if not gradient:
            pn = self.measure.aggregate(rho, analysis, gradient=False, scale=self.scale)[0]
            return Response(self.name, self.correction * pn)
        pn, dpn, peak = self.measure.aggregate(rho, analysis, scale=self.scale)
        ratio = peak / pn if pn > 0 else 1.0
        prev = self.correction
        self.correction = ratio if prev is None else self.alpha * ratio + (1 - self.alpha) * prev
        return Response(self.name, self.correction * pn, gradient=self.correction * dpn)

    def state(self) -> dict:
        return {"correction": np.array(np.nan if self.correction is None else self.correction)}

    def restore(self, state: dict) -> None:
        c = state.get("correction")
        self.correction = None if c is None or np.isnan(c) else float(c)


class DeflectionLimit(Term):
    """(δ/δ_lim)² − 1 ≤ 0 for one probe and one load case: |δ| ≤ δ_lim along the
    probe's direction, with the adjoint gradient of deflection.py (one extra solve
    with the factorised matrix per limited probe and case)."""

    def __init__(self, model, probe, case: int):
        self.model, self.probe, self.case = model, probe, case
        self.name = f"deflection[{probe.name}, {model.problem.load_cases[case].name}]"

    def evaluate(self, rho, analysis, gradient: bool = True) -> Response:
        from .deflection import deflection_gradient, deflections

        limit = self.probe.limit**2
        if not gradient:
            return Response(
                self.name, deflections(self.probe, analysis.displacements)[self.case] ** 2, limit
            )
        delta, d_delta = deflection_gradient(self.model, rho, analysis, self.probe, self.case)
        return Response(self.name, delta**2, limit, gradient=2.0 * delta * d_delta)


def loop_stress_limits(problem: Problem) -> list[dict]:
    """Per load case, the peak von Mises stress the loop allows: {name, limit_MPa
    (None: unbounded), governed_by ("stress_limit", "fatigue_life" or None)}.
    optimization.stress_limit bounds every case; with optimization.fatigue_life each
    case with cycles is bounded by the peak whose point on the chosen mean-stress
    correction at the S-N strength of that life gives the required
    checks.fatigue_safety_factor (fatigue.allowed_peak); the lower one governs.

    A case cycling against another (`cycles_with`) is bounded as fully reversed, and
    so is its partner: with both von Mises peaks ≤ σb the cycle's amplitude plus its
    mean is at most σb, and on a correction line with Sa < Su the worst of those is
    σa = σb, σm = 0."""
    opt = problem.optimization
    fatigue = {}
    if opt.fatigue_life is not None:
        from .conditions import condition_of
        from .fatigue import allowed_peak

        cond = condition_of(problem.material)

        def bound(ratio):
            return allowed_peak(
                cond,
                opt.fatigue_life,
                ratio,
                problem.checks.fatigue_safety_factor,
                problem.material.mean_stress_correction,
            )

        for case in problem.load_cases:
            if case.cycles is None:
                continue
            partner = case.cycles_with
            if partner is None:
                fatigue[case.name] = bound(case.load_ratio)
            else:
                reversed_ = bound(-1.0)
                for name in (case.name, partner):
                    fatigue[name] = min(fatigue.get(name, np.inf), reversed_)

    rows = []
    for case in problem.load_cases:
        limit, by = opt.stress_limit, "stress_limit" if opt.stress_limit is not None else None
        peak = fatigue.get(case.name)
        if peak is not None and (limit is None or peak < limit):
            limit, by = peak, "fatigue_life"
        rows.append({"name": case.name, "limit_MPa": limit, "governed_by": by})
    return rows


def case_stress_limits(problem: Problem) -> np.ndarray | None:
    """The limits of loop_stress_limits as an array (inf: no bound), None when no
    case is bounded."""
    limits = [r["limit_MPa"] for r in loop_stress_limits(problem)]
    if all(v is None for v in limits):
        return None
    return np.array([np.inf if v is None else v for v in limits])


def refuse_closed_passives(problem: Problem, model) -> None:
    """With build.no_enclosed_cavities, a region that the passive solids alone close
    in is a cavity no design can open: refused."""
    from .cavities import unavoidable_cavities

    if problem.build is None or not problem.build.no_enclosed_cavities:
        return
    shape, h = model.grid.shape, problem.domain.element_size
    trapped = unavoidable_cavities(model.solid.reshape(shape))
    if trapped.any():
        where = (np.argwhere(trapped).mean(axis=0) + 0.5) * h
        raise ProblemError(
            problem.source,
            "build.no_enclosed_cavities",
            f"the passive solid regions alone close in {int(trapped.sum())} elements "
            f"(around [{', '.join(f'{v:g}' for v in where)}] mm): no design can open "
            "them; leave the key out or open the passive regions",
        )


class EnclosedCavities(Term):
    """ln(P(ρ)/P_ref) ≤ ln(build.cavity_bound): the p-norm of the virtual temperature
    (cavities.py; Liu et al. 2015, Front. Mech. Eng. 10:126) against that of the
    reference design with every design element empty, which has no closed void.
    Two solves of the scalar conduction problem (temperature, adjoint) per design."""

    name = "cavities"
    needs_design = True

    def __init__(self, problem: Problem, model, chain=None):
        from .cavities import VirtualTemperature
        from .robust import RobustChain

        refuse_closed_passives(problem, model)
        self.temperature = VirtualTemperature(model.grid.shape)
        self.log_bound = float(np.log(problem.build.cavity_bound))
        self.reference = self.temperature.aggregate(np.where(model.solid, 1.0, 0.0), False)[0]
        # the robust formulation analyses the eroded design, whose voids are the
        # widest; the dilated design, the most solid, is the one that closes them in
        self.dilated = chain.dilated if isinstance(chain, RobustChain) else None

    def evaluate(self, rho, analysis, gradient: bool = True, design=None) -> Response:
        through = None
        if self.dilated is not None:
            if design is None:
                raise ValueError("the robust formulation's cavity term needs the design x")
            rho, through = self.dilated.forward(design), self.dilated
        # in logarithms, ln(P/P_ref) ≤ ln(bound): a closed void raises P by orders
        # of magnitude, and the logarithm keeps the constraint's steps to a scale
        # MMA's approximation follows
        value, d_value, _ = self.temperature.aggregate(rho, gradient)
        if value < 1e-12 * self.reference:  # no void at all (a full budget): nothing to trap
            value, d_value = 1e-12 * self.reference, None if d_value is None else 0 * d_value
        d_log = None if d_value is None else d_value / value
        return Response(
            self.name,
            float(np.log(value / self.reference)),
            self.log_bound,
            d_log,
            through=through,
        )

    def state(self) -> dict:
        return self.temperature.system.state()  # the CG warm start on large grids

    def restore(self, state: dict) -> None:
        self.temperature.system.restore(state)


def constraint_terms(problem: Problem, model, chain) -> list:
    """The constraints of a problem, the material budget first. Deflection limits
    are constraints for MMA and GCMMA; OC takes the budget only (the limits are
    then checked on the printed part, problem.py warns)."""
    from .robust import RobustChain

    budget = DilatedBudget if isinstance(chain, RobustChain) else MaterialBudget
    terms = [budget(problem, model, chain)]
    limits = case_stress_limits(problem)
    if limits is not None:
        terms.append(StressLimit(model, limits))
    if problem.build is not None and problem.build.no_enclosed_cavities:
        terms.append(EnclosedCavities(problem, model, chain))
    if problem.optimization.optimizer != "oc":
        terms += [
            DeflectionLimit(model, probe, case)
            for probe in model.probes
            if probe.limit is not None
            for case in probe.cases
        ]
    return terms


class Responses:
    """The objective and the constraint terms of a problem, evaluated together."""

    def __init__(self, problem: Problem, model, chain):
        if problem.optimization.objective == "worst_case":
            self.objective = WorstCaseCompliance(model, [c.name for c in problem.load_cases])
        else:
            self.objective = WeightedCompliance(
                model, np.array([c.weight for c in problem.load_cases])
            )
        build = problem.build
        if build and build.overhang_filter and build.interface_support > 0 and model.solid.any():
            self.objective = SupportedInterfaces(self.objective, model, build.interface_support)
        self.constraints = constraint_terms(problem, model, chain)
        self.model, self.chain = model, chain
        self.n_bounds = (
            len(problem.load_cases) if problem.optimization.objective == "worst_case" else 0
        )

    @property
    def material(self) -> MaterialBudget:
        return self.constraints[0]

    def evaluate(self, rho: np.ndarray, analysis, x: np.ndarray | None = None) -> Evaluation:
        """Values and ρ-gradients at the accepted design x (ρ its analysed field)."""
        objective, bounds = self.objective.evaluate(rho, analysis)
        constraints = [self.material.evaluate(rho, analysis, design=x)]
        constraints += [self._term(t, rho, analysis, x) for t in self.constraints[1:]]
        return Evaluation(objective, constraints, bounds, self.probe)

    @staticmethod
    def _term(term, rho, analysis, x, gradient: bool = True) -> Response:
        if term.needs_design:
            return term.evaluate(rho, analysis, gradient, design=x)
        return term.evaluate(rho, analysis, gradient)

    def pull_back(self, x: np.ndarray, ev: Evaluation) -> None:
        """Turn every ρ-gradient of `ev` into an x-gradient, in one chain pass."""
        terms = [r for r in [ev.objective, *ev.bounds, *ev.constraints] if r.gradient is not None]
        own = [r for r in terms if r.through is None]
        for r, g in zip(own, self.chain.backward_many(x, [r.gradient for r in own])):
            r.gradient = g
        for r in terms:
            if r.through is not None:
                r.gradient = r.through.backward(x, r.gradient)

    def probe(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        """Objective and constraint values at a candidate design (one solve); the
        stress correction stays as it is."""
        rho = self.chain.forward(x)
        analysis = self.model.analyze(rho, stresses=False)
        objective = self.objective.evaluate(rho, analysis, gradient=False)[0]
        budget = self.material.evaluate(rho, analysis, gradient=False, design=x)
        return objective.value, np.array(
            [budget.g]
            + [self._term(t, rho, analysis, x, gradient=False).g for t in self.constraints[1:]]
        )

    def state(self) -> dict:
        return {f"{t.name}_{k}": v for t in self.constraints for k, v in t.state().items()}

    def restore(self, state: dict) -> None:
        for t in self.constraints:
            prefix = f"{t.name}_"
            t.restore({k[len(prefix) :]: v for k, v in state.items() if k.startswith(prefix)})
