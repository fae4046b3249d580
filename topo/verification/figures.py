"""The figures of a verification (verify.json), its checks, and how it changes the
run's summary: the headline stress and safety factor come from the finest
body-fitted mesh, with the grid's figures beside them."""

from __future__ import annotations

import numpy as np

from ..anisotropy import yield_basis, yield_safety
from ..checks import CORRECTION_NAMES, FAIL, NA, PASS, failed
from ..fatigue import assess
from ..printed import finite_or_none, relative_gap
from .outline import BLUR
from .sizing import region_distance
from .surface import BLUR_3D

CONVERGENCE_LIMIT = 0.05  # largest change of a peak between the two finest meshes
STRESS_SOURCE = "body-fitted verification (verify.json): quadratic elements, finest mesh"


def _row(name: str, ok: bool | None, value, limit, detail: str) -> dict:
    status = NA if ok is None else PASS if ok else FAIL
    return {"name": name, "status": status, "value": value, "limit": limit, "detail": detail}


def convergence_row(changes: dict[str, float | None]) -> dict:
    """changes: load case → relative change of its peak von Mises stress between
    the two finest meshes."""
    known = {k: abs(v) for k, v in changes.items() if v is not None}
    if not known:
        return _row("verify_convergence", None, None, CONVERGENCE_LIMIT, "no peak stress")
    case = max(known, key=known.get)
    worst = known[case]
    return _row(
        "verify_convergence",
        worst <= CONVERGENCE_LIMIT,
        worst,
        CONVERGENCE_LIMIT,
        f"largest change of the peak von Mises stress between the two finest body-fitted "
        f"meshes: {100 * worst:.2f} % (load case {case})",
    )


def singular_row(at_points: list[str]) -> dict:
    """at_points: 'case: region' for each load case whose peak sits at a point-like
    load or support (a singularity: no mesh converges it)."""
    return _row(
        "verify_peak_not_singular",
        not at_points,
        len(at_points),
        0,
        "peak stress away from point-like loads and supports"
        if not at_points
        else "peak at a point-like load or support, where the stress grows without bound as "
        "the mesh refines: " + "; ".join(at_points),
    )


def safety_row(safety: float | None, required: float, basis: str = "") -> dict:
    if safety is None:
        return _row("safety_factor", None, None, required, "no yield strength given")
    return _row(
        "safety_factor",
        safety >= required,
        safety,
        required,
        "yield strength over the peak von Mises stress of the body-fitted verification "
        "(recovered nodal stresses, finest mesh)" + (f"; yield: {basis}" if basis else ""),
    )


def fatigue_rows(block: dict | None, required: float) -> list[dict]:
    """The fatigue checks on the verification's stresses (none without cycles)."""
    if block is None:
        return []
    name = CORRECTION_NAMES.get(block["mean_stress_method"], block["mean_stress_method"])
    value, damage = block["safety_factor"], block["damage"]
    return [
        _row(
            "fatigue_safety_factor",
            value is None or value >= required,
            value,
            required,
            f"{name} safety factor on stress amplitude at the design life, least over the "
            "nodes of the body-fitted verification (finest mesh) and the load cases; "
            "indicative (defects and surface govern printed-metal fatigue)",
        ),
        _row(
            "fatigue_damage",
            damage < 1.0,
            damage,
            1.0,
            "Miner's damage sum of the load cases' design lives at the worst node of the "
            "body-fitted verification",
        ),
    ]


def _named_regions(problem) -> list[tuple[str, object]]:
    out = [(f"support {s.name}", s.region) for s in problem.supports]
    out += [(f"load {c.name}", f.region) for c in problem.load_cases for f in c.forces]
    out += [(f"{p.kind} {p.name}", p.region) for p in problem.passives]
    out += [(f"deflection {d.name}", d.region) for d in problem.deflections]
    return out


def nearest_region(problem, point: np.ndarray) -> dict:
    """The named region nearest a point, and every one within a grid element of it."""
    rows = [
        (float(region_distance(r, point[None, :], problem.domain.size)[0]), name)
        for name, r in _named_regions(problem)
    ]
    dist, name = min(rows)
    h = problem.domain.element_size
    return {
        "name": name,
        "distance_mm": dist,
        "within_one_element": [n for d, n in sorted(rows) if d <= h],
    }


