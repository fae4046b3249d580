"""Parameter sweeps: the cartesian product of values of any dotted keys, each run in
a folder named after its parameters, on local worker processes or a Dask cluster.

Calls only the public API. A run whose folder is marked finished (runfolder.py) and
holds the same resolved problem is read back, not run again; a run stopped part-way
resumes from its checkpoint, so re-running an interrupted sweep's command completes
only what is missing. A stopped sweep writes the table of the runs it has.
"""

from __future__ import annotations

import csv
import io
import itertools
import json
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from .files import pyplot, write_figure, write_text


def combinations(vary: dict[str, list]) -> list[dict[str, Any]]:
    keys = list(vary)
    return [dict(zip(keys, values)) for values in itertools.product(*(vary[k] for k in keys))]


def folder_name(params: dict[str, Any]) -> str:
    """'optimization.volume_fraction=0.3' → 'volume_fraction-0.3', parts joined by '_'."""
    parts = []
    for key, value in params.items():
        text = json.dumps(value) if not isinstance(value, str) else value
        safe = "".join(c if c.isalnum() or c in ".+-" else "-" for c in text)
        parts.append(f"{key.split('.')[-1]}-{safe}")
    return "_".join(parts) or "base"


def _limit_blas(threads: int) -> None:
    """BLAS threads and the threads of sparse products (parallel.py) of one job."""
    from .parallel import set_threads

    set_threads(threads)
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(threads)
    except ImportError:  # pragma: no cover
        pass


def run_one(
    raw: dict, source: str, params: dict[str, Any], out_dir: str, blas_threads: int | None = None
) -> dict:
    """Optimise one combination and write its folder; returns its sweep row."""
    from . import export, optimize, problem_from_dict

    if blas_threads:
        _limit_blas(blas_threads)
    from .runfolder import OutputFolder, unmark

    problem = problem_from_dict(raw, params, source=source)
    out = Path(out_dir)
    with OutputFolder(out):
        unmark(out)  # of an earlier run of other values, if any
        checkpoint = out / "checkpoint.npz"
        # a direction that cannot reach a load still runs: its failing load-path check
        # keeps it off the trade-off front, and the table says why
        result = optimize(
            problem,
            callback=_check_stop,
            checkpoint=checkpoint,
            resume=_resumable(checkpoint, problem),
            allow_unreachable=True,
        )
        written = export(result, out)
        checkpoint.unlink(missing_ok=True)
    return row_of(params, written.summary, out_dir, ran=True)


def _resumable(checkpoint: Path, problem) -> bool:
    """A checkpoint of this very problem (any other is stale and is overwritten)."""
    if not checkpoint.exists():
        return False
    try:
        with np.load(checkpoint) as data:
            return json.loads(str(data["problem"])) == json.loads(json.dumps(problem.raw))
    except Exception:  # damaged: start again
        return False


def row_of(params: dict, summary: dict, out_dir: str, ran: bool) -> dict:
    row = dict(params)
    row.update(
        {
            "mass_kg": summary["mass_kg"],
            "volume_fraction": summary["volume_fraction"],
            "compliance_Nmm": summary["compliance_Nmm"],
            "optimizer_compliance_Nmm": summary["optimizer"]["compliance_Nmm"],
            "compliance_gap": summary["compliance_gap"],
        }
    )
    for case in summary["load_cases"]:
        row[f"compliance_{case['name']}_Nmm"] = case["compliance_Nmm"]
        for name, value in case["deflections_mm"].items():
            row[f"deflection_{name}_{case['name']}_mm"] = value
    row["max_displacement_mm"] = _largest(c["max_displacement_mm"] for c in summary["load_cases"])
    row.update(
        {
            "max_von_mises_MPa": summary["max_von_mises_MPa"],
            "safety_factor": summary["safety_factor"],
            "checks_failed": " ".join(summary["checks_failed"]),
            "unsupported_fraction": summary["unsupported_fraction"],
            "iterations": summary["iterations"],
            "converged": summary["converged"],
            "runtime_s": summary["runtime_s"],
            "folder": str(out_dir),
            "ran": ran,
        }
    )
    return row


