"""Command line: thin subcommands over the public API; the lines printed come from
report.py. No module state: a command names its output folder on the `Outputs` it is
given, and main puts error.log there."""

from __future__ import annotations

import argparse
import errno
import json
import math
import os
import shlex
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import (
    CAUTION,
    MESH_FORMATS,
    ProblemError,
    analyze,
    check,
    estimate_resources,
    export,
    load_problem,
    load_run,
    load_run_problem,
    optimize,
    parse_override,
    report,
    run_benchmarks,
    runfolder,
    sweep,
    verify,
    write_report,
    write_verification,
)
from .interrupts import terminate_as_interrupt
from .orient import CAUTION as ORIENT_CAUTION
from .orient import orient
from .orient import write_outputs as write_orient


@dataclass
class Outputs:
    """The output folder of the command in progress, once it is known (for error.log
    and the resume hint), and the command that continues it after an interruption."""

    folder: Path | None = None
    resume: str | None = None
    argv: tuple[str, ...] = ()


def _say(lines) -> None:
    for line in lines:
        _print(line)


def _print(text: str) -> None:
    """print to stdout; once stdout is a closed pipe (`topo run ... | head`) the rest
    goes to /dev/null and the command carries on."""
    try:
        print(text, flush=True)
    except BrokenPipeError:
        _drop_stdout()


def _drop_stdout() -> None:
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())


def _load(args):
    overrides = dict(parse_override(s) for s in (args.set or []))
    return load_problem(args.file, overrides)


def _warn(problem) -> None:
    for w in problem.warnings:
        print(f"warning: {w}", file=sys.stderr)


def _out_dir(args, problem) -> Path:
    return Path(args.out) if args.out else Path("outputs") / problem.name


def _progress(row: dict) -> None:
    """Every iteration on a terminal; in a pipe or a log, the first and every tenth."""
    if sys.stdout.isatty() or row["iteration"] == 1 or row["iteration"] % 10 == 0:
        _say(report.format_progress(row))


def cmd_run(args, outputs: Outputs) -> int:
    if args.resume:
        out = Path(args.resume)
        _resumable(out)
        problem = load_run_problem(out, [parse_override(x) for x in (args.set or [])])
    else:
        if not args.file:
            raise ProblemError("topo run", "FILE", "give a problem file, or --resume RUN_DIR")
        problem = _load(args)
        out = _out_dir(args, problem)
    runfolder.check_target(out)
    _warn(problem)
    est = estimate_resources(problem)
    _say([report.format_plan(problem, est)])
    if est["available_bytes"] and est["memory_bytes"] > est["available_bytes"] and not args.force:
        hint = (
            f"; domain.element_size = {est['fitting_element_size']} mm would fit"
            if est["fitting_element_size"]
            else ""
        )
        raise ProblemError(
            problem.source,
            "domain.element_size",
            f"the run needs about {est['memory_bytes'] / 2**30:.1f} GiB but "
            f"{est['available_bytes'] / 2**30:.1f} GiB are free{hint} "
            "(--force runs anyway)",
        )
    with runfolder.OutputFolder(out):
        outputs.folder = out
        checkpoint = out / "checkpoint.npz"
        if args.resume:
            _print(f"resuming from {checkpoint}")
        else:
            runfolder.unmark(out)
        result = optimize(
            problem,
            callback=None if args.quiet else _progress,
            checkpoint=checkpoint,
            resume=bool(args.resume),
            allow_unreachable=args.allow_unreachable,
        )
        s = export(
            result, out, iso=args.iso, smooth=args.smooth, mesh_format=args.mesh_format
        ).summary
        checkpoint.unlink(missing_ok=True)  # the run is complete; finished.json marks it
        verified = None
        if args.verify or problem.report.verify:
            ver = verify(result)
            s = write_verification(ver, out, s)
            verified = report.format_verification(ver.figures, out)
            write_report(out)  # with the verified figures
    lines = report.format_run(s, args.mesh_format) + (verified or [])
    _say(lines + [f"outputs in {out}/", CAUTION])
    if s["stop_reason"].startswith("numerical fault"):
        print(f"error: {s['stop_reason']}", file=sys.stderr)
        return 1
    failed = s["checks_failed"]
    if args.strict and failed:
        print(f"error: checks failed: {', '.join(failed)} (--strict)", file=sys.stderr)
        return 3
    return 0


