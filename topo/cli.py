"""Command line: thin subcommands over the public API."""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

from . import (analyze, check, estimate_resources, export, load_problem, load_run, load_run_problem,
               optimize, run_benchmarks, sweep)
from .problem import ProblemError, parse_override
from .schema import format_setting
from .export import MESH_FORMATS
from .report import CAUTION


def _load(args):
    overrides = dict(parse_override(s) for s in (args.set or []))
    return load_problem(args.file, overrides)


def _warn(problem) -> None:
    for w in problem.warnings:
        print(f"warning: {w}", file=sys.stderr)


def _out_dir(args, problem) -> Path:
    return Path(args.out) if args.out else Path("outputs") / problem.name


def _progress(row: dict) -> None:
    if row["iteration"] == 1:
        print(f"solver: {row['solver']}", flush=True)
    beta = f"  beta {row['beta']:5.1f}" if row["beta"] is not None else ""
    if row["solver_iterations"]:
        beta += f"  cg {row['solver_iterations']:3d}"
    print(f"iter {row['iteration']:4d}  compliance {row['objective']:.6e} N·mm  "
          f"volume {row['volume_fraction']:.4f}  change {row['change']:.4f}{beta}  "
          f"{row['seconds']:.2f} s", flush=True)


def _print_cases(summary: dict) -> None:
    for case in summary["load_cases"]:
        vm = case["max_von_mises_MPa"]
        print(f"  load case {case['name']}: compliance {case['compliance_Nmm']:.6g} N·mm, "
              f"max displacement {case['max_displacement_mm']:.4g} mm"
              + (f", max von Mises {vm:.4g} MPa" if vm is not None else ""))


def cmd_run(args) -> int:
    if args.resume:
        problem = load_run_problem(args.resume, [parse_override(x) for x in (args.set or [])])
        out = Path(args.resume)
    else:
        if not args.file:
            raise ProblemError("topo run", "FILE", "give a problem file, or --resume RUN_DIR")
        problem = _load(args)
        out = _out_dir(args, problem)
    _warn(problem)
    g = problem.domain.shape
    est = estimate_resources(problem)
    print(f"{problem.name}: {problem.dim}D, {'×'.join(map(str, g))} = {int(np.prod(g))} elements "
          f"of {problem.domain.element_size} mm, {problem.material.name}; estimated "
          f"{est['memory_bytes'] / 2**30:.2f} GiB, {est['seconds_per_iteration']:.2g} s per iteration",
          flush=True)
    if est["available_bytes"] and est["memory_bytes"] > est["available_bytes"] and not args.force:
        hint = (f"; domain.element_size = {est['fitting_element_size']} mm would fit"
                if est["fitting_element_size"] else "")
        raise ProblemError(problem.source, "domain.element_size",
                           f"the run needs about {est['memory_bytes'] / 2**30:.1f} GiB but "
                           f"{est['available_bytes'] / 2**30:.1f} GiB are free{hint} "
                           "(--force runs anyway)")
    out.mkdir(parents=True, exist_ok=True)
    _CURRENT_OUT[0] = out
    checkpoint = out / "checkpoint.npz"
    if args.resume:
        print(f"resuming from {checkpoint}", flush=True)
    result = optimize(problem, callback=None if args.quiet else _progress, checkpoint=checkpoint,
                      resume=bool(args.resume))
    export(result, out, iso=args.iso, smooth=args.smooth, mesh_format=args.mesh_format)
    if checkpoint.exists():
        checkpoint.unlink()  # the run is complete; summary.json marks it
    s = result.summary
    print(f"{'converged' if s['converged'] else 'stopped'} after {s['iterations']} iterations "
          f"in {s['runtime_s']:.1f} s (solver {s['solver']}): {s['stop_reason']}")
    print(f"  compliance {s['compliance_Nmm']:.6g} N·mm, volume fraction {s['volume_fraction']:.4f}, "
          f"mass {s['mass_kg']:.4g} kg")
    _print_cases(s)
    if s["build_direction"]:
        print(f"  unsupported fraction {s['unsupported_fraction']:.4f} building {s['build_direction']}"
              f" (overhang filter {'on' if s['overhang_filter'] else 'off'})")
    for r in s["passive_regions"]:
        if r["kind"] == "solid" and r["solid_share"] < 0.999:
            print(f"  note: only {100 * r['solid_share']:.1f} % of solid region {r['name']} is printed "
                  "solid (the rest is not self-supporting)")
    best = min(s["unsupported_by_direction"], key=s["unsupported_by_direction"].get)
    print(f"  best build direction for this design: {best} "
          f"(unsupported fraction {s['unsupported_by_direction'][best]:.4f})")
    _print_mesh(s["mesh"], args.mesh_format)
    print(f"outputs in {out}/")
    print(CAUTION)
    if s["stop_reason"].startswith("numerical fault"):
        print(f"error: {s['stop_reason']}", file=sys.stderr)
        return 1
    return 0


