"""Summary figures of a Result (mass, compliance, stress, printability, the design
mesh) and the console lines that show them. The one place summary.json is made."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import mesh as meshing
from .checks import CORRECTION_NAMES, failed
from .integrity import unreachable_regions
from .printability import printable_envelope
from .printed import finite_or_none, relative_gap
from .responses import loop_stress_limits
from .schema import format_setting, settings
from .signoff import sign_off
from .stress import relax

CAUTION = (
    "Concept design only. Verify by qualified analysis and physical testing "
    "under the applicable codes and licensed engineering practice before use."
)
PRINTED_NOTE = (
    "the printed part: elements at density >= 0.5 (the level of the design mesh) plus every "
    "passive solid region whole, minus the void regions, re-analysed for every load case; "
    "the optimiser's figures of the grey density field are under 'optimizer'"
)
# what the figures are of when the printed part does not carry its loads (printed.py)
UNANALYSED_NOTE = (
    "the printed part (elements at density >= 0.5 plus passive solids whole, minus the "
    "void regions) was NOT analysed: {reason}. Only its mass and volume are given; its "
    "stiffness, deflection, stress and fatigue figures are null. The optimiser's figures "
    "of the grey density field are under 'optimizer'"
)
# where the headline stress comes from; `topo verify` replaces it (verification/figures.py)
GRID_STRESS_SOURCE = "grid: element centres of the printed part (not converged at stress raisers)"
NOTES = {
    "max_displacement_mm": "the largest nodal displacement magnitude (not along any direction)",
    "deflections": "mean displacement of the named nodes along the stated direction",
    "max_von_mises_MPa": (
        "von Mises stress at element centres of the printed part; peaks at holes, fillets, "
        "point loads, supports and re-entrant corners depend on the grid and are not "
        "converged: verify with a body-fitted analysis before sign-off"
    ),
    "safety_factor": "yield strength over max_von_mises_MPa",
    "yield_basis": (
        "which yield strength the safety factor used (the condition's by direction, or "
        "an explicit yield_strength)"
    ),
    "optimizer.peak_relaxed_stress_MPa": (
        "largest density^0.5 times the solid-material stress over all elements of the grey "
        "field (what a stress_limit constrains)"
    ),
    "compliance_gap": "(printed - optimiser) / optimiser weighted compliance",
    "loop_stress_limits": (
        "per load case, the peak von Mises stress the optimiser bounded (corrected p-norm "
        "of the relaxed stress of the grey field): optimization.stress_limit, or with "
        "optimization.fatigue_life the peak at checks.fatigue_safety_factor on the chosen "
        "mean-stress correction at that life, whichever is lower; the printed part is "
        "checked, not bounded"
    ),
}


def summarize(result, analysis_only: bool = False) -> dict:
    """The figures of a Result (run_summary adds those of its design mesh). The
    headline figures are those of the printed part (result.printed); the
    optimiser's figures of the grey field stand under "optimizer" and beside each
    load case. Every number is finite or null, so the summary is strict JSON."""
    problem, model = result.problem, result.model
    dom, mat = problem.domain, problem.material
    rho = np.clip(result.density.ravel(), 0.0, 1.0)  # round-off negatives: ρ^q is NaN
    figures = sign_off(result)
    printed, grey = figures["printed"], figures["optimizer"]
    relaxed = relax(rho, result.analysis.von_mises)  # the measure a stress_limit constrains
    grey["peak_relaxed_stress_MPa"] = finite_or_none(relaxed.max())
    for case, grey_case in zip(printed["load_cases"], grey["load_cases"]):
        case["optimizer"] = {
            k: grey_case[k] for k in ("compliance_Nmm", "max_displacement_mm", "max_von_mises_MPa")
        }
    return {
        "name": problem.name,
        "description": problem.description,
        "dimension": problem.dim,
        "elements": list(dom.shape),
        "element_count": int(rho.size),
        "element_size_mm": dom.element_size,
        "thickness_mm": dom.thickness,
        "material": {
            "name": mat.name,
            "youngs_modulus_MPa": mat.youngs_modulus,
            "poissons_ratio": mat.poissons_ratio,
            "density_kg_m3": mat.density,
            "yield_strength_MPa": mat.yield_strength,
        },
        "figures_of": _figures_of(result.printed),
        "volume_fraction": printed["volume_fraction"],
        "volume_fraction_target": None if analysis_only else problem.optimization.volume_fraction,
        "volume_mm3": printed["volume_mm3"],
        "mass_kg": printed["mass_kg"],
        "compliance_Nmm": printed["compliance_Nmm"],
        "load_cases": printed["load_cases"],
        "max_von_mises_MPa": printed["max_von_mises_MPa"],
        "safety_factor": printed["safety_factor"],
        "yield_basis": printed["yield_basis"],
        "stress_source": GRID_STRESS_SOURCE,
        "required_safety_factor": problem.checks.safety_factor,
        "deflections": figures["deflections"],
        "optimizer": grey,
        "compliance_gap": figures["compliance_gap"],
        "printed_part": figures["printed_part"],
        "interfaces": figures["interfaces"],
        "enclosed_cavities": figures["enclosed_cavities"],
        "min_wall_mm": figures["min_wall_mm"],
        "min_gap_mm": figures["min_gap_mm"],
        # the wall and gap the design loop held (robust formulation), None when not asked
        "length_scale": problem.length_scale.summary() if problem.length_scale else None,
        "fatigue": figures["fatigue"],
        "stress_limit_MPa": problem.optimization.stress_limit,
        "loop_stress_limits": loop_stress_limits(problem),
        "notes": NOTES,
        "iterations": len(result.history),
        "converged": bool(result.converged),
        "stop_reason": result.stop_reason,
        "runtime_s": round(result.runtime_s, 3),
        "solver": model.system.name,
        "build_direction": problem.build.direction if problem.build else None,
        "overhang_filter": bool(problem.build and problem.build.overhang_filter),
        "unsupported_fraction": figures["unsupported_fraction"],
        "unsupported_by_direction": figures["unsupported_by_direction"],
        "checks": figures["checks"],
        "checks_failed": failed(figures["checks"]),
        "caution": CAUTION,
    }


def run_summary(result, surface: DesignSurface | None = None) -> dict:
    """What summary.json holds: the Result's summary (made by summarize when it
    carries none; read back from the folder for a re-export) with the figures of
    `surface`, its design mesh. The Result is left as it is."""
    base = dict(result.summary) if result.summary else summarize(result)
    if surface is not None:
        mesh = mesh_figures(surface, result.problem)
        # cross-check of the printed mass: the smooth surface cuts the voxel corners
        mesh["volume_gap_to_printed"] = relative_gap(mesh["volume_mm3"], base["volume_mm3"])
        base["mesh"] = mesh
    return base


@dataclass(frozen=True)
class DesignSurface:
    """The printable surface of a design and how it was made."""

    mesh: meshing.TriMesh
    iso: float
    smoothing_passes: int
    debris_pieces_removed: int


def design_surface(
    result, iso: float = 0.5, smooth: int = 0, min_piece_fraction: float = 0.01
) -> DesignSurface:
    """Isosurface of the density with passive solids filled in, floating debris
    dropped and `smooth` Taubin passes that keep the domain's faces flat."""
    problem, model = result.problem, result.model
    rho = np.maximum(result.density, model.solid.reshape(result.density.shape))  # passive solids in
    raw = meshing.isosurface(rho, problem.domain.element_size, iso, problem.domain.thickness)
    mesh, dropped = meshing.remove_debris(raw, min_piece_fraction)
    if smooth > 0:
        mesh = meshing.taubin_smooth(
            mesh, smooth, pinned=meshing.boundary_pins(mesh, _box(problem))
        )
    return DesignSurface(mesh, iso, smooth, dropped)