def _case(sol, c: int) -> dict:
    vm = sol.von_mises[:, c]
    i = int(np.argmax(vm))
    mag = np.linalg.norm(sol.displacement[:, :, c], axis=1)
    return {
        "max_displacement_mm": finite_or_none(mag.max()),
        "max_von_mises_MPa": finite_or_none(vm[i]),
        "peak_location_mm": [float(v) for v in sol.points[i]],
        "deflections_mm": {p["name"]: p["cases"][c] for p in sol.deflections if c in p["cases"]},
    }


def _changes(fine: dict, other: dict) -> dict:
    return {
        "max_displacement": relative_gap(fine["max_displacement_mm"], other["max_displacement_mm"]),
        "max_von_mises": relative_gap(fine["max_von_mises_MPa"], other["max_von_mises_MPa"]),
        "deflections": {
            k: relative_gap(v, other["deflections_mm"].get(k))
            for k, v in fine["deflections_mm"].items()
        },
    }


def mesh_volume(points: np.ndarray, cells: np.ndarray, thickness: float | None) -> float:
    """Volume of the mesh (mm³) from its straight-sided corner simplices; 2D: area
    times the thickness."""
    if points.shape[1] == 2:
        a, b, c = (points[cells[:, k]] for k in range(3))
        u, v = b - a, c - a
        area = 0.5 * np.abs(u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]).sum()
        return float(area * thickness)
    a, b, c, d = (points[cells[:, k]] for k in range(4))
    return float(np.abs(np.einsum("ij,ij->i", np.cross(b - a, c - a), d - a)).sum() / 6)


def verification_figures(result, levels, exact: bool, base: float, runtime: float) -> dict:
    problem = result.problem
    h = problem.domain.element_size
    fy = problem.material.yield_strength
    finest = levels[-1][2]
    build = problem.build.direction if problem.build else None
    tensors = np.transpose(finest.stress, (0, 2, 1))  # (nodes, cases, components)
    yields = yield_safety(problem.material, build, tensors, finest.von_mises)
    grid_cases = (result.summary or {}).get("load_cases") or [{} for _ in problem.load_cases]
    point_like = [m for m in finest.mappings if m.point_like]
    cases, changes, singular = [], {}, []
    for c, case in enumerate(problem.load_cases):
        per = {name: _case(sol, c) for name, _, sol, _, _ in levels}
        top = dict(per[levels[-1][0]])
        peak = np.array(top["peak_location_mm"])
        near = nearest_region(problem, peak)
        at = [
            m.name
            for m in point_like
            if region_distance(m.region, peak[None, :], problem.domain.size)[0] <= h
        ]
        if at:
            singular.append(f"{case.name}: {', '.join(at)}")
        change = _changes(per[levels[-1][0]], per[levels[-2][0]])
        changes[case.name] = change["max_von_mises"]
        grid = grid_cases[c] if c < len(grid_cases) else {}
        grid_fig = {
            "max_von_mises_MPa": grid.get("max_von_mises_MPa"),
            "max_displacement_mm": grid.get("max_displacement_mm"),
            "deflections_mm": grid.get("deflections_mm") or {},
        }
        top.update(
            {
                "name": case.name,
                "nearest_region": near,
                "peak_at_point_like": at,
                "safety_factor": finite_or_none(yields[c][0])
                if yields[c][0] is not None and top["max_von_mises_MPa"]
                else None,
                "yield_strength_MPa": yields[c][1],
                "yield_angle_to_build_deg": yields[c][2],
                "meshes": per,
                "change_to_previous_mesh": change,
                "grid": grid_fig,
                "verified_vs_grid": {
                    "max_von_mises": relative_gap(
                        top["max_von_mises_MPa"], grid_fig["max_von_mises_MPa"]
                    ),
                    "max_displacement": relative_gap(
                        top["max_displacement_mm"], grid_fig["max_displacement_mm"]
                    ),
                    "deflections": {
                        k: relative_gap(v, grid_fig["deflections_mm"].get(k))
                        for k, v in top["deflections_mm"].items()
                    },
                },
            }
        )
        cases.append(top)
    peaks = [c["max_von_mises_MPa"] for c in cases if c["max_von_mises_MPa"] is not None]
    peak = max(peaks) if peaks else None
    factors = [c["safety_factor"] for c in cases if c["safety_factor"] is not None]
    safety = min(factors) if factors and peak else None
    required = problem.checks.safety_factor
    fatigue = assess(
        problem,
        finest.points,
        finest.von_mises,
        np.ones(len(finest.points), dtype=bool),
        stress=tensors,
        source=STRESS_SOURCE + "; nodal stresses",
    )
    basis = yield_basis(problem.material, build)
    rows = [safety_row(safety, required, basis), convergence_row(changes), singular_row(singular)]
    rows += fatigue_rows(fatigue, problem.checks.fatigue_safety_factor)
    return {
        "geometry": "the domain less its void regions, exact"
        if exact
        else "the printed design (density >= 0.5 plus passive solids), smoothed by a "
        f"Gaussian blur of {BLUR if problem.dim == 2 else BLUR_3D} elements and contoured "
        "at 0.5",
        "analysis": (
            "plane stress, quadratic triangles"
            if problem.dim == 2
            else "linear elasticity, quadratic tetrahedra"
        )
        + " (scikit-fem), meshes by gmsh; nodal stresses averaged from the elements "
        "around each node",
        "thickness_mm": problem.domain.thickness,
        "volume_mm3": mesh_volume(finest.points, finest.cells, problem.domain.thickness),
        "volume_gap_to_grid": relative_gap(
            mesh_volume(finest.points, finest.cells, problem.domain.thickness),
            (result.summary or {}).get("volume_mm3"),
        ),
        "base_size_mm": base,
        "meshes": [
            {
                "name": name,
                "size_scale": scale,
                "elements": int(len(sol.cells)),
                "nodes": int(len(sol.points)),
                "free_dofs": int(sol.dofs),
                "mesh_s": round(tm, 3),
                "solve_s": round(ts, 3),
            }
            for name, scale, sol, tm, ts in levels
        ],
        "load_mapping": [
            {
                "name": m.name,
                "role": m.role,
                "spread": m.spread,
                "measure": m.measure,
                "nodes_or_cells": m.nodes,
                "point_like": m.point_like,
                "applied_total_N": m.applied,
            }
            for m in finest.mappings
        ],
        "load_cases": cases,
        "max_von_mises_MPa": peak,
        "yield_strength_MPa": fy,
        "yield_basis": basis,
        "safety_factor": safety,
        "fatigue": fatigue,
        "required_safety_factor": required,
        "checks": rows,
        "checks_failed": failed(rows),
        "runtime_s": round(runtime, 3),
    }


