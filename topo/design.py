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

from .fem import Analysis, Model
from .optimizers import MMA, OptimalityCriteria
from .problem import Problem, ProblemError
from .solvers import blas_for_solver
from .timing import Timer
from .transforms import Chain, DensityFilter, HeavisideProjection, OverhangFilter, PassiveOverride


def _tick(timer: dict | None, phase: str, since: float) -> float:
    now = time.perf_counter()
    if timer is not None:
        timer[phase] = timer.get(phase, 0.0) + now - since
    return now


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


def _material_budget(problem: Problem, model: Model) -> tuple[np.ndarray, float, float]:
    """The material constraint w·ρ ≤ target and the starting density of the design
    elements. volume_fraction: w averages ρ over the design elements. mass_limit: w
    is each element's mass at full density, over all elements, so passive solids
    count (and so does any part of them the overhang layer removes)."""
    opt, active = problem.optimization, model.active
    n_active = int(active.sum())
    if opt.mass_limit is None:
        return active / n_active, opt.volume_fraction, opt.volume_fraction
    element_mass = problem.domain.element_volume * 1e-9 * problem.material.density  # kg
    passive = element_mass * int(model.solid.sum())
    if passive >= opt.mass_limit:
        raise ProblemError(problem.source, "optimization.mass_limit",
                           f"{opt.mass_limit} kg is not more than the passive solid regions "
                           f"alone ({passive:.4g} kg)")
    start = (opt.mass_limit - passive) / (element_mass * n_active)
    return np.full(model.grid.n_elements, element_mass), opt.mass_limit, float(np.clip(start, 0.01, 1.0))


class _MMADesign:
    """MMA on the design elements. Weighted objective: min c/c₁ s.t. w·ρ/target ≤ 1.
    Worst case (bound formulation): min t over (x, t) s.t. c_l/c₁ ≤ t for every load
    case and the material constraint; c₁ is the first iteration's value."""

    def __init__(self, active: np.ndarray, n_cases: int, worst: bool, move: float,
                 extra_constraints: int = 0, globally_convergent: bool = False):
        n = int(active.sum()) + (1 if worst else 0)
        m = 1 + (n_cases if worst else 0) + extra_constraints
        self.stress_correction = None
        lo, hi = np.zeros(n), np.ones(n)
        if worst:
            hi[-1] = 100.0  # t, in units of the first iteration's largest compliance
        self.mma = MMA(n, m, lo, hi, move=move, globally_convergent=globally_convergent)
        self.active, self.worst = active, worst
        self.scale = None
        self.t = None

    def state(self) -> dict:
        out = {f"mma_{k}": v for k, v in self.mma.state().items()}
        out["scale"] = np.array(self.scale if self.scale is not None else np.nan)
        out["t"] = np.array(self.t if self.t is not None else np.nan)
        out["stress_correction"] = np.array(np.nan if self.stress_correction is None else self.stress_correction)
        return out

    def correct_stress(self, ratio: float, alpha: float = 0.5) -> None:
        """Adaptive p-norm correction of Le et al. (2010): blend the latest ratio of
        the true peak to the aggregate with the previous correction."""
        prev = self.stress_correction
        self.stress_correction = ratio if prev is None else alpha * ratio + (1 - alpha) * prev

    def restore(self, state: dict) -> None:
        self.mma.restore({k[4:]: v for k, v in state.items() if k.startswith("mma_")})
        self.scale = None if np.isnan(state["scale"]) else float(state["scale"])
        self.t = None if np.isnan(state["t"]) else float(state["t"])
        sc = state.get("stress_correction")
        self.stress_correction = None if sc is None or np.isnan(sc) else float(sc)

    def update(self, x, dc, volume, dv, target, extra=(), extra_grads=(),
               objective: float = 0.0, evaluate=None):
        """extra: further constraint values g ≤ 0 with their gradients (full vectors);
        objective and evaluate(x_full) → (objective, material, extra) for GCMMA."""
        if self.scale is None:
            self.scale = float(abs(dc[self.active] @ x[self.active])) or 1.0
        act = self.active
        f = np.array([volume / target - 1.0] + list(extra))
        df = np.array([dv[act] / target] + [g[act] for g in extra_grads])
        scaled = None
        if evaluate is not None:
            def scaled(xa_candidate):
                full = x.copy()
                full[act] = xa_candidate
                c, material, values = evaluate(full)
                return c / self.scale, np.array([material / target - 1.0] + list(values))
        xa = self.mma.update(x[act], dc[act] / self.scale, f, df, objective / self.scale, scaled)
        out = x.copy()
        out[act] = xa
        return out

    def update_worst(self, x, compliances, dcs, volume, dv, target, extra=(), extra_grads=()):
        act = self.active
        if self.scale is None:
            self.scale = float(compliances.max())
            self.t = 1.0
        n = int(act.sum())
        z = np.append(x[act], self.t)
        df0 = np.zeros(n + 1)
        df0[-1] = 1.0
        f = np.concatenate([compliances / self.scale - self.t, [volume / target - 1.0], list(extra)])
        df = np.zeros((len(f), n + 1))
        for i, g in enumerate(dcs):
            df[i, :n], df[i, -1] = g[act] / self.scale, -1.0
        df[len(dcs), :n] = dv[act] / target
        for i, g in enumerate(extra_grads):
            df[len(dcs) + 1 + i, :n] = g[act]
        z = self.mma.update(z, df0, f, df)
        self.t = float(z[-1])
        out = x.copy()
        out[act] = z[:n]
        return out


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