def _print_mesh(m: dict, fmt: str) -> None:
    down = m["downfacing_overhang_fraction"]
    print(f"  mesh design.{fmt}: {m['volume_mm3']:.6g} mm³, {m['area_mm2']:.6g} mm², "
          f"{'watertight' if m['watertight'] else 'NOT watertight'}, {m['pieces']} piece(s), "
          f"{m['debris_pieces_removed']} debris piece(s) removed"
          + (f", down-facing overhang {100 * down:.2f} % of the area" if down is not None else ""))


def cmd_export(args) -> int:
    result = load_run(args.run_dir)
    export(result, args.run_dir, only=["fields.vtu", "summary.json"], iso=args.iso,
           smooth=args.smooth, mesh_format=args.mesh_format)
    _print_mesh(result.summary["mesh"], args.mesh_format)
    print(f"re-exported design.{args.mesh_format}, fields.vtu and summary.json in {args.run_dir}/")
    return 0


def cmd_check(args) -> int:
    problem = _load(args)
    _warn(problem)
    rep = check(problem)
    if args.json:
        print(json.dumps(rep, indent=2))
        return 0
    print(f"{rep['name']} ({rep['source']}): {rep['dimension']}D")
    print(f"  grid {'×'.join(map(str, rep['elements']))} = {rep['element_count']} elements of "
          f"{rep['element_size_mm']} mm; {rep['nodes']} nodes; {rep['dofs']} dofs "
          f"({rep['free_dofs']} free); {rep['design_elements']} design elements")
    print(f"  material {rep['material']}; build direction {rep['build_direction'] or 'none'}; "
          f"solver {rep['solver']}")
    print("  settings in effect:")
    for row in rep["settings"]:
        print(f"    {format_setting(row)}")
    for r in rep["regions"]:
        what = f"{r['nodes']} nodes" if r["role"] in ("support", "force") else f"{r['elements']} elements"
        print(f"  {r['key']:<24} {r['role']:<8} {r['name']:<24} {what}")
    for c in rep["load_cases"]:
        tot = ", ".join(f"{v:.6g}" for v in c["total_force_N"])
        extra = (f"; {c['force_on_fixed_dofs_N']:.6g} N lands on fixed dofs"
                 if c["force_on_fixed_dofs_N"] > 0 else "")
        print(f"  load case {c['name']} (weight {c['weight']}): total force [{tot}] N{extra}")
    for r in rep["unsupportable_solid_regions"]:
        print(f"  warning: {r['key']} ({r['name']}): {r['unsupportable_elements']} of {r['elements']} "
              f"elements cannot be supported from the build plate ({rep['build_direction']}); "
              "void regions block every 45° path")
    print(f"  estimated memory {rep['memory_estimate_MB']} MB, "
          f"{rep['seconds_per_iteration_estimate']:.2g} s per iteration")
    return 0


def cmd_analyze(args) -> int:
    problem = _load(args)
    density = np.load(args.design) if args.design else None
    result = analyze(problem, density)
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-analysis"
    export(result, out, only=["problem.json", "summary.json"], mesh=False)
    s = result.summary
    print(f"{problem.name}: analysis of {'the design ' + args.design if args.design else 'the full domain'}")
    print(f"  compliance {s['compliance_Nmm']:.6g} N·mm, mass {s['mass_kg']:.4g} kg")
    _print_cases(s)
    print(f"summary in {out}/summary.json")
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


def cmd_sweep(args) -> int:
    problem = _load(args)
    vary = dict(_parse_vary(v) for v in args.vary)
    out = Path(args.out) if args.out else Path("outputs") / f"{problem.name}-sweep"
    _CURRENT_OUT[0] = out
    n = int(np.prod([len(v) for v in vary.values()]))
    where = f"on {args.scheduler}" if args.scheduler else f"with {args.jobs} local job(s)"
    print(f"{problem.name}: sweeping {', '.join(vary)} ({n} runs) {where}", flush=True)
    rows = sweep(problem, vary, jobs=args.jobs, out=out, scheduler=args.scheduler,
                 progress=lambda text: print(text, flush=True))
    ran = sum(r["ran"] for r in rows)
    print(f"{ran} run(s) made, {len(rows) - ran} already finished; table in {out}/sweep.csv, "
          f"trade-off in {out}/sweep.png")
    print(CAUTION)
    return 0