def _box(problem) -> tuple[float, ...]:
    """The domain's extent in mm; a 2D design is extruded through its thickness."""
    return tuple(problem.domain.size) + ((problem.domain.thickness,) if problem.dim == 2 else ())


def mesh_figures(surface: DesignSurface, problem) -> dict:
    """Volume, area, watertightness, pieces and down-facing overhang area of a design mesh."""
    mesh = surface.mesh
    area = mesh.area
    info = {
        "iso": surface.iso,
        "smoothing_passes": surface.smoothing_passes,
        "volume_mm3": mesh.volume,
        "area_mm2": area,
        "watertight": mesh.watertight,
        "pieces": int(len(np.unique(mesh.pieces()))) if len(mesh.faces) else 0,
        "debris_pieces_removed": surface.debris_pieces_removed,
        "vertices": int(len(mesh.vertices)),
        "faces": int(len(mesh.faces)),
        "downfacing_overhang_area_mm2": None,
        "downfacing_overhang_fraction": None,
    }
    if problem.build is not None:
        d = problem.build.direction
        axis = "xyz".index(d[1])
        plate = 0.0 if d[0] == "+" else _box(problem)[axis]
        down = meshing.downfacing_area(mesh, d, plate, problem.build.overhang_angle)
        info["downfacing_overhang_area_mm2"] = down
        info["downfacing_overhang_fraction"] = down / area if area > 0 else None
    return info


