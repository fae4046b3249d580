"""Body-fitted quadratic triangles by gmsh (Geuzaine & Remacle 2009, IJNME 79:1309),
with the element size given point by point by a size function."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


class MeshingError(RuntimeError):
    """gmsh could not mesh the geometry."""


@dataclass
class TriMesh6:
    """Quadratic triangles: points (n, 2) mm, cells (m, 6) in gmsh/VTK order
    (corners, then the mid-edge nodes of edges 0-1, 1-2, 2-0)."""

    points: np.ndarray
    cells: np.ndarray


def mesh_2d(geometry, size: Callable[[float, float], float]) -> TriMesh6:
    """Mesh `geometry` (an object with build(gmsh)) with element sizes size(x, y)."""
    import gmsh

    gmsh.initialize(["-noenv"], readConfigFiles=False)
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.option.setNumber("General.NumThreads", 1)
        gmsh.model.add("verify")
        geometry.build(gmsh)
        gmsh.model.mesh.setSizeCallback(lambda dim, tag, x, y, z, lc: float(size(x, y)))
        for name in ("MeshSizeExtendFromBoundary", "MeshSizeFromPoints", "MeshSizeFromCurvature"):
            gmsh.option.setNumber(f"Mesh.{name}", 0)
        gmsh.option.setNumber("Mesh.Algorithm", 6)  # Frontal-Delaunay: well-shaped triangles
        gmsh.option.setNumber("Mesh.HighOrderOptimize", 0)
        gmsh.option.setNumber("Mesh.LcIntegrationPrecision", 1e-3)
        try:
            gmsh.model.mesh.generate(2)
            gmsh.model.mesh.setOrder(2)
        except Exception as exc:  # gmsh raises a bare Exception with its log line
            raise MeshingError(f"gmsh failed to mesh the outline: {exc}") from None
        tags, xyz, _ = gmsh.model.mesh.getNodes()
        _, nodes = gmsh.model.mesh.getElementsByType(9)  # 9: 6-node triangle
    finally:
        gmsh.finalize()
    if len(nodes) == 0:
        raise MeshingError("gmsh made no triangles")
    index = np.zeros(int(tags.max()) + 1, dtype=int)
    index[tags.astype(int)] = np.arange(len(tags))
    cells = index[nodes.astype(int)].reshape(-1, 6)
    used = np.unique(cells)
    renumber = np.full(len(tags), -1)
    renumber[used] = np.arange(len(used))
    return TriMesh6(xyz.reshape(-1, 3)[used, :2].copy(), renumber[cells])
