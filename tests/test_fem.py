"""Finite-element model against beam theory and bar extension."""

import numpy as np
import pytest

from problems import beam_problem, timoshenko_tip_deflection
from topo.fem import Model
from topo.problem import problem_from_dict


def tip_deflection(dim, L, H, h, E=1000.0, nu=0.3):
    p = problem_from_dict(beam_problem(dim, [L, H] if dim == 2 else [L, H, H], h, E, nu))
    m = Model(p)
    a = m.analyze(np.ones(m.grid.n_elements))
    u = a.displacements[:, 0].reshape(m.grid.n_nodes, dim)
    tip = np.isclose(m.grid.node_coords[:, 0], L)
    depth = 1.0 if dim == 2 else H
    # Timoshenko beam with shear, tip load P = 1 (Timoshenko & Gere)
    reference = timoshenko_tip_deflection(1.0, L, E, nu, depth, H)
    return -u[tip, 1].mean(), reference, a


@pytest.mark.parametrize(
    "dim,L,H,coarse,fine,tol",
    [
        (2, 100.0, 10.0, 1.0, 0.5, 0.01),
        (3, 60.0, 6.0, 1.0, 0.75, 0.03),
    ],
)
def test_cantilever_against_timoshenko(dim, L, H, coarse, fine, tol):
    # The clamped end (all dofs fixed, no free contraction) and the bilinear
    # elements' bending stiffness both make the model slightly stiffer than beam
    # theory; refining the mesh must move towards it.
    d_coarse, ref, _ = tip_deflection(dim, L, H, coarse)
    d_fine, _, a = tip_deflection(dim, L, H, fine)
    assert abs(d_fine / ref - 1) < tol
    assert abs(d_fine - ref) < abs(d_coarse - ref)
    # Compliance fᵀu with a unit load equals the mean tip deflection here.
    assert np.isclose(a.compliances[0], d_fine, rtol=1e-9)


@pytest.mark.parametrize("dim", [2, 3])
def test_bar_extension_equals_PL_over_EA(dim):
    # Axial bar one element across, supported so it can contract freely: the end
    # displacement is δ = PL/(EA) and the stress P/A everywhere (bar extension,
    # any strength-of-materials text). Bilinear elements hold this state exactly,
    # and with one element across, even nodal shares are the consistent load.
    L, h, E, P = 12.0, 1.5, 2000.0, 30.0
    size = [L, h] if dim == 2 else [L, h, h]
    d = {
        "domain": {"size": size, "element_size": h},
        "material": {"youngs_modulus": E, "poissons_ratio": 0.3, "density": 1.0},
        "optimization": {"volume_fraction": 1.0},
        "support": [
            {"region": {"face": "x-min"}, "fix": ["x"]},
            {"region": {"point": [0.0] * dim}, "fix": ["y", "z"][: dim - 1]},
        ],
        "load_case": [
            {
                "force": [
                    {"region": {"face": "x-max"}, "total": [P, 0.0] + ([0.0] if dim == 3 else [])}
                ]
            }
        ],
    }
    if dim == 3:  # stop the rotation about x without stopping the contraction
        d["support"].append({"region": {"point": [0.0, 0.0, h]}, "fix": ["y"]})
    else:
        d["domain"]["thickness"] = 2.0
    m = Model(problem_from_dict(d))
    a = m.analyze(np.ones(m.grid.n_elements))
    u = a.displacements[:, 0].reshape(m.grid.n_nodes, dim)
    area = h * (2.0 if dim == 2 else h)
    end = np.isclose(m.grid.node_coords[:, 0], L)
    assert np.allclose(u[end, 0], P * L / (E * area), rtol=1e-9)
    assert np.allclose(a.von_mises[:, 0], P / area, rtol=1e-9)
    assert np.isclose(a.compliances[0], P * P * L / (E * area), rtol=1e-9)


def test_all_load_cases_in_one_solve_match_separate_solves():
    d = beam_problem(2, [10.0, 4.0], 1.0)
    d["load_case"].append(
        {"name": "side", "force": [{"region": {"point": [10.0, 4.0]}, "total": [3.0, 1.0]}]}
    )
    m = Model(problem_from_dict(d))
    rho = np.random.default_rng(0).uniform(0.2, 1.0, m.grid.n_elements)
    both = m.analyze(rho)
    for c in range(2):
        single = dict(d, load_case=[d["load_case"][c]])
        one = Model(problem_from_dict(single)).analyze(rho)
        assert np.allclose(
            both.displacements[:, c], one.displacements[:, 0], rtol=1e-10, atol=1e-14
        )


@pytest.mark.parametrize("dim", [2, 3])
def test_assembly_matches_dense_reference(dim):
    # Independent assembly with plain loops and numpy, against the node-stencil one
    # (full dof space, supports as identity rows) and the lower triangle of its
    # free-dof block that the direct solver gathers from it and factorises.
    from topo.solvers import DirectSystem
    from topo.stencil import StencilAssembly

    d = beam_problem(dim, [5.0, 3.0] if dim == 2 else [3.0, 2.0, 2.0], 1.0)
    m = Model(problem_from_dict(d))
    rho = np.random.default_rng(1).uniform(0.1, 1.0, m.grid.n_elements)
    e = m.moduli(rho)
    full = np.zeros((m.grid.n_dofs,) * 2)
    for el, dofs in enumerate(m.grid.element_dofs):
        full[np.ix_(dofs, dofs)] += e[el] * m.ke
    reduced = full[np.ix_(m.free, m.free)]
    tol = 1e-12 * np.abs(reduced).max()
    stencil = StencilAssembly(m.grid, m.ke, m._fixed).matrix(e).toarray()
    assert np.allclose(stencil[np.ix_(m.free, m.free)], reduced, rtol=0, atol=tol)
    fixed = m.fixed_dofs
    assert np.array_equal(stencil[np.ix_(fixed, fixed)], np.eye(len(fixed)))
    assert not stencil[np.ix_(fixed, m.free)].any() and not stencil[np.ix_(m.free, fixed)].any()
    lower = DirectSystem(m.grid, m.ke, m._fixed).lower(e)
    assert lower.format == "csc" and lower.has_sorted_indices
    assert np.allclose(lower.toarray(), np.tril(reduced), rtol=0, atol=tol)


def test_loads_are_shared_evenly():
    d = beam_problem(2, [4.0, 2.0], 1.0)
    m = Model(problem_from_dict(d))
    f = m.loads[:, 0].reshape(m.grid.n_nodes, 2)
    tip = np.isclose(m.grid.node_coords[:, 0], 4.0)
    assert np.allclose(f[tip, 1], -1.0 / 3)
    assert np.isclose(f.sum(), -1.0)
