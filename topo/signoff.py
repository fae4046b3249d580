"""Sign-off figures of a finished design: the printed part first, the optimiser's
grey figures beside it, and the checks.

`sign_off(result)` re-analyses the printed part (printed.py) and gathers, for it
and for the grey field: mass, compliance, displacement magnitude, deflections at
the problem's probes, peak von Mises stress and safety factor per load case; the
support each passive solid region needs; whether every load reaches a support;
enclosed cavities; and the PASS/FAIL rows of checks.py.
"""

from __future__ import annotations

import numpy as np

from .anisotropy import yield_basis, yield_safety
from .checks import SignOffFigures, run_checks
from .deflection import deflections
from .fatigue import assess
from .integrity import enclosed_cavities, load_path
from .lengthscale import minimum_wall_and_gap
from .printability import SOLID, support_needed, unsupported_by_direction
from .printed import finite_or_none, relative_gap
from .stress import centre_stresses


def part_figures(
    problem, model, rho: np.ndarray, analysis, probes, solid: np.ndarray, stress=None
) -> dict:
    """Figures of one density field (flat) and its analysis (None: a mechanism,
    printed.py; then only mass and volume are given). Stresses are those of
    the solid material at element centres, over the elements of `solid` only (the
    printed material); void and grey elements below ρ = 0.5 carry none. The yield
    strength of the safety factors is the material's, or a named condition's by the
    direction of the principal stress (anisotropy.yield_safety); `stress` gives the
    centre stress tensors when they are already known."""
    dom, mat = problem.domain, problem.material
    weights = np.array([c.weight for c in problem.load_cases])
    volume = dom.element_volume * float(np.clip(rho, 0.0, 1.0).sum())
    build = problem.build.direction if problem.build else None
    active = model.active
    out = {
        "mass_kg": volume * 1e-9 * mat.density,
        "volume_mm3": volume,
        "volume_fraction": float(np.clip(rho[active], 0, 1).mean()) if active.any() else None,
        "compliance_Nmm": None,
        "max_von_mises_MPa": None,
        "safety_factor": None,
        "yield_basis": yield_basis(mat, build),
    }
    if analysis is None:  # a mechanism (printed.py): no stiffness figure describes it
        out["load_cases"] = [
            {
                "name": case.name,
                "weight": case.weight,
                "compliance_Nmm": None,
                "max_displacement_mm": None,
                "max_von_mises_MPa": None,
                "safety_factor": None,
                "yield_strength_MPa": None,
                "yield_angle_to_build_deg": None,
                "deflections_mm": {p.name: None for p in probes if i in p.cases},
            }
            for i, case in enumerate(problem.load_cases)
        ]
        return out
    if stress is None:
        stress = centre_stresses(model, analysis.displacements)
    safety = yield_safety(mat, build, stress[solid], analysis.von_mises[solid])
    cases = []
    for i, case in enumerate(problem.load_cases):
        peak = float(analysis.von_mises[solid, i].max()) if solid.any() else None
        factor, strength, angle = safety[i]
        cases.append(
            {
                "name": case.name,
                "weight": case.weight,
                "compliance_Nmm": finite_or_none(analysis.compliances[i]),
                "max_displacement_mm": finite_or_none(analysis.max_displacement[i]),
                "max_von_mises_MPa": finite_or_none(peak),
                "safety_factor": finite_or_none(factor) if factor is not None and peak else None,
                "yield_strength_MPa": strength,
                "yield_angle_to_build_deg": angle,
                "deflections_mm": {
                    p.name: finite_or_none(deflections(p, analysis.displacements)[i])
                    for p in probes
                    if i in p.cases
                },
            }
        )
    peaks = [c["max_von_mises_MPa"] for c in cases if c["max_von_mises_MPa"] is not None]
    factors = [c["safety_factor"] for c in cases if c["safety_factor"] is not None]
    out.update(
        compliance_Nmm=finite_or_none(weights @ analysis.compliances),
        max_von_mises_MPa=max(peaks) if peaks else None,
        safety_factor=min(factors) if factors else None,
        load_cases=cases,
    )
    return out


def interface_support(problem, model, printed: np.ndarray, grey: np.ndarray) -> list[dict]:
    """Per passive solid region: its share at ρ ≥ 0.5 in the optimiser's design, and
    the support it needs in the printed part (down-facing area and support volume
    down to the plate or the part below) when grown in the build direction."""
    out = []
    build = problem.build
    for i, (p, elems) in enumerate(zip(problem.passives, model.passive_elements)):
        if p.kind != "solid":
            continue
        row = {
            "key": f"passive[{i}]",
            "name": p.name,
            "elements": int(len(elems)),
            "solid_share": float((grey[elems] >= SOLID).mean()),
            "downfacing_area_mm2": None,
            "support_volume_mm3": None,
        }
        if build is not None:
            within = np.zeros(model.grid.n_elements, dtype=bool)
            within[elems] = True
            area, volume, _ = support_needed(
                printed > 0.5,
                build.direction,
                problem.domain.element_size,
                problem.domain.thickness,
                within.reshape(printed.shape),
                build.overhang_angle,
            )
            row["downfacing_area_mm2"], row["support_volume_mm3"] = area, volume
        out.append(row)
    return out


