"""report.html: one self-contained review document for a finished run.

Built from the run folder alone (summary.json, problem.json and the pictures), so
`topo report OUTDIR` can rebuild it at any time. Every number in its tables is
read from summary.json; pictures are embedded as base64 PNG, so the file can be
attached to a design review as it is.
"""

from __future__ import annotations

import base64
import html
import json
import platform
from importlib import metadata
from pathlib import Path

PICTURES = (
    ("design.png", "The design"),
    ("stress.png", "Stress of the printed part"),
    ("deflection.png", "Displacement of the printed part"),
    ("verify.png", "Body-fitted verification"),
    ("fatigue.png", "Fatigue: S-N curves by condition and surface, the design's points"),
    ("history.png", "Convergence"),
)
STYLE = """
body { font-family: sans-serif; max-width: 60em; margin: 2em auto; color: #222; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.6em; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.PASS { background: #dff0d8; } .FAIL { background: #f2dede; font-weight: bold; }
.chosen { background: #e4ecf7; font-weight: bold; }
.caution { border: 2px solid #a94442; padding: 0.6em 1em; background: #fcf8f8; }
img { max-width: 100%; }
"""


def _e(value) -> str:
    return html.escape(str(value))


def fmt(value, digits: int = 4) -> str:
    """A figure as the report shows it (the tests read the tables back with this)."""
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def _cell(value) -> str:
    num = isinstance(value, (int, float)) and not isinstance(value, bool)
    return f'<td class="num">{_e(fmt(value))}</td>' if num else f"<td>{_e(fmt(value))}</td>"


def table(header: list[str], rows: list[list], row_class: list[str] | None = None) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = []
    for i, row in enumerate(rows):
        cls = f' class="{_e(row_class[i])}"' if row_class else ""
        body.append(f"<tr{cls}>" + "".join(_cell(v) for v in row) + "</tr>")
    return f"<table><tr>{head}</tr>{''.join(body)}</table>"


def _problem_section(raw: dict) -> str:
    dom, mat, opt = raw.get("domain", {}), raw.get("material", {}), raw.get("optimization", {})
    parts = [
        "<h2>Problem</h2>",
        f"<p>{_e(raw.get('description', ''))}</p>",
        table(
            ["item", "value"],
            [
                ["domain (mm)", " × ".join(fmt(v) for v in dom.get("size", []))],
                ["element size (mm)", dom.get("element_size")],
                ["thickness (mm, 2D)", dom.get("thickness")],
                ["material", ", ".join(f"{k} = {fmt(v)}" for k, v in mat.items())],
                ["build", ", ".join(f"{k} = {fmt(v)}" for k, v in raw.get("build", {}).items())],
                ["optimisation", ", ".join(f"{k} = {fmt(v)}" for k, v in opt.items())],
            ],
        ),
        "<h3>Load cases</h3>",
        table(
            ["load case", "weight", "region", "total force (N)"],
            [
                [
                    c.get("name", f"load_case[{i}]"),
                    c.get("weight", 1.0),
                    json.dumps(f["region"]),
                    " , ".join(fmt(v) for v in f["total"]),
                ]
                for i, c in enumerate(raw.get("load_case", []))
                for f in c.get("force", [])
            ],
        ),
        "<h3>Supports, interfaces and keep-out regions</h3>",
        table(
            ["kind", "name", "region", "fixed"],
            [
                [
                    "support",
                    s.get("name", f"support[{i}]"),
                    json.dumps(s["region"]),
                    ", ".join(s.get("fix", ["all"])),
                ]
                for i, s in enumerate(raw.get("support", []))
            ]
            + [
                [p["kind"], p.get("name", f"passive[{i}]"), json.dumps(p["region"]), ""]
                for i, p in enumerate(raw.get("passive", []))
            ],
        ),
    ]
    return "".join(parts)


