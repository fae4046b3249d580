"""Linear elasticity on quadratic triangles (plane stress, the problem's thickness)
or tetrahedra, with scikit-fem; the problem's supports, loads and deflection
points mapped onto the body-fitted mesh.

How a region reaches the mesh (same rules for every mesh, so the convergence
study compares like with like):

- a force whose region holds part of the body (element centroids inside it) is
  spread as a uniform body force over that area (2D, "area") or volume (3D,
  "volume");
- otherwise, over the boundary edges (2D) or faces (3D) whose midpoints lie
  within `tol` of the region, as a uniform traction ("boundary");
- a `point` region goes to the nearest node ("node"); any other region that
  reaches neither is refused (GeometryError).
Each is integrated with the quadratic shape functions (consistent loads), so the
nodal forces sum to the stated total exactly (Mapping.applied). Supports fix the
listed directions of every node within `tol` of the region (a point: the nearest
node). Deflection points average the displacement of the nodes within `tol` (a
point: the nearest). A region whose outline is drawn into the mesh (`embedded`)
is selected without the tolerance.

Stresses are recovered at the nodes by averaging the element stresses there (see
_nodal_stress), then the von Mises stress of the averaged components.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import SimpleNamespace

import numpy as np
import scipy.sparse.linalg as spla

from ..loads import rigid_distribution
from ..problem import Point
from ..regions import _inside  # the same membership test the grid uses
from .mesher import QuadraticMesh
from .outline import GeometryError

AXIS = {"x": 0, "y": 1, "z": 2}


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
class Solution:
    points: np.ndarray  # (n, 2) mm, every node of the quadratic mesh
    cells: np.ndarray  # (m, 6)
    displacement: np.ndarray  # (n, 2, n_cases) mm
    von_mises: np.ndarray  # (n, n_cases) MPa, recovered nodal values
    stress: np.ndarray  # (n, 3, n_cases) MPa, σx, σy, τxy
    deflections: list[dict]  # per probe: {name, cases: {case index: mm}}
    mappings: list[Mapping] = field(default_factory=list)
    dofs: int = 0


def _where(region, pts: np.ndarray, tol: float, size) -> np.ndarray:
    return _inside(region, pts, tol, SimpleNamespace(dim=len(size), size=tuple(size)))


def _nearest(points: np.ndarray, region: Point) -> int:
    dim = points.shape[1]
    return int(np.argmin(np.linalg.norm(points - np.array(region.point[:dim]), axis=1)))


def _node_set(points, region, tol, size, what: str) -> tuple[np.ndarray, str]:
    if isinstance(region, Point):
        return np.array([_nearest(points, region)]), "node"
    nodes = np.flatnonzero(_where(region, points, tol, size))
    if len(nodes) == 0:
        raise GeometryError(f"{what}: the region selects no node of the body-fitted mesh")
    return nodes, "nodes"


def solve_elastic(mesh: QuadraticMesh, problem, tol: float, embedded=()) -> Solution:
    """Solve every load case on `mesh`. Regions in `embedded` have their outline in
    the mesh, so their nodes are selected without the tolerance `tol`."""
    from skfem import (
        Basis,
        ElementTetP2,
        ElementTriP2,
        ElementVector,
        FacetBasis,
        Functional,
        LinearForm,
        MeshTet2,
        MeshTri2,
        asm,
        condense,
    )
    from skfem.models.elasticity import lame_parameters

    dom, mat = problem.domain, problem.material
    size, h = dom.size, dom.element_size
    dim = len(size)
    t = dom.thickness if dim == 2 else 1.0
    exact = {repr(r) for r in embedded}
    fine_tol = 1e-6 * max(size)

    def tol_of(region) -> float:
        return fine_tol if repr(region) in exact else tol

    mesh_type, p2 = (MeshTri2, ElementTriP2) if dim == 2 else (MeshTet2, ElementTetP2)
    m = mesh_type(mesh.points.T.copy(), mesh.cells.T.copy())
    elem = ElementVector(p2())
    # degree 2 integrates the stiffness of a straight-sided quadratic element exactly;
    # 2D elements may be curved at the boundary, and 2D is cheap
    basis = Basis(m, elem, intorder=4 if dim == 2 else 2)
    scalar = basis.with_element(p2())
    points = scalar.doflocs.T  # node j carries dofs dim·j + component
    lam, mu = lame_parameters(mat.youngs_modulus, mat.poissons_ratio)
    if dim == 2:
        lam = 2 * lam * mu / (lam + 2 * mu)  # plane stress
    stiffness = asm(_elasticity(lam, mu), basis) * t
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
            total = np.array(force.total[:dim], dtype=float)
            region = force.region
            if force.moment is not None or force.at is not None:
                # the moment about the region's centroid, as the grid model carries it
                nodes, _ = _node_set(points, region, tol_of(region), size, name)
                couple = rigid_distribution(points[nodes], total, force.moment, force.at)
                couple -= total / len(nodes)
                for k in range(dim):
                    np.add.at(loads[:, c], dim * nodes + k, couple[:, k])
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
                measure = asm(one, part.with_element(p2()))
                spread = "area" if dim == 2 else "volume"
            elif len(edges):
                part = FacetBasis(m, elem, facets=edges, intorder=4)
                measure = asm(one, part.with_element(p2()))
                spread = "boundary"
            else:
                node = _nearest(points, region) if isinstance(region, Point) else None
                if node is None:
                    raise GeometryError(
                        f"load_case[{c}].force[{j}] ({name}): the region reaches no element "
                        "or boundary edge of the body-fitted mesh"
                    )
                loads[dim * node : dim * node + dim, c] += total
                mappings.append(
                    Mapping(name, "force", region, "node", 0.0, 1, True, total.tolist())
                )
                continue
            # N per unit of area or volume (body force), of edge length or surface
            # area (traction): integrates to the total
            density = total / measure

            @LinearForm
            def spread_load(v, w, d=density):
                return sum(d[k] * v[k] for k in range(len(d)))

            vector = asm(spread_load, part)
            loads[:, c] += vector
            power = dim if spread != "boundary" else dim - 1
            small = measure < h**power
            count = len(inside) if spread != "boundary" else len(edges)
            applied = [float(vector[k::dim].sum()) for k in range(dim)]
            mappings.append(
                Mapping(name, "force", region, spread, float(measure), count, bool(small), applied)
            )

    fixed = []
    for i, s in enumerate(problem.supports):
        nodes, how = _node_set(points, s.region, tol_of(s.region), size, f"support[{i}] ({s.name})")
        for axis in s.fix:
            if axis in AXIS:
                fixed.append(dim * nodes + AXIS[axis])
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

    stress = _nodal_stress(m, elem, p2, u, lam, mu, fixed, len(points))
    vm = _von_mises(stress)

    disp = u.reshape(len(points), dim, n_cases)
    probes = []
    names = [c.name for c in problem.load_cases]
    for i, d in enumerate(problem.deflections):
        nodes, _ = _node_set(
            points, d.region, tol_of(d.region), size, f"deflection[{i}] ({d.name})"
        )
        direction = _unit(d.direction, dim)
        cases = range(n_cases) if d.load_case is None else [names.index(d.load_case)]
        probes.append(
            {
                "name": d.name,
                "limit_mm": d.limit,
                "cases": {c: float(disp[nodes, :, c].mean(axis=0) @ direction) for c in cases},
            }
        )
    return Solution(
        points, scalar.element_dofs.T.copy(), disp, vm, stress, probes, mappings, len(free)
    )


def _elasticity(lam: float, mu: float):
    """Isotropic linear elasticity, σ(u):ε(v) = 2μ ε(u):ε(v) + λ tr ε(u) tr ε(v)."""
    from skfem import BilinearForm
    from skfem.helpers import ddot, sym_grad, trace

    @BilinearForm
    def form(u, v, w):
        eu, ev = sym_grad(u), sym_grad(v)
        return 2.0 * mu * ddot(eu, ev) + lam * trace(eu) * trace(ev)

    return form


# stress components kept: 2D σx, σy, τxy; 3D σx, σy, σz, τyz, τxz, τxy
COMPONENTS = {2: ((0, 0), (1, 1), (0, 1)), 3: ((0, 0), (1, 1), (2, 2), (1, 2), (0, 2), (0, 1))}


def _von_mises(stress: np.ndarray) -> np.ndarray:
    """von Mises stress of nodal stresses (n, 3 or 6, n_cases)."""
    if stress.shape[1] == 3:
        sx, sy, txy = stress[:, 0], stress[:, 1], stress[:, 2]
        return np.sqrt(np.maximum(sx**2 - sx * sy + sy**2 + 3 * txy**2, 0.0))
    sx, sy, sz, tyz, txz, txy = (stress[:, k] for k in range(6))
    return np.sqrt(
        np.maximum(
            0.5 * ((sx - sy) ** 2 + (sy - sz) ** 2 + (sz - sx) ** 2)
            + 3 * (tyz**2 + txz**2 + txy**2),
            0.0,
        )
    )


def _nodal_stress(m, elem, p2, u, lam, mu, fixed, n_nodes) -> np.ndarray:
    """Stresses (n_nodes, 3 or 6, n_cases) at the nodes: each element's stress
    (linear in a quadratic element) evaluated at its nodes, averaged over the
    elements around a node. Elements whose every dof is fixed (inside a support
    region held whole, such as a bolt) carry no stress and stay out of the average,
    so the stress beside them is not diluted."""
    from skfem import Basis
    from skfem.helpers import sym_grad

    ref = p2().doflocs.T  # the reference nodes, in element-dof order
    at_nodes = Basis(m, elem, quadrature=(ref, np.ones(ref.shape[1])))
    dofs = at_nodes.with_element(p2()).element_dofs  # (nodes per element, n_elements)
    held = np.zeros(u.shape[0], dtype=bool)
    held[fixed] = True
    active = ~held[at_nodes.element_dofs].all(axis=0)
    count = np.bincount(dofs[:, active].ravel(), minlength=n_nodes).astype(float)
    dim = m.p.shape[0]
    pairs = COMPONENTS[dim]
    out = np.zeros((n_nodes, len(pairs), u.shape[1]))
    for c in range(u.shape[1]):
        eps = sym_grad(at_nodes.interpolate(u[:, c]))  # (dim, dim, n_elements, nodes)
        tr = sum(eps[k, k] for k in range(dim))
        comps = [2 * mu * eps[i, j] + (lam * tr if i == j else 0.0) for i, j in pairs]
        for k, comp in enumerate(comps):
            total = np.bincount(
                dofs[:, active].ravel(), weights=comp[active].T.ravel(), minlength=n_nodes
            )
            out[:, k, c] = total / np.maximum(count, 1.0)
    return out


def _unit(direction, dim: int) -> np.ndarray:
    if isinstance(direction, str):
        vec = np.zeros(dim)
        vec["xyz".index(direction.lstrip("+-"))] = -1.0 if direction.startswith("-") else 1.0
        return vec
    vec = np.asarray(direction[:dim], dtype=float)
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
