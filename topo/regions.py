"""Regions of a problem → node sets (supports, loads) or element sets (passive).

Nodes are selected by position with a tolerance of half an element, so a face or a
box edge placed on grid lines picks the nodes on it; elements are selected by their
centre, without tolerance. A point selects the nearest node (or the element that
contains it).
"""

from __future__ import annotations

import numpy as np

from .grid import Grid
from .problem import Box, Cylinder, Face, Mesh, Point, Region, Sphere
from .surfaces import inside, load_surface

AXIS_INDEX = {"x": 0, "y": 1, "z": 2}


def _inside(region: Region, pts: np.ndarray, tol: float, grid: Grid) -> np.ndarray:
    dim = grid.dim
    if isinstance(region, Box):
        lo, hi = np.array(region.min), np.array(region.max)
        return np.all((pts >= lo - tol) & (pts <= hi + tol), axis=1)
    if isinstance(region, Sphere):
        return np.linalg.norm(pts - np.array(region.center), axis=1) <= region.radius + tol
    if isinstance(region, Cylinder):
        rel = pts - np.array(region.center)
        if dim == 2:  # a disc through the thickness
            return np.linalg.norm(rel, axis=1) <= region.radius + tol
        a = AXIS_INDEX[region.axis]
        radial = np.linalg.norm(np.delete(rel, a, axis=1), axis=1)
        return (radial <= region.radius + tol) & (np.abs(rel[:, a]) <= region.length / 2 + tol)
    if isinstance(region, Face):
        a = AXIS_INDEX[region.face[0]]
        end = 0.0 if region.face.endswith("min") else grid.size[a]
        return np.abs(pts[:, a] - end) <= tol
    if isinstance(region, Mesh):  # nodes (a tolerance given): inside or on the surface
        on = tol > 1e-6 * getattr(grid, "h", 1.0)  # element centres: strictly inside
        return inside(pts, *load_surface(region.path), on=on)
    raise TypeError(f"not a region: {region!r}")


def select_nodes(region: Region, grid: Grid) -> np.ndarray:
    """Sorted node numbers selected by `region`."""
    if isinstance(region, Point):
        return np.array([_nearest(region.point, grid.node_shape, 0.0, grid.h)])
    return _select(region, grid, grid.node_shape, 0.0, 0.5 * grid.h * (1 + 1e-9))


def select_elements(region: Region, grid: Grid) -> np.ndarray:
    """Sorted element numbers whose centre lies in `region` (faces: the boundary layer)."""
    if isinstance(region, Point):
        return np.array([_nearest(region.point, grid.shape, 0.5, grid.h)])
    # A face selects the layer of elements touching it: centres lie h/2 inside.
    tol = 0.5 * grid.h * (1 + 1e-9) if isinstance(region, Face) else 1e-9 * grid.h
    return _select(region, grid, grid.shape, 0.5, tol)


def _positions(lo: np.ndarray, hi: np.ndarray, offset: float, h: float) -> np.ndarray:
    """(n, dim) positions (index + offset)·h of the points of the index box lo..hi−1,
    in C order; the same floats as Grid.node_coords / element_centers."""
    axes = [(np.arange(a, b) + offset) * h for a, b in zip(lo, hi)]
    mesh = np.meshgrid(*axes, indexing="ij")
    return np.stack([m.ravel() for m in mesh], axis=1)


def _select(region: Region, grid: Grid, shape, offset: float, tol: float) -> np.ndarray:
    """Sorted numbers of the points (nodes: offset 0, element centres: 0.5) of the
    grid `shape` inside `region`; only the points in the region's bounding box are
    tested, so a small region on a fine grid costs little."""
    shape = np.array(shape)
    box = _bounds(region, grid)
    lo, hi = np.zeros(len(shape), dtype=int), shape.copy()
    if box is not None:  # one point of slack each side: the exact test decides
        low, high = (np.asarray(b, dtype=float) for b in box)
        lo = np.clip(np.floor((low - tol) / grid.h - offset).astype(int) - 1, 0, shape)
        hi = np.clip(np.ceil((high + tol) / grid.h - offset).astype(int) + 2, 0, shape)
    if np.any(hi <= lo):
        return np.zeros(0, dtype=np.int64)
    local = np.flatnonzero(_inside(region, _positions(lo, hi, offset, grid.h), tol, grid))
    idx = np.unravel_index(local, tuple(hi - lo))
    return np.ravel_multi_index(tuple(i + a for i, a in zip(idx, lo)), tuple(shape))


