"""Benchmarks: standard cases timed per phase, with ratios against reference runs
made in the same process. Benchmarks are never timed tests.

Each case runs in a forked child process so that its peak memory (ru_maxrss) is
its own.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import platform
import resource
import time
from contextlib import contextmanager

import numpy as np

from .design import optimize
from .fem import Model
from .problem import problem_from_dict
from .solvers import DirectSystem, SparseCholesky

PHASES = ("assembly", "solve", "sensitivities", "transforms", "update")


def mbb_2d(nx: int = 300, ny: int = 100) -> dict:
    """Half MBB beam, unit data (as in the 88-line paper), density filter only."""
    return {
        "name": f"mbb-{nx}x{ny}",
        "domain": {"size": [float(nx), float(ny)], "element_size": 1.0, "thickness": 1.0},
        "material": {"youngs_modulus": 1.0, "poissons_ratio": 0.3, "density": 1.0},
        "optimization": {
            "volume_fraction": 0.5,
            "filter_radius": 3.0,
            "projection": False,
            "solver": "direct",
            "tolerance": 1e-9,
        },
        "support": [
            {"region": {"face": "x-min"}, "fix": ["x"]},
            {"region": {"point": [float(nx), 0.0]}, "fix": ["y"]},
        ],
        "load_case": [{"force": [{"region": {"point": [0.0, float(ny)]}, "total": [0.0, -1.0]}]}],
    }


def cantilever_3d(nx: int, ny: int, nz: int, solver: str = "auto") -> dict:
    """Cantilever clamped at x = 0, line load down along the lower edge at x = L."""
    L, W, H = float(nx), float(ny), float(nz)
    return {
        "name": f"cantilever-{nx}x{ny}x{nz}-{solver}",
        "domain": {"size": [L, W, H], "element_size": 1.0},
        "material": {"youngs_modulus": 1.0, "poissons_ratio": 0.3, "density": 1.0},
        "optimization": {
            "volume_fraction": 0.12,
            "filter_radius": 1.5,
            "projection": False,
            "solver": solver,
            "tolerance": 1e-9,
        },
        "support": [{"region": {"face": "x-min"}}],
        "load_case": [
            {
                "force": [
                    {
                        "region": {"box": {"min": [L, 0.0, 0.0], "max": [L, W, 0.0]}},
                        "total": [0.0, 0.0, -1.0],
                    }
                ]
            }
        ],
    }


def _run(problem_dict: dict, iterations: int, after_iteration=None) -> dict:
    """`after_iteration()` runs between iterations, outside their timing."""
    d = json.loads(json.dumps(problem_dict))
    d["optimization"]["max_iterations"] = iterations
    timer: dict = {}
    between = [0.0]

    def snapshot(row: dict) -> None:
        if row["iteration"] == 1:
            timer["first_iteration"] = dict(timer)
        if after_iteration:
            t = time.perf_counter()
            after_iteration()
            between[0] += time.perf_counter() - t
        last[0] = time.perf_counter()

    last = [0.0]
    start = time.perf_counter()
    result = optimize(problem_from_dict(d), callback=snapshot, timer=timer)
    end = time.perf_counter()
    wall = end - start
    # after the loop: the final analysis, the printed part's re-analysis, the summary
    finish = end - last[0]
    n = len(result.history)
    loop = sum(h["seconds"] for h in result.history)
    # Steady state: the first iteration also does one-off work (CHOLMOD's symbolic
    # analysis, a cold CG start), so the phase split is over iterations 2..n.
    first = timer.pop("first_iteration")
    steady = {p: timer.get(p, 0.0) - first.get(p, 0.0) for p in PHASES}
    m = max(n - 1, 1)
    per = {p: steady[p] / m for p in PHASES}
    per_iteration = (loop - result.history[0]["seconds"]) / m
    per["other"] = max(per_iteration - sum(per.values()), 0.0)
    return {
        "result": result,
        "iterations": n,
        "per_iteration_s": per_iteration,
        "phases_s": per,
        "first_iteration_s": result.history[0]["seconds"],
        "setup_s": wall - loop - between[0] - finish,
        "finish_s": finish,
        "solver": result.model.system.name,
        # a direct solver takes no iterations (None): counted as 0
        "solver_iterations": float(np.mean([h["solver_iterations"] or 0 for h in result.history])),
        "compliance": [h["objective"] for h in result.history],
    }


class _PairedFactorisation:
    """One CHOLMOD numerical factorisation + solve of the problem's matrix (its
    symbolic analysis done beforehand, as the design loop does), timed between the
    design iterations of the same run. Cholesky's work depends on the sparsity
    pattern only, which every design shares, so the matrix of a uniform design
    stands for all. Pairing the two in time keeps the ratio honest on a machine
    whose speed drifts (DEVELOPERS.md, "Machine drift and paired timings")."""

    def __init__(self, problem_dict: dict):
        model = Model(problem_from_dict(problem_dict), system_factory=DirectSystem)
        self.k = model.system.lower(model.moduli(np.full(model.grid.n_elements, 0.5)))
        self.rhs = model.loads[model.free]
        self.factor = SparseCholesky()
        self._factor_and_solve()  # symbolic analysis, warm-up
        self.seconds: list[float] = []

    def _factor_and_solve(self) -> None:
        self.factor.factorize(self.k)
        self.factor.solve(self.rhs)

    def __call__(self) -> None:
        t = time.perf_counter()
        self._factor_and_solve()
        self.seconds.append(time.perf_counter() - t)


def case_mbb(quick: bool) -> dict:
    problem = mbb_2d()
    reference = _PairedFactorisation(problem)
    out = _run(problem, 10 if quick else 30, after_iteration=reference)
    # medians over iterations 2..n on both sides: robust to the odd slow one
    loop = float(np.median([h["seconds"] for h in out.pop("result").history[1:]]))
    ref = float(np.median(reference.seconds[1:]))
    out["reference"] = {"cholmod_factor_and_solve_s": ref, "median_iteration_s": loop}
    out["ratio_iteration_to_factor_solve"] = loop / ref
    out.pop("compliance")
    return out


def case_cantilever(shape: tuple[int, int, int], quick: bool) -> dict:
    out = _run(cantilever_3d(*shape), 5 if quick else 20)
    out.pop("result")
    out.pop("compliance")
    return out


def case_compare(shape: tuple[int, int, int], iterations: int) -> dict:
    """The same 3D problem with the direct and the multigrid-CG solver, the same
    number of iterations: time per iteration and the compliance reached."""
    iterative = _run(cantilever_3d(*shape, "iterative"), iterations)
    direct = _run(cantilever_3d(*shape, "direct"), iterations)
    ci, cd = iterative["compliance"][-1], direct["compliance"][-1]
    for r in (iterative, direct):
        r.pop("result")
        r.pop("compliance")
    return {
        "iterative": iterative,
        "direct": direct,
        "ratio_direct_to_iterative": direct["per_iteration_s"] / iterative["per_iteration_s"],
        "compliance_relative_difference": abs(ci - cd) / cd,
        "iterations": iterations,
    }


# The machine the 3D solver targets (DEVELOPERS.md, "Benchmarks"): one thread
# streams about 13 GB/s; two cores multiply dense matrices at about 100 GFLOP/s.
MACHINE_GB_PER_S = 13.0
MACHINE_GFLOP_PER_S = 100.0


@contextmanager
def _iterative_path(path: str):
    """Within this block an iterative solve in 3D takes `path` ("matrix-free" or
    "assembled" multigrid-CG) whatever the problem's size, so that the two can be
    compared on one problem in the same process."""
    from . import fem
    from .matrixfree import MatrixFreeCG
    from .multigrid import MultigridCG
    from .solvers import DirectSystem, choose

    def make(kind, grid, ke, fixed):
        if choose(kind, grid.dim, int(np.count_nonzero(~fixed))) == "iterative":
            if path == "matrix-free" and grid.dim == 3:
                return MatrixFreeCG(grid, ke, fixed)
            return MultigridCG(grid, ke, fixed)
        return DirectSystem(grid, ke, fixed)

    before = fem.make_system
    fem.make_system = make
    try:
        yield
    finally:
        fem.make_system = before


def _estimate(problem_dict: dict) -> dict:
    from .resources import estimate

    return estimate(problem_from_dict(problem_dict))


def case_matrix_free(shape: tuple[int, int, int], iterations: int) -> dict:
    """The 3D cantilever with the automatic (matrix-free) solver: per-iteration
    figures, set-up, wall time, and the resource estimate beside what was
    measured (peak memory is added by the child process)."""
    problem = cantilever_3d(*shape)
    start = time.perf_counter()
    out = _run(problem, iterations)
    out["wall_s"] = time.perf_counter() - start
    result = out.pop("result")
    out["cg_iterations"] = [h["solver_iterations"] for h in result.history]
    out["levels"] = result.model.system.levels
    out["estimate"] = _estimate(problem)
    out["final_compliance"] = out.pop("compliance")[-1]
    return out


def case_operator(shape: tuple[int, int, int], repeats: int = 5) -> dict:
    """One application of the fine stiffness operator: the assembled matrix
    (threaded CSR product) against the matrix-free element products in double
    and single precision, on a random design; seconds (median), GFLOP/s of the
    element products (2·24² flops per element) and the memory traffic per second
    each would need at least (matrix entries and vectors; moduli and vectors)."""
    from .matrixfree import SINGLE, FineOperator
    from .parallel import RowBlocks
    from .stencil import StencilAssembly

    model = Model(problem_from_dict(cantilever_3d(*shape)), system_factory=DirectSystem)
    rng = np.random.default_rng(0)
    e = model.moduli(rng.uniform(0.01, 1.0, model.grid.n_elements))
    n, ne = model.grid.n_dofs, model.grid.n_elements
    fixed = np.zeros(n, bool)
    fixed[model.fixed_dofs] = True
    flops = 2.0 * 24 * 24 * ne

    def timed(fn, x):
        fn(x)  # compile / warm up
        wall, cpu = [], []
        for _ in range(repeats):
            t, c = time.perf_counter(), time.process_time()
            fn(x)
            wall.append(time.perf_counter() - t)
            cpu.append(time.process_time() - c)
        return float(np.median(wall)), float(np.median(cpu))

    out = {"elements": ne, "dofs": n, "gflop_per_application": flops / 1e9}
    fine = FineOperator(model.grid.shape, model.ke, fixed)
    fine.set_moduli(e)
    for name, dtype in (("matrix_free_double", float), ("matrix_free_single", SINGLE)):
        x = rng.standard_normal((n, 1)).astype(dtype)
        wall, cpu = timed(lambda v: fine @ v, x)
        size = np.dtype(dtype).itemsize
        traffic = ne * size + 3 * n * size  # moduli, x, y (read and written)
        out[name] = {
            "seconds": wall,
            "cpu_seconds": cpu,
            "gflop_per_s": flops / wall / 1e9,
            "gb_per_s": traffic / wall / 1e9,
        }
    a = StencilAssembly(model.grid, model.ke, fixed).matrix(e)
    blocks = RowBlocks(a)
    x = rng.standard_normal((n, 1))
    wall, cpu = timed(lambda v: blocks @ v, x)
    traffic = a.nnz * 12 + 3 * n * 8
    out["assembled"] = {
        "seconds": wall,
        "cpu_seconds": cpu,
        "gb_per_s": traffic / wall / 1e9,
        "matrix_MB": (a.data.nbytes + a.indices.nbytes + a.indptr.nbytes) / 2**20,
    }
    out["ratio_assembled_to_matrix_free_double"] = wall / out["matrix_free_double"]["seconds"]
    out["ratio_assembled_to_matrix_free_single"] = wall / out["matrix_free_single"]["seconds"]
    return out


def case_compare_paths(shape: tuple[int, int, int], iterations: int) -> dict:
    """The same 3D problem with the matrix-free and the assembled multigrid-CG,
    the same number of iterations: time per iteration, CG iterations and how far
    the compliances differ (the designs should not depend on the path)."""
    problem = cantilever_3d(*shape, "iterative")
    with _iterative_path("matrix-free"):
        new = _run(problem, iterations)
    with _iterative_path("assembled"):
        old = _run(problem, iterations)
    cn, co = new["compliance"][-1], old["compliance"][-1]
    for r in (new, old):
        r.pop("result")
        r["final_compliance"] = r.pop("compliance")[-1]
    return {
        "matrix_free": new,
        "assembled": old,
        "ratio_assembled_to_matrix_free": old["per_iteration_s"] / new["per_iteration_s"],
        "compliance_relative_difference": abs(cn - co) / co,
        "iterations": iterations,
    }


def _child(fn, args, queue) -> None:
    try:
        out = fn(*args)
        out["peak_memory_MB"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        queue.put(out)
    except BaseException as exc:  # report, do not hang the parent
        queue.put({"error": repr(exc)})


def case_scale(shape: tuple[int, int, int], iterations: int) -> dict:
    """The 3D scale target: a full run of `iterations` design iterations, wall time
    from problem to result, setup included."""
    start = time.perf_counter()
    out = _run(cantilever_3d(*shape), iterations)
    out["wall_s"] = time.perf_counter() - start
    out.pop("result")
    out.pop("compliance")
    return out


# Run only when named with --case: each is too long for a routine run
# (durations: DEVELOPERS.md, "Benchmarks").
def case_verify(demo: str) -> dict:
    """Body-fitted verification of a demo bracket (problems/NAME.toml): the design
    is optimised first (not timed), then verified; time and peak memory of the
    process (which includes the optimisation's)."""
    from pathlib import Path

    from .design import optimize
    from .problem import load_problem
    from .verification import verify

    problem = load_problem(Path(__file__).resolve().parent.parent / "problems" / f"{demo}.toml")
    result = optimize(problem)
    start = time.perf_counter()
    figures = verify(result).figures
    return {
        "verify_s": time.perf_counter() - start,
        "meshes": figures["meshes"],
        "max_von_mises_MPa": figures["max_von_mises_MPa"],
        "grid_max_von_mises_MPa": result.summary["max_von_mises_MPa"],
        "checks_failed": figures["checks_failed"],
    }


def case_print_stages(shape: tuple[int, int, int]) -> dict:
    """Every stage of the print-resolution bracket but the linear solve, on a
    synthetic design and synthetic displacements (stagebench.py): seconds and peak
    memory per stage, output file sizes."""
    from .stagebench import run_stages

    return run_stages(shape)


def case_print_run(shape: tuple[int, int, int], iterations: int) -> dict:
    """The print-resolution bracket (stagebench.print_bracket) run whole with the
    default solver: `iterations` design iterations with checkpoints, the final
    analyses and sign-off, then every output file; per-phase means over the
    iterations, wall time from problem to files, peak memory of the process."""
    import tempfile
    from pathlib import Path

    from .export import export
    from .stagebench import print_bracket

    d = print_bracket(shape)
    d["optimization"]["max_iterations"] = iterations
    timer: dict = {}
    with tempfile.TemporaryDirectory() as tmp:
        marks: list[float] = []  # wall time at the end of each iteration
        start = time.perf_counter()
        problem = problem_from_dict(d)
        result = optimize(
            problem,
            callback=lambda row: marks.append(time.perf_counter()),
            timer=timer,
            checkpoint=Path(tmp) / "checkpoint.npz",
        )
        loop_end = time.perf_counter()
        checkpoint_mb = (Path(tmp) / "checkpoint.npz").stat().st_size / 2**20
        export(result, Path(tmp) / "out")
        end = time.perf_counter()
    n = len(result.history)
    loop = sum(h["seconds"] for h in result.history)
    per = {p: timer.get(p, 0.0) / n for p in PHASES}
    per["other"] = max(loop / n - sum(per.values()), 0.0)
    return {
        "solver": result.model.system.name,
        "iterations": n,
        "wall_s": end - start,
        "per_iteration_s": loop / n,
        "phases_s": per,
        "first_iteration_s": result.history[0]["seconds"],
        "setup_s": marks[0] - result.history[0]["seconds"] - start,
        # the final analyses of the grey and the printed design, sign-off, summary, files
        "finish_s": end - marks[-1],
        "export_s": end - loop_end,
        "solver_iterations": float(np.mean([h["solver_iterations"] or 0 for h in result.history])),
        "checkpoint_MB": checkpoint_mb,
        "compliance": result.history[-1]["objective"],
    }


def format_stages(name: str, r: dict) -> str:
    lines = [f"{name}: {r['elements']:,} elements, stages other than the solve"]
    for stage, row in r["stages"].items():
        lines.append(
            f"  {stage:40s} {row['s']:8.2f} s  peak {row['peak_MB']:7.0f} MB "
            f"(+{row['extra_MB']:.0f} MB)"
        )
    sizes = ", ".join(f"{k} {v:.1f} MB" for k, v in r["file_MB"].items())
    lines.append(f"  files: {sizes}; peak memory {r['peak_memory_MB']:.0f} MB")
    return "\n".join(lines)


# Run only when named with --case: each takes from ten minutes to over half an
# hour on two cores (the long comparison is dominated by its direct run).
ON_REQUEST = {
    "scale-3d-100x50x50": (case_scale, ((100, 50, 50), 100)),
    "compare-3d-60x30x30-long": (case_compare, ((60, 30, 30), 50)),
    "paths-3d-60x30x30-long": (case_compare_paths, ((60, 30, 30), 50)),
    "matrixfree-3d-200x100x50": (case_matrix_free, ((200, 100, 50), 100)),
    "matrixfree-3d-200x100x50-short": (case_matrix_free, ((200, 100, 50), 4)),
    "matrixfree-3d-300x160x120-short": (case_matrix_free, ((300, 160, 120), 3)),
    "operator-3d-200x100x50": (case_operator, ((200, 100, 50),)),
    "verify-2d-demo": (case_verify, ("bracket-2d",)),
    "verify-3d-demo": (case_verify, ("bracket-3d",)),
    # the print-resolution bracket, 150 × 80 × 60 mm at 0.5 mm (5.76 million elements)
    "print-3d-300x160x120-stages": (case_print_stages, ((300, 160, 120),)),
    "print-3d-300x160x120": (case_print_run, ((300, 160, 120), 100)),
    # the same run whole, cut to 10 design iterations: every stage of the pipeline
    # at print resolution in about half an hour
    "print-3d-300x160x120-short": (case_print_run, ((300, 160, 120), 10)),
}


def cases(quick: bool) -> dict:
    plan = {
        "mbb-2d-300x100": (case_mbb, (quick,)),
        "cantilever-3d-48x24x24": (case_cantilever, ((48, 24, 24), quick)),
    }
    if not quick:
        plan["cantilever-3d-96x48x48"] = (case_cantilever, ((96, 48, 48), quick))
        plan["compare-3d-60x30x30"] = (case_compare, ((60, 30, 30), 10))
        plan["paths-3d-60x30x30"] = (case_compare_paths, ((60, 30, 30), 10))
        plan["operator-3d-100x50x50"] = (case_operator, ((100, 50, 50),))
    return plan


def run_benchmarks(quick: bool = False, only: list[str] | None = None, echo=print) -> dict:
    """Run the standard cases (each in its own process) and return their figures."""
    ctx = mp.get_context("fork")
    report = {
        "machine": {
            "python": platform.python_version(),
            "cpus": mp.cpu_count(),
            "platform": platform.platform(),
        },
        "quick": quick,
        "cases": {},
    }
    plan = cases(quick)
    plan.update({k: v for k, v in ON_REQUEST.items() if only and k in only})
    for name, (fn, args) in plan.items():
        if only and name not in only:
            continue
        echo(f"running {name} …")
        queue = ctx.Queue()
        proc = ctx.Process(target=_child, args=(fn, args, queue))
        proc.start()
        out = queue.get()
        proc.join()
        report["cases"][name] = out
        echo(format_case(name, out))
    return report


def _phases(r: dict) -> str:
    ph = r["phases_s"]
    return ", ".join(f"{p} {ph[p]:.3f}" for p in PHASES + ("other",))


def _format_operator(name: str, r: dict) -> str:
    lines = [
        f"{name}: {r['elements']} elements, {r['gflop_per_application']:.2f} GFLOP per "
        "element-by-element application"
    ]
    for key in ("matrix_free_double", "matrix_free_single"):
        s = r[key]
        lines.append(
            f"  {key}: {s['seconds']:.3f} s ({s['cpu_seconds']:.3f} s CPU), "
            f"{s['gflop_per_s']:.1f} GFLOP/s (machine: {MACHINE_GFLOP_PER_S:.0f} dense), "
            f"{s['gb_per_s']:.1f} GB/s of vectors and moduli"
        )
    s = r["assembled"]
    lines.append(
        f"  assembled CSR: {s['seconds']:.3f} s ({s['cpu_seconds']:.3f} s CPU), "
        f"{s['gb_per_s']:.1f} GB/s (machine: {MACHINE_GB_PER_S:.0f} per thread), "
        f"matrix {s['matrix_MB']:.0f} MB; assembled / matrix-free: "
        f"{r['ratio_assembled_to_matrix_free_double']:.1f}× (double), "
        f"{r['ratio_assembled_to_matrix_free_single']:.1f}× (single); "
        f"peak memory {r['peak_memory_MB']:.0f} MB"
    )
    return "\n".join(lines)


def _format_paths(name: str, r: dict) -> str:
    lines = [f"{name}: {r['iterations']} iterations each"]
    for kind in ("matrix_free", "assembled"):
        s = r[kind]
        lines.append(
            f"  {kind:11s} {s['solver']}: {s['per_iteration_s']:.2f} s/iteration "
            f"({_phases(s)}); CG iterations {s['solver_iterations']:.1f}; "
            f"compliance {s['final_compliance']:.10g}"
        )
    lines.append(
        f"  assembled / matrix-free time per iteration: "
        f"{r['ratio_assembled_to_matrix_free']:.2f}×; compliance differs by "
        f"{r['compliance_relative_difference']:.2e} (relative); "
        f"peak memory {r['peak_memory_MB']:.0f} MB"
    )
    return "\n".join(lines)


def format_case(name: str, r: dict) -> str:
    if "error" in r:
        return f"{name}: FAILED {r['error']}"
    if "stages" in r:
        return format_stages(name, r)
    if "gflop_per_application" in r:
        return _format_operator(name, r)
    if "matrix_free" in r:
        return _format_paths(name, r)
    if "verify_s" in r:
        fine = r["meshes"][-1]
        return (
            f"{name}: verification {r['verify_s']:.1f} s, finest mesh {fine['elements']} "
            f"elements ({fine['free_dofs']} dofs, mesh {fine['mesh_s']:.1f} s, solve "
            f"{fine['solve_s']:.1f} s); peak {r['max_von_mises_MPa']:.4g} MPa against the "
            f"grid's {r['grid_max_von_mises_MPa']:.4g}; peak memory {r['peak_memory_MB']:.0f} MB"
        )
    if "direct" in r:
        lines = [f"{name}: {r['iterations']} iterations each"]
        for kind in ("iterative", "direct"):
            s = r[kind]
            lines.append(
                f"  {kind:9s} {s['solver']}: {s['per_iteration_s']:.2f} s/iteration "
                f"({_phases(s)}); solver iterations {s['solver_iterations']:.1f}"
            )
        lines.append(
            f"  direct / iterative time per iteration: {r['ratio_direct_to_iterative']:.1f}×; "
            f"compliance differs by {100 * r['compliance_relative_difference']:.3f} %; "
            f"peak memory {r['peak_memory_MB']:.0f} MB"
        )
        return "\n".join(lines)
    line = (
        f"{name}: {r['solver']}, {r['iterations']} iterations"
        + (f" in {r['wall_s']:.0f} s wall" if "wall_s" in r else "")
        + f", {r['per_iteration_s']:.3f} s/iteration "
        f"({_phases(r)}); solver iterations {r['solver_iterations']:.1f}; "
        f"first iteration {r['first_iteration_s']:.2f} s; setup {r['setup_s']:.1f} s; "
        f"final analyses and summary {r['finish_s']:.1f} s; "
        f"peak memory {r['peak_memory_MB']:.0f} MB"
    )
    if "estimate" in r:
        est = r["estimate"]
        mb = est["memory_bytes"] / 2**20
        line += (
            f"\n  levels {r['levels']}; CG iterations per design iteration "
            f"{r['cg_iterations']}; estimate {mb:.0f} MB and "
            f"{est['seconds_per_iteration']:.2f} s/iteration, measured / estimate: "
            f"memory {r['peak_memory_MB'] / mb:.2f}, time "
            f"{r['per_iteration_s'] / est['seconds_per_iteration']:.2f}"
        )
    if "reference" in r:
        ref = r["reference"]
        line += (
            f"\n  medians, paired in time: iteration {ref['median_iteration_s']:.3f} s, "
            "one CHOLMOD "
            f"factorisation + solve {ref['cholmod_factor_and_solve_s']:.3f} s; "
            f"iteration / (factorisation + solve) = {r['ratio_iteration_to_factor_solve']:.2f}"
        )
    return line
