"""Command line: thin subcommands over the public API; the lines printed come from
report.py. No module state: a command names its output folder on the `Outputs` it is
given, and main puts error.log there."""

from __future__ import annotations

import argparse
import json
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
    sweep,
    verify,
    write_verification,
)


@dataclass
class Outputs:
    """The output folder of the command in progress, once it is known (for error.log
    and the resume hint)."""

    folder: Path | None = None


def _say(lines) -> None:
    for line in lines:
        print(line, flush=True)


def _load(args):
    overrides = dict(parse_override(s) for s in (args.set or []))
    return load_problem(args.file, overrides)


def _warn(problem) -> None:
    for w in problem.warnings:
        print(f"warning: {w}", file=sys.stderr)


def _out_dir(args, problem) -> Path:
    return Path(args.out) if args.out else Path("outputs") / problem.name


def _progress(row: dict) -> None:
    _say(report.format_progress(row))


def cmd_run(args, outputs: Outputs) -> int:
    if args.resume:
        problem = load_run_problem(args.resume, [parse_override(x) for x in (args.set or [])])
        out = Path(args.resume)
    else:
        if not args.file:
            raise ProblemError("topo run", "FILE", "give a problem file, or --resume RUN_DIR")
        problem = _load(args)
        out = _out_dir(args, problem)
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
    out.mkdir(parents=True, exist_ok=True)
    outputs.folder = out
    checkpoint = out / "checkpoint.npz"
    if args.resume:
        print(f"resuming from {checkpoint}", flush=True)
    result = optimize(
        problem,
        callback=None if args.quiet else _progress,
        checkpoint=checkpoint,
        resume=bool(args.resume),
        allow_unreachable=args.allow_unreachable,
    )
    s = export(result, out, iso=args.iso, smooth=args.smooth, mesh_format=args.mesh_format).summary
    if checkpoint.exists():
        checkpoint.unlink()  # the run is complete; summary.json marks it
    verified = None
    if args.verify or problem.report.verify:
        ver = verify(result)
        s = write_verification(ver, out, s)
        verified = report.format_verification(ver.figures, out)
    lines = report.format_run(s, args.mesh_format) + (verified or [])
    _say(lines + [f"outputs in {out}/", CAUTION])
    if s["stop_reason"].startswith("numerical fault"):
        print(f"error: {s['stop_reason']}", file=sys.stderr)
        return 1
    failed = (s or ver.figures)["checks_failed"]
    if args.strict and failed:
        print(f"error: checks failed: {', '.join(failed)} (--strict)", file=sys.stderr)
        return 3
    return 0


def cmd_export(args, outputs: Outputs) -> int:
    result = load_run(args.run_dir)
    s = export(
        result,
        args.run_dir,
        only=["fields.vtu", "summary.json"],
        iso=args.iso,
        smooth=args.smooth,
        mesh_format=args.mesh_format,
    ).summary
    _say(
        [
            report.format_mesh(s["mesh"], args.mesh_format),
            f"re-exported design.{args.mesh_format}, fields.vtu and summary.json "
            f"in {args.run_dir}/",
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
    density = np.load(args.design) if args.design else None
    result = analyze(problem, density)
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-analysis"
    outputs.folder = out
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
    lines = report.format_verification(ver.figures, args.run_dir)
    _say(lines + (report.format_checks(s) if s else []))
    if args.strict and s["checks_failed"]:
        print(f"error: checks failed: {', '.join(s['checks_failed'])} (--strict)", file=sys.stderr)
        return 3
    return 0


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
    outputs.folder = out
    n = int(np.prod([len(v) for v in vary.values()]))
    where = f"on {args.scheduler}" if args.scheduler else f"with {args.jobs} local job(s)"
    print(f"{problem.name}: sweeping {', '.join(vary)} ({n} runs) {where}", flush=True)
    rows = sweep(
        problem,
        vary,
        jobs=args.jobs,
        out=out,
        scheduler=args.scheduler,
        progress=lambda text: print(text, flush=True),
    )
    ran = sum(r["ran"] for r in rows)
    print(
        f"{ran} run(s) made, {len(rows) - ran} already finished; table in {out}/sweep.csv, "
        f"trade-off in {out}/sweep.png"
    )
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
    p.add_argument("--jobs", type=int, default=1, help="local worker processes (default 1)")
    p.add_argument(
        "--scheduler", help="address of a running Dask scheduler (needs dask.distributed)"
    )
    p.add_argument("--out", help="sweep folder (default outputs/NAME-sweep)")
    p.set_defaults(func=cmd_sweep)
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
    return ap


def verify_option(p) -> None:
    p.add_argument(
        "--verify",
        action="store_true",
        help="then verify with a body-fitted quadratic mesh (verify.json/.vtu/.png)",
    )


def mesh_options(p, format_flag: str = "--mesh-format") -> None:
    p.add_argument("--iso", type=float, default=0.5, help="density of the surface (default 0.5)")
    p.add_argument(
        "--smooth",
        type=int,
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


def main(argv: list[str] | None = None) -> int:
    """Exit codes: 0 success, 2 input error (one message, no traceback), 1 internal
    error (the traceback goes to error.log in the output folder), 3 a check of the
    printed part failed under `run --strict`."""
    args = build_parser().parse_args(argv)
    outputs = Outputs()
    try:
        return args.func(args, outputs)
    except (ProblemError, FileNotFoundError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        out = outputs.folder
        print(
            "interrupted" + (f"; continue with: topo run --resume {out}" if out else ""),
            file=sys.stderr,
        )
        return 130
    except Exception as exc:  # the one place that turns crashes into exit 1
        import traceback

        out = Path(outputs.folder or "outputs")
        out.mkdir(parents=True, exist_ok=True)
        log = out / "error.log"
        log.write_text(traceback.format_exc())
        print(f"internal error: {type(exc).__name__}: {exc} (traceback in {log})", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
