"""The rigid-body check without the dense SVD: same answers as the SVD of the
restricted mode matrix (built densely here, an independent construction), the
restraint of each named mode tested on the modes themselves, and memory O(n)."""

import tracemalloc

import numpy as np
import pytest

from topo.grid import Grid
from topo.rigid import free_motions, restricted_r, rigid_modes


def dense_answer(coords, fixed):
    """The former method: SVD of the dense restricted basis, null space by threshold."""
    dim = coords.shape[1]
    n_modes = 3 if dim == 2 else 6
    restricted = rigid_modes(coords)[fixed]
    _, s, vt = np.linalg.svd(restricted, full_matrices=True)
    s = np.concatenate([s, np.zeros(n_modes - len(s))])
    return vt[s < 1e-9 * max(1.0, s.max())]


def cases():
    rng = np.random.default_rng(7)
    out = []
    for shape in [(6, 3), (5, 4), (4, 3, 2), (3, 3, 3)]:
        g = Grid(shape, 1.0)
        dim = len(shape)
        for size in [1, 2, 3, 5, 8, 20]:
            fixed = np.sort(rng.choice(g.n_dofs, size=min(size, g.n_dofs), replace=False))
            out.append((shape, fixed))
        nodes = np.flatnonzero(g.node_coords[:, 0] == 0)  # the x-min face, only x fixed
        out.append((shape, np.sort(dim * nodes)))
        out.append((shape, np.sort((dim * nodes[:, None] + np.arange(dim)).ravel())))
    return out


@pytest.mark.parametrize("shape,fixed", cases())
def test_same_null_space_as_the_dense_svd(shape, fixed):
    coords = Grid(shape, 1.0).node_coords
    dense = rigid_modes(coords)[fixed]
    r = restricted_r(coords, fixed)
    # RᵀR is the Gram matrix of the restricted modes: the same singular values
    np.testing.assert_allclose(r.T @ r, dense.T @ dense, atol=1e-12)
    null = dense_answer(coords, fixed)
    _, s, vt = np.linalg.svd(r, full_matrices=True)
    s = np.concatenate([s, np.zeros(vt.shape[0] - len(s))])
    mine = vt[s < 1e-9 * max(1.0, s.max())]
    np.testing.assert_allclose(mine.T @ mine, null.T @ null, atol=1e-9)  # same null space
    names = free_motions(coords, fixed)
    assert (len(null) == 0) == (names == [])
    # every mode named free as a pure translation vanishes on the fixed dofs, read
    # straight off the mode matrix
    for i, name in enumerate(["translation along x", "translation along y", "translation along z"]):
        if i < len(shape):
            assert (name in names) == bool(np.all(dense[:, i] == 0)), name


def test_memory_is_linear_in_the_grid():
    """A face support of 40×40×20 elements (5,043 fixed dofs): the dense SVD's left
    factor alone was 5043² × 8 B = 203 MB; here the peak stays within a few arrays
    of the node coordinates."""
    g = Grid((40, 40, 20), 1.0)
    coords = g.node_coords
    nodes = np.flatnonzero(coords[:, 2] == 0)
    fixed = np.sort((3 * nodes[:, None] + np.arange(3)).ravel())
    tracemalloc.start()
    assert free_motions(coords, fixed) == []
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 4 * coords.nbytes + 6 * 8 * 4096 * 4  # coordinates (centred) and blocks


def test_a_pinned_node_leaves_rotations_free():
    coords = Grid((4, 3, 2), 1.0).node_coords
    fixed = np.array([0, 1, 2])  # one node, all components
    assert free_motions(coords, fixed) == [
        "rotation about x",
        "rotation about y",
        "rotation about z",
    ]
