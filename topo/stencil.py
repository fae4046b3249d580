"""Assembly of the full stiffness matrix on a structured grid by node stencils.

Every node couples only with the 3^dim nodes around it, so row (node n, component
i) of the matrix holds one 3×3 (2×2) block per neighbour offset o. The elements
that contribute to block (n, o) are those with n at some corner a and n + o at the
corner b = a + o; so with E_a(n) the modulus of the element that has n at corner a
(zero outside the grid), every row of the matrix is

    K[n, (i, o, j)] = Σ_a E_a(n) · k0[(a, i), (a + o, j)],

one dense product of an (nodes × corners) array with a constant (corners × row
entries) matrix, written straight in CSR order: no sorting, no scatter matrix, no
intermediate layout. Memory is O(nodes), about 3 kB per node in 3D, against tens of
bytes per element-matrix entry for a general sparse assembly (measured:
DEVELOPERS.md, "Node-stencil assembly"). Element matrices
that differ per element (the coarse levels of multigrid) go through
`from_elements`, which accumulates contiguous slices instead.

Both linear systems assemble here: multigrid-CG uses the full matrix, the direct
solver gathers the lower triangle of its free-dof block (FreeLowerTriangle).

Supports are imposed on the full dof space: rows and columns of fixed dofs are
zeroed and their diagonal set to 1 (with zero load there), which keeps the grid
structure that geometric multigrid relies on.
"""

from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp


class StencilAssembly:
    def __init__(self, grid, ke: np.ndarray | None, fixed: np.ndarray):
        self.grid, self.ke = grid, ke
        dim = self.dim = grid.dim
        nshape = np.array(grid.node_shape)
        self.offsets = list(itertools.product((-1, 0, 1), repeat=dim))  # lexicographic
        slot_of = {o: s for s, o in enumerate(self.offsets)}
        corners = grid.corners
        nc = len(corners)
        # per corner a: the slot of every corner b
        self.slots = [
            np.array([slot_of[tuple(corners[b] - corners[a])] for b in range(nc)])
            for a in range(nc)
        ]
        n_nodes, n_slots = grid.n_nodes, len(self.offsets)
        idx = np.indices(tuple(nshape)).reshape(dim, -1).T  # (n_nodes, dim)
        nbr_idx = idx[:, None, :] + np.array(self.offsets)[None, :, :]
        nbr = np.ravel_multi_index(
            tuple(np.clip(nbr_idx, 0, nshape - 1).transpose(2, 0, 1)), tuple(nshape)
        )
        # CSR layout: row (node, ca) lists every slot in order, then cb. Slots whose
        # neighbour lies outside the grid are kept as explicit zeros (on the clipped
        # neighbour's column; matrix-vector products and sums add them harmlessly),
        # so that the rows computed below are the CSR data as they stand.
        self.n = n = n_nodes * dim
        width = n_slots * dim
        index_type = np.int32 if n * width < 2**31 else np.int64  # what scipy would pick
        cols = dim * nbr[:, None, :, None] + np.arange(dim)[None, None, None, :]
        self.indices = (
            np.broadcast_to(cols, (n_nodes, dim, n_slots, dim)).reshape(-1).astype(index_type)
        )
        self.indptr = np.arange(0, n * width + 1, width, dtype=index_type)
        fixed_dofs = np.flatnonzero(fixed)
        # entries in rows or columns of fixed dofs are zeroed, their diagonal set to 1
        fixed_rows = (fixed_dofs[:, None] * width + np.arange(width)).ravel()
        self._drop = np.union1d(fixed_rows, np.flatnonzero(fixed[self.indices]))
        centre = self.offsets.index((0,) * dim)
        self._fixed_diag = fixed_dofs * width + centre * dim + fixed_dofs % dim
        self._blocks = None  # from_elements' accumulator, made on first use
        if ke is not None:
            # row entries (i, slot, j) of a node that sits at corner a of an element
            row = np.zeros((nc, dim, n_slots, dim))
            for a in range(nc):
                for b in range(nc):
                    row[a, :, self.slots[a][b], :] = ke[
                        dim * a : dim * a + dim, dim * b : dim * b + dim
                    ]
            self._row_of_corner = row.reshape(nc, -1)

    def matrix(self, moduli: np.ndarray) -> sp.csr_matrix:
        """Full stiffness for element modulus factors, supports imposed."""
        shape = self.grid.shape
        padded = np.zeros(tuple(n + 2 for n in shape))
        padded[tuple(slice(1, -1) for _ in shape)] = moduli.reshape(shape)
        # E_a(n): the element with node n at corner a is n − corner_a
        around = np.stack(
            [
                padded[tuple(slice(1 - c, 2 - c + n) for c, n in zip(corner, shape))]
                for corner in self.grid.corners
            ],
            axis=-1,
        )
        rows = around.reshape(-1, len(self.grid.corners)) @ self._row_of_corner
        return self._csr(rows.reshape(self.n, -1))

    def from_elements(self, k: np.ndarray) -> sp.csr_matrix:
        """Full matrix from one (nde, nde) matrix per element, supports imposed."""
        flat = np.ascontiguousarray(k.reshape(len(k), -1).T)  # entry-major: contiguous reads
        nde, shape, d = k.shape[1], self.grid.shape, self.dim
        if self._blocks is None:
            # slot-major so that every update below runs over contiguous node slices
            self._blocks = np.empty((len(self.offsets), d, d) + self.grid.node_shape)
        blocks = self._blocks
        blocks[:] = 0.0
        for a, corner in enumerate(self.grid.corners):
            # nodes at corner a of element i sit at i + corner: a slice of the grid
            nodes = tuple(slice(c, c + n) for c, n in zip(corner, shape))
            for b, slot in enumerate(self.slots[a]):
                for i in range(d):
                    for j in range(d):
                        blocks[(slot, i, j) + nodes] += flat[(d * a + i) * nde + d * b + j].reshape(
                            shape
                        )
        # to the CSR row layout (node, da, slot, db)
        rows = np.moveaxis(blocks.reshape(blocks.shape[0], d, d, -1), 3, 0).transpose(0, 2, 1, 3)
        return self._csr(rows.reshape(self.n, -1))

    def _csr(self, rows: np.ndarray) -> sp.csr_matrix:
        """CSR matrix from rows laid out (row, slot, component), supports imposed."""
        data = rows.reshape(-1)  # a view for the product's contiguous output
        data[self._drop] = 0.0
        data[self._fixed_diag] = 1.0
        return sp.csr_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))


