"""Build orientation study: one design per build direction, its printed part's
figures, the support it needs, its build height and the cost estimates of cost.py,
and a recommended direction among those whose checks all pass.

The designs come from the sweep machinery (a folder per direction, resume of
finished runs, local processes or a Dask cluster); this module reads them back and
adds what depends on the direction: supports, layers, build time and cost.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .cost import (
    break_even,
    build_hours,
    layers,
    machining_total,
    parts_per_build,
    printing_total,
    stock,
)
from .printability import directions as all_directions
from .printability import support_needed
from .problem import ProblemError

CAUTION = (
    "Cost and time figures are estimates for comparing options, not quotes; the "
    "[cost] defaults are illustrative."
)
STIFFNESS_MARGIN = 0.10  # a direction within this of the stiffest passing one competes on cost


def _extent(printed: np.ndarray, h: float, depth: float | None) -> tuple[float, ...]:
    """Bounding box of the printed part, mm, as 3 sizes (2D: the thickness third)."""
    where = np.argwhere(printed > 0.5)
    box = tuple(float((where[:, a].max() - where[:, a].min() + 1) * h) for a in range(printed.ndim))
    return box + ((float(depth),) if printed.ndim == 2 else ())


def direction_figures(result, direction: str) -> dict:
    """Supports, height, layers, build time and costs of one direction's design."""
    problem, rates = result.problem, result.problem.cost
    dom, mat = problem.domain, problem.material
    printed = result.printed.density
    depth = dom.thickness if printed.ndim == 2 else None
    angle = problem.build.overhang_angle if problem.build else 45.0
    area, support_mm3, _ = support_needed(
        printed > 0.5, direction, dom.element_size, depth, angle=angle
    )
    box = _extent(printed, dom.element_size, depth)
    axis = "xyz".index(direction[1])
    height = box[axis]
    footprint = tuple(box[a] for a in range(3) if a != axis)
    part_mm3 = float(printed.sum()) * dom.element_volume
    per_build = parts_per_build(footprint, rates)
    interfaces = sum(1 for p in problem.passives if p.kind == "solid")
    row = {
        "downfacing_area_mm2": area,
        "support_volume_mm3": support_mm3,
        "support_mass_kg": support_mm3 * rates.support_density * 1e-9 * mat.density,
        "build_height_mm": height,
        "layers": layers(height, rates),
        "parts_per_build": per_build,
    }
    blank = stock(box, part_mm3, mat.density, rates)
    machining = lambda q: machining_total(q, blank, rates)
    row.update(
        {
            "stock_mm": list(blank.size_mm),
            "buy_to_fly": blank.buy_to_fly,
            "machined_cost_per_part": float(machining(rates.batch)) / rates.batch,
        }
    )
    if per_build == 0:
        row.update(
            {
                "build_hours": None,
                "printed_cost_per_part": None,
                "break_even_quantity": None,
                "fits_plate": False,
            }
        )
        return row
    printing = lambda q: printing_total(
        q, part_mm3, support_mm3, area, height, per_build, mat.density, interfaces, rates
    )
    row.update(
        {
            "build_hours": build_hours(per_build, part_mm3, support_mm3, height, rates),
            "printed_cost_per_part": float(printing(rates.batch)) / rates.batch,
            "break_even_quantity": break_even(printing, machining),
            "fits_plate": True,
        }
    )
    return row


def _refuse_small_plate(problem, chosen: list[str]) -> None:
    """A plate that cannot take the design domain in any chosen direction makes the
    study pointless (the part may come out smaller, but no design is bounded by it)."""
    dom, rates = problem.domain, problem.cost
    size = tuple(dom.size) + ((dom.thickness,) if problem.dim == 2 else ())
    for d in chosen:
        axis = "xyz".index(d[1])
        footprint = tuple(size[a] for a in range(3) if a != axis)
        if parts_per_build(footprint, rates) > 0:
            return
    raise ProblemError(
        problem.source,
        "cost.plate_size",
        f"{list(rates.plate_size)} mm is smaller than the design domain "
        f"({' × '.join(f'{s:g}' for s in size)} mm) in every build direction "
        f"studied ({', '.join(chosen)})",
    )


def recommend(rows: list[dict]) -> tuple[int | None, str]:
    """Index of the recommended direction and the reason in words. Only directions
    whose checks all pass and that fit the plate are eligible; among those within
    STIFFNESS_MARGIN of the stiffest, the cheapest per part wins."""
    ok = [
        i
        for i, r in enumerate(rows)
        if not r["checks_failed"] and r["fits_plate"] and r["compliance_Nmm"] is not None
    ]
    if not ok:
        return None, "no direction gives a design that passes every check and fits the plate"
    stiffest = min(rows[i]["compliance_Nmm"] for i in ok)
    close = [i for i in ok if rows[i]["compliance_Nmm"] <= (1 + STIFFNESS_MARGIN) * stiffest]
    best = min(close, key=lambda i: rows[i]["printed_cost_per_part"])
    r = rows[best]
    reason = (
        f"{r['build.direction']}: every check passes; compliance {r['compliance_Nmm']:.4g} N·mm "
        f"(within {100 * STIFFNESS_MARGIN:.0f} % of the stiffest passing direction, "
        f"{stiffest:.4g}); the cheapest of those at {r['printed_cost_per_part']:.4g} per part "
        f"for a batch of {r['batch']}, {r['support_volume_mm3']:.4g} mm³ of support, "
        f"{r['layers']} layers"
    )
    return best, reason