def _unsupportable(model) -> list[dict]:
    """Passive solid regions some of whose elements no self-supporting design can
    reach from the build plate (void regions in the way)."""
    problem = model.problem
    if problem.build is None:
        return []
    build = problem.build
    ok = printable_envelope(
        model.void.reshape(model.grid.shape), build.direction, build.overhang_angle
    ).ravel()
    out = []
    for i, (p, elems) in enumerate(zip(problem.passives, model.passive_elements)):
        if p.kind != "solid":
            continue
        bad = int((~ok[elems]).sum())
        if bad:
            out.append(
                {
                    "key": f"passive[{i}]",
                    "name": p.name,
                    "unsupportable_elements": bad,
                    "elements": int(len(elems)),
                }
            )
    return out


def model_report(model) -> dict:
    """What the model holds before any solve: for `topo check`."""
    problem, grid = model.problem, model.grid
    loads = model.loads
    cases = []
    bounds = loop_stress_limits(problem)
    for i, case in enumerate(problem.load_cases):
        applied = loads.reshape(grid.n_nodes, grid.dim, -1)[:, :, i].sum(axis=0)
        on_fixed = loads[model.fixed_dofs, i]
        cases.append(
            {
                "name": case.name,
                "weight": case.weight,
                "total_force_N": [float(v) for v in applied],
                "force_on_fixed_dofs_N": float(np.abs(on_fixed).sum()),
                "stress_bound": bounds[i],  # what the loop will bound, if anything
            }
        )
    from .resources import estimate

    est = estimate(problem)
    return {
        "name": problem.name,
        "source": problem.source,
        "dimension": grid.dim,
        "elements": list(grid.shape),
        "element_count": grid.n_elements,
        "element_size_mm": grid.h,
        "nodes": grid.n_nodes,
        "dofs": grid.n_dofs,
        "free_dofs": int(len(model.free)),
        "design_elements": int(model.active.sum()),
        "regions": [s.__dict__ for s in model.selections],
        "load_cases": cases,
        "material": problem.material.name,
        "solver": model.system.name,
        "build_direction": problem.build.direction if problem.build else None,
        "settings": settings(problem),
        "unsupportable_solid_regions": _unsupportable(model),
        "unreachable_regions": unreachable_regions(model),
        "memory_estimate_MB": round(est["memory_bytes"] / 2**20, 1),
        "seconds_per_iteration_estimate": round(est["seconds_per_iteration"], 3),
    }


# Console lines. Each returns the lines without printing, so the command line stays a
# thin layer and the wording lives beside the figures it shows.


def format_plan(problem, est: dict) -> str:
    """The first line of a run: the grid, the material and the resource estimates."""
    g = problem.domain.shape
    return (
        f"{problem.name}: {problem.dim}D, {'×'.join(map(str, g))} = {int(np.prod(g))} elements "
        f"of {problem.domain.element_size} mm, {problem.material.name}; estimated "
        f"{est['memory_bytes'] / 2**30:.2f} GiB, {est['seconds_per_iteration']:.2g} s per iteration"
    )


def format_progress(row: dict) -> list[str]:
    """One history row of the loop (the first also names the solver): iteration n of
    the limit, the figures, the constraint values g = v/L − 1 of a constrained run
    beyond the material budget, and the time so far and at most left (the run may
    stop earlier on its tolerance)."""
    lines = [f"solver: {row['solver']}"] if row["iteration"] == 1 else []
    beta = f"  beta {row['beta']:5.1f}" if row["beta"] is not None else ""
    if row["solver_iterations"]:
        beta += f"  cg {row['solver_iterations']:3d}"
    others = {k: g for k, g in row.get("constraints", {}).items() if k != "material"}
    limits = "".join(f"  {k} {g:+.3f}" for k, g in others.items())
    n, of = row["iteration"], row.get("max_iterations")
    timing = f"{row['seconds']:.2f} s"
    if of and "elapsed" in row:
        left = row["elapsed"] / n * (of - n)
        timing += f", {row['elapsed']:.0f} s so far, at most {left:.0f} s left"
    lines.append(
        f"iter {n:4d}{f'/{of}' if of else ''}  compliance {row['objective']:.6e} N·mm  "
        f"volume {row['volume_fraction']:.4f}  change {row['change']:.4f}{beta}{limits}  "
        f"{timing}"
    )
    return lines