def _largest(values) -> float | None:
    found = [v for v in values if v is not None]
    return max(found) if found else None


def _finished(expected: dict, out_dir: Path) -> dict | None:
    """The summary of a finished run of exactly the resolved problem `expected`,
    if there is one: its loop ended (finished.json), not merely a summary written."""
    from .runfolder import finished

    summary, resolved = out_dir / "summary.json", out_dir / "problem.json"
    if finished(out_dir) is None:
        return None
    try:
        if json.loads(resolved.read_text()) != json.loads(json.dumps(expected)):
            return None
        return json.loads(summary.read_text())
    except (OSError, ValueError):  # damaged: run it again
        return None


def eligible(row: dict) -> bool:
    """A design that may stand on the trade-off front: every check of its printed
    part passed and its figures are finite."""
    return not row["checks_failed"] and row["compliance_Nmm"] is not None


def pareto(rows: list[dict]) -> list[bool]:
    """True for each eligible run that no other eligible run beats on both mass and
    compliance of the printed part; a design that fails a check is never on the front."""
    ok = [r for r in rows if eligible(r)]
    out = []
    for r in rows:
        dominated = any(
            o is not r
            and o["mass_kg"] <= r["mass_kg"]
            and o["compliance_Nmm"] <= r["compliance_Nmm"]
            and (o["mass_kg"] < r["mass_kg"] or o["compliance_Nmm"] < r["compliance_Nmm"])
            for o in ok
        )
        out.append(eligible(r) and not dominated)
    return out


def sweep(
    problem,
    vary: dict[str, list],
    jobs: int = 1,
    out: str | Path | None = None,
    scheduler: str | None = None,
    progress: Callable[[str], None] | None = None,
) -> list[dict]:
    """Run every combination of `vary` (dotted key → values) of `problem` (a Problem
    or a problem file). Writes one folder per run, sweep.csv and sweep.png under
    `out` (default outputs/NAME-sweep) and returns the rows in combination order."""
    from . import load_problem, problem_from_dict

    if isinstance(problem, (str, Path)):
        problem = load_problem(problem)
    raw, source = problem.raw, problem.source
    combos = combinations(vary)
    # validate every combination before running any; the resolved problems also
    # tell finished runs from stale ones
    resolved = [problem_from_dict(raw, params, source=source).raw for params in combos]
    root = Path(out) if out else Path("outputs") / f"{problem.name}-sweep"
    root.mkdir(parents=True, exist_ok=True)
    say = progress or (lambda text: None)
    rows: list[dict | None] = [None] * len(combos)
    todo = []
    for i, params in enumerate(combos):
        folder = root / folder_name(params)
        done = _finished(resolved[i], folder)
        if done is not None:
            rows[i] = row_of(params, done, str(folder), ran=False)
            say(f"[{i + 1}/{len(combos)}] {folder.name}: already finished")
        else:
            todo.append((i, params, str(folder)))
    finished = len(combos) - len(todo)

    def record(i: int, row: dict) -> None:
        nonlocal finished
        rows[i] = row
        finished += 1
        compliance = row["compliance_Nmm"]
        verdict = (
            f"checks FAILED: {row['checks_failed']}" if row["checks_failed"] else "checks passed"
        )
        say(
            f"[{finished}/{len(combos)}] {Path(row['folder']).name}: printed part "
            f"compliance {'n/a' if compliance is None else f'{compliance:.5g}'} N·mm, "
            f"mass {row['mass_kg']:.4g} kg, {verdict}; "
            f"{row['iterations']} iterations, {row['runtime_s']:.1f} s"
        )

    try:
        _run_all(todo, raw, source, jobs, scheduler, record)
    except KeyboardInterrupt:
        done = [r for r in rows if r is not None]
        if done:
            write_table(done, root / "sweep.csv")
        say(
            f"stopped: {len(done)} of {len(combos)} runs finished, in {root / 'sweep.csv'}; "
            "the same sweep command again runs the rest"
        )
        raise
    write_table(rows, root / "sweep.csv")
    write_plot(rows, list(vary), root / "sweep.png")
    return rows


