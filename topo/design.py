"""The optimisation loop: x → transforms → ρ → FE solve → responses → optimizer step.

Minimises the weighted sum of load-case compliances c = Σ w_l f_lᵀ u_l (or, for the
worst case, the largest of them) subject to the material budget and any further
constraints (responses.py); β continuation and the stopping rules are in
continuation.py, saving and resuming in checkpoint.py, the optimizer steps in
optimizers.py.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .checkpoint import Checkpoint, LoopState
from .continuation import Continuation, density_change
from .fem import Analysis, Model
from .integrity import unreachable_regions
from .interrupts import Interrupts
from .optimizers import make_optimizer
from .printed import PrintedPart, printed_part
from .problem import Problem, ProblemError
from .responses import Evaluation, Responses, refuse_closed_passives
from .robust import Projections, RobustChain, anchored_elements, blueprint
from .solvers import blas_for_solver
from .timing import Timer
from .transforms import (
    Chain,
    DensityFilter,
    HeavisideProjection,
    MirrorSymmetry,
    OverhangFilter,
    PassiveOverride,
)


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
    printed: PrintedPart | None = None  # the thresholded design with interfaces whole
    loop_ended: bool = False  # made by the design loop (not an analysis or a re-read run)

    def __post_init__(self):
        if self.printed is None:
            self.printed = printed_part(self.model, self.density)


def build_chain(
    problem: Problem, model: Model
) -> tuple[Chain, HeavisideProjection | Projections | None]:
    opt = problem.optimization
    steps = [DensityFilter(model.grid.shape, opt.filter_radius / problem.domain.element_size)]
    if opt.symmetry:  # first, so that every later step sees a symmetric field
        axes = tuple("xyz".index(p.axis) for p in opt.symmetry)
        planes = tuple(p.at / problem.domain.element_size for p in opt.symmetry)
        mirror = MirrorSymmetry(model.grid.shape, axes, planes)
        _refuse_asymmetric_passives(problem, model)
        # and after the filter: its edges at the domain boundary (and, with a length
        # scale, its solid padding at supports and loads) need not be mirror images
        steps = [mirror, steps[0], mirror]
    projection = None
    if opt.projection:
        projection = HeavisideProjection(1.0, opt.projection_threshold)
        steps.append(projection)
    steps.append(PassiveOverride(model.solid, model.void))
    # Last, so that passive solids must be supported like any other element.
    if problem.build is not None and problem.build.overhang_filter:
        build = problem.build
        steps.append(OverhangFilter(model.grid.shape, build.direction, build.overhang_angle))
    if problem.length_scale is not None:  # three projections: robust.py
        chain = RobustChain(steps, projection, problem.length_scale, anchored_elements(model))
        return chain, chain.projections
    return Chain(steps), projection


def _refuse_asymmetric_passives(problem: Problem, model: Model) -> None:
    """Mirror symmetry of the design needs the solid and void regions symmetric too,
    wherever an element's mirror image lies inside the domain."""
    h = problem.domain.element_size
    for name, mask in (("solid", model.solid), ("void", model.void)):
        for plane in problem.optimization.symmetry:
            axis = "xyz".index(plane.axis)
            mirror = MirrorSymmetry(model.grid.shape, (axis,), (plane.at / h,))
            if not np.array_equal(mirror.forward(mask.astype(float)), mask.astype(float)):
                raise ProblemError(
                    problem.source,
                    "optimization.symmetry",
                    f"the passive {name} regions are not mirror-symmetric about the plane "
                    f"{plane.axis} = {plane.at:g} mm (normal to {plane.axis}), "
                    "so the design cannot be; make them symmetric or drop the plane",
                )