def _num(value, fmt: str = ".4g", unit: str = "") -> str:
    return "n/a" if value is None else f"{value:{fmt}}{unit}"


def format_cases(summary: dict) -> list[str]:
    """Per load case: the printed part's figures, the optimiser's compliance beside them."""
    lines = []
    for case in summary["load_cases"]:
        gap = case.get("compliance_gap")
        grey = case.get("optimizer", {}).get("compliance_Nmm")
        beside = (
            f" (optimiser {_num(grey, '.6g')}, {100 * gap:+.1f} %)"
            if gap is not None and grey is not None
            else ""
        )
        lines.append(
            f"  load case {case['name']}: compliance {_num(case['compliance_Nmm'], '.6g')} N·mm"
            f"{beside}, largest displacement {_num(case['max_displacement_mm'])} mm (magnitude), "
            f"max von Mises {_num(case['max_von_mises_MPa'])} MPa, "
            f"safety factor {_num(case['safety_factor'], '.3g')}"
        )
        for name, value in case.get("deflections_mm", {}).items():
            lines.append(f"    deflection {name}: {_num(value)} mm")
    return lines


def format_fatigue(summary: dict) -> list[str]:
    """The fatigue figures and the table of conditions and surfaces, when load cases
    give cycles (summaries written before fatigue have no block)."""
    f = summary.get("fatigue")
    if not f:
        return []
    where = ", ".join(f"{v:g}" for v in f["weakest_location_mm"])
    lines = [
        f"  fatigue ({f['material']['alloy']}, {f['condition']}, {f['surface']} surface; "
        f"{CORRECTION_NAMES[f.get('mean_stress_method', 'goodman')]}, Miner; "
        f"{f['caution'].split(':')[0]}): safety factor "
        f"{_num(f['safety_factor'], '.3g')} ({f['governing_load_case']}, at ({where}) mm), "
        f"damage {_num(f['damage'], '.3g')}"
    ]
    for c in f["load_cases"]:
        lines.append(
            f"    {c['name']}: {c['cycles']:.3g} cycles at R = {c['load_ratio']:g}, amplitude "
            f"{_num(c['amplitude_at_weakest_MPa'])} MPa, mean {_num(c['mean_at_weakest_MPa'])} "
            f"MPa, strength at life {_num(c['strength_at_life_MPa'])} MPa, life "
            f"{_life(c['life_at_weakest_cycles'])}"
        )
    lines.append(
        "    the same design by condition and surface (safety factor, damage, governing load "
        "case and the life at its weakest point; * the chosen one):"
    )
    for r in f["comparison"]:
        chosen = "*" if (r["condition"], r["surface"]) == (f["condition"], f["surface"]) else " "
        life = (
            f" (life {_life(r['life_at_weakest_cycles'])})" if "life_at_weakest_cycles" in r else ""
        )  # summaries written before these columns have none
        lines.append(
            f"     {chosen}{r['condition']:<13} {r['surface']:<9} "
            f"{_num(r['safety_factor'], '.3g'):>7}  {_num(r['damage'], '.3g'):>9}  "
            f"{r.get('governing_load_case', '')}{life}"
        )
    return lines + _loop_limits(summary)


def _life(cycles) -> str:
    return "unbounded" if cycles is None else f"{cycles:.3g} cycles"


def _loop_limits(summary: dict) -> list[str]:
    """The stress bound each load case had in the loop, beside its printed peak."""
    rows = [r for r in summary.get("loop_stress_limits") or [] if r["limit_MPa"] is not None]
    if not rows:
        return []
    peaks = {c["name"]: c["max_von_mises_MPa"] for c in summary["load_cases"]}
    return ["    bounded in the loop (grey design, corrected p-norm):"] + [
        f"      {r['name']}: peak {_num(r['limit_MPa'])} MPa from {r['governed_by']}; printed "
        f"part's peak {_num(peaks.get(r['name']))} MPa"
        for r in rows
    ]


