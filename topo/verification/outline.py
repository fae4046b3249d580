"""2D geometry for the body-fitted analysis, as gmsh entities.

Two sources. The printed design (a 0/1 element field) is turned into a smooth
outline: the field is upsampled, blurred with a Gaussian of `BLUR` elements and
contoured at 0.5 by marching squares (scikit-image). A step blurred by a
symmetric kernel crosses 0.5 exactly at the step, so straight edges (the domain
faces included, as the field is padded with void) stay where they are; corners
are rounded over about one element. Each contour is drawn as a chain of splines.
The full domain less its void regions (`topo analyze --verify`) is built exactly
with OpenCASCADE booleans: the rectangle minus discs and boxes.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage
from scipy.spatial import cKDTree

from ..problem import Box, Cylinder, Sphere
from .sizing import region_distance

UPSAMPLE = 4  # sub-cells per element edge before blurring
BLUR = 0.6  # Gaussian σ in elements: a one-element strut (peak 0.68) survives
SPLINE_POINTS = 40  # contour points per spline of a chain


class GeometryError(ValueError):
    """The design cannot be turned into one meshable piece (a fault of the input)."""


@dataclass
class Outline:
    """Closed loops (k×2 arrays, mm): one outer boundary and its holes."""

    outer: np.ndarray
    holes: list[np.ndarray]
    h: float  # grid element size, mm
    embed: list = field(default_factory=list)  # regions whose outline the mesh follows

    def build(self, gmsh) -> None:
        """Create the plane surface in the current gmsh model (built-in kernel)."""
        geo = gmsh.model.geo
        loops = [_loop(geo, self.outer)] + [_loop(geo, h) for h in self.holes]
        surface = geo.addPlaneSurface(loops)
        curves = [_region_curves(geo, r) for r in self.embedded()]
        geo.synchronize()
        _embed(gmsh, curves, surface)

    def fits(self, pts: np.ndarray) -> bool:
        """All points inside the part and at least h/4 from its outline."""
        loops = [self.outer] + self.holes
        if not all(_contains(self.outer, p) for p in pts):
            return False
        if any(_contains(hole, p) for hole in self.holes for p in pts):
            return False
        edge = np.concatenate(loops)
        return bool(cKDTree(edge).query(pts)[0].min() > 0.25 * self.h)

    def embedded(self) -> list:
        return _embeddable(self.embed, self.fits, self.h)


def _loop(geo, pts: np.ndarray) -> int:
    pts = pts[:-1] if np.allclose(pts[0], pts[-1]) else pts
    tags = [geo.addPoint(x, y, 0.0) for x, y in pts]
    n = len(tags)
    step = max(2, min(SPLINE_POINTS, n // 3))
    starts = list(range(0, n, step))
    curves = []
    for a, b in zip(starts, starts[1:] + [n]):
        chain = [tags[i % n] for i in range(a, b + 1)]
        curves.append(geo.addSpline(chain))
    return geo.addCurveLoop(curves)


def _area(loop: np.ndarray) -> float:
    x, y = loop[:, 0], loop[:, 1]
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))


def _contains(loop: np.ndarray, pt: np.ndarray) -> bool:
    """Even-odd point-in-polygon test."""
    x, y = loop[:, 0], loop[:, 1]
    x2, y2 = np.roll(x, -1), np.roll(y, -1)
    crosses = ((y > pt[1]) != (y2 > pt[1])) & (
        pt[0] < (x2 - x) * (pt[1] - y) / np.where(y2 == y, 1e-300, y2 - y) + x
    )
    return bool(crosses.sum() % 2)


def printed_outline(printed: np.ndarray, h: float) -> Outline:
    """The smooth outline of a 0/1 element field (nx, ny) with elements of size h."""
    from skimage import measure

    solid = np.asarray(printed) > 0.5
    if not solid.any():
        raise GeometryError("the printed design is empty: no element at density >= 0.5")
    pad = 2
    fine = np.kron(np.pad(solid, pad).astype(float), np.ones((UPSAMPLE, UPSAMPLE)))
    field = ndimage.gaussian_filter(fine, BLUR * UPSAMPLE, mode="constant")
    loops = []
    for c in measure.find_contours(field, 0.5):
        # sub-cell centre i lies at ((i + 0.5) / UPSAMPLE - pad) elements
        xy = ((c + 0.5) / UPSAMPLE - pad) * h
        if len(xy) >= 4 and np.allclose(xy[0], xy[-1]):
            loops.append(xy)
    return _assemble(loops, h)


def _assemble(loops: list[np.ndarray], h: float) -> Outline:
    areas = np.array([_area(lp) for lp in loops])
    if not len(loops):
        raise GeometryError("the printed design has no closed outline")
    order = np.argsort(-np.abs(areas))
    loops, areas = [loops[i] for i in order], areas[order]
    big = np.abs(areas[0])
    outer_sign = np.sign(areas[0])
    outers = [i for i in range(len(loops)) if np.sign(areas[i]) == outer_sign]
    pieces = [i for i in outers if abs(areas[i]) >= 0.01 * big]
    if len(pieces) > 1:
        raise GeometryError(
            f"the printed design is in {len(pieces)} separate pieces (areas "
            + ", ".join(f"{abs(areas[i]):.0f}" for i in pieces)
            + " mm²); the verification needs one connected part"
        )
    outer = loops[0]
    holes = [
        loops[i]
        for i in range(1, len(loops))
        if np.sign(areas[i]) != outer_sign
        and abs(areas[i]) >= 0.05 * h * h
        and _contains(outer, loops[i][0])
    ]
    return Outline(outer, holes, h)


def region_outline(region, n: int = 64) -> np.ndarray | None:
    """Points around a disc or box region (2D), None for other kinds."""
    if isinstance(region, (Cylinder, Sphere)):
        a = np.linspace(0, 2 * np.pi, n, endpoint=False)
        return np.array(region.center[:2]) + region.radius * np.column_stack([np.cos(a), np.sin(a)])
    if isinstance(region, Box):
        lo, hi = np.array(region.min[:2]), np.array(region.max[:2])
        if np.any(hi - lo <= 0):
            return None
        s = np.linspace(0, 1, n // 4, endpoint=False)[:, None]
        c = [lo, [hi[0], lo[1]], hi, [lo[0], hi[1]]]
        sides = [np.array(c[i]) + s * (np.array(c[(i + 1) % 4]) - c[i]) for i in range(4)]
        return np.concatenate(sides)
    return None


def _embeddable(regions: list, fits, h: float) -> list:
    """Distinct disc and box regions that lie inside the part, clear of its outline
    and of each other (embedded curves must not cross)."""
    out, seen = [], []
    for r in regions:
        pts = region_outline(r)
        if pts is None or repr(r) in [repr(o) for o in out] or not fits(pts):
            continue
        if any(cKDTree(p).query(pts)[0].min() <= 0.25 * h for p in seen):
            continue
        out.append(r)
        seen.append(pts)
    return out


def _region_curves(kernel, region) -> list[int]:
    """Curves of a disc (four arcs) or a box (four lines) in a gmsh kernel."""
    if isinstance(region, Box):
        lo, hi = region.min[:2], region.max[:2]
        corners = [(lo[0], lo[1]), (hi[0], lo[1]), (hi[0], hi[1]), (lo[0], hi[1])]
        pts = [kernel.addPoint(x, y, 0.0) for x, y in corners]
        return [kernel.addLine(pts[i], pts[(i + 1) % 4]) for i in range(4)]
    (cx, cy), r = region.center[:2], region.radius
    centre = kernel.addPoint(cx, cy, 0.0)
    quarters = ((1, 0), (0, 1), (-1, 0), (0, -1))
    pts = [kernel.addPoint(cx + r * dx, cy + r * dy, 0.0) for dx, dy in quarters]
    return [kernel.addCircleArc(pts[i], centre, pts[(i + 1) % 4]) for i in range(4)]


def _embed(gmsh, curves: list[list[int]], surface: int) -> None:
    tags = [t for c in curves for t in c]
    if tags:
        gmsh.model.mesh.embed(1, tags, 2, surface)


@dataclass
class DomainLessVoids:
    """The problem's domain rectangle minus its void regions (2D), exact."""

    size: tuple[float, float]
    voids: list
    h: float
    embed: list = field(default_factory=list)

    def fits(self, pts: np.ndarray) -> bool:
        margin = 0.25 * self.h
        inside = np.all((pts >= margin) & (pts <= np.array(self.size) - margin))
        clear = all(region_distance(v, pts, self.size).min() > margin for v in self.voids)
        return bool(inside and clear)

    def embedded(self) -> list:
        return _embeddable(self.embed, self.fits, self.h)

    def build(self, gmsh) -> None:
        occ = gmsh.model.occ
        body = occ.addRectangle(0.0, 0.0, 0.0, *self.size)
        tools = []
        for r in self.voids:
            if isinstance(r, (Cylinder, Sphere)):
                tools.append(occ.addDisk(r.center[0], r.center[1], 0.0, r.radius, r.radius))
            elif isinstance(r, Box):
                lo, hi = np.array(r.min[:2]), np.array(r.max[:2])
                tools.append(occ.addRectangle(lo[0], lo[1], 0.0, *(hi - lo)))
            else:
                raise GeometryError(
                    f"a void region of kind {type(r).__name__.lower()} has no exact shape"
                )
        surface = body
        if tools:
            out, _ = occ.cut([(2, body)], [(2, t) for t in tools])
            if len(out) != 1:
                occ.synchronize()
                raise GeometryError(
                    f"the domain less its void regions is in {len(out)} separate pieces"
                )
            surface = out[0][1]
        curves = [_region_curves(occ, r) for r in self.embedded()]
        occ.synchronize()
        _embed(gmsh, curves, surface)


