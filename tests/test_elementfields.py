"""Blockwise element fields against the whole-array numpy forms they replace."""

import numpy as np
import pytest

from topo.elementfields import (
    block_dofs,
    element_energies_and_stresses,
    scatter_to_nodes,
    slabs,
)
from topo.elements import centre_strain_displacement, elasticity_matrix, von_mises
from topo.grid import Grid


@pytest.mark.parametrize("shape", [(5, 3), (4, 3, 2)])
def test_block_dofs_and_slabs_cover_the_dof_table(shape):
    g = Grid(shape, 1.0)
    assert np.array_equal(block_dofs(g, 0, g.n_elements), g.element_dofs)
    assert np.array_equal(block_dofs(g, 3, 7), g.element_dofs[3:7])
    cover = [(a, b) for _, _, a, b in slabs(g, size=7)]
    assert cover[0][0] == 0 and cover[-1][1] == g.n_elements
    assert all(b == c for (_, b), (c, _) in zip(cover, cover[1:]))


@pytest.mark.parametrize("shape", [(5, 3), (4, 3, 2)])
def test_scatter_to_nodes_equals_numpy_add_at(shape, rng):
    g = Grid(shape, 1.0)
    nde, nc = g.element_dofs.shape[1], 2
    local = rng.standard_normal((g.n_elements, nde, nc))
    expect = np.zeros((g.n_dofs, nc))
    for c in range(nc):  # the reference: numpy's unbuffered scatter-add
        np.add.at(expect[:, c], g.element_dofs.ravel(), local[:, :, c].ravel())
    got = np.zeros((g.n_dofs, nc))
    for i0, i1, a, b in slabs(g, size=5):
        scatter_to_nodes(got, g, i0, i1, local[a:b])
    np.testing.assert_allclose(got, expect, rtol=1e-13, atol=1e-13)


def test_energies_and_stresses_equal_the_whole_array_einsum(rng):
    from types import SimpleNamespace

    from topo.elements import element_stiffness

    g = Grid((5, 4, 3), 0.5)
    ke = element_stiffness(3, 0.5, 0.3, 200.0, 1.0)
    material = SimpleNamespace(youngs_modulus=200.0, poissons_ratio=0.3)
    model = SimpleNamespace(grid=g, ke=ke, problem=SimpleNamespace(material=material))
    u = rng.standard_normal((g.n_dofs, 3))
    energies, vm = element_energies_and_stresses(model, u)
    ue = u[g.element_dofs]  # (ne, 24, nc)
    np.testing.assert_allclose(energies, np.einsum("enc,nm,emc->ec", ue, ke, ue), rtol=1e-12)
    c = elasticity_matrix(3, 200.0, 0.3) @ centre_strain_displacement(3, 0.5)
    np.testing.assert_allclose(vm, von_mises(np.einsum("sn,enc->ecs", c, ue)), rtol=1e-12)