def cmd_bench(args) -> int:
    report = run_benchmarks(quick=args.quick, only=args.case)
    if args.out:
        Path(args.out).parent.mkdir(parents=True, exist_ok=True)
        Path(args.out).write_text(json.dumps(report, indent=2) + "\n")
        print(f"results in {args.out}")
    return 0 if all("error" not in c for c in report["cases"].values()) else 1


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="topo", description="Topology optimisation of metal "
                                 "brackets for laser powder-bed fusion.", epilog=CAUTION)
    sub = ap.add_subparsers(dest="command", required=True)

    def common(p):
        p.add_argument("file", help="problem file (TOML)")
        p.add_argument("--set", action="append", metavar="KEY=VALUE",
                       help="override a problem value, e.g. optimization.volume_fraction=0.25")

    p = sub.add_parser("run", help="optimise a problem and write every output file")
    p.add_argument("file", nargs="?", help="problem file (TOML)")
    p.add_argument("--set", action="append", metavar="KEY=VALUE",
                   help="override a problem value, e.g. optimization.volume_fraction=0.25")
    p.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted run from its checkpoint")
    p.add_argument("--force", action="store_true", help="run even when the memory estimate exceeds free memory")
    p.add_argument("--out", help="output folder (default outputs/NAME)")
    p.add_argument("--quiet", action="store_true", help="no progress lines")
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
    p.set_defaults(func=cmd_analyze)
    p = sub.add_parser("sweep", help="run the cartesian product of values of one or more keys")
    common(p)
    p.add_argument("--vary", action="append", required=True, metavar="KEY=V1,V2,...",
                   help="a dotted key and its values, e.g. optimization.volume_fraction=0.2,0.3")
    p.add_argument("--jobs", type=int, default=1, help="local worker processes (default 1)")
    p.add_argument("--scheduler", help="address of a running Dask scheduler (needs dask.distributed)")
    p.add_argument("--out", help="sweep folder (default outputs/NAME-sweep)")
    p.set_defaults(func=cmd_sweep)
    p = sub.add_parser("bench", help="benchmark the standard cases (per-phase times, ratios)")
    p.add_argument("--quick", action="store_true", help="small cases only, for small machines")
    p.add_argument("--case", action="append", help="run only this case (repeatable)")
    p.add_argument("--out", default="outputs/bench.json", help="JSON results (default outputs/bench.json)")
    p.set_defaults(func=cmd_bench)
    p = sub.add_parser("export", help="re-export the mesh and fields of a finished run")
    p.add_argument("run_dir", help="a run folder written by `topo run`")
    mesh_options(p, "--format")
    p.set_defaults(func=cmd_export)
    return ap


def mesh_options(p, format_flag: str = "--mesh-format") -> None:
    p.add_argument("--iso", type=float, default=0.5, help="density of the surface (default 0.5)")
    p.add_argument("--smooth", type=int, default=0, metavar="N",
                   help="Taubin smoothing passes on the mesh (default 0)")
    p.add_argument(format_flag, dest="mesh_format", choices=MESH_FORMATS, default="stl",
                   help="mesh file format (default stl)")


_CURRENT_OUT: list = [None]  # the output folder of a run in progress, for error.log


def main(argv: list[str] | None = None) -> int:
    """Exit codes: 0 success, 2 input error (one message, no traceback), 1 internal
    error (the traceback goes to error.log in the output folder)."""
    args = build_parser().parse_args(argv)
    _CURRENT_OUT[0] = None
    try:
        return args.func(args)
    except (ProblemError, FileNotFoundError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        out = _CURRENT_OUT[0]
        print("interrupted" + (f"; continue with: topo run --resume {out}" if out else ""), file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001 - the one place that turns crashes into exit 1
        import traceback

        out = Path(_CURRENT_OUT[0] or "outputs")
        out.mkdir(parents=True, exist_ok=True)
        log = out / "error.log"
        log.write_text(traceback.format_exc())
        print(f"internal error: {type(exc).__name__}: {exc} (traceback in {log})", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