def _bounds(region: Region, grid: Grid) -> tuple | None:
    """(lower, upper) corner in mm of a box holding `region`, or None (the domain)."""
    dim = grid.dim
    if isinstance(region, Box):
        return region.min, region.max
    if isinstance(region, Sphere) or (isinstance(region, Cylinder) and dim == 2):
        c = np.array(region.center, dtype=float)[:dim]
        return c - region.radius, c + region.radius
    if isinstance(region, Cylinder):
        c = np.array(region.center, dtype=float)
        reach = np.full(dim, region.radius)
        reach[AXIS_INDEX[region.axis]] = region.length / 2
        return c - reach, c + reach
    if isinstance(region, Face):
        a = AXIS_INDEX[region.face[0]]
        low, high = np.zeros(dim), np.array(grid.size, dtype=float)
        end = 0.0 if region.face.endswith("min") else grid.size[a]
        low[a] = high[a] = end
        return low, high
    return None  # a mesh: every point is tested


def _nearest(point, shape, offset: float, h: float) -> int:
    """Number of the grid point (index + offset)·h nearest `point`; on a tie the
    lowest number, as an argmin over all points gives."""
    p = np.asarray(point, dtype=float)
    lo = np.clip(np.floor(p / h - offset).astype(int) - 1, 0, np.array(shape) - 1)
    hi = np.minimum(lo + 4, np.array(shape))
    pts = _positions(lo, hi, offset, h)
    k = int(np.argmin(np.linalg.norm(pts - p, axis=1)))
    idx = np.unravel_index(k, tuple(hi - lo))
    return int(np.ravel_multi_index(tuple(i + a for i, a in zip(idx, lo)), tuple(shape)))


def select_mask(region: Region, grid: Grid) -> np.ndarray:
    """Boolean mask over the elements: centre inside `region`."""
    mask = np.zeros(grid.n_elements, dtype=bool)
    mask[select_elements(region, grid)] = True
    return mask


def outside_domain(region: Region, grid: Grid) -> bool:
    """True when the region lies wholly outside the domain box."""
    size = np.array(grid.size)
    tol = 0.5 * grid.h
    if isinstance(region, Box):
        return bool(
            np.any(np.array(region.max) < -tol) or np.any(np.array(region.min) > size + tol)
        )
    if isinstance(region, Point):
        p = np.array(region.point)
        return bool(np.any(p < -tol) or np.any(p > size + tol))
    if isinstance(region, (Sphere, Cylinder)):
        c = np.array(region.center)
        reach = region.radius + (
            0
            if isinstance(region, Sphere) or grid.dim == 2
            else max(region.radius, region.length / 2)
        )
        return bool(np.any(c + reach < -tol) or np.any(c - reach > size + tol))
    if isinstance(region, Mesh):
        vertices, _ = load_surface(region.path)
        lo, hi = vertices.min(axis=0), vertices.max(axis=0)
        return bool(np.any(hi < -tol) or np.any(lo > size + tol))
    return False


# a mesh this many times the domain's diagonal is taken for one in other units
UNITS_FACTOR = 10.0


def mesh_fault(region: Region, grid: Grid) -> str | None:
    """Why a mesh region looks wrong for the domain (units), or None."""
    if not isinstance(region, Mesh):
        return None
    vertices, _ = load_surface(region.path)
    extent = np.ptp(vertices, axis=0)
    ratio = float(np.linalg.norm(extent) / np.linalg.norm(grid.size))
    if ratio > UNITS_FACTOR:
        return (
            f"the mesh's bounding box ({' × '.join(f'{e:g}' for e in extent)}) is {ratio:.0f} "
            f"times the domain's diagonal ({' × '.join(f'{s:g}' for s in grid.size)} mm): "
            "is the file in other units? Lengths are mm"
        )
    return None
