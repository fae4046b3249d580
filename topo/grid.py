"""Structured grid of square (2D) or cubic (3D) elements.

Element (i, j[, k]) spans x ∈ [i·h, (i+1)·h] and so on. Elements and nodes are
numbered in C order of their index tuples, so `density.reshape(shape)` is indexed
[i, j, k]. Node n carries the degrees of freedom dim·n + c for component c.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

# Local node order of an element, as offsets from its lowest corner. Q4 runs
# counter-clockwise in x-y; H8 is the bottom face (z=0) then the top face.
Q4_CORNERS = np.array([(0, 0), (1, 0), (1, 1), (0, 1)])
H8_CORNERS = np.array(
    [(0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0), (0, 0, 1), (1, 0, 1), (1, 1, 1), (0, 1, 1)]
)


@dataclass(frozen=True)
class Grid:
    shape: tuple[int, ...]  # elements per axis
    h: float  # element size, mm

    @property
    def dim(self) -> int:
        return len(self.shape)

    @property
    def node_shape(self) -> tuple[int, ...]:
        return tuple(n + 1 for n in self.shape)

    @property
    def n_elements(self) -> int:
        return int(np.prod(self.shape))

    @property
    def n_nodes(self) -> int:
        return int(np.prod(self.node_shape))

    @property
    def n_dofs(self) -> int:
        return self.dim * self.n_nodes

    @cached_property
    def corners(self) -> np.ndarray:
        return Q4_CORNERS if self.dim == 2 else H8_CORNERS

    @cached_property
    def element_nodes(self) -> np.ndarray:
        """(n_elements, 4 or 8) node numbers of every element, local order above."""
        # node number of each element's lowest corner, by broadcasting the strides
        strides = np.cumprod((self.node_shape[1:] + (1,))[::-1])[::-1]
        base = np.zeros(self.shape, dtype=np.int64)
        for a, (n, s) in enumerate(zip(self.shape, strides)):
            base += (np.arange(n, dtype=np.int64) * s).reshape(
                [-1 if b == a else 1 for b in range(self.dim)]
            )
        return base.reshape(-1, 1) + self.corners @ strides

    @cached_property
    def element_dofs(self) -> np.ndarray:
        """(n_elements, 8 or 24) global dofs, node-major then component."""
        n = self.element_nodes
        d = self.dim
        return (d * n[:, :, None] + np.arange(d)).reshape(len(n), -1)

    @cached_property
    def node_coords(self) -> np.ndarray:
        """(n_nodes, dim) node positions in mm."""
        return self._positions(self.node_shape, 0.0)

    @cached_property
    def element_centers(self) -> np.ndarray:
        """(n_elements, dim) element centre positions in mm."""
        return self._positions(self.shape, 0.5)

    def _positions(self, shape: tuple[int, ...], offset: float) -> np.ndarray:
        """(index + offset)·h of every point of `shape`, C order, one column per axis."""
        out = np.empty((int(np.prod(shape)), self.dim))
        for a, n in enumerate(shape):
            column = out[:, a].reshape(shape)
            column[...] = ((np.arange(n) + offset) * self.h).reshape(
                [-1 if b == a else 1 for b in range(self.dim)]
            )
        return out

    @property
    def size(self) -> tuple[float, ...]:
        return tuple(n * self.h for n in self.shape)