def optimize(
    problem: Problem,
    callback: Callable[[dict], None] | None = None,
    timer: dict | None = None,
    checkpoint: str | Path | None = None,
    resume: bool = False,
    optimizer: Callable | None = None,
    allow_unreachable: bool = False,
) -> Result:
    """Run the design loop.

    callback: receives each history row as it is made.
    timer: a dict that accumulates seconds per phase (assembly, solve,
        sensitivities, transforms, update), for benchmarks.
    checkpoint: a file to save the loop state to every
        `optimization.checkpoint_interval` iterations and on interruption; with
        `resume`, the loop continues from that file and reaches the design an
        uninterrupted run would.
    optimizer: a factory with the arguments of `optimizers.make_optimizer`
        (settings, active, n_bounds, n_constraints), in its place.
    allow_unreachable: go on when a load or support region cannot be reached by
        self-supporting material in the build direction (refused by default).
    A NaN or infinity in the solve or the update stops the run with the last good
    design, `converged` false and the fault in `stop_reason`.

    >>> from topo.problem import problem_from_dict
    >>> p = problem_from_dict({"domain": {"size": [12.0, 4.0], "element_size": 1.0,
    ...     "thickness": 1.0}, "material": {"preset": "316L"},
    ...     "optimization": {"volume_fraction": 0.5, "max_iterations": 5},
    ...     "support": [{"region": {"face": "x-min"}}],
    ...     "load_case": [{"force": [{"region": {"point": [12, 2]}, "total": [0, -10]}]}]})
    >>> r = optimize(p)
    >>> r.density.shape, len(r.history), r.summary["checks"][0]["name"]
    ((12, 4), 5, 'load_path')
    """
    with blas_for_solver():
        return _optimize(
            problem,
            callback,
            Timer(timer),
            checkpoint,
            resume,
            optimizer or make_optimizer,
            allow_unreachable,
        )


def _refuse_unreachable(problem: Problem, model: Model) -> None:
    cut = unreachable_regions(model)
    if cut:
        raise ProblemError(
            problem.source,
            "build.direction",
            f"building {problem.build.direction}, no self-supporting material can reach "
            f"{', '.join(cut)}: void regions block every path from the plate within the "
            f"{problem.build.overhang_angle:g}° overhang rule, so the "
            "design cannot join them to the part. Choose another build direction, or go on "
            "anyway (--allow-unreachable; the load-path check will fail)",
        )


def _refuse_empty_budget(problem: Problem, model: Model) -> None:
    fraction, n = problem.optimization.volume_fraction, int(model.active.sum())
    if fraction is not None and fraction * n < 1:
        raise ProblemError(
            problem.source,
            "optimization.volume_fraction",
            f"{fraction:g} of the {n} design elements is less than one element's material: "
            f"the design would be empty; give at least {1 / n:.3g}",
        )


def _optimize(
    problem: Problem, callback, timer: Timer, checkpoint, resume, make, allow_unreachable
) -> Result:
    from .report import summarize

    start, opt = time.perf_counter(), problem.optimization
    model = Model(problem)
    if not allow_unreachable:
        _refuse_unreachable(problem, model)
    chain, projection = build_chain(problem, model)
    if not model.active.any():
        raise ProblemError(
            problem.source, "passive", "no design elements: passive regions cover the whole domain"
        )
    _refuse_empty_budget(problem, model)
    responses = Responses(problem, model, chain)
    optimizer = make(opt, model.active, responses.n_bounds, len(responses.constraints))
    saved = Checkpoint(
        checkpoint, problem, model, {"opt": optimizer, "resp": responses, "sys": model.system}
    )
    state = saved.load() if resume else LoopState(_start_design(model, responses.material.start))
    continuation = Continuation(
        projection, opt.beta_max, opt.beta_interval, opt.tolerance, state.beta
    )
    if state.finished is None:
        with Interrupts() as interrupts:
            parts = (chain, model, responses, optimizer, continuation)
            _loop(state, parts, saved, callback, timer, interrupts)
            interrupts.check()  # a signal during the last iteration stops before the export
    result = _result(
        problem,
        model,
        chain,
        state,
        state.finished["converged"],
        state.finished["stop_reason"],
        start,
    )
    result.loop_ended = True
    result.summary = summarize(result)
    return result


