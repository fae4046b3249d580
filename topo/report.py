"""Summary figures of a Result: mass, compliance, stress and printability."""
from __future__ import annotations

import numpy as np

from .printability import SOLID, printable_envelope, unsupported_by_direction
from .schema import settings
from .stress import relax

CAUTION = ("Concept design only. Verify by qualified analysis and physical testing "
           "under the applicable codes and licensed engineering practice before use.")
STRESS_NOTE = ("max_von_mises_MPa: von Mises stress of the solid material at element centres, "
               "elements with density >= 0.5; peak_relaxed_stress_MPa: the largest density^0.5 "
               "times that stress over all elements (what a stress_limit constrains); safety "
               "factors are yield strength over max_von_mises_MPa. Peaks at point loads, supports "
               "and re-entrant corners depend on the mesh.")


def summarize(result, analysis_only: bool = False) -> dict:
    problem, model, a = result.problem, result.model, result.analysis
    rho = result.density.ravel()
    dom, mat = problem.domain, problem.material
    active = model.active
    solid = rho >= SOLID
    weights = np.array([c.weight for c in problem.load_cases])
    vm = np.where(solid[:, None], a.von_mises, 0.0)
    relaxed = relax(rho, a.von_mises)  # the measure a stress_limit constrains
    yield_strength = mat.yield_strength
    cases = []
    for i, case in enumerate(problem.load_cases):
        peak_i = float(vm[:, i].max()) if solid.any() else None
        cases.append({
            "name": case.name,
            "weight": case.weight,
            "compliance_Nmm": float(a.compliances[i]),
            "max_displacement_mm": float(a.max_displacement[i]),
            "max_von_mises_MPa": peak_i,
            "peak_relaxed_stress_MPa": float(relaxed[:, i].max()),
            "safety_factor": (yield_strength / peak_i) if yield_strength and peak_i else None,
        })
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
        "material": {"name": mat.name, "youngs_modulus_MPa": mat.youngs_modulus,
                     "poissons_ratio": mat.poissons_ratio, "density_kg_m3": mat.density,
                     "yield_strength_MPa": mat.yield_strength},
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
        "solver": model.solver.name,
        "build_direction": problem.build.direction if problem.build else None,
        "passive_regions": _passive_report(result, solid),
        "overhang_filter": bool(problem.build and problem.build.overhang_filter),
        "unsupported_fraction": by_direction[problem.build.direction] if problem.build else None,
        "unsupported_by_direction": by_direction,
        "caution": CAUTION,
    }
    return summary


def _passive_report(result, solid: np.ndarray) -> list[dict]:
    """How much of each passive region the final design keeps solid. The overhang
    layer acts on passive solids too, so an unsupported part of one is not printed."""
    out = []
    for i, (p, elems) in enumerate(zip(result.problem.passives, result.model.passive_elements)):
        out.append({"key": f"passive[{i}]", "name": p.name, "kind": p.kind, "elements": int(len(elems)),
                    "solid_share": float(solid[elems].mean())})
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
            out.append({"key": f"passive[{i}]", "name": p.name, "unsupportable_elements": bad,
                        "elements": int(len(elems))})
    return out


def model_report(model) -> dict:
    """What the model holds before any solve: for `topo check`."""
    problem, grid = model.problem, model.grid
    loads = model.loads
    cases = []
    for i, case in enumerate(problem.load_cases):
        applied = loads.reshape(grid.n_nodes, grid.dim, -1)[:, :, i].sum(axis=0)
        on_fixed = loads[model.fixed_dofs, i]
        cases.append({"name": case.name, "weight": case.weight,
                      "total_force_N": [float(v) for v in applied],
                      "force_on_fixed_dofs_N": float(np.abs(on_fixed).sum())})
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
        "solver": model.solver.name,
        "build_direction": problem.build.direction if problem.build else None,
        "settings": settings(problem),
        "unsupportable_solid_regions": _unsupportable(model),
        "memory_estimate_MB": round(est["memory_bytes"] / 2**20, 1),
        "seconds_per_iteration_estimate": round(est["seconds_per_iteration"], 3),
    }