def format_checks(summary: dict) -> list[str]:
    """The PASS/FAIL table and a closing verdict."""
    rows = summary["checks"]
    lines = ["checks (printed part):"]
    for r in rows:
        value = "" if r["value"] is None else f" {_num(r['value'])}"
        limit = "" if r["limit"] is None else f" (limit {_num(r['limit'])})"
        lines.append(f"  {r['status']:<4}  {r['name']:<20}{value}{limit}: {r['detail']}")
    bad = summary["checks_failed"]
    lines.append(
        f"{len(bad)} of {len(rows)} checks FAILED: {', '.join(bad)}; do not hand this design on"
        if bad
        else "all checks passed (no check replaces a qualified verification)"
    )
    return lines


def format_mesh(m: dict, fmt: str) -> str:
    down = m["downfacing_overhang_fraction"]
    return (
        f"  mesh design.{fmt}: {m['volume_mm3']:.6g} mm³, {m['area_mm2']:.6g} mm², "
        f"{'watertight' if m['watertight'] else 'NOT watertight'}, {m['pieces']} piece(s), "
        f"{m['debris_pieces_removed']} debris piece(s) removed"
        + (f", down-facing overhang {100 * down:.2f} % of the area" if down is not None else "")
    )


def _figures_of(part) -> str:
    if part.analysis is None:
        return UNANALYSED_NOTE.format(reason=part.why_not_analysed())
    return PRINTED_NOTE


def _printed_heading(s: dict) -> str:
    """The console's heading of the printed part's figures: analysed or why not."""
    reason = s.get("printed_part", {}).get("not_analysed")
    if reason:
        return f"printed part (density >= 0.5, interfaces whole), {reason}:"
    return "printed part (density >= 0.5, interfaces whole), re-analysed:"


def format_run(s: dict, mesh_format: str) -> list[str]:
    """The outcome of a run from its summary.json: the printed part first."""
    grey = s["optimizer"]
    gap = s["compliance_gap"]
    lines = [
        f"{'converged' if s['converged'] else 'stopped'} after {s['iterations']} iterations "
        f"in {s['runtime_s']:.1f} s (solver {s['solver']}): {s['stop_reason']}",
        _printed_heading(s),
        f"  mass {_num(s['mass_kg'])} kg, volume fraction {_num(s['volume_fraction'], '.4f')}, "
        f"compliance {_num(s['compliance_Nmm'], '.6g')} N·mm; optimiser's grey design: "
        f"mass {_num(grey['mass_kg'])} kg, compliance {_num(grey['compliance_Nmm'], '.6g')} N·mm"
        + (f" ({100 * gap:+.1f} %)" if gap is not None else ""),
    ]
    lines += format_cases(s) + format_fatigue(s)
    if s["build_direction"]:
        lines.append(
            f"  unsupported fraction {_num(s['unsupported_fraction'], '.4f')} "
            f"building {s['build_direction']}"
            f" (overhang filter {'on' if s['overhang_filter'] else 'off'})"
        )
    scale = s.get("length_scale")
    if scale:
        lines.append(
            f"  held in the design: walls ≥ {_num(scale['min_wall_mm'])} mm, gaps ≥ "
            f"{_num(scale['min_gap_mm'])} mm (filter radius {scale['filter_radius_mm']:.3g} mm, "
            f"thresholds {scale['eroded_threshold']:.3f} / 0.5 / {scale['dilated_threshold']:.3f}"
            "); the loop's compliance is the eroded design's"
        )
    for r in s["interfaces"]:
        if r["solid_share"] < 1.0 or r["downfacing_area_mm2"]:
            lines.append(
                f"  interface {r['name']}: {100 * r['solid_share']:.1f} % solid in the optimiser's "
                f"design, printed whole; needs {_num(r['downfacing_area_mm2'])} mm² of support "
                f"({_num(r['support_volume_mm3'])} mm³)"
            )
    best = min(s["unsupported_by_direction"], key=s["unsupported_by_direction"].get)
    lines.append(
        f"  best build direction for this printed part as it is: {best} "
        f"(unsupported fraction {s['unsupported_by_direction'][best]:.4f})"
    )
    if "mesh" in s:
        lines.append(format_mesh(s["mesh"], mesh_format))
    return lines + format_checks(s)


