"""3D geometry for the body-fitted analysis: the printed design's smooth surface.

The 0/1 element field is upsampled, blurred with a Gaussian of `BLUR_3D` elements and
contoured at 0.5 by marching cubes (Lewiner et al. 2003, scikit-image). Smoothing
the field rather than the surface keeps the surface a level set of one function,
which cannot intersect itself; Taubin smoothing of the marching-cubes surface made
gmsh fail on self-intersections. gmsh then splits the surface into patches it can
parametrise (classifySurfaces with reparametrisation, as in gmsh's tutorial 13),
remeshes them and fills the volume.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from .outline import GeometryError

UPSAMPLE_3D = 2  # sub-cells per element edge (memory grows with its cube)
# Gaussian σ in elements. The blur thins members an element or two across: the
# marching-cubes volume of the 3D demo came out 8.9 % under the voxels' at 0.6
# (the 2D default), 5.1 % at 0.45, 3.1 % at 0.35 (rougher surface)
BLUR_3D = 0.45
FEATURE_ANGLE = 40.0  # degrees: sharper edges between facets are kept as curves


@dataclass
class Surface:
    vertices: np.ndarray  # (n, 3) mm
    faces: np.ndarray  # (m, 3)
    embed: list = field(default_factory=list)  # no embedded regions in 3D

    def embedded(self) -> list:
        return []

    def build(self, gmsh) -> None:
        gmsh.model.addDiscreteEntity(2, 1)
        gmsh.model.mesh.addNodes(2, 1, np.arange(1, len(self.vertices) + 1), self.vertices.ravel())
        gmsh.model.mesh.addElementsByType(1, 2, [], (self.faces + 1).ravel())
        gmsh.model.mesh.classifySurfaces(np.radians(FEATURE_ANGLE), True, True, np.pi)
        gmsh.model.mesh.createGeometry()
        surfaces = [tag for _, tag in gmsh.model.getEntities(2)]
        loop = gmsh.model.geo.addSurfaceLoop(surfaces)
        gmsh.model.geo.addVolume([loop])
        gmsh.model.geo.synchronize()


def printed_surface(printed: np.ndarray, h: float) -> Surface:
    """The smooth, closed surface of a 0/1 element field (nx, ny, nz), elements h."""
    from skimage import measure

    solid = np.asarray(printed) > 0.5
    if not solid.any():
        raise GeometryError("the printed design is empty: no element at density >= 0.5")
    pad = 2
    fine = np.pad(solid, pad).astype(np.float32)
    for axis in range(3):
        fine = np.repeat(fine, UPSAMPLE_3D, axis=axis)
    fine = ndimage.gaussian_filter(fine, BLUR_3D * UPSAMPLE_3D, mode="constant")
    verts, faces, _, _ = measure.marching_cubes(fine, 0.5)
    verts = ((verts + 0.5) / UPSAMPLE_3D - pad) * h
    n = len(verts)
    edges = np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]]])
    graph = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(n, n))
    count, labels = connected_components(graph, directed=False)
    sizes = np.bincount(labels[faces[:, 0]], minlength=count)
    pieces = np.flatnonzero(sizes >= 0.01 * sizes.max())
    if len(pieces) > 1:
        raise GeometryError(
            f"the printed design's surface is in {len(pieces)} separate pieces (or holds an "
            "enclosed cavity); the verification needs one connected part without cavities"
        )
    keep = labels[faces[:, 0]] == pieces[0]
    faces = faces[keep]
    used = np.unique(faces)
    renumber = np.full(n, -1)
    renumber[used] = np.arange(len(used))
    return Surface(verts[used], renumber[faces])
