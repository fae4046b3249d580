"""Element fields from nodal displacements, a block of elements at a time:
strain energies u_eᵀ k0 u_e and the solid-material von Mises stress at element
centres, for every load case.

Gathering every element's displacements at once takes n_elements × 24 × n_cases
floats (3.3 GB for 5.76 million H8 elements and three load cases) and each product
as much again; a block of BLOCK elements keeps the temporaries to a few MB, and the
element dofs of a block are computed from the element numbers, so the whole
(n_elements, 24) dof table is not needed either.
"""

from __future__ import annotations

import numpy as np

from .elements import centre_strain_displacement, elasticity_matrix, von_mises

BLOCK = 32768  # elements per block: temporaries of a few MB, numpy's overhead negligible


def block_dofs(grid, start: int, stop: int) -> np.ndarray:
    """(stop − start, 8 or 24) global dofs of elements start..stop−1, in the order
    of grid.element_dofs (node-major, then component)."""
    idx = np.unravel_index(np.arange(start, stop), grid.shape)
    nodes = np.stack(
        [
            np.ravel_multi_index(tuple(idx[a] + c[a] for a in range(grid.dim)), grid.node_shape)
            for c in grid.corners
        ],
        axis=1,
    )
    return (grid.dim * nodes[:, :, None] + np.arange(grid.dim)).reshape(stop - start, -1)


def blocks(n: int, size: int = BLOCK):
    """(start, stop) of consecutive blocks covering range(n)."""
    for start in range(0, n, size):
        yield start, min(start + size, n)


def slabs(grid, size: int = BLOCK):
    """(i0, i1, start, stop): slabs of whole element planes i0 ≤ i < i1 along x, about
    `size` elements each; elements start..stop−1 in the C order of the grid."""
    plane = grid.n_elements // grid.shape[0]
    step = max(1, size // plane)
    for i0 in range(0, grid.shape[0], step):
        i1 = min(i0 + step, grid.shape[0])
        yield i0, i1, i0 * plane, i1 * plane


def scatter_to_nodes(out: np.ndarray, grid, i0: int, i1: int, local: np.ndarray) -> None:
    """out (n_dofs, nc) += the element vectors `local` (b, nde, nc) of the slab
    i0..i1 (slabs()), summed at the shared nodes: per corner one shifted slice of
    the node grid, O(b) and no scatter by index."""
    dim, nc = grid.dim, local.shape[2]
    nodes = out.reshape(grid.node_shape + (dim, nc))
    slab = (i1 - i0,) + grid.shape[1:]
    for k, corner in enumerate(grid.corners):
        where = (slice(i0 + corner[0], i1 + corner[0]),) + tuple(
            slice(c, c + n) for c, n in zip(corner[1:], grid.shape[1:])
        )
        nodes[where] += local[:, dim * k : dim * (k + 1), :].reshape(slab + (dim, nc))


def element_energies_and_stresses(
    model, u: np.ndarray, stresses: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """(energies, von Mises) of shape (n_elements, n_cases): u_eᵀ k0 u_e with the
    solid modulus, and the von Mises stress of the solid material at each element
    centre (zeros when `stresses` is false)."""
    grid, ke = model.grid, model.ke
    u = u.reshape(len(u), -1)
    nc = u.shape[1]
    energies = np.empty((grid.n_elements, nc))
    vm = np.zeros((grid.n_elements, nc))
    if stresses:
        mat = model.problem.material
        c = elasticity_matrix(grid.dim, mat.youngs_modulus, mat.poissons_ratio)
        c = c @ centre_strain_displacement(grid.dim, grid.h)
    for start, stop in blocks(grid.n_elements):
        ue = u[block_dofs(grid, start, stop)]  # (b, nde, nc)
        flat = ue.transpose(0, 2, 1).reshape(-1, ue.shape[1])  # (b·nc, nde)
        energies[start:stop] = np.einsum("ij,ij->i", flat @ ke, flat).reshape(-1, nc)
        if stresses:
            vm[start:stop] = von_mises(flat @ c.T).reshape(-1, nc)
    return energies, vm