def format_analysis(s: dict, design: str | None) -> list[str]:
    """The figures of `topo analyze`: of the design file `design`, or of the full domain."""
    return (
        [
            f"{s['name']}: analysis of {'the design ' + design if design else 'the full domain'}"
            " as printed (density >= 0.5, interfaces whole)"
            + (f", {reason}" if (reason := s["printed_part"].get("not_analysed")) else ""),
            f"  compliance {_num(s['compliance_Nmm'], '.6g')} N·mm, mass {_num(s['mass_kg'])} kg",
        ]
        + format_cases(s)
        + format_fatigue(s)
        + format_checks(s)
    )


def format_check(rep: dict) -> list[str]:
    """The model report of `topo check` (model_report) as lines."""
    lines = [
        f"{rep['name']} ({rep['source']}): {rep['dimension']}D",
        f"  grid {'×'.join(map(str, rep['elements']))} = {rep['element_count']} elements of "
        f"{rep['element_size_mm']} mm; {rep['nodes']} nodes; {rep['dofs']} dofs "
        f"({rep['free_dofs']} free); {rep['design_elements']} design elements",
        f"  material {rep['material']}; build direction {rep['build_direction'] or 'none'}; "
        f"solver {rep['solver']}",
        "  settings in effect:",
    ]
    lines += [f"    {format_setting(row)}" for row in rep["settings"]]
    for r in rep["regions"]:
        what = (
            f"{r['nodes']} nodes"
            if r["role"] in ("support", "force")
            else f"{r['elements']} elements"
        )
        lines.append(f"  {r['key']:<24} {r['role']:<8} {r['name']:<24} {what}")
    for c in rep["load_cases"]:
        tot = ", ".join(f"{v:.6g}" for v in c["total_force_N"])
        extra = (
            f"; {c['force_on_fixed_dofs_N']:.6g} N lands on fixed dofs"
            if c["force_on_fixed_dofs_N"] > 0
            else ""
        )
        bound = c.get("stress_bound") or {}
        if bound.get("limit_MPa") is not None:
            extra += (
                f"; peak von Mises bounded at {bound['limit_MPa']:.4g} MPa "
                f"(from {bound['governed_by']})"
            )
        lines.append(
            f"  load case {c['name']} (weight {c['weight']}): total force [{tot}] N{extra}"
        )
    for r in rep["unsupportable_solid_regions"]:
        lines.append(
            f"  warning: {r['key']} ({r['name']}): "
            f"{r['unsupportable_elements']} of {r['elements']} "
            f"elements cannot be supported from the build plate ({rep['build_direction']}); "
            "void regions block every path within the overhang rule"
        )
    for name in rep["unreachable_regions"]:
        lines.append(
            f"  warning: {name}: no self-supporting material can reach it building "
            f"{rep['build_direction']}; `topo run` refuses this direction"
        )
    lines.append(
        f"  estimated memory {rep['memory_estimate_MB']} MB, "
        f"{rep['seconds_per_iteration_estimate']:.2g} s per iteration"
    )
    return lines


def format_verification(v: dict, folder) -> list[str]:
    """The figures of a body-fitted verification (verify.json) for the console."""
    fine = v["meshes"][-1]
    lines = [
        f"body-fitted verification of {v['geometry']}:",
        f"  {v['analysis']}; finest mesh {fine['elements']} elements, "
        f"{fine['free_dofs']} free dofs; {v['runtime_s']:.1f} s",
    ]
    for c in v["load_cases"]:
        change = c["change_to_previous_mesh"]["max_von_mises"]
        grid = c["verified_vs_grid"]["max_von_mises"]
        where = ", ".join(f"{v:.2f}" for v in c["peak_location_mm"])
        near = c["nearest_region"]
        lines.append(
            f"  {c['name']}: peak von Mises {_num(c['max_von_mises_MPa'])} MPa at "
            f"({where}) mm, {near['distance_mm']:.2f} mm from {near['name']}"
            + (
                f" (also near {', '.join(near['within_one_element'][1:])})"
                if len(near["within_one_element"]) > 1
                else ""
            )
            + (f"; {100 * change:+.2f} % against the previous mesh" if change is not None else "")
            + (
                f"; {100 * grid:+.1f} % against the grid's {_num(c['grid']['max_von_mises_MPa'])}"
                " MPa"
                if grid is not None
                else ""
            )
        )
        lines.append(
            f"    max displacement {_num(c['max_displacement_mm'])} mm, safety factor "
            f"{_num(c['safety_factor'], '.3g')}"
            + "".join(f", {k} {_num(d)} mm" for k, d in c["deflections_mm"].items())
        )
    lines.append(f"verify.json, verify.vtu, verify.png in {folder}/")
    return lines