def _run_all(todo, raw, source, jobs, scheduler, record) -> None:
    if todo and scheduler:
        from dask.distributed import Client, as_completed

        with Client(scheduler) as client:
            futures = {
                client.submit(run_one, raw, source, params, folder, 1, pure=False): i
                for i, params, folder in todo
            }
            try:
                for fut in as_completed(futures):
                    record(futures[fut], fut.result())
            except KeyboardInterrupt:
                client.cancel(list(futures))
                raise
    elif todo and jobs > 1:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor
        from concurrent.futures import as_completed as done_first

        threads = max(1, (os.cpu_count() or 1) // jobs)  # jobs × threads ≤ cores
        context = mp.get_context("spawn")
        stop = context.Event()
        pool = ProcessPoolExecutor(
            jobs, mp_context=context, initializer=_worker_init, initargs=(stop,)
        )
        try:
            futures = {
                pool.submit(run_one, raw, source, params, folder, threads): i
                for i, params, folder in todo
            }
            for fut in done_first(futures):
                record(futures[fut], fut.result())
        except KeyboardInterrupt:
            stop.set()  # the running runs save a checkpoint and stop
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    else:
        for i, params, folder in todo:
            record(i, run_one(raw, source, params, folder))


# set by the sweep's process when it is stopped; each worker's run checks it after
# every iteration (a whole iteration: the checkpoint it saves is exact)
_STOP = None


def _worker_init(stop) -> None:
    """Workers leave Ctrl-C to the sweep's process, which stops them through `stop`:
    a signal landing in a worker between runs could kill it in the middle of the
    pool's queue and hang the pool. During a run the loop's own handler
    (interrupts.py) still stops it cleanly."""
    import signal

    global _STOP
    _STOP = stop
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _check_stop(row: dict) -> None:
    if _STOP is not None and _STOP.is_set():
        raise KeyboardInterrupt


def write_table(rows: list[dict], path: Path) -> None:
    columns = list(dict.fromkeys(k for r in rows for k in r if k != "ran")) + ["pareto"]
    buf = io.StringIO()
    w = csv.DictWriter(buf, columns, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for r, best in zip(rows, pareto(rows)):
        w.writerow({**r, "pareto": best})
    write_text(path, buf.getvalue())


def write_plot(rows: list[dict], keys: list[str], path: Path) -> None:
    plt = pyplot()

    best = np.array(pareto(rows))
    failing = np.array([not eligible(r) for r in rows])
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    mass = np.array([r["mass_kg"] for r in rows], dtype=float)
    comp = np.array([np.nan if r["compliance_Nmm"] is None else r["compliance_Nmm"] for r in rows])
    dominated = ~best & ~failing
    ax.scatter(mass[dominated], comp[dominated], color="tab:gray", label="dominated")
    ax.scatter(mass[failing], comp[failing], color="tab:gray", marker="x", label="a check failed")
    ax.scatter(mass[best], comp[best], color="tab:red", label="not dominated")
    order = np.argsort(mass[best])
    ax.plot(mass[best][order], comp[best][order], color="tab:red", lw=1)
    for r, m, c in zip(rows, mass, comp):
        ax.annotate(
            ", ".join(f"{k.split('.')[-1]}={r[k]}" for k in keys),
            (m, c),
            fontsize=7,
            textcoords="offset points",
            xytext=(4, 4),
        )
    ax.set_xlabel("mass of the printed part (kg)")
    ax.set_ylabel("weighted compliance of the printed part (N·mm)")
    ax.set_title("trade-off: stiffness against mass")
    ax.legend(fontsize=8)
    write_figure(path, fig)
