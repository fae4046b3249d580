"""The optimisation loop: x → transforms → ρ → FE solve → sensitivities → update.

Minimises the weighted sum of load-case compliances c = Σ w_l f_lᵀ u_l subject to the
mean physical density of the design elements (passive regions excluded) equal to the
volume fraction. With projection on, β starts at 1 and doubles every `beta_interval`
iterations, or earlier once the design change falls below the tolerance, until
`beta_max`; the run counts as converged only with β at its maximum, when the design change is
below the tolerance or the objective has settled (see `_objective_settled`).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .fem import Analysis, Model, _tick
from .optimizers import OptimalityCriteria
from .problem import Problem
from .solvers import blas_for_solver
from .transforms import Chain, DensityFilter, HeavisideProjection, OverhangFilter, PassiveOverride


@dataclass
class Result:
    """A finished design: every exporter reads this and nothing else."""
    problem: Problem
    model: Model
    density: np.ndarray  # physical ρ, grid shape
    design: np.ndarray  # design variables x, grid shape
    analysis: Analysis  # of the final ρ
    history: list[dict] = field(default_factory=list)
    converged: bool = False
    runtime_s: float = 0.0
    stop_reason: str = ""
    summary: dict = field(default_factory=dict)


SETTLED_WINDOW, SETTLED_RTOL = 10, 1e-4


def _objective_settled(history: list[dict], since_beta: int) -> bool:
    """True when the objective moved less than SETTLED_RTOL (relative) over the last
    SETTLED_WINDOW iterations at the current β. With a sharp projection a few
    elements on the boundary can keep flipping in x long after the layout and the
    compliance have settled; this rule ends such runs and says so in the summary."""
    if since_beta < SETTLED_WINDOW or len(history) < SETTLED_WINDOW:
        return False
    recent = [h["objective"] for h in history[-SETTLED_WINDOW:]]
    return (max(recent) - min(recent)) <= SETTLED_RTOL * abs(recent[-1])


def build_chain(problem: Problem, model: Model) -> tuple[Chain, HeavisideProjection | None]:
    opt = problem.optimization
    steps = [DensityFilter(model.grid.shape, opt.filter_radius / problem.domain.element_size)]
    projection = None
    if opt.projection:
        projection = HeavisideProjection(1.0, opt.projection_threshold)
        steps.append(projection)
    steps.append(PassiveOverride(model.solid, model.void))
    # Last, so that passive solids must be supported like any other element.
    if problem.build is not None and problem.build.overhang_filter:
        steps.append(OverhangFilter(model.grid.shape, problem.build.direction))
    return Chain(steps), projection


def compliance_gradient(model: Model, density: np.ndarray, analysis: Analysis,
                        weights: np.ndarray) -> tuple[float, np.ndarray]:
    """Weighted compliance and its derivative with respect to ρ (adjoint: λ = −u)."""
    c = float(weights @ analysis.compliances)
    # ∂c_l/∂ρ_e = −(∂E_e/∂ρ_e / E0) · u_eᵀ k0 u_e  (k0 with the solid modulus)
    dc = -model.moduli_derivative(density) * (analysis.energies @ weights)
    return c, dc


def optimize(problem: Problem, callback: Callable[[dict], None] | None = None,
             timer: dict | None = None) -> Result:
    """Run the design loop; `callback` receives each history row as it is made;
    `timer` (a dict) accumulates seconds per phase: assembly, solve,
    sensitivities, transforms, update (for benchmarks)."""
    with blas_for_solver():
        return _optimize(problem, callback, timer)


def _optimize(problem: Problem, callback, timer) -> Result:
    from .report import summarize

    start = time.perf_counter()
    opt = problem.optimization
    model = Model(problem)
    chain, projection = build_chain(problem, model)
    active = model.active
    n_active = int(active.sum())
    if n_active == 0:
        raise ValueError("no design elements: passive regions cover the whole domain")
    weights = np.array([c.weight for c in problem.load_cases])
    dv_drho = active / n_active

    update = OptimalityCriteria(active, opt.move_limit)
    # A projection or an overhang layer makes the volume nonlinear in x: meet it
    # exactly at every step.
    exact_volume = None if chain.linear else (lambda xc: float(dv_drho @ chain.forward(xc)))
    x = np.where(model.solid, 1.0, 0.0)
    x[active] = opt.volume_fraction
    history: list[dict] = []
    converged, stop_reason = False, "iteration limit"
    since_beta = 0
    for it in range(1, opt.max_iterations + 1):
        t0 = time.perf_counter()
        rho = chain.forward(x)
        clock = _tick(timer, "transforms", t0)
        analysis = model.analyze(rho, stresses=False, timer=timer)
        clock = time.perf_counter()
        c, dc_drho = compliance_gradient(model, rho, analysis, weights)
        volume = float(dv_drho @ rho)
        clock = _tick(timer, "sensitivities", clock)
        dc, dv = chain.backward_many(x, [dc_drho, dv_drho])
        clock = _tick(timer, "transforms", clock)
        x_new = update.update(x, dc, volume, dv, opt.volume_fraction, exact_volume)
        _tick(timer, "update", clock)  # includes the exact-volume chain evaluations
        change = float(np.max(np.abs(x_new - x)[active]))
        x = x_new
        beta = projection.beta if projection else None
        row = {"iteration": it, "objective": c, "volume_fraction": volume, "change": change,
               "beta": beta, "seconds": time.perf_counter() - t0,
               "solver_iterations": model.solver.iterations, "solver": model.solver.name}
        history.append(row)
        if callback:
            callback(row)
        since_beta += 1
        at_max = projection is None or projection.beta >= opt.beta_max
        if at_max and change < opt.tolerance:
            converged, stop_reason = True, "design change below tolerance"
            break
        if at_max and _objective_settled(history, since_beta):
            converged, stop_reason = True, (f"objective settled (relative change below "
                                            f"{SETTLED_RTOL:g} over {SETTLED_WINDOW} iterations)")
            break
        if not at_max and (since_beta >= opt.beta_interval or change < opt.tolerance):
            projection.beta = min(2 * projection.beta, opt.beta_max)
            since_beta = 0

    rho = chain.forward(x)
    analysis = model.analyze(rho)
    shape = model.grid.shape
    result = Result(problem, model, rho.reshape(shape), x.reshape(shape), analysis, history,
                    converged, time.perf_counter() - start, stop_reason=stop_reason)
    result.summary = summarize(result)
    return result


def analyze(problem: Problem, density: np.ndarray | None = None) -> Result:
    """Finite-element analysis of a given design, or of the full domain (solid
    everywhere but the void regions) when no density is given."""
    from .report import summarize

    start = time.perf_counter()
    model = Model(problem)
    shape = model.grid.shape
    if density is None:
        rho = np.where(model.void, 0.0, 1.0)
    else:
        density = np.asarray(density, dtype=float)
        if density.shape != shape:
            raise ValueError(f"design has shape {density.shape}, the problem's grid is {shape}")
        rho = np.clip(density.ravel(), 0.0, 1.0)
    result = Result(problem, model, rho.reshape(shape), rho.reshape(shape), model.analyze(rho),
                    [], True, 0.0)
    result.runtime_s = time.perf_counter() - start
    result.summary = summarize(result, analysis_only=True)
    return result


def check(problem: Problem) -> dict:
    """Build the model without solving and report what it holds (`topo check`)."""
    from .report import model_report

    return model_report(Model(problem))


def load_run(run_dir) -> Result:
    """A finished run folder (problem.json, density.npy, summary.json) as a Result,
    with a fresh analysis of its density, for re-export without re-optimising."""
    import json
    from pathlib import Path

    from .problem import problem_from_dict

    run = Path(run_dir)
    for name in ("problem.json", "density.npy"):
        if not (run / name).exists():
            raise FileNotFoundError(f"{run}: no {name}; is this a topo run folder?")
    raw = json.loads((run / "problem.json").read_text())
    problem = problem_from_dict(raw, source=str(run / "problem.json"))
    result = analyze(problem, np.load(run / "density.npy"))
    if (run / "summary.json").exists():
        result.summary = json.loads((run / "summary.json").read_text())
    return result
