"""Isosurface mesh of a density field: the solid the engineer takes to CAD.

The surface is extracted by marching cubes (Lorensen & Cline 1987; scikit-image's
Lewiner variant) from the element-centre densities padded with void, so it always
closes. In 3D the samples sit at element centres and the iso-level 0.5 between a
solid and a void element falls on their shared face, so a box of solid elements
gives exactly its box. A 2D design is extruded through its thickness.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from skimage import measure


@dataclass
class TriMesh:
    vertices: np.ndarray  # (nv, 3) mm
    faces: np.ndarray  # (nf, 3) vertex indices, counter-clockwise seen from outside

    def face_normals(self) -> tuple[np.ndarray, np.ndarray]:
        """Unit outward normals and areas of the faces."""
        v = self.vertices[self.faces]
        cross = np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0])
        norm = np.linalg.norm(cross, axis=1)
        return cross / np.where(norm > 0, norm, 1.0)[:, None], 0.5 * norm

    @property
    def area(self) -> float:
        return float(self.face_normals()[1].sum())

    @property
    def volume(self) -> float:
        """Enclosed volume by the divergence theorem (signed tetrahedra)."""
        v = self.vertices[self.faces]
        return float(np.einsum("ij,ij->i", v[:, 0], np.cross(v[:, 1], v[:, 2])).sum() / 6.0)

    def edge_counts(self) -> np.ndarray:
        e = np.sort(self.faces[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2), axis=1)
        return np.unique(e, axis=0, return_counts=True)[1]

    @property
    def watertight(self) -> bool:
        """Every edge shared by exactly two faces, consistently oriented."""
        if len(self.faces) == 0:
            return False
        directed = self.faces[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2)
        unique_directed = len(np.unique(directed, axis=0)) == len(directed)
        return bool(np.all(self.edge_counts() == 2) and unique_directed)

    def pieces(self) -> np.ndarray:
        """Connected-component label of every face."""
        n = len(self.vertices)
        f = self.faces
        rows = np.concatenate([f[:, 0], f[:, 1], f[:, 2]])
        cols = np.concatenate([f[:, 1], f[:, 2], f[:, 0]])
        graph = sp.coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
        _, labels = connected_components(graph, directed=False)
        return labels[f[:, 0]]

    def subset(self, keep_faces: np.ndarray) -> TriMesh:
        faces = self.faces[keep_faces]
        used, inverse = np.unique(faces, return_inverse=True)
        return TriMesh(self.vertices[used], inverse.reshape(-1, 3))


def _empty() -> TriMesh:
    return TriMesh(np.zeros((0, 3)), np.zeros((0, 3), dtype=np.int64))


def _march(field: np.ndarray, iso: float, spacing: tuple[float, ...]) -> TriMesh:
    """Marching cubes with faces ordered counter-clockwise seen from outside and the
    first sample at the origin shifted back by half a spacing."""
    verts, faces, _, _ = measure.marching_cubes(field, iso, spacing=spacing, allow_degenerate=False)
    # scikit-image orders faces so that normals point up the gradient (into the
    # solid, which carries the high values): reverse them to face outwards.
    return TriMesh(verts - 0.5 * np.array(spacing), faces[:, ::-1].astype(np.int64))


def isosurface(
    density: np.ndarray, h: float, iso: float = 0.5, thickness: float | None = None, refine: int = 1
) -> TriMesh:
    """Closed surface ρ = iso of an element field (grid shape), coordinates in mm.

    `refine` repeats each element into refine^dim samples first. Marching cubes cuts
    every convex edge of a solid region by half a sample spacing; refining makes that
    chamfer smaller (a bar two elements square loses about 12 % of its section at
    refine = 1, 3 % at refine = 2) but turns 45° element staircases, which marching
    cubes on the element centres renders as flat 45° faces, into small steps whose
    undersides count as down-facing overhang. The default keeps refine = 1.
    """
    rho = np.asarray(density, dtype=float)
    if rho.max(initial=0.0) < iso:
        return _empty()
    for axis in range(rho.ndim):
        rho = np.repeat(rho, refine, axis=axis)
    s = h / refine
    if rho.ndim == 2:
        if thickness is None:
            raise ValueError("a 2D design needs its thickness to be extruded")
        return _extrude(rho, s, iso, thickness)
    return _march(np.pad(rho, 1, constant_values=0.0), iso, (s, s, s))


def _extrude(rho: np.ndarray, h: float, iso: float, thickness: float) -> TriMesh:
    """A 2D design as a solid of its thickness: the field repeated through z. The
    padding layers hold min(ρ, 2·iso − ρ) just under iso, which puts both caps
    exactly on z = 0 and z = thickness whatever the grey level."""
    layers = max(1, int(round(thickness / h)))
    dz = thickness / layers
    below = np.minimum(rho, 2 * iso - rho) - 1e-9
    field = np.concatenate(
        [below[..., None]] + [rho[..., None]] * layers + [below[..., None]], axis=2
    )
    field = np.pad(field, ((1, 1), (1, 1), (0, 0)), constant_values=min(0.0, field.min()))
    return _march(field, iso, (h, h, dz))


def remove_debris(mesh: TriMesh, min_fraction: float = 0.01) -> tuple[TriMesh, int]:
    """Drop closed pieces enclosing less than `min_fraction` of the largest piece's
    volume (floating debris). Returns the mesh and how many pieces were dropped."""
    if len(mesh.faces) == 0:
        return mesh, 0
    labels = mesh.pieces()
    v = mesh.vertices[mesh.faces]
    signed = np.einsum("ij,ij->i", v[:, 0], np.cross(v[:, 1], v[:, 2])) / 6.0
    volumes = np.bincount(labels, weights=signed)
    present = np.unique(labels)
    big = volumes[present].max()
    keep_labels = present[volumes[present] >= min_fraction * big]
    dropped = len(present) - len(keep_labels)
    return mesh.subset(np.isin(labels, keep_labels)), int(dropped)


def taubin_smooth(
    mesh: TriMesh,
    passes: int,
    lam: float = 0.5,
    mu: float = -0.53,
    pinned: np.ndarray | None = None,
) -> TriMesh:
    """Taubin λ|μ smoothing (Taubin 1995, SIGGRAPH "A signal processing approach to
    fair surface design"), uniform umbrella weights: each pass a shrinking step λ
    then an inflating step μ < −λ, which leaves the volume nearly unchanged.

    `pinned` (nv, 3) booleans hold a coordinate fixed, e.g. vertices on a plane of
    the domain stay on it so mounting faces remain flat.
    """
    if passes <= 0 or len(mesh.faces) == 0:
        return mesh
    n = len(mesh.vertices)
    f = mesh.faces
    rows = np.concatenate([f[:, 0], f[:, 1], f[:, 2], f[:, 1], f[:, 2], f[:, 0]])
    cols = np.concatenate([f[:, 1], f[:, 2], f[:, 0], f[:, 0], f[:, 1], f[:, 2]])
    adj = sp.coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n)).tocsr()
    adj.data[:] = 1.0
    degree = np.asarray(adj.sum(axis=1)).ravel()
    average = sp.diags(1.0 / np.maximum(degree, 1)) @ adj
    v = mesh.vertices.copy()
    keep = mesh.vertices
    for _ in range(passes):
        for factor in (lam, mu):
            v = v + factor * (average @ v - v)
            if pinned is not None:
                v = np.where(pinned, keep, v)
    return TriMesh(v, f.copy())


def boundary_pins(mesh: TriMesh, size: tuple[float, ...], tol: float = 1e-6) -> np.ndarray:
    """Coordinates of vertices lying on a plane of the domain box, to hold fixed."""
    v = mesh.vertices
    upper = np.array(list(size) + [np.inf] * (3 - len(size)))
    return (np.abs(v) < tol) | (np.abs(v - upper) < tol)


def downfacing_area(
    mesh: TriMesh, direction: str, plate: float, limit_deg: float = 45.0, tol: float = 1e-6
) -> float:
    """Area (mm²) of surface facing down more steeply than the overhang limit when
    grown along `direction`, not counting faces lying on the build plate."""
    normals, areas = mesh.face_normals()
    axis = "xyz".index(direction[1])
    up = 1.0 if direction[0] == "+" else -1.0
    down = -up * normals[:, axis]  # cosine between the normal and "down"
    on_plate = np.all(np.abs(mesh.vertices[mesh.faces][:, :, axis] - plate) < tol, axis=1)
    steep = down > np.cos(np.radians(limit_deg)) + 1e-9
    return float(areas[steep & ~on_plate].sum())