@dataclass
class BoxLessVoids:
    """The problem's domain box minus its void regions (3D), exact (OpenCASCADE)."""

    size: tuple[float, float, float]
    voids: list
    h: float
    embed: list = field(default_factory=list)  # not used in 3D

    def embedded(self) -> list:
        return []

    def build(self, gmsh) -> None:
        occ = gmsh.model.occ
        body = occ.addBox(0.0, 0.0, 0.0, *self.size)
        tools = [_solid(occ, r) for r in self.voids]
        if tools:
            out, _ = occ.cut([(3, body)], [(3, t) for t in tools])
            if len(out) != 1:
                occ.synchronize()
                raise GeometryError(
                    f"the domain less its void regions is in {len(out)} separate pieces"
                )
        occ.synchronize()


def _solid(occ, region) -> int:
    if isinstance(region, Sphere):
        return occ.addSphere(*region.center, region.radius)
    if isinstance(region, Cylinder):
        a = "xyz".index(region.axis)
        start = np.array(region.center, dtype=float)
        start[a] -= region.length / 2
        span = np.zeros(3)
        span[a] = region.length
        return occ.addCylinder(*start, *span, region.radius)
    if isinstance(region, Box):
        lo, hi = np.array(region.min), np.array(region.max)
        return occ.addBox(*lo, *(hi - lo))
    raise GeometryError(f"a void region of kind {type(region).__name__.lower()} has no exact shape")


def domain_less_voids(problem):
    """The domain less its void regions, exact: a 2D or a 3D geometry."""
    if problem.dim == 3:
        return BoxLessVoids(
            tuple(problem.domain.size),
            [p.region for p in problem.passives if p.kind == "void"],
            problem.domain.element_size,
        )
    return DomainLessVoids(
        tuple(problem.domain.size),
        [p.region for p in problem.passives if p.kind == "void"],
        problem.domain.element_size,
    )