def _loop(state: LoopState, parts, saved: Checkpoint, callback, timer: Timer, interrupts) -> None:
    """Iterate until a stopping rule, the iteration limit or a numerical fault; then
    record why in `state.finished` and save the checkpoint, so that a run interrupted
    later (in the export) resumes to the export with no further iteration."""
    chain, model, responses, optimizer, continuation = parts
    opt = model.problem.optimization
    stop, stop_reason = None, "iteration limit"
    whole = True  # state holds a whole iteration: safe to save
    loop_start = time.perf_counter()
    try:
        for it in range(state.iteration + 1, opt.max_iterations + 1):
            interrupts.check()
            whole = False
            t0 = time.perf_counter()
            rho, ev, x = _iterate(state.x, chain, model, responses, optimizer, timer)
            if not (np.isfinite(ev.objective.value) and np.all(np.isfinite(x))):
                raise FloatingPointError(f"non-finite objective or design at iteration {it}")
            with timer("transforms"):  # ρ of the step at the same β: see density_change
                change = density_change(chain.forward(x), rho, model.active)
            design_change = float(np.max(np.abs(x - state.x)[model.active]))
            row = _history_row(
                it,
                ev,
                blueprint(chain, state.x, rho),  # the printed design's volume
                change,
                design_change,
                continuation.beta,
                time.perf_counter() - t0,
                model,
                time.perf_counter() - loop_start,
            )
            state.history.append(row)
            stop = continuation.after(state, change)
            state.x, state.iteration = x, it
            whole = True
            if saved.due(it):
                saved.save(state)
            if callback:
                callback(row)
            if stop:
                stop_reason = stop
                break
    except FloatingPointError as exc:
        # the optimizer may have moved past the last good design: its parts are not
        # saved again, so a resume of this run repeats the fault the same way
        stop_reason = f"numerical fault: {exc}; the design is the last good one"
        state.finished = {"stop_reason": stop_reason, "converged": False}
        return
    except KeyboardInterrupt:
        if whole:
            saved.save(state)
        raise
    state.finished = {"stop_reason": stop_reason, "converged": stop is not None}
    saved.save(state)


def _result(
    problem,
    model: Model,
    chain: Chain,
    state: LoopState,
    converged: bool,
    stop_reason: str,
    start: float,
) -> Result:
    """The last good design with a fresh analysis (stresses included)."""
    rho = blueprint(chain, state.x)
    shape = model.grid.shape
    return Result(
        problem,
        model,
        rho.reshape(shape),
        state.x.reshape(shape),
        model.analyze(rho),
        state.history,
        converged,
        time.perf_counter() - start,
        stop_reason=stop_reason,
    )


def _start_design(model: Model, fraction: float) -> np.ndarray:
    x0 = np.where(model.solid, 1.0, 0.0)
    x0[model.active] = fraction
    return x0


def _iterate(
    x, chain: Chain, model: Model, responses: Responses, optimizer, timer: Timer
) -> tuple[np.ndarray, Evaluation, np.ndarray]:
    """One design iteration: ρ, the responses there and the optimizer's next x."""
    with timer("transforms"):
        rho = chain.forward(x)
    analysis = model.analyze(rho, stresses=False, timer=timer)
    with timer("sensitivities"):
        ev = responses.evaluate(rho, analysis, x)
    with timer("transforms"):
        responses.pull_back(x, ev)
    # GCMMA's inner iterations solve at candidate designs, OC's exact budget runs the
    # chain; the next iteration refactorises (or warm-starts CG) at the accepted one
    with timer("update"):
        return rho, ev, optimizer.step(x, ev)