def sign_off(result) -> dict:
    """Everything summary.json says about the printed part (result.printed), with
    the optimiser's figures beside it and the checks against problem.checks."""
    problem, model = result.problem, result.model
    probes, requirements = model.probes, problem.checks
    grey = result.density.ravel()
    part = result.printed
    solid = part.density.ravel() > 0.5
    analysed = part.analysis is not None
    # (elements, cases, ns)
    stress = centre_stresses(model, part.analysis.displacements) if analysed else None
    printed = part_figures(
        problem, model, part.density.ravel(), part.analysis, probes, solid, stress
    )
    optimizer = part_figures(problem, model, grey, result.analysis, probes, grey >= SOLID)
    for pc, gc in zip(printed["load_cases"], optimizer["load_cases"]):
        pc["compliance_gap"] = relative_gap(pc["compliance_Nmm"], gc["compliance_Nmm"])
    grid, dom = model.grid, problem.domain
    path = part.load_path or load_path(
        part.density, grid, model.support_nodes, model.load_nodes, dom.element_volume
    )
    cavities = [
        c.__dict__ for c in enclosed_cavities(part.density, dom.element_size, dom.element_volume)
    ]
    interfaces = interface_support(problem, model, part.density, grey)
    wall, gap = minimum_wall_and_gap(part.density, dom.element_size)
    build = problem.build
    by_direction = unsupported_by_direction(part.density, build.overhang_angle if build else 45.0)
    unsupported = by_direction[build.direction] if build else None
    deflection_rows = [
        {
            "name": p.name,
            "load_case": problem.load_cases[i].name,
            "value_mm": printed["load_cases"][i]["deflections_mm"][p.name],
            "limit_mm": p.limit,
        }
        for p in probes
        for i in p.cases
    ]
    fatigue = (
        assess(problem, grid.element_centers, part.analysis.von_mises, solid, stress=stress)
        if analysed
        else None
    )
    opt = problem.optimization
    figures = SignOffFigures(
        load_path_connected=path.connected,
        cut_off_loads=path.cut_off,
        unattached_loads=path.unattached,
        loose_pieces=path.loose_pieces,
        interfaces=interfaces,
        compliance_gaps={c["name"]: c["compliance_gap"] for c in printed["load_cases"]},
        safety_factor=printed["safety_factor"],
        yield_basis=printed["yield_basis"],
        required_safety_factor=requirements.safety_factor,
        max_von_mises_MPa=printed["max_von_mises_MPa"],
        stress_limit_MPa=opt.stress_limit,
        mass_kg=printed["mass_kg"],
        mass_limit_kg=opt.mass_limit,
        deflections=deflection_rows,
        unsupported_fraction=unsupported,
        unsupported_limit=requirements.unsupported_fraction,
        cavities=cavities,
        compliance_gap_limit=requirements.compliance_gap,
        min_wall_mm=wall,
        min_gap_mm=gap,
        wall_limit=requirements.min_wall,
        gap_limit=requirements.min_gap,
        element_size=dom.element_size,
        fatigue_safety_factor=fatigue["safety_factor"] if fatigue else None,
        required_fatigue_safety_factor=requirements.fatigue_safety_factor,
        fatigue_damage=fatigue["damage"] if fatigue else None,
        fatigue_cycles=fatigue is not None
        or (not analysed and any(c.cycles is not None for c in problem.load_cases)),
        fatigue_correction=fatigue["mean_stress_method"] if fatigue else "goodman",
        not_analysed=None if analysed else part.why_not_analysed(),
    )
    return {
        "printed": printed,
        "optimizer": optimizer,
        "compliance_gap": relative_gap(printed["compliance_Nmm"], optimizer["compliance_Nmm"]),
        "printed_part": {
            "elements": int(solid.sum()),
            "passive_elements_added": part.passive_added,
            "elements_added": part.added,
            "elements_removed": part.removed,
            "pieces": path.pieces,
            "loose_pieces": path.loose_pieces,
            "loose_volume_mm3": path.loose_volume_mm3,
            "cut_off_loads": path.cut_off,
            "unattached_loads": path.unattached,
            "analysed": analysed,
            "not_analysed": None if analysed else part.why_not_analysed(),
        },
        "interfaces": interfaces,
        "deflections": deflection_rows,
        "enclosed_cavities": cavities,
        "unsupported_fraction": unsupported,
        "unsupported_by_direction": by_direction,
        "min_wall_mm": wall,
        "min_gap_mm": gap,
        "fatigue": fatigue,
        "checks": run_checks(figures),
    }