def cmd_report(args, outputs: Outputs) -> int:
    folder = Path(args.run_dir)
    if not (folder / "summary.json").exists():
        raise FileNotFoundError(f"{folder}: no summary.json; is this a finished topo run folder?")
    target = write_report(folder)
    _say([f"review document in {target}", CAUTION])
    return 0


def _resumable(out: Path) -> None:
    if not (out / "checkpoint.npz").exists() and runfolder.finished(out):
        raise ProblemError(
            str(out), "--resume", "the run is finished (finished.json); nothing to resume"
        )
    if not out.is_dir():
        raise ProblemError(str(out), "--resume", "no such run folder")


def cmd_export(args, outputs: Outputs) -> int:
    run = Path(args.run_dir)
    if (run / runfolder.MARKER).exists() and not runfolder.finished(run):
        raise ProblemError(
            str(run / "density.npy"),
            "",
            f"damaged or changed since the run (it does not match {runfolder.MARKER}); "
            "run the problem again into a new folder",
        )
    if not runfolder.finished(run):
        more = (
            f"continue it with: topo run --resume {run}"
            if (run / "checkpoint.npz").exists()
            else "run the problem again"
        )
        raise ProblemError(
            str(run),
            "RUN_DIR",
            f"not a finished run (no {runfolder.MARKER} matching its density.npy); {more}",
        )
    with runfolder.OutputFolder(run, "RUN_DIR"):
        result = load_run(run)
        s = export(
            result,
            run,
            only=["fields.vtu", "summary.json"],
            iso=args.iso,
            smooth=args.smooth,
            mesh_format=args.mesh_format,
        ).summary
    _say(
        [
            report.format_mesh(s["mesh"], args.mesh_format),
            f"re-exported design.{args.mesh_format}, fields.vtu and summary.json in {run}/",
        ]
    )
    return 0


def cmd_check(args, outputs: Outputs) -> int:
    problem = _load(args)
    _warn(problem)
    rep = check(problem)
    if args.json:
        print(json.dumps(rep, indent=2))
        return 0
    _say(report.format_check(rep))
    return 0


def cmd_analyze(args, outputs: Outputs) -> int:
    problem = _load(args)
    density = _design(args.design, problem) if args.design else None
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-analysis"
    runfolder.check_target(out)
    result = analyze(problem, density)
    outputs.folder = out
    with runfolder.OutputFolder(out):
        s = export(result, out, only=["problem.json", "summary.json"], mesh=False).summary
        verified = []
        if args.verify:
            # a design file is verified as printed; without one, the exact domain less voids
            ver = verify(result, exact=args.design is None)
            s = write_verification(ver, out, s)
            verified = report.format_verification(ver.figures, out)
    _say(report.format_analysis(s, args.design) + verified + [f"summary in {out}/summary.json"])
    return 0


def cmd_verify(args, outputs: Outputs) -> int:
    result = load_run(args.run_dir)
    outputs.folder = Path(args.run_dir)
    ver = verify(result)
    s = write_verification(ver, args.run_dir, result.summary or None)
    if s:
        write_report(args.run_dir)  # the review document with the verified figures
    lines = report.format_verification(ver.figures, args.run_dir)
    _say(lines + (report.format_checks(s) if s else []))
    if args.strict and s["checks_failed"]:
        print(f"error: checks failed: {', '.join(s['checks_failed'])} (--strict)", file=sys.stderr)
        return 3
    return 0


