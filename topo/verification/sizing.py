"""Element sizes for the body-fitted meshes: a base size, finer at the load and
support regions, and (second pass) finer where the first solution's stress is high.

The field is tabulated once on a raster over the domain (vectorised), so that
gmsh's size callback is a table look-up."""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..problem import Box, Cylinder, Face, Mesh, Point, Sphere

REGION_FACTOR = 1 / 3  # size at load and support regions, relative to the base
REGION_BAND = 2.0  # … within this many base sizes of the region
# second pass: size factor by stress relative to the case's peak (highest first)
STRESS_STEPS = ((0.7, 0.25), (0.5, 0.5))
RASTER_POINTS = 2_000_000  # largest raster of the tabulated field


def region_distance(region, pts: np.ndarray, size) -> np.ndarray:
    """Distance (mm) of each point (2D or 3D, as the domain) to a region (0 inside)."""
    dim = len(size)
    pts = np.atleast_2d(pts)[:, :dim]
    if isinstance(region, Point):
        return np.linalg.norm(pts - np.array(region.point[:dim]), axis=1)
    if isinstance(region, Cylinder) and dim == 3:
        a = "xyz".index(region.axis)
        rel = pts - np.array(region.center)
        radial = np.maximum(np.linalg.norm(np.delete(rel, a, axis=1), axis=1) - region.radius, 0)
        along = np.maximum(np.abs(rel[:, a]) - region.length / 2, 0)
        return np.hypot(radial, along)
    if isinstance(region, (Cylinder, Sphere)):
        gap = np.linalg.norm(pts - np.array(region.center[:dim]), axis=1) - region.radius
        return np.maximum(gap, 0.0)
    if isinstance(region, Box):
        lo, hi = np.array(region.min[:dim]), np.array(region.max[:dim])
        return np.linalg.norm(np.maximum(np.maximum(lo - pts, pts - hi), 0.0), axis=1)
    if isinstance(region, Face):
        a = "xyz".index(region.face[0])
        end = 0.0 if region.face.endswith("min") else size[a]
        return np.abs(pts[:, a] - end)
    if isinstance(region, Mesh):
        # 0 inside or on the surface, else the distance to the nearest vertex (an
        # upper bound, which is enough to place refinement and name a nearest region)
        from ..surfaces import inside, load_surface

        vertices, faces = load_surface(region.path)
        out = np.zeros(len(pts))
        chunk = max(1, 1_000_000 // len(vertices))
        for i in range(0, len(pts), chunk):
            d = np.linalg.norm(pts[i : i + chunk, None, :] - vertices[None, :, :], axis=-1)
            out[i : i + chunk] = d.min(axis=1)
        out[inside(pts, vertices, faces, on=True)] = 0.0
        return out
    raise TypeError(f"not a region: {region!r}")


class SizeField:
    """size(x, y) = base × (region factor near loads and supports) × stress factor,
    times `scale`; callable as gmsh's size callback."""

    def __init__(self, problem, base: float):
        self.base = base
        self.size = tuple(problem.domain.size)
        self.regions = [s.region for s in problem.supports] + [
            f.region for c in problem.load_cases for f in c.forces
        ]
        self.scale = 1.0
        step = base * REGION_FACTOR * STRESS_STEPS[0][1] / 2
        step = max(step, (np.prod(self.size) / RASTER_POINTS) ** (1 / len(self.size)))
        self.step = step
        self.shape = tuple(int(np.ceil(s / step)) + 1 for s in self.size)
        axes = (np.arange(n) * step for n in self.shape)
        self.raster = np.column_stack([a.ravel() for a in np.meshgrid(*axes, indexing="ij")])
        near = np.zeros(len(self.raster), dtype=bool)
        for r in self.regions:
            near |= region_distance(r, self.raster, self.size) <= REGION_BAND * base
        self.table = np.where(near, base * REGION_FACTOR, base).reshape(self.shape)

    def refine_by_stress(self, points: np.ndarray, von_mises: np.ndarray) -> None:
        """Second pass: von_mises (n, n_cases) at `points` from the first solution."""
        peaks = np.maximum(von_mises.max(axis=0), 1e-300)
        ratio = (von_mises / peaks).max(axis=1)
        factor = np.ones(len(points))
        for level, f in reversed(STRESS_STEPS):
            factor[ratio >= level] = f
        _, nearest = cKDTree(points).query(self.raster)
        self.table = np.minimum(self.table, self.base * factor[nearest].reshape(self.shape))

    def scaled(self, scale: float) -> SizeField:
        other = SizeField.__new__(SizeField)
        other.__dict__.update(self.__dict__)
        other.scale = scale
        return other

    def __call__(self, *xyz: float) -> float:
        index = tuple(
            min(max(int(round(v / self.step)), 0), n - 1) for v, n in zip(xyz, self.shape)
        )
        return float(self.table[index]) * self.scale