def _fatigue_headline(block: dict | None) -> dict | None:
    """The headline of a fatigue block, kept beside the verified one."""
    if not block:
        return None
    keys = ("stress_source", "safety_factor", "governing_load_case", "weakest_location_mm")
    return {k: block.get(k) for k in keys + ("damage",)}


def apply_to_summary(summary: dict, figures: dict) -> dict:
    """The run's summary with its headline stress and safety factor taken from the
    verification, the grid's beside them, and the verification's checks in place of
    the grid's stress checks."""
    out = dict(summary)
    grid_peak, grid_sf = summary.get("max_von_mises_MPa"), summary.get("safety_factor")
    if summary.get("stress_source") == STRESS_SOURCE:  # verified before: keep the grid's
        grid_peak = summary.get("grid_max_von_mises_MPa")
        grid_sf = summary.get("grid_safety_factor")
    out["stress_source"] = STRESS_SOURCE
    out["max_von_mises_MPa"] = figures["max_von_mises_MPa"]
    out["safety_factor"] = figures["safety_factor"]
    out["grid_max_von_mises_MPa"] = grid_peak
    out["grid_safety_factor"] = grid_sf
    out["verified_vs_grid_stress"] = relative_gap(figures["max_von_mises_MPa"], grid_peak)
    if figures.get("fatigue") is not None:
        grid_fatigue = summary.get("fatigue")
        if summary.get("stress_source") == STRESS_SOURCE:
            grid_fatigue = summary.get("grid_fatigue")
        out["fatigue"] = figures["fatigue"]
        out["grid_fatigue"] = _fatigue_headline(grid_fatigue)
    replaced = {r["name"] for r in figures["checks"]}
    rows = [r for r in summary.get("checks", []) if r["name"] not in replaced]
    limit = summary.get("stress_limit_MPa")
    if limit is not None:
        rows = [r for r in rows if r["name"] != "stress_limit"]
        peak = figures["max_von_mises_MPa"]
        rows.append(
            _row(
                "stress_limit",
                peak is not None and peak <= limit,
                peak,
                limit,
                "peak von Mises stress of the body-fitted verification against "
                "optimization.stress_limit",
            )
        )
    out["checks"] = rows + figures["checks"]
    out["checks_failed"] = failed(out["checks"])
    return out
