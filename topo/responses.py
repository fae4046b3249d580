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

    def evaluate(self, rho, analysis, gradient: bool = True) -> Response:
        # A projection or an overhang layer makes the budget nonlinear in x: OC
        # meets it exactly at every step through `exact`.
        return Response(
            self.name,
            float(self.weights @ rho),
            self.target,
            self.weights if gradient else None,
            None if self.chain.linear else self.at,
        )


class StressLimit(Term):
    """c_k·σ_PN/σ_limit − 1 ≤ 0 on the p-norm of the relaxed stress, with the
    adaptive correction c_k of Le et al. (2010, Struct. Multidisc. Optim. 41:605):
    the latest ratio of the true peak to the aggregate blended with the previous
    correction. Only the evaluation with gradient (the accepted design) updates c_k."""

    name = "stress"

    def __init__(self, model, limit: float, alpha: float = 0.5):
        from .stress import StressMeasure

        self.measure, self.limit, self.alpha = StressMeasure(model), limit, alpha
        self.correction: float | None = None

    def evaluate(self, rho, analysis, gradient: bool = True) -> Response:
        if not gradient:
            pn = self.measure.aggregate(rho, analysis, gradient=False)[0]
            return Response(self.name, self.correction * pn / self.limit)
        pn, dpn, peak = self.measure.aggregate(rho, analysis)
        ratio = peak / pn if pn > 0 else 1.0
        prev = self.correction
        self.correction = ratio if prev is None else self.alpha * ratio + (1 - self.alpha) * prev
        return Response(
            self.name,
            self.correction * pn / self.limit,
            gradient=self.correction * dpn / self.limit,
        )

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

    def __init__(self, problem: Problem, model):
        from .cavities import VirtualTemperature

        refuse_closed_passives(problem, model)
        self.temperature = VirtualTemperature(model.grid.shape)
        self.log_bound = float(np.log(problem.build.cavity_bound))
        self.reference = self.temperature.aggregate(np.where(model.solid, 1.0, 0.0), False)[0]

    def evaluate(self, rho, analysis, gradient: bool = True) -> Response:
        # in logarithms, ln(P/P_ref) ≤ ln(bound): a closed void raises P by orders
        # of magnitude, and the logarithm keeps the constraint's steps to a scale
        # MMA's approximation follows
        value, d_value, _ = self.temperature.aggregate(rho, gradient)
        if value < 1e-12 * self.reference:  # no void at all (a full budget): nothing to trap
            value, d_value = 1e-12 * self.reference, None if d_value is None else 0 * d_value
        d_log = None if d_value is None else d_value / value
        return Response(self.name, float(np.log(value / self.reference)), self.log_bound, d_log)

    def state(self) -> dict:
        return self.temperature.system.state()  # the CG warm start on large grids

    def restore(self, state: dict) -> None:
        self.temperature.system.restore(state)


def constraint_terms(problem: Problem, model, chain) -> list:
    """The constraints of a problem, the material budget first. Deflection limits
    are constraints for MMA and GCMMA; OC takes the budget only (the limits are
    then checked on the printed part, problem.py warns)."""
    terms = [MaterialBudget(problem, model, chain)]
    if problem.optimization.stress_limit is not None:
        terms.append(StressLimit(model, problem.optimization.stress_limit))
    if problem.build is not None and problem.build.no_enclosed_cavities:
        terms.append(EnclosedCavities(problem, model))
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

    def evaluate(self, rho: np.ndarray, analysis) -> Evaluation:
        """Values and ρ-gradients at the accepted design."""
        objective, bounds = self.objective.evaluate(rho, analysis)
        constraints = [t.evaluate(rho, analysis) for t in self.constraints]
        return Evaluation(objective, constraints, bounds, self.probe)

    def pull_back(self, x: np.ndarray, ev: Evaluation) -> None:
        """Turn every ρ-gradient of `ev` into an x-gradient, in one chain pass."""
        terms = [r for r in [ev.objective, *ev.bounds, *ev.constraints] if r.gradient is not None]
        for r, g in zip(terms, self.chain.backward_many(x, [r.gradient for r in terms])):
            r.gradient = g

    def probe(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        """Objective and constraint values at a candidate design (one solve); the
        stress correction stays as it is."""
        rho = self.chain.forward(x)
        analysis = self.model.analyze(rho, stresses=False)
        objective = self.objective.evaluate(rho, analysis, gradient=False)[0]
        return objective.value, np.array(
            [t.evaluate(rho, analysis, gradient=False).g for t in self.constraints]
        )

    def state(self) -> dict:
        return {f"{t.name}_{k}": v for t in self.constraints for k, v in t.state().items()}

    def restore(self, state: dict) -> None:
        for t in self.constraints:
            prefix = f"{t.name}_"
            t.restore({k[len(prefix) :]: v for k, v in state.items() if k.startswith(prefix)})
