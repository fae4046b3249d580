"""Verification analysis on the smooth geometry: body-fitted quadratic meshes,
converged stress and deflection for sign-off (`topo verify`).

The geometry is the printed design's smooth outline (outline.py) or surface
(surface.py, 3D), or, for a plain analysis, the domain less its void regions
exactly. A first mesh (base size, finer at loads and supports) is solved; its
stress guides a second size field, finer where the stress is high (sizing.py).
That field is meshed three times (LEVELS, LEVELS_3D) and each mesh solved
(elastic.py): the finest gives the figures, the other two their convergence.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

from ..problem import ProblemError
from .elastic import solve_elastic
from .figures import verification_figures
from .mesher import make_mesh
from .outline import GeometryError, domain_less_voids, printed_outline
from .output import write_verification
from .sizing import SizeField
from .surface import printed_surface

LEVELS = (("coarse", 2.0), ("default", 1.0), ("fine", 0.6))
# 3D: a fine mesh at 0.6 had over a million dofs on the demo bracket (CHOLMOD ran
# out of time and memory); 0.75 keeps it to a few hundred thousand
LEVELS_3D = (("coarse", 1.5), ("default", 1.0), ("fine", 0.75))
BASE = 2.0  # base element size in grid elements: quadratic elements need fewer
BASE_3D = 2.0  # … in 3D (1.0 gave 98,000 tetrahedra on the demo bracket before refining)


@dataclass
class Verification:
    figures: dict  # what verify.json holds
    solution: object  # elastic.Solution of the finest mesh
    problem: object


def verify(result, exact: bool = False, base_size: float | None = None) -> Verification:
    """Body-fitted verification of a Result: its printed design, or (exact=True) the
    full domain less the void regions. Raises ProblemError for a fault of the input
    (3D, empty or disconnected design, a region reaching no node)."""
    problem = result.problem
    source = problem.source
    if not exact and result.printed.analysis is None:
        # a part that does not carry its loads has no figure to verify; a body-fitted
        # mesh would move each load to the nearest printed node and report a part
        # that is not the one made (printed.py)
        raise ProblemError(
            source,
            "printed design",
            f"not verified: the printed part is {result.printed.why_not_analysed()}",
        )
    start = time.perf_counter()
    h = problem.domain.element_size
    base = base_size or (BASE if problem.dim == 2 else BASE_3D) * h
    try:
        if exact:
            geometry, tol = domain_less_voids(problem), 1e-6 * max(problem.domain.size)
        elif problem.dim == 2:
            geometry, tol = printed_outline(result.printed.density, h), 0.5 * h * (1 + 1e-9)
        else:
            geometry, tol = printed_surface(result.printed.density, h), 0.5 * h * (1 + 1e-9)
        geometry.embed = [s.region for s in problem.supports] + [
            f.region for c in problem.load_cases for f in c.forces
        ]
        embedded = geometry.embedded()
        field = SizeField(problem, base)
        first = solve_elastic(make_mesh(geometry, field, problem.dim), problem, tol, embedded)
        field.refine_by_stress(first.points, first.von_mises)
        levels = []
        for name, scale in LEVELS if problem.dim == 2 else LEVELS_3D:
            t0 = time.perf_counter()
            mesh = make_mesh(geometry, field.scaled(scale), problem.dim)
            t1 = time.perf_counter()
            sol = solve_elastic(mesh, problem, tol, embedded)
            levels.append((name, scale, sol, t1 - t0, time.perf_counter() - t1))
    except GeometryError as exc:
        what = "domain less voids" if exact else "printed design"
        raise ProblemError(source, what, str(exc)) from None
    figures = verification_figures(result, levels, exact, base, time.perf_counter() - start)
    return Verification(figures, levels[-1][2], problem)


__all__ = ["Verification", "verify", "write_verification"]