class FreeLowerTriangle:
    """The lower triangle of the free-dof block of a StencilAssembly matrix, in
    CSC order with sorted indices (what CHOLMOD takes), by one gather from the
    stencil entries: the direct solver shares the iterative one's assembly.

    K is symmetric, so column j of its lower triangle in CSC holds the entries of
    row j at columns ≥ j, which a stencil row lists in increasing column order.
    Left out: slots whose neighbour lies outside the grid (the explicit zeros on a
    clipped column), entries no element couples (zero in k0), and the rows and
    columns of fixed dofs. Setup needs no sort; each call is one fancy index."""

    def __init__(self, assembly: StencilAssembly, fixed: np.ndarray):
        grid, dim, n = assembly.grid, assembly.dim, assembly.n
        n_slots = len(assembly.offsets)
        node = np.indices(grid.node_shape).reshape(dim, -1).T
        nbr = node[:, None, :] + np.array(assembly.offsets)[None, :, :]
        inside = np.all((nbr >= 0) & (nbr < np.array(grid.node_shape)), axis=2)  # (nodes, slots)
        ke = assembly.ke
        coupled = np.abs(assembly._row_of_corner).max(axis=0) > 1e-12 * np.abs(ke).max()
        keep = inside[:, None, :, None] & coupled.reshape(1, dim, n_slots, dim)
        cols = assembly.indices.reshape(n, -1)
        free = ~fixed
        keep = keep.reshape(n, -1) & free[:, None] & free[cols] & (cols >= np.arange(n)[:, None])
        take = np.flatnonzero(keep)
        self.n_free = int(free.sum())
        index_type = np.int32 if len(take) < 2**31 else np.int64
        self._take = take  # np.intp: np.take is fastest with native indices
        self._indices = (np.cumsum(free) - 1)[cols.reshape(-1)[take]].astype(index_type)
        per_column = keep.sum(axis=1)[free]
        self._indptr = np.concatenate([[0], np.cumsum(per_column)]).astype(index_type)

    def __call__(self, full: sp.csr_matrix) -> sp.csc_matrix:
        return sp.csc_matrix(
            (np.take(full.data, self._take), self._indices, self._indptr),
            shape=(self.n_free, self.n_free),
        )