def _figures_section(s: dict) -> str:
    grey = s["optimizer"]
    rows = [
        ["mass (kg)", s["mass_kg"], grey["mass_kg"]],
        ["volume fraction", s["volume_fraction"], grey["volume_fraction"]],
        ["weighted compliance (N·mm)", s["compliance_Nmm"], grey["compliance_Nmm"]],
        ["peak von Mises (MPa)", s["max_von_mises_MPa"], grey["max_von_mises_MPa"]],
        ["safety factor against yield", s["safety_factor"], grey["safety_factor"]],
    ]
    cases = [
        [
            c["name"],
            c["compliance_Nmm"],
            c["optimizer"]["compliance_Nmm"],
            c["compliance_gap"],
            c["max_displacement_mm"],
            c["max_von_mises_MPa"],
            c["safety_factor"],
        ]
        for c in s["load_cases"]
    ]
    deflections = [
        [d["name"], d["load_case"], d["value_mm"], d["limit_mm"]] for d in s["deflections"]
    ]
    interfaces = [
        [i["name"], i["solid_share"], i["downfacing_area_mm2"], i["support_volume_mm3"]]
        for i in s["interfaces"]
    ]
    out = [
        "<h2>The printed part</h2>",
        f"<p>{_e(s['figures_of'])}.</p>",
        table(["figure", "printed part", "optimiser (grey)"], rows),
        f"<p>Peak stress and safety factor from: {_e(s.get('stress_source', 'the grid'))}.</p>",
        table(
            [
                "load case",
                "compliance (N·mm)",
                "optimiser (N·mm)",
                "gap",
                "largest displacement magnitude (mm)",
                "peak von Mises (MPa)",
                "safety factor",
            ],
            cases,
        ),
    ]
    if deflections:
        out.append(
            table(
                ["deflection", "load case", "along its direction (mm)", "limit (mm)"], deflections
            )
        )
    if interfaces:
        out.append(
            table(
                [
                    "interface",
                    "solid in the optimiser's design",
                    "support area (mm²)",
                    "support volume (mm³)",
                ],
                interfaces,
            )
        )
    return "".join(out)


def _life(cycles):
    """A life in cycles; None is a life without bound (below the endurance knee)."""
    return "unbounded" if cycles is None else cycles


def _fatigue_section(s: dict) -> str:
    """The fatigue figures of the chosen condition per load case, the same design in
    every condition and surface, and what the loop bounded; empty without cycles."""
    f = s.get("fatigue")
    if not f:
        return ""
    cases = [
        [
            c["name"],
            c["cycles"],
            c["load_ratio"],
            c["amplitude_at_weakest_MPa"],
            c["mean_at_weakest_MPa"],
            c["strength_at_life_MPa"],
            c["safety_factor"],
            _life(c["life_at_weakest_cycles"]),
        ]
        for c in f["load_cases"]
    ]
    chosen = (f["condition"], f["surface"])
    comparison = [
        [
            r["condition"],
            r["surface"],
            r["safety_factor"],
            r["damage"],
            r.get("governing_load_case"),
            _life(r.get("life_at_weakest_cycles", "")),
        ]
        for r in f["comparison"]
    ]
    marks = ["chosen" if (r["condition"], r["surface"]) == chosen else "" for r in f["comparison"]]
    limits = [
        [r["name"], r["limit_MPa"], r["governed_by"]]
        for r in s.get("loop_stress_limits") or []
        if r["limit_MPa"] is not None
    ]
    out = [
        "<h2>Fatigue</h2>",
        f'<p class="caution">{_e(f["caution"][0].upper() + f["caution"][1:])}.</p>',
        f"<p>{_e(f['material']['alloy'])}, {_e(f['condition'])} condition, "
        f"{_e(f['surface'])} surface; {_e(f['mean_stress_correction'])}. Safety factor "
        f"{_e(fmt(f['safety_factor']))} (load case {_e(f['governing_load_case'])}), "
        f"Miner damage {_e(fmt(f['damage']))}. Data: {_e(f['material']['source'])}.</p>",
        table(
            [
                "load case",
                "design life (cycles)",
                "R",
                "amplitude at the weakest element (MPa)",
                "mean there (MPa)",
                "S-N strength at the life (MPa)",
                "safety factor",
                "life there (cycles)",
            ],
            cases,
        ),
        "<h3>The same design by condition and surface</h3>",
        "<p>Whether HIP or machining is worth its cost: the chosen condition is shaded.</p>",
        table(
            [
                "condition",
                "surface",
                "safety factor",
                "damage",
                "governing load case",
                "life at its weakest element (cycles)",
            ],
            comparison,
            marks,
        ),
    ]
    if limits:
        out += [
            "<h3>Stress bounded in the design loop</h3>",
            table(["load case", "peak von Mises bound (MPa)", "from"], limits),
        ]
    return "".join(out)


