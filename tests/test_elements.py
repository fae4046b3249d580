"""Q4 and H8 element checks against closed-form references."""

import numpy as np
import pytest

from topo.elements import (
    elasticity_matrix,
    element_stiffness,
    gauss_points,
    strain_displacement,
    von_mises,
)
from topo.grid import H8_CORNERS, Q4_CORNERS


@pytest.mark.parametrize("dim,modes", [(2, 3), (3, 6)])
def test_symmetric_psd_with_rigid_body_modes(dim, modes):
    # A free elastic body in 2D has 3 rigid-body modes, in 3D 6 (any FE text, e.g.
    # Zienkiewicz & Taylor Vol. 1); full integration adds no spurious ones.
    k = element_stiffness(dim, 1.7, 0.3, youngs_modulus=2.0)
    assert np.allclose(k, k.T, atol=1e-14 * np.abs(k).max())
    w = np.linalg.eigvalsh(k)
    tol = 1e-10 * w.max()
    assert np.all(w > -tol)
    assert np.sum(np.abs(w) < tol) == modes


def test_q4_matches_closed_form_of_99_line_paper():
    # Sigmund 2001, "A 99 line topology optimization code written in Matlab",
    # Struct. Multidisc. Optim. 21:120, the KE matrix for a unit square, E = 1,
    # unit thickness, nodes counter-clockwise from the lower left (recalled from
    # memory; its entries are the k1..k8 below).
    nu = 0.3
    k = np.array(
        [
            1 / 2 - nu / 6,
            1 / 8 + nu / 8,
            -1 / 4 - nu / 12,
            -1 / 8 + 3 * nu / 8,
            -1 / 4 + nu / 12,
            -1 / 8 - nu / 8,
            nu / 6,
            1 / 8 - 3 * nu / 8,
        ]
    )
    pattern = (
        np.array(
            [
                [1, 2, 3, 4, 5, 6, 7, 8],
                [2, 1, 8, 7, 6, 5, 4, 3],
                [3, 8, 1, 6, 7, 4, 5, 2],
                [4, 7, 6, 1, 8, 3, 2, 5],
                [5, 6, 7, 8, 1, 2, 3, 4],
                [6, 5, 4, 3, 2, 1, 8, 7],
                [7, 4, 5, 2, 3, 8, 1, 6],
                [8, 3, 2, 5, 4, 7, 6, 1],
            ]
        )
        - 1
    )
    reference = k[pattern] / (1 - nu**2)
    # The plane-stress Q4 matrix does not depend on the element size.
    for h in (1.0, 2.5):
        assert np.allclose(element_stiffness(2, h, nu), reference, atol=1e-13)


@pytest.mark.parametrize("dim", [2, 3])
def test_patch_linear_field_gives_uniform_strain_and_energy(dim, rng):
    # Patch test (Irons; Zienkiewicz & Taylor Vol. 1 ch. 10): a linear displacement
    # field u = G x + c is reproduced exactly, so every point sees the same strain
    # ε = sym(G) and the element energy is V/2 · εᵀ D ε.
    h, nu, e = 1.3, 0.28, 5.0
    corners = (Q4_CORNERS if dim == 2 else H8_CORNERS) * h
    g = rng.normal(size=(dim, dim))
    c = rng.normal(size=dim)
    u = (corners @ g.T + c).ravel()
    eps = 0.5 * (g + g.T)
    if dim == 2:
        voigt = np.array([eps[0, 0], eps[1, 1], 2 * eps[0, 1]])
    else:
        voigt = np.array(
            [eps[0, 0], eps[1, 1], eps[2, 2], 2 * eps[1, 2], 2 * eps[0, 2], 2 * eps[0, 1]]
        )
    for xi in list(gauss_points(dim)) + [np.zeros(dim), np.full(dim, 0.77)]:
        assert np.allclose(strain_displacement(dim, h, xi) @ u, voigt, atol=1e-12)
    d = elasticity_matrix(dim, e, nu)
    k = element_stiffness(dim, h, nu, youngs_modulus=e)
    volume = h**dim
    assert np.isclose(0.5 * u @ k @ u, 0.5 * volume * voigt @ d @ voigt, rtol=1e-12)


def test_von_mises_closed_forms():
    # Uniaxial σ → σ; pure shear τ → √3 τ; hydrostatic → 0 (any strength-of-materials text).
    assert np.isclose(von_mises(np.array([100.0, 0, 0])), 100.0)
    assert np.isclose(von_mises(np.array([0, 0, 50.0])), np.sqrt(3) * 50)
    assert np.isclose(von_mises(np.array([7.0, 7.0, 7.0, 0, 0, 0])), 0.0)
    assert np.isclose(von_mises(np.array([0, 0, 0, 0, 0, 10.0])), np.sqrt(3) * 10)
    assert np.isclose(von_mises(np.array([200.0, 0, 0, 0, 0, 0])), 200.0)
