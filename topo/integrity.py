"""Whether a printed design holds together: load paths and enclosed cavities.

Both work on the 0/1 element field of the printed part. A load path needs face
connectivity (4 neighbours in 2D, 6 in 3D): elements that meet only at an edge or
a corner are not counted as joined, since the finite-element model would pass
load through that single node or edge while the printed part has no section
there. A piece counts as loose only when it does not touch the supported part at
all, not even at a corner (as the printed part's debris rule, printed.py).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from .printability import unreachable


@dataclass
class LoadPath:
    connected: bool  # every load region joined to a support through printed elements
    cut_off: list[str]  # names of the load regions that reach no support
    pieces: int  # face-connected pieces of the printed part
    loose_pieces: int  # pieces that touch no support (they fall off in service)
    loose_volume_mm3: float
    # load regions with loaded nodes that no printed element has as a corner: that
    # share of the load acts on the void and is held only by its E_min
    unattached: list[str] = field(default_factory=list)

    @property
    def mechanism(self) -> bool:
        """Some load is not carried by the printed part into a support."""
        return bool(self.cut_off or self.unattached)


def _elements_at_nodes(grid, nodes: np.ndarray) -> np.ndarray:
    """Boolean mask of the elements that have any of `nodes` as a corner: node
    (i, j[, k]) is a corner of the elements (i − 1 or i, j − 1 or j, …) that exist,
    so the cost is that of the node set, not of the grid."""
    idx = np.unravel_index(np.asarray(nodes, dtype=np.int64), grid.node_shape)
    mask = np.zeros(grid.n_elements, dtype=bool)
    for corner in grid.corners:
        cells = [i - c for i, c in zip(idx, corner)]
        ok = np.all([(c >= 0) & (c < n) for c, n in zip(cells, grid.shape)], axis=0)
        mask[np.ravel_multi_index(tuple(c[ok] for c in cells), grid.shape)] = True
    return mask


def load_path(
    printed: np.ndarray,
    grid,
    supports: list[np.ndarray],
    loads: list[tuple[str, np.ndarray]],
    element_volume: float,
) -> LoadPath:
    """printed: 0/1 field (grid shape); supports: node sets of the supports; loads:
    (name, node set) of every load region."""
    solid = np.asarray(printed) > 0.5

    def pieces(structure):
        labels, n = ndimage.label(solid, structure=structure)
        flat = labels.ravel()

        def reached(nodes: np.ndarray) -> set[int]:
            return set(np.unique(flat[_elements_at_nodes(grid, nodes)])) - {0}

        held = set().union(*(reached(s) for s in supports)) if supports else set()
        return flat, n, reached, held

    _, _, reached, held = pieces(None)  # face connectivity
    cut = [name for name, nodes in loads if not (reached(nodes) & held)]
    flat, n, _, held = pieces(ndimage.generate_binary_structure(solid.ndim, solid.ndim))
    loose = [k for k in range(1, n + 1) if k not in held]
    sizes = ndimage.sum_labels(np.ones_like(flat), flat, loose) if loose else np.zeros(0)
    on_part = _nodes_on_elements(solid, grid)
    unattached = [name for name, nodes in loads if name not in cut and not on_part[nodes].all()]
    return LoadPath(
        not cut and not loose and not unattached,
        cut,
        int(n),
        len(loose),
        float(np.sum(sizes) * element_volume),
        unattached,
    )


def _nodes_on_elements(solid: np.ndarray, grid) -> np.ndarray:
    """Flat node mask: the nodes that are a corner of some element of `solid`."""
    out = np.zeros(grid.node_shape, dtype=bool)
    for corner in grid.corners:
        out[tuple(slice(c, c + n) for c, n in zip(corner, grid.shape))] |= solid
    return out.ravel()


@dataclass
class Cavity:
    volume_mm3: float
    centre_mm: list[float]
    box_min_mm: list[float]
    box_max_mm: list[float]


def enclosed_cavities(printed: np.ndarray, h: float, element_volume: float) -> list[Cavity]:
    """Void pockets that do not reach the domain boundary: powder trapped in them
    cannot be removed (flood fill of the empty elements from the outside). A 2D
    design is extruded, so its holes go through the thickness and none is enclosed."""
    void = np.asarray(printed) <= 0.5
    if void.ndim == 2:
        return []
    labels, n = ndimage.label(void)
    border = np.zeros_like(void)
    for axis in range(void.ndim):
        index = [slice(None)] * void.ndim
        for end in (0, -1):
            index[axis] = end
            border[tuple(index)] = True
    open_labels = set(np.unique(labels[border])) - {0}
    out = []
    for k, where in enumerate(ndimage.find_objects(labels), start=1):
        if k in open_labels or where is None:
            continue
        # within the cavity's bounding box only: the cost is the cavity's, not the grid's
        cells = np.argwhere(labels[where] == k) + [sl.start for sl in where]
        out.append(
            Cavity(
                float(len(cells) * element_volume),
                [float(v) for v in (cells.mean(axis=0) + 0.5) * h],
                [float(s.start * h) for s in where],
                [float(s.stop * h) for s in where],
            )
        )
    return out


def unreachable_regions(model) -> list[str]:
    """Load and support regions that no self-supporting design can reach from the
    build plate (void regions block every path to them within the overhang rule).
    Empty without a build direction or with the overhang filter off (then supports
    can be added)."""
    build = model.problem.build
    if build is None or not build.overhang_filter:
        return []
    grid = model.grid

    def touching(nodes):
        return _elements_at_nodes(grid, nodes) & ~model.void

    regions = {
        f"support {s.name}": touching(n)
        for s, n in zip(model.problem.supports, model.support_nodes)
    }
    regions |= {f"load {name}": touching(n) for name, n in model.load_nodes}
    return unreachable(
        model.void.reshape(grid.shape), build.direction, regions, build.overhang_angle
    )
