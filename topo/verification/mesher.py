"""Body-fitted quadratic triangles (2D) or tetrahedra (3D) by gmsh (Geuzaine &
Remacle 2009, IJNME 79:1309), with the element size given point by point by a size
function."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


class MeshingError(RuntimeError):
    """gmsh could not mesh the geometry."""


# gmsh element type, nodes per element, and the gmsh → VTK node order
GMSH_TYPES = {2: (9, 6, list(range(6))), 3: (11, 10, [0, 1, 2, 3, 4, 5, 6, 7, 9, 8])}


@dataclass
class QuadraticMesh:
    """Quadratic simplices in VTK order: triangles (m, 6) in 2D (corners, then the
    mid-edge nodes of edges 0-1, 1-2, 2-0), tetrahedra (m, 10) in 3D (corners, then
    edges 0-1, 1-2, 2-0, 0-3, 1-3, 2-3); points (n, dim) mm."""

    points: np.ndarray
    cells: np.ndarray


def make_mesh(geometry, size: Callable[..., float], dim: int = 2) -> QuadraticMesh:
    """Mesh `geometry` (an object with build(gmsh)) with element sizes size(x, y[, z])."""
    import gmsh

    kind, per, order = GMSH_TYPES[dim]

    gmsh.initialize(["-noenv"], readConfigFiles=False)
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.option.setNumber("General.NumThreads", 1)
        gmsh.model.add("verify")
        geometry.build(gmsh)
        if dim == 2:
            gmsh.model.mesh.setSizeCallback(lambda d, tag, x, y, z, lc: float(size(x, y)))
        else:
            gmsh.model.mesh.setSizeCallback(lambda d, tag, x, y, z, lc: float(size(x, y, z)))
            # mid-edge nodes on straight edges: the surface is faceted anyway, and
            # curving edges onto it gave elements with negative Jacobians
            gmsh.option.setNumber("Mesh.SecondOrderLinear", 1)
        for name in ("MeshSizeExtendFromBoundary", "MeshSizeFromPoints", "MeshSizeFromCurvature"):
            gmsh.option.setNumber(f"Mesh.{name}", 0)
        gmsh.option.setNumber("Mesh.Algorithm", 6)  # Frontal-Delaunay: well-shaped triangles
        gmsh.option.setNumber("Mesh.HighOrderOptimize", 0)
        gmsh.option.setNumber("Mesh.LcIntegrationPrecision", 1e-3)
        try:
            gmsh.model.mesh.generate(dim)
            gmsh.model.mesh.setOrder(2)
        except Exception as exc:  # gmsh raises a bare Exception with its log line
            raise MeshingError(f"gmsh failed to mesh the geometry: {exc}") from None
        tags, xyz, _ = gmsh.model.mesh.getNodes()
        _, nodes = gmsh.model.mesh.getElementsByType(kind)
    finally:
        gmsh.finalize()
    if len(nodes) == 0:
        raise MeshingError("gmsh made no elements")
    index = np.zeros(int(tags.max()) + 1, dtype=int)
    index[tags.astype(int)] = np.arange(len(tags))
    cells = index[nodes.astype(int)].reshape(-1, per)[:, order]
    used = np.unique(cells)
    renumber = np.full(len(tags), -1)
    renumber[used] = np.arange(len(used))
    return QuadraticMesh(xyz.reshape(-1, 3)[used, :dim].copy(), renumber[cells])