def _design(path: str, problem) -> np.ndarray:
    """A density.npy for `analyze --design`: readable, the problem's grid, finite."""
    try:
        density = np.load(path, allow_pickle=False)
    except FileNotFoundError:
        raise ProblemError(path, "--design", "no such file") from None
    except Exception as exc:  # truncated, not .npy, pickled objects
        raise ProblemError(
            path, "--design", f"not a readable .npy array ({type(exc).__name__}: {exc})"
        ) from None
    shape = problem.domain.shape
    if not isinstance(density, np.ndarray) or density.shape != shape:
        got = getattr(density, "shape", type(density).__name__)
        raise ProblemError(
            path, "--design", f"design of shape {got}, the problem's grid is {shape}"
        )
    if density.dtype.kind not in "fiub" or not np.all(np.isfinite(density)):
        raise ProblemError(path, "--design", "densities must be finite numbers in [0, 1]")
    return density


def _parse_vary(text: str) -> tuple[str, list]:
    """'KEY=V1,V2,...' → (KEY, [V1, V2, ...]), each value read as TOML."""
    if "=" not in text:
        raise ProblemError("--vary", text, "expected KEY=V1,V2,...")
    key, values = text.split("=", 1)
    items = [parse_override(f"v={v.strip()}")[1] for v in values.split(",") if v.strip()]
    if not items:
        raise ProblemError("--vary", key, "expected KEY=V1,V2,...")
    return key.strip(), items


def cmd_sweep(args, outputs: Outputs) -> int:
    problem = _load(args)
    vary = dict(_parse_vary(v) for v in args.vary)
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-sweep"
    runfolder.check_target(out)
    n = int(np.prod([len(v) for v in vary.values()]))
    where = f"on {args.scheduler}" if args.scheduler else f"with {args.jobs} local job(s)"
    with runfolder.OutputFolder(out):
        outputs.folder = out
        # finished runs are kept, interrupted ones resume from their checkpoints
        outputs.resume = shlex.join(["topo", *outputs.argv]) if outputs.argv else None
        _print(f"{problem.name}: sweeping {', '.join(vary)} ({n} runs) {where}")
        rows = sweep(
            problem, vary, jobs=args.jobs, out=out, scheduler=args.scheduler, progress=_print
        )
    ran = sum(r["ran"] for r in rows)
    _say(
        [
            f"{ran} run(s) made, {len(rows) - ran} already finished; table in "
            f"{out}/sweep.csv, trade-off in {out}/sweep.png",
            CAUTION,
        ]
    )
    return 0


def cmd_orient(args, outputs: Outputs) -> int:
    problem = _load(args)
    dims = ("+x", "-x", "+y", "-y", "+z", "-z")[: 2 * problem.dim]
    chosen = [d.strip() for d in args.directions.split(",")] if args.directions else list(dims)
    for d in chosen:
        if d not in dims:
            raise ProblemError(
                "--directions",
                d,
                f"not a build direction of a {problem.dim}D problem; choose from {', '.join(dims)}",
            )
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-orient"
    outputs.folder = out
    print(f"{problem.name}: one design per build direction ({', '.join(chosen)})", flush=True)
    rows, best, reason = orient(
        problem,
        chosen,
        jobs=args.jobs,
        out=out,
        scheduler=args.scheduler,
        progress=lambda t: print(t, flush=True),
    )
    write_orient(problem, rows, best, reason, out)
    for r in rows:
        cost, c = r["printed_cost_per_part"], r["compliance_Nmm"]
        stiffness = "not analysed (no load path)" if c is None else f"{c:.5g} N·mm"
        print(
            f"  {r['build.direction']}: compliance {stiffness}, support "
            f"{r['support_volume_mm3']:.4g} mm³, {r['layers']} layers, "
            f"{'does not fit the plate' if cost is None else f'{cost:.4g} per part'}"
            + (f"; checks FAILED: {r['checks_failed']}" if r["checks_failed"] else "")
        )
    print(f"recommended: {reason}")
    print(f"table in {out}/orient.csv, pictures orient.png and cost.png")
    print(ORIENT_CAUTION)
    print(CAUTION)
    return 0