def orient(
    problem,
    directions: list[str] | None = None,
    jobs: int = 1,
    out=None,
    scheduler: str | None = None,
    progress=None,
) -> tuple[list[dict], int | None, str]:
    """Optimise one design per build direction (the overhang layer on) and return
    the rows, the recommended row's index and the reason."""
    from . import load_problem, load_run, problem_from_dict
    from .sweep import sweep

    if isinstance(problem, (str, Path)):
        problem = load_problem(problem)
    chosen = list(directions or all_directions(problem.dim))
    _refuse_small_plate(problem, chosen)
    if jobs < 1:
        raise ProblemError("--jobs", str(jobs), "needs at least one worker process")
    root = Path(out) if out else Path("outputs") / f"{problem.name}-orient"
    # every direction with the overhang layer on, whatever the file says
    overrides = {"build.direction": chosen[0], "build.overhang_filter": True}
    base = problem_from_dict(problem.raw, overrides, problem.source)
    rows = sweep(
        base,
        {"build.direction": chosen},
        jobs=jobs,
        out=root,
        scheduler=scheduler,
        progress=progress,
    )
    for row in rows:
        row.update(direction_figures(load_run(row["folder"]), row["build.direction"]))
        row["batch"] = problem.cost.batch
    best, reason = recommend(rows)
    return rows, best, reason


COLUMNS = (
    "build.direction",
    "checks_failed",
    "compliance_Nmm",
    "mass_kg",
    "max_von_mises_MPa",
    "safety_factor",
    "downfacing_area_mm2",
    "support_volume_mm3",
    "support_mass_kg",
    "build_height_mm",
    "layers",
    "parts_per_build",
    "build_hours",
    "printed_cost_per_part",
    "machined_cost_per_part",
    "buy_to_fly",
    "break_even_quantity",
    "folder",
)


def write_outputs(problem, rows: list[dict], best: int | None, reason: str, root) -> list[Path]:
    """orient.csv, orient.png and cost.png in the study folder."""
    import csv
    import io

    from .files import pyplot, write_figure, write_text

    root = Path(root)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(COLUMNS) + ["recommended"])
    for i, r in enumerate(rows):
        w.writerow([r.get(c) for c in COLUMNS] + [i == best])
    write_text(root / "orient.csv", f"# {CAUTION}\n# recommended: {reason}\n" + buf.getvalue())
    plt = pyplot()
    names = [r["build.direction"] for r in rows]
    fig, axes = plt.subplots(1, 4, figsize=(14, 3.8))
    panels = (
        ("compliance_Nmm", "compliance (N·mm)"),
        ("support_volume_mm3", "support (mm³)"),
        ("build_hours", "build time of a plate (h)"),
        ("printed_cost_per_part", f"cost per part, batch {problem.cost.batch}"),
    )
    for ax, (key, label) in zip(axes, panels):
        values = [np.nan if r[key] is None else r[key] for r in rows]
        colors = [
            "tab:red" if i == best else "tab:gray" if r["checks_failed"] else "tab:blue"
            for i, r in enumerate(rows)
        ]
        ax.bar(names, values, color=colors)
        ax.set_title(label, fontsize=9)
    fig.suptitle(
        f"{problem.name}: build directions (red: recommended; grey: a check fails)\n{reason}",
        fontsize=8,
    )
    write_figure(root / "orient.png", fig)
    written = [root / "orient.csv", root / "orient.png"]
    if best is not None:
        written.append(_cost_plot(problem, rows[best], root / "cost.png"))
    return written


def _cost_plot(problem, row: dict, path: Path) -> Path:
    """Cost per part against quantity, printed in the chosen direction and machined."""
    from . import load_run
    from .files import pyplot, write_figure

    result = load_run(row["folder"])
    rates, mat, dom = problem.cost, problem.material, problem.domain
    printed = result.printed.density
    part_mm3 = float(printed.sum()) * dom.element_volume
    interfaces = sum(1 for p in problem.passives if p.kind == "solid")
    q = np.unique(np.geomspace(1, 1000, 200).astype(int))
    printing = (
        printing_total(
            q,
            part_mm3,
            row["support_volume_mm3"],
            row["downfacing_area_mm2"],
            row["build_height_mm"],
            row["parts_per_build"],
            mat.density,
            interfaces,
            rates,
        )
        / q
    )
    depth = dom.thickness if printed.ndim == 2 else None
    blank = stock(_extent(printed, dom.element_size, depth), part_mm3, mat.density, rates)
    machining = machining_total(q, blank, rates) / q
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    ax.loglog(q, printing, label=f"printed, grown {row['build.direction']}")
    ax.loglog(q, machining, label=f"machined from stock (buy-to-fly {blank.buy_to_fly:.3g})")
    if row["break_even_quantity"]:
        ax.axvline(
            row["break_even_quantity"],
            color="k",
            ls=":",
            label=f"break-even at {row['break_even_quantity']} parts",
        )
    ax.set_xlabel("quantity")
    ax.set_ylabel("cost per part")
    ax.set_title(f"{problem.name}: estimates for comparing options, not quotes", fontsize=9)
    ax.legend(fontsize=8)
    write_figure(path, fig)
    return path
