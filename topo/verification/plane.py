"""Plane-stress linear elasticity on quadratic triangles (scikit-fem), with the
problem's supports, loads and deflection points mapped onto the body-fitted mesh.

How a region reaches the mesh (same rules for every mesh, so the convergence
study compares like with like):

- a force whose region holds part of the body (element centroids inside it) is
  spread as a uniform body force over that area: total / (area · thickness);
- otherwise, over the boundary edges whose midpoints lie within `tol` of the
  region, as a uniform traction: total / (length · thickness);
- a `point` region, or a region that reaches neither, goes to the nearest node.
Each is integrated with the quadratic shape functions (consistent loads), so the
nodal forces sum to the stated total exactly. Supports fix the listed directions
of every node within `tol` of the region (a point: the nearest node). Deflection
points average the displacement of the nodes within `tol` (a point: the nearest).

Stresses are recovered at the nodes by averaging the element stresses there (see
_nodal_stress), then von Mises σ_v = √(σx² − σxσy + σy² + 3τxy²).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import SimpleNamespace

import numpy as np
import scipy.sparse.linalg as spla

from ..problem import Point
from ..regions import _inside  # the same membership test the grid uses
from .mesher import TriMesh6
from .outline import GeometryError

AXIS = {"x": 0, "y": 1}


@dataclass
class Mapping:
    """How one support or force reached the mesh."""

    name: str
    role: str  # "support" | "force"
    region: object
    spread: str  # "area" | "boundary" | "node" | "nodes"
    measure: float  # mm² (area), mm (boundary), 0 (node)
    nodes: int
    point_like: bool
    applied: list | None = None  # forces: the sum of the nodal forces, N (= the total)


@dataclass
class PlaneSolution:
    points: np.ndarray  # (n, 2) mm, every node of the quadratic mesh
    cells: np.ndarray  # (m, 6)
    displacement: np.ndarray  # (n, 2, n_cases) mm
    von_mises: np.ndarray  # (n, n_cases) MPa, recovered nodal values
    stress: np.ndarray  # (n, 3, n_cases) MPa, σx, σy, τxy
    deflections: list[dict]  # per probe: {name, cases: {case index: mm}}
    mappings: list[Mapping] = field(default_factory=list)
    dofs: int = 0


def _where(region, pts: np.ndarray, tol: float, size) -> np.ndarray:
    return _inside(region, pts, tol, SimpleNamespace(dim=2, size=tuple(size)))


def _nearest(points: np.ndarray, region: Point) -> int:
    return int(np.argmin(np.linalg.norm(points - np.array(region.point[:2]), axis=1)))


def _node_set(points, region, tol, size, what: str) -> tuple[np.ndarray, str]:
    if isinstance(region, Point):
        return np.array([_nearest(points, region)]), "node"
    nodes = np.flatnonzero(_where(region, points, tol, size))
    if len(nodes) == 0:
        raise GeometryError(f"{what}: the region selects no node of the body-fitted mesh")
    return nodes, "nodes"


def solve_plane(mesh: TriMesh6, problem, tol: float, embedded=()) -> PlaneSolution:
    """Solve every load case on `mesh`. Regions in `embedded` have their outline in
    the mesh, so their nodes are selected without the tolerance `tol`."""
    from skfem import (
        Basis,
        ElementTriP2,
        ElementVector,
        FacetBasis,
        Functional,
        LinearForm,
        MeshTri2,
        asm,
        condense,
    )
    from skfem.models.elasticity import lame_parameters, linear_elasticity

    dom, mat = problem.domain, problem.material
    size, t, h = dom.size, dom.thickness, dom.element_size
    exact = {repr(r) for r in embedded}
    fine_tol = 1e-6 * max(size)

    def tol_of(region) -> float:
        return fine_tol if repr(region) in exact else tol

    m = MeshTri2(mesh.points.T.copy(), mesh.cells.T.copy())
    elem = ElementVector(ElementTriP2())
    basis = Basis(m, elem, intorder=4)
    scalar = basis.with_element(ElementTriP2())
    points = scalar.doflocs.T  # node j carries dofs 2j (x) and 2j + 1 (y)
    lam, mu = lame_parameters(mat.youngs_modulus, mat.poissons_ratio)
    lam = 2 * lam * mu / (lam + 2 * mu)  # plane stress
    stiffness = asm(linear_elasticity(lam, mu), basis) * t
    n_cases = len(problem.load_cases)
    loads = np.zeros((basis.N, n_cases))
    mappings: list[Mapping] = []

    centroids = m.p[:, m.t].mean(axis=1).T
    facets = m.boundary_facets()
    mids = m.p[:, m.facets[:, facets]].mean(axis=1).T

    @Functional
    def one(w):
        return 1.0 + 0.0 * w.x[0]

    for c, case in enumerate(problem.load_cases):
        for j, force in enumerate(case.forces):
            name = case.name if j == 0 else f"{case.name}[{j}]"
            total = np.array(force.total[:2], dtype=float)
            region = force.region
            inside = (
                np.flatnonzero(_where(region, centroids, 0.0, size))
                if not isinstance(region, Point)
                else []
            )
            edges = (
                facets[_where(region, mids, tol_of(region), size)]
                if not isinstance(region, Point)
                else []
            )
            if len(inside):
                part = Basis(m, elem, elements=inside, intorder=4)
                measure = asm(one, part.with_element(ElementTriP2()))
                spread = "area"
            elif len(edges):
                part = FacetBasis(m, elem, facets=edges, intorder=4)
                measure = asm(one, part.with_element(ElementTriP2()))
                spread = "boundary"
            else:
                node = _nearest(points, region) if isinstance(region, Point) else None
                if node is None:
                    raise GeometryError(
                        f"load_case[{c}].force[{j}] ({name}): the region reaches no element "
                        "or boundary edge of the body-fitted mesh"
                    )
                loads[2 * node : 2 * node + 2, c] += total
                mappings.append(
                    Mapping(name, "force", region, "node", 0.0, 1, True, total.tolist())
                )
                continue
            density = total / measure  # N per mm² of area or per mm of edge: sums to total

            @LinearForm
            def spread_load(v, w, d=density):
                return d[0] * v[0] + d[1] * v[1]

            vector = asm(spread_load, part)
            loads[:, c] += vector
            small = measure < (h * h if spread == "area" else h)
            count = len(inside) if spread == "area" else len(edges)
            applied = [float(vector[0::2].sum()), float(vector[1::2].sum())]
            mappings.append(
                Mapping(name, "force", region, spread, float(measure), count, bool(small), applied)
            )

    fixed = []
    for i, s in enumerate(problem.supports):
        nodes, how = _node_set(points, s.region, tol_of(s.region), size, f"support[{i}] ({s.name})")
        for axis in s.fix:
            if axis in AXIS:
                fixed.append(2 * nodes + AXIS[axis])
        span = np.ptp(points[nodes], axis=0).max() if len(nodes) > 1 else 0.0
        mappings.append(
            Mapping(s.name, "support", s.region, how, float(span), len(nodes), bool(span < h))
        )
    fixed = np.unique(np.concatenate(fixed))

    u = np.zeros((basis.N, n_cases))
    kc, _, _, free = condense(stiffness, loads[:, 0], D=fixed)
    solve = _factor(kc)
    u[free] = solve(loads[free])
    if not np.all(np.isfinite(u)):
        raise FloatingPointError("the body-fitted solve returned non-finite displacements")

    stress = _nodal_stress(m, elem, u, lam, mu, fixed, len(points))
    sx, sy, txy = stress[:, 0], stress[:, 1], stress[:, 2]
    vm = np.sqrt(np.maximum(sx**2 - sx * sy + sy**2 + 3 * txy**2, 0.0))

    disp = u.reshape(len(points), 2, n_cases)
    probes = []
    names = [c.name for c in problem.load_cases]
    for i, d in enumerate(problem.deflections):
        nodes, _ = _node_set(
            points, d.region, tol_of(d.region), size, f"deflection[{i}] ({d.name})"
        )
        direction = _unit(d.direction)
        cases = range(n_cases) if d.load_case is None else [names.index(d.load_case)]
        probes.append(
            {
                "name": d.name,
                "limit_mm": d.limit,
                "cases": {c: float(disp[nodes, :, c].mean(axis=0) @ direction) for c in cases},
            }
        )
    return PlaneSolution(
        points, scalar.element_dofs.T.copy(), disp, vm, stress, probes, mappings, len(free)
    )


def _nodal_stress(m, elem, u, lam, mu, fixed, n_nodes) -> np.ndarray:
    """Stresses (n_nodes, 3, n_cases) at the nodes: each element's stress (linear in
    a quadratic element) evaluated at its six nodes, averaged over the elements
    around a node. Elements whose every dof is fixed (inside a support region held
    whole, such as a bolt) carry no stress and stay out of the average, so the
    stress beside them is not diluted."""
    from skfem import Basis, ElementTriP2
    from skfem.helpers import sym_grad

    ref = ElementTriP2().doflocs.T  # the six reference nodes, in element-dof order
    at_nodes = Basis(m, elem, quadrature=(ref, np.ones(ref.shape[1])))
    dofs = at_nodes.with_element(ElementTriP2()).element_dofs  # (6, n_elements)
    held = np.zeros(u.shape[0], dtype=bool)
    held[fixed] = True
    vector_dofs = at_nodes.element_dofs  # (12, n_elements)
    active = ~held[vector_dofs].all(axis=0)
    count = np.bincount(dofs[:, active].ravel(), minlength=n_nodes).astype(float)
    out = np.zeros((n_nodes, 3, u.shape[1]))
    for c in range(u.shape[1]):
        eps = sym_grad(at_nodes.interpolate(u[:, c]))  # (2, 2, n_elements, 6)
        tr = eps[0, 0] + eps[1, 1]
        comps = (2 * mu * eps[0, 0] + lam * tr, 2 * mu * eps[1, 1] + lam * tr, 2 * mu * eps[0, 1])
        for k, comp in enumerate(comps):
            total = np.bincount(
                dofs[:, active].ravel(), weights=comp[active].T.ravel(), minlength=n_nodes
            )
            out[:, k, c] = total / np.maximum(count, 1.0)
    return out


def _unit(direction) -> np.ndarray:
    if isinstance(direction, str):
        vec = np.zeros(2)
        vec["xyz".index(direction.lstrip("+-"))] = -1.0 if direction.startswith("-") else 1.0
        return vec
    vec = np.asarray(direction[:2], dtype=float)
    return vec / np.linalg.norm(vec)


def _factor(matrix):
    """A solve function for the symmetric positive-definite reduced matrix: CHOLMOD
    when scikit-sparse is there, SuperLU otherwise."""
    try:
        from sksparse.cholmod import cholesky
    except ImportError:  # pragma: no cover - depends on the machine
        lu = spla.splu(matrix.tocsc())
        return lu.solve
    factor = cholesky(matrix.tocsc())
    return factor