def cmd_bench(args, outputs: Outputs) -> int:
    report = run_benchmarks(quick=args.quick, only=args.case)
    if args.out:
        Path(args.out).parent.mkdir(parents=True, exist_ok=True)
        Path(args.out).write_text(json.dumps(report, indent=2) + "\n")
        print(f"results in {args.out}")
    return 0 if all("error" not in c for c in report["cases"].values()) else 1


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="topo",
        description="Topology optimisation of metal brackets for laser powder-bed fusion.",
        epilog=CAUTION,
    )
    sub = ap.add_subparsers(dest="command", required=True)

    def common(p):
        p.add_argument("file", help="problem file (TOML)")
        p.add_argument(
            "--set",
            action="append",
            metavar="KEY=VALUE",
            help="override a problem value, e.g. optimization.volume_fraction=0.25",
        )

    p = sub.add_parser("run", help="optimise a problem and write every output file")
    p.add_argument("file", nargs="?", help="problem file (TOML)")
    p.add_argument(
        "--set",
        action="append",
        metavar="KEY=VALUE",
        help="override a problem value, e.g. optimization.volume_fraction=0.25",
    )
    p.add_argument(
        "--resume", metavar="RUN_DIR", help="continue an interrupted run from its checkpoint"
    )
    p.add_argument(
        "--force", action="store_true", help="run even when the memory estimate exceeds free memory"
    )
    p.add_argument(
        "--strict",
        action="store_true",
        help="exit with status 3 when any check of the printed part fails",
    )
    p.add_argument(
        "--allow-unreachable",
        action="store_true",
        help="go on when no self-supporting material can reach a load or support region",
    )
    p.add_argument("--out", help="output folder (default outputs/NAME)")
    p.add_argument("--quiet", action="store_true", help="no progress lines")
    verify_option(p)
    mesh_options(p)
    p.set_defaults(func=cmd_run)
    p = sub.add_parser("check", help="build the model and print it, without solving")
    common(p)
    p.add_argument("--json", action="store_true", help="print the report as JSON")
    p.set_defaults(func=cmd_check)
    p = sub.add_parser("analyze", help="finite-element analysis of the full domain or a design")
    common(p)
    p.add_argument("--design", help="density.npy of a design (default: the full domain)")
    p.add_argument("--out", help="output folder (default outputs/NAME-analysis)")
    verify_option(p)
    p.set_defaults(func=cmd_analyze)
    p = sub.add_parser("sweep", help="run the cartesian product of values of one or more keys")
    common(p)
    p.add_argument(
        "--vary",
        action="append",
        required=True,
        metavar="KEY=V1,V2,...",
        help="a dotted key and its values, e.g. optimization.volume_fraction=0.2,0.3",
    )
    p.add_argument(
        "--jobs", type=_at_least(1), default=1, help="local worker processes (default 1)"
    )
    p.add_argument(
        "--scheduler", help="address of a running Dask scheduler (needs dask.distributed)"
    )
    p.add_argument("--out", help="sweep folder (default outputs/NAME-sweep)")
    p.set_defaults(func=cmd_sweep)
    p = sub.add_parser("orient", help="a design per build direction, with supports, time and cost")
    common(p)
    p.add_argument("--directions", help="comma-separated, e.g. +z,-z,+x (default: every axis)")
    p.add_argument("--jobs", type=int, default=1, help="local worker processes (default 1)")
    p.add_argument(
        "--scheduler", help="address of a running Dask scheduler (needs dask.distributed)"
    )
    p.add_argument("--out", help="study folder (default outputs/NAME-orient)")
    p.set_defaults(func=cmd_orient)
    p = sub.add_parser("bench", help="benchmark the standard cases (per-phase times, ratios)")
    p.add_argument("--quick", action="store_true", help="small cases only, for small machines")
    p.add_argument("--case", action="append", help="run only this case (repeatable)")
    p.add_argument(
        "--out", default="outputs/bench.json", help="JSON results (default outputs/bench.json)"
    )
    p.set_defaults(func=cmd_bench)
    p = sub.add_parser("verify", help="body-fitted verification of a finished run's printed part")
    p.add_argument("run_dir", help="a run folder written by `topo run`")
    p.add_argument("--strict", action="store_true", help="exit with status 3 when any check fails")
    p.set_defaults(func=cmd_verify)
    p = sub.add_parser("export", help="re-export the mesh and fields of a finished run")
    p.add_argument("run_dir", help="a run folder written by `topo run`")
    mesh_options(p, "--format")
    p.set_defaults(func=cmd_export)
    p = sub.add_parser("report", help="rebuild report.html, the review document, of a finished run")
    p.add_argument("run_dir", help="a run folder written by `topo run`")
    p.set_defaults(func=cmd_report)
    return ap