def _save_checkpoint(path: Path, state: _LoopState, update, model: Model,
                     problem: Problem) -> None:
    import io
    import json

    from .export import atomic_write

    buf = io.BytesIO()
    extra = {f"opt_{k}": np.asarray(v) for k, v in update.state().items()}
    extra.update({f"sys_{k}": v for k, v in model.system.state().items()})
    np.savez(buf, x=state.x, **extra,
             scalars=np.array([state.iteration, state.beta, state.since_beta], dtype=float),
             history=np.array(json.dumps(state.history)), problem=np.array(json.dumps(problem.raw)))
    atomic_write(path, buf.getvalue())


def _load_checkpoint(path: Path, state: _LoopState, update, model: Model,
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
    update.restore({k[4:]: data[k] for k in data.files if k.startswith("opt_")})
    model.system.restore({k[4:]: data[k] for k in data.files if k.startswith("sys_")})


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
    dv_drho, target, start_fraction = _material_budget(problem, model)

    stress = None
    if opt.stress_limit is not None:
        from .stress import StressMeasure

        stress = StressMeasure(model)
    if opt.optimizer in ("mma", "gcmma"):
        update = _MMADesign(active, len(weights), opt.objective == "worst_case", opt.move_limit,
                            extra_constraints=1 if stress else 0,
                            globally_convergent=opt.optimizer == "gcmma")
    else:
        update = OptimalityCriteria(active, opt.move_limit)

    def evaluate(xc: np.ndarray) -> tuple[float, float, list]:
        """Objective, material use and extra constraints of a candidate design (the
        inner iterations of GCMMA); the stress correction stays as it is."""
        r = chain.forward(xc)
        a = model.analyze(r, stresses=False)
        values = []
        if stress is not None:
            values.append(update.stress_correction * stress.aggregate(r, a, gradient=False)[0]
                          / opt.stress_limit - 1.0)
        return float(weights @ a.compliances), float(dv_drho @ r), values

    # A projection or an overhang layer makes the volume nonlinear in x: meet it
    # exactly at every step.
    exact_volume = None if chain.linear else (lambda xc: float(dv_drho @ chain.forward(xc)))
    x0 = np.where(model.solid, 1.0, 0.0)
    x0[active] = start_fraction
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
            analysis = model.analyze(rho, stresses=False, timer=Timer(timer))
            clock = time.perf_counter()
            volume = float(dv_drho @ rho)
            extra, extra_grads = [], []
            if stress is not None:
                # constraint c_k·σ_PN / σ_limit − 1 ≤ 0 with the adaptive correction c_k
                pn, dpn, peak = stress.aggregate(rho, analysis)
                update.correct_stress(peak / pn if pn > 0 else 1.0)
                extra.append(update.stress_correction * pn / opt.stress_limit - 1.0)
                extra_grads.append(update.stress_correction * dpn / opt.stress_limit)
            if opt.objective == "worst_case":
                c = float(analysis.compliances.max())
                per_case = -model.moduli_derivative(rho)[:, None] * analysis.energies
                clock = _tick(timer, "sensitivities", clock)
                grads = chain.backward_many(x, list(per_case.T) + [dv_drho] + extra_grads)
                n_cases = per_case.shape[1]
                dcs, dv, extra_grads = grads[:n_cases], grads[n_cases], grads[n_cases + 1:]
                clock = _tick(timer, "transforms", clock)
                x_new = update.update_worst(x, analysis.compliances, dcs, volume, dv, target,
                                            extra, extra_grads)
            else:
                c, dc_drho = compliance_gradient(model, rho, analysis, weights)
                clock = _tick(timer, "sensitivities", clock)
                dc, dv, *extra_grads = chain.backward_many(x, [dc_drho, dv_drho] + extra_grads)
                clock = _tick(timer, "transforms", clock)
                if opt.optimizer == "oc":
                    x_new = update.update(x, dc, volume, dv, target, exact_volume)
                else:
                    # GCMMA's inner iterations solve at candidate designs; the next
                    # iteration refactorises (or warm-starts CG) at the accepted one
                    x_new = update.update(x, dc, volume, dv, target, extra, extra_grads, objective=c,
                                          evaluate=evaluate if opt.optimizer == "gcmma" else None)
            _tick(timer, "update", clock)  # includes the exact-volume chain evaluations
            if not (np.isfinite(c) and np.all(np.isfinite(x_new))):
                raise FloatingPointError(f"non-finite objective or design at iteration {it}")
            change = float(np.max(np.abs(x_new - x)[active]))
            x = x_new
            beta = projection.beta if projection else None
            row = {"iteration": it, "objective": c, "volume_fraction": float(rho[active].mean()),
                   "constraint": volume / target - 1.0, "change": change,
                   "beta": beta, "seconds": time.perf_counter() - t0,
                   "solver_iterations": model.system.iterations, "solver": model.system.name}
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
