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
from pathlib import Path
from typing import Callable

import numpy as np

from .fem import Analysis, Model, _tick
from .optimizers import OptimalityCriteria
from .problem import Problem, ProblemError
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
             timer: dict | None = None, checkpoint: str | Path | None = None,
             resume: bool = False) -> Result:
    """Run the design loop.

    callback: receives each history row as it is made.
    timer: a dict that accumulates seconds per phase (assembly, solve,
        sensitivities, transforms, update), for benchmarks.
    checkpoint: a file to save the loop state to every
        `optimization.checkpoint_interval` iterations and on interruption; with
        `resume`, the loop continues from that file and reaches the design an
        uninterrupted run would.
    A NaN or infinity in the solve or the update stops the run with the last good
    design, `converged` false and the fault in `stop_reason`.
    """
    with blas_for_solver():
        return _optimize(problem, callback, timer, checkpoint, resume)


@dataclass
class _LoopState:
    x: np.ndarray
    iteration: int = 0
    beta: float = 1.0
    since_beta: int = 0
    history: list = field(default_factory=list)


def _save_checkpoint(path: Path, state: _LoopState, update: OptimalityCriteria, model: Model,
                     problem: Problem) -> None:
    import io
    import json

    from .export import atomic_write

    warm = getattr(model.solver, "last", None)
    buf = io.BytesIO()
    np.savez(buf, x=state.x, limits=update.limits, last_step=update.last_step,
             warm=np.zeros(0) if warm is None else warm,
             scalars=np.array([state.iteration, state.beta, state.since_beta], dtype=float),
             history=np.array(json.dumps(state.history)), problem=np.array(json.dumps(problem.raw)))
    atomic_write(path, buf.getvalue())


def _load_checkpoint(path: Path, state: _LoopState, update: OptimalityCriteria, model: Model,
                     problem: Problem) -> None:
    import json

    data = np.load(path)
    if json.loads(str(data["problem"])) != json.loads(json.dumps(problem.raw)):
        raise ProblemError(str(path), "", "the checkpoint belongs to a different problem "
                           "(the problem file or an override changed since)")
    state.x = data["x"].copy()
    it, beta, since = data["scalars"]
    state.iteration, state.beta, state.since_beta = int(it), float(beta), int(since)
    state.history = json.loads(str(data["history"]))
    update.limits, update.last_step = data["limits"].copy(), data["last_step"].copy()
    if data["warm"].size and hasattr(model.solver, "last"):
        model.solver.last = data["warm"].copy()


def _optimize(problem: Problem, callback, timer, checkpoint, resume) -> Result:
    from .report import summarize

    start = time.perf_counter()
    opt = problem.optimization
    model = Model(problem)
    chain, projection = build_chain(problem, model)
    active = model.active
    n_active = int(active.sum())
    if n_active == 0:
        raise ProblemError(problem.source, "passive", "no design elements: passive regions "
                           "cover the whole domain")
    weights = np.array([c.weight for c in problem.load_cases])
    dv_drho = active / n_active

    update = OptimalityCriteria(active, opt.move_limit)
    # A projection or an overhang layer makes the volume nonlinear in x: meet it
    # exactly at every step.
    exact_volume = None if chain.linear else (lambda xc: float(dv_drho @ chain.forward(xc)))
    x0 = np.where(model.solid, 1.0, 0.0)
    x0[active] = opt.volume_fraction
    state = _LoopState(x0)
    checkpoint = Path(checkpoint) if checkpoint else None
    if resume:
        if checkpoint is None or not checkpoint.exists():
            raise FileNotFoundError(f"no checkpoint to resume from at {checkpoint}")
        _load_checkpoint(checkpoint, state, update, model, problem)
    if projection:
        projection.beta = state.beta
    converged, stop_reason = False, "iteration limit"
    x = state.x
    try:
        for it in range(state.iteration + 1, opt.max_iterations + 1):
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
            if not (np.isfinite(c) and np.all(np.isfinite(x_new))):
                raise FloatingPointError(f"non-finite objective or design at iteration {it}")
            change = float(np.max(np.abs(x_new - x)[active]))
            x = x_new
            beta = projection.beta if projection else None
            row = {"iteration": it, "objective": c, "volume_fraction": volume, "change": change,
                   "beta": beta, "seconds": time.perf_counter() - t0,
                   "solver_iterations": model.solver.iterations, "solver": model.solver.name}
            state.history.append(row)
            state.since_beta += 1
            at_max = projection is None or projection.beta >= opt.beta_max
            if at_max and change < opt.tolerance:
                converged, stop_reason = True, "design change below tolerance"
            elif at_max and _objective_settled(state.history, state.since_beta):
                converged, stop_reason = True, (f"objective settled (relative change below "
                                                f"{SETTLED_RTOL:g} over {SETTLED_WINDOW} iterations)")
            elif not at_max and (state.since_beta >= opt.beta_interval or change < opt.tolerance):
                projection.beta = min(2 * projection.beta, opt.beta_max)
                state.since_beta = 0
            state.x, state.iteration = x, it
            state.beta = projection.beta if projection else 1.0
            if checkpoint and it % opt.checkpoint_interval == 0:
                _save_checkpoint(checkpoint, state, update, model, problem)
            if callback:
                callback(row)
            if converged:
                break
    except FloatingPointError as exc:
        stop_reason = f"numerical fault: {exc}; the design is the last good one"
        x = state.x
    except KeyboardInterrupt:
        if checkpoint:
            _save_checkpoint(checkpoint, state, update, model, problem)
        raise

    rho = chain.forward(x)
    analysis = model.analyze(rho)
    shape = model.grid.shape
    result = Result(problem, model, rho.reshape(shape), x.reshape(shape), analysis, state.history,
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


def load_run_problem(run_dir, overrides: list[tuple[str, object]] | None = None) -> Problem:
    """The problem a run folder was made from (its problem.json or checkpoint)."""
    import json

    from .problem import problem_from_dict

    run = Path(run_dir)
    if (run / "problem.json").exists():
        raw, source = json.loads((run / "problem.json").read_text()), run / "problem.json"
    elif (run / "checkpoint.npz").exists():
        raw, source = json.loads(str(np.load(run / "checkpoint.npz")["problem"])), run / "checkpoint.npz"
    else:
        raise FileNotFoundError(f"{run}: neither problem.json nor checkpoint.npz; is this a topo run folder?")
    return problem_from_dict(raw, dict(overrides or []), source=str(source))


def estimate_resources(problem: Problem) -> dict:
    """Memory and time estimates, free memory, and a coarser element size that
    would fit when the estimate does not."""
    from .resources import available_memory, coarser_element_size, estimate

    est = estimate(problem)
    est["available_bytes"] = available_memory()
    est["fitting_element_size"] = None
    if est["available_bytes"] and est["memory_bytes"] > est["available_bytes"]:
        est["fitting_element_size"] = coarser_element_size(problem, est["available_bytes"])
    return est