def verify_option(p) -> None:
    p.add_argument(
        "--verify",
        action="store_true",
        help="then verify with a body-fitted quadratic mesh (verify.json/.vtu/.png)",
    )


def mesh_options(p, format_flag: str = "--mesh-format") -> None:
    p.add_argument(
        "--iso", type=_fraction, default=0.5, help="density of the surface, in (0, 1) (default 0.5)"
    )
    p.add_argument(
        "--smooth",
        type=_at_least(0),
        default=0,
        metavar="N",
        help="Taubin smoothing passes on the mesh (default 0)",
    )
    p.add_argument(
        format_flag,
        dest="mesh_format",
        choices=MESH_FORMATS,
        default="stl",
        help="mesh file format (default stl)",
    )


def _fraction(text: str) -> float:
    """--iso: a number strictly between 0 and 1 (the densities lie in [0, 1], so a
    surface at 0, 1 or beyond is empty or the whole box)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number in (0, 1), got {text!r}") from None
    if not (math.isfinite(value) and 0 < value < 1):
        raise argparse.ArgumentTypeError(
            f"must lie in (0, 1), got {text!r}: densities lie in [0, 1], so that surface "
            "would be empty or the whole box"
        )
    return value


def _at_least(low: int):
    def whole(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if value < low:
            raise argparse.ArgumentTypeError(f"must be at least {low}, got {value}")
        return value

    return whole


def main(argv: list[str] | None = None) -> int:
    """Exit codes: 0 success, 2 input error or a file that cannot be written (one
    message, no traceback), 1 internal error (the traceback goes to error.log in the
    output folder), 3 a check of the printed part failed under `run --strict`,
    130 interrupted (Ctrl-C or SIGTERM; the message says how to continue)."""
    args = build_parser().parse_args(argv)
    outputs = Outputs(argv=tuple(sys.argv[1:] if argv is None else argv))
    restore = terminate_as_interrupt()
    try:
        return args.func(args, outputs)
    except (ProblemError, FileNotFoundError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted" + _continue_hint(outputs), file=sys.stderr)
        return 130
    except BrokenPipeError:  # stdout closed by its reader: nothing more to say
        _drop_stdout()
        return 0
    except Exception as exc:  # the one place that turns crashes into exit 1
        import traceback

        if isinstance(exc, OSError) and exc.errno in WRITE_FAULTS:
            print(
                f"error: cannot write {exc.filename}: {exc.strerror}; the files written "
                "before are kept" + _continue_hint(outputs),
                file=sys.stderr,
            )
            return 2

        text = traceback.format_exc()
        try:
            out = Path(outputs.folder or "outputs")
            out.mkdir(parents=True, exist_ok=True)
            log = out / "error.log"
            log.write_text(text)
            where = f"traceback in {log}"
        except OSError as why:  # no folder to log into (e.g. a file named outputs)
            sys.stderr.write(text)
            where = f"traceback above; no error.log: {why}"
        print(f"internal error: {type(exc).__name__}: {exc} ({where})", file=sys.stderr)
        return 1
    finally:
        restore()


# a full disk, a quota, a read-only or forbidden folder: the user's to fix
WRITE_FAULTS = (errno.ENOSPC, errno.EDQUOT, errno.EROFS, errno.EACCES, errno.EPERM)


def _continue_hint(outputs: Outputs) -> str:
    if outputs.resume:
        return f"; continue with the same command: {outputs.resume}"
    out = outputs.folder
    if out is not None and (out / "checkpoint.npz").exists():
        return f"; continue with: topo run --resume {out}"
    if out is not None:
        return "; no checkpoint was saved yet: run the same command again"
    return ""


if __name__ == "__main__":
    sys.exit(main())