def _history_row(
    it: int,
    ev: Evaluation,
    rho,
    change: float,
    design_change: float,
    beta,
    seconds: float,
    model: Model,
    elapsed: float,
) -> dict:
    return {
        "iteration": it,
        "objective": ev.objective.value,
        "volume_fraction": float(rho[model.active].mean()),
        "constraint": ev.constraints[0].g,
        "change": change,
        "max_design_change": design_change,
        "beta": beta,
        "seconds": seconds,
        "solver_iterations": model.system.iterations,
        "solver": model.system.name,
        "max_iterations": model.problem.optimization.max_iterations,
        "elapsed": elapsed,  # seconds since this process started the loop
        "constraints": {r.name: r.g for r in ev.constraints},
    }


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
    result = Result(
        problem, model, rho.reshape(shape), rho.reshape(shape), model.analyze(rho), [], True, 0.0
    )
    result.runtime_s = time.perf_counter() - start
    result.summary = summarize(result, analysis_only=True)
    return result


def check(problem: Problem) -> dict:
    """Build the model without solving and report what it holds (`topo check`)."""
    from .report import model_report

    model = Model(problem)
    _refuse_empty_budget(problem, model)
    refuse_closed_passives(problem, model)
    return model_report(model)


def load_run(run_dir) -> Result:
    """A finished run folder (problem.json, density.npy, summary.json) as a Result,
    with a fresh analysis of its density, for re-export without re-optimising.
    A missing or damaged file raises a ProblemError that names it."""
    from .problem import problem_from_dict

    run = Path(run_dir)
    for name in ("problem.json", "density.npy"):
        if not (run / name).exists():
            raise FileNotFoundError(f"{run}: no {name}; is this a topo run folder?")
    problem = problem_from_dict(
        _read_json(run / "problem.json", dict), source=str(run / "problem.json")
    )
    result = analyze(problem, _read_density(run / "density.npy", problem.domain.shape))
    if (run / "summary.json").exists():
        result.summary = _read_json(run / "summary.json", dict)
    return result


def _damaged(path: Path, why: str) -> ProblemError:
    return ProblemError(
        str(path),
        "",
        f"the file is damaged ({why}); run the problem again into a new folder "
        "(or restore the file from a copy)",
    )


def _read_json(path: Path, kind: type):
    import json

    try:
        value = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:  # truncated, emptied, not text
        raise _damaged(path, f"{type(exc).__name__}: {exc}") from None
    if not isinstance(value, kind):
        raise _damaged(path, f"expected a JSON {kind.__name__}, got {type(value).__name__}")
    return value


def _read_density(path: Path, shape: tuple[int, ...]) -> np.ndarray:
    try:
        density = np.load(path, allow_pickle=False)
    except Exception as exc:  # truncated, not .npy, pickled objects
        raise _damaged(path, f"{type(exc).__name__}: {exc}") from None
    if density.shape != tuple(shape) or density.dtype.kind != "f":
        raise _damaged(path, f"{density.dtype} array of shape {density.shape}, the grid is {shape}")
    if not np.all(np.isfinite(density)):
        raise _damaged(path, "non-finite densities")
    return density


def load_run_problem(run_dir, overrides: list[tuple[str, object]] | None = None) -> Problem:
    """The problem a run folder was made from (its checkpoint or problem.json)."""
    import json

    from .problem import problem_from_dict

    run = Path(run_dir)
    if (run / "checkpoint.npz").exists():  # what a resume continues from
        source = run / "checkpoint.npz"
        try:
            with np.load(source) as data:
                raw = json.loads(str(data["problem"]))
        except Exception as exc:  # truncated, emptied, bit-flipped
            raise ProblemError(
                str(source),
                "",
                f"the checkpoint is damaged ({type(exc).__name__}: {exc}). Delete it and run "
                "the problem again without --resume",
            ) from None
    elif (run / "problem.json").exists():
        source = run / "problem.json"
        raw = _read_json(source, dict)
    else:
        raise FileNotFoundError(
            f"{run}: neither problem.json nor checkpoint.npz; is this a topo run folder?"
        )
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
