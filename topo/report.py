"""Summary figures of a Result (mass, compliance, stress, printability, the design
mesh) and the console lines that show them. The one place summary.json is made."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import mesh as meshing
from .printability import SOLID, printable_envelope, unsupported_by_direction
from .schema import format_setting, settings
from .stress import relax

CAUTION = (
    "Concept design only. Verify by qualified analysis and physical testing "
    "under the applicable codes and licensed engineering practice before use."
)
STRESS_NOTE = (
    "max_von_mises_MPa: von Mises stress of the solid material at element centres, "
    "elements with density >= 0.5; peak_relaxed_stress_MPa: the largest density^0.5 "
    "times that stress over all elements (what a stress_limit constrains); safety "
    "factors are yield strength over max_von_mises_MPa. Peaks at point loads, supports "
    "and re-entrant corners depend on the mesh."
)


def summarize(result, analysis_only: bool = False) -> dict:
    """The figures of a Result (run_summary adds those of its design mesh). Every
    number is finite, so the summary is strict JSON."""
    problem, model, a = result.problem, result.model, result.analysis
    rho = result.density.ravel()
    dom, mat = problem.domain, problem.material
    active = model.active
    solid = rho >= SOLID
    weights = np.array([c.weight for c in problem.load_cases])
    vm = np.where(solid[:, None], a.von_mises, 0.0)
    # the measure a stress_limit constrains; ρ^q of a round-off negative density is NaN
    relaxed = relax(np.maximum(rho, 0.0), a.von_mises)
    yield_strength = mat.yield_strength
    cases = []
    for i, case in enumerate(problem.load_cases):
        peak_i = float(vm[:, i].max()) if solid.any() else None
        cases.append(
            {
                "name": case.name,
                "weight": case.weight,
                "compliance_Nmm": float(a.compliances[i]),
                "max_displacement_mm": float(a.max_displacement[i]),
                "max_von_mises_MPa": peak_i,
                "peak_relaxed_stress_MPa": float(relaxed[:, i].max()),
                "safety_factor": (yield_strength / peak_i) if yield_strength and peak_i else None,
            }
        )
    peak = max((c["max_von_mises_MPa"] or 0.0) for c in cases) if solid.any() else None
    volume_mm3 = dom.element_volume * float(rho.sum())
    by_direction = unsupported_by_direction(result.density)
    summary = {
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
        "volume_fraction": float(rho[active].mean()) if active.any() else None,
        "volume_fraction_target": None if analysis_only else problem.optimization.volume_fraction,
        "domain_solid_fraction": float(solid.mean()),
        "volume_mm3": volume_mm3,
        "mass_kg": volume_mm3 * 1e-9 * mat.density,
        "solid_mass_kg": dom.element_volume * float(solid.sum()) * 1e-9 * mat.density,
        "compliance_Nmm": float(weights @ a.compliances),
        "load_cases": cases,
        "max_von_mises_MPa": peak,
        "safety_factor": (yield_strength / peak) if yield_strength and peak else None,
        "stress_limit_MPa": problem.optimization.stress_limit,
        "peak_relaxed_stress_MPa": float(relaxed.max()),
        "stress_note": STRESS_NOTE,
        "iterations": len(result.history),
        "converged": bool(result.converged),
        "stop_reason": result.stop_reason,
        "runtime_s": round(result.runtime_s, 3),
        "solver": model.system.name,
        "build_direction": problem.build.direction if problem.build else None,
        "passive_regions": _passive_report(result, solid),
        "overhang_filter": bool(problem.build and problem.build.overhang_filter),
        "unsupported_fraction": by_direction[problem.build.direction] if problem.build else None,
        "unsupported_by_direction": by_direction,
        "caution": CAUTION,
    }
    return summary


def run_summary(result, surface: DesignSurface | None = None) -> dict:
    """What summary.json holds: the Result's summary (made by summarize when it
    carries none; read back from the folder for a re-export) with the figures of
    `surface`, its design mesh. The Result is left as it is."""
    base = dict(result.summary) if result.summary else summarize(result)
    if surface is not None:
        base["mesh"] = mesh_figures(surface, result.problem)
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


def _passive_report(result, solid: np.ndarray) -> list[dict]:
    """How much of each passive region the final design keeps solid. The overhang
    layer acts on passive solids too, so an unsupported part of one is not printed."""
    out = []
    for i, (p, elems) in enumerate(zip(result.problem.passives, result.model.passive_elements)):
        out.append(
            {
                "key": f"passive[{i}]",
                "name": p.name,
                "kind": p.kind,
                "elements": int(len(elems)),
                "solid_share": float(solid[elems].mean()),
            }
        )
    return out


def _unsupportable(model) -> list[dict]:
    """Passive solid regions some of whose elements no self-supporting design can
    reach from the build plate (void regions in the way)."""
    problem = model.problem
    if problem.build is None:
        return []
    ok = printable_envelope(model.void.reshape(model.grid.shape), problem.build.direction).ravel()
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
    for i, case in enumerate(problem.load_cases):
        applied = loads.reshape(grid.n_nodes, grid.dim, -1)[:, :, i].sum(axis=0)
        on_fixed = loads[model.fixed_dofs, i]
        cases.append(
            {
                "name": case.name,
                "weight": case.weight,
                "total_force_N": [float(v) for v in applied],
                "force_on_fixed_dofs_N": float(np.abs(on_fixed).sum()),
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
    """One history row of the loop (the first also names the solver)."""
    lines = [f"solver: {row['solver']}"] if row["iteration"] == 1 else []
    beta = f"  beta {row['beta']:5.1f}" if row["beta"] is not None else ""
    if row["solver_iterations"]:
        beta += f"  cg {row['solver_iterations']:3d}"
    lines.append(
        f"iter {row['iteration']:4d}  compliance {row['objective']:.6e} N·mm  "
        f"volume {row['volume_fraction']:.4f}  change {row['change']:.4f}{beta}  "
        f"{row['seconds']:.2f} s"
    )
    return lines


def format_cases(summary: dict) -> list[str]:
    lines = []
    for case in summary["load_cases"]:
        vm = case["max_von_mises_MPa"]
        lines.append(
            f"  load case {case['name']}: compliance {case['compliance_Nmm']:.6g} N·mm, "
            f"max displacement {case['max_displacement_mm']:.4g} mm"
            + (f", max von Mises {vm:.4g} MPa" if vm is not None else "")
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


def format_run(s: dict, mesh_format: str) -> list[str]:
    """The outcome of a run from its summary.json."""
    lines = [
        f"{'converged' if s['converged'] else 'stopped'} after {s['iterations']} iterations "
        f"in {s['runtime_s']:.1f} s (solver {s['solver']}): {s['stop_reason']}",
        f"  compliance {s['compliance_Nmm']:.6g} N·mm, volume fraction {s['volume_fraction']:.4f}, "
        f"mass {s['mass_kg']:.4g} kg",
    ]
    lines += format_cases(s)
    if s["build_direction"]:
        lines.append(
            f"  unsupported fraction {s['unsupported_fraction']:.4f} "
            f"building {s['build_direction']}"
            f" (overhang filter {'on' if s['overhang_filter'] else 'off'})"
        )
    for r in s["passive_regions"]:
        if r["kind"] == "solid" and r["solid_share"] < 0.999:
            lines.append(
                f"  note: only {100 * r['solid_share']:.1f} % of solid region {r['name']} is "
                "printed solid (the rest is not self-supporting)"
            )
    best = min(s["unsupported_by_direction"], key=s["unsupported_by_direction"].get)
    lines.append(
        f"  best build direction for this design: {best} "
        f"(unsupported fraction {s['unsupported_by_direction'][best]:.4f})"
    )
    if "mesh" in s:
        lines.append(format_mesh(s["mesh"], mesh_format))
    return lines


def format_analysis(s: dict, design: str | None) -> list[str]:
    """The figures of `topo analyze`: of the design file `design`, or of the full domain."""
    return [
        f"{s['name']}: analysis of {'the design ' + design if design else 'the full domain'}",
        f"  compliance {s['compliance_Nmm']:.6g} N·mm, mass {s['mass_kg']:.4g} kg",
    ] + format_cases(s)


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
        lines.append(
            f"  load case {c['name']} (weight {c['weight']}): total force [{tot}] N{extra}"
        )
    for r in rep["unsupportable_solid_regions"]:
        lines.append(
            f"  warning: {r['key']} ({r['name']}): "
            f"{r['unsupportable_elements']} of {r['elements']} "
            f"elements cannot be supported from the build plate ({rep['build_direction']}); "
            "void regions block every 45° path"
        )
    lines.append(
        f"  estimated memory {rep['memory_estimate_MB']} MB, "
        f"{rep['seconds_per_iteration_estimate']:.2g} s per iteration"
    )
    return lines