def _checks_section(s: dict) -> str:
    rows = [[r["status"], r["name"], r["value"], r["limit"], r["detail"]] for r in s["checks"]]
    verdict = (
        f"{len(s['checks_failed'])} check(s) FAILED: {', '.join(s['checks_failed'])}. "
        "Do not hand this design on."
        if s["checks_failed"]
        else "All checks passed. No check replaces a qualified verification."
    )
    return (
        "<h2>Checks</h2>"
        + table(
            ["status", "check", "value", "limit", "what was checked"],
            rows,
            [r["status"] for r in s["checks"]],
        )
        + f"<p><b>{_e(verdict)}</b></p>"
    )


def _pictures(folder: Path) -> str:
    out = []
    for name, title in PICTURES:
        path = folder / name
        if path.exists():
            data = base64.b64encode(path.read_bytes()).decode()
            out.append(
                f'<h2>{_e(title)}</h2><img alt="{_e(name)}" src="data:image/png;base64,{data}">'
            )
    return "".join(out)


def _versions() -> list[list]:
    rows = [["python", platform.python_version()]]
    for pkg in ("topo", "numpy", "scipy", "scikit-sparse", "meshio", "scikit-image"):
        try:
            rows.append([pkg, metadata.version(pkg)])
        except metadata.PackageNotFoundError:
            rows.append([pkg, "not installed"])
    return rows


def build_report(folder: str | Path, summary: dict | None = None) -> str:
    """The HTML text of report.html for the run folder `folder` (its summary.json,
    unless the summary is given)."""
    folder = Path(folder)
    s = summary if summary is not None else json.loads((folder / "summary.json").read_text())
    raw = (
        json.loads((folder / "problem.json").read_text())
        if (folder / "problem.json").exists()
        else {}
    )
    run = [
        ["iterations", s["iterations"]],
        ["converged", s["converged"]],
        ["stop reason", s["stop_reason"]],
        ["solver", s["solver"]],
        ["runtime (s)", s["runtime_s"]],
        ["build direction", s["build_direction"]],
        ["unsupported fraction", s["unsupported_fraction"]],
    ]
    notes = [[k, v] for k, v in s.get("notes", {}).items()]
    body = [
        f"<h1>{_e(s['name'])}: design review</h1>",
        f'<p class="caution"><b>Caution.</b> {_e(s["caution"])}</p>',
        _problem_section(raw),
        _checks_section(s),
        _figures_section(s),
        _fatigue_section(s),
        _pictures(folder),
        "<h2>The run</h2>",
        table(["item", "value"], run),
        "<h2>What the figures are</h2>",
        table(["figure", "meaning"], notes),
        "<h2>Software</h2>",
        table(["package", "version"], _versions()),
        f'<p class="caution">{_e(s["caution"])}</p>',
    ]
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{_e(s['name'])}: design review</title><style>{STYLE}</style></head><body>"
        + "".join(body)
        + "</body></html>\n"
    )


def write_report(folder: str | Path) -> Path:
    """Rebuild report.html in a finished run folder from its files."""
    from .files import write_text

    target = Path(folder) / "report.html"
    write_text(target, build_report(folder))
    return target
