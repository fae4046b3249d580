"""Stress: relaxed von Mises, p-norm aggregate and its sensitivity, the hole in a
plate against Kirsch, and a stress-limited design."""

import numpy as np
import pytest

from problems import add_point_load, beam_problem, central_difference, l_bracket
from topo.design import analyze, optimize
from topo.elements import centre_strain_displacement, elasticity_matrix
from topo.fem import Model
from topo.problem import problem_from_dict
from topo.stress import StressMeasure


@pytest.mark.parametrize("dim", [2, 3])
def test_aggregate_sensitivity_matches_finite_differences(dim):
    d = beam_problem(dim, [6.0, 3.0] if dim == 2 else [4.0, 2.0, 2.0], 1.0)
    corner = [6.0, 3.0] if dim == 2 else [4.0, 2.0, 2.0]
    add_point_load(d, "side", corner, [1.0, 0.5] + ([0.2] if dim == 3 else []))
    m = Model(problem_from_dict(d))
    sm = StressMeasure(m)
    rng = np.random.default_rng(0)
    rho = rng.uniform(0.2, 1.0, m.grid.n_elements)
    _, grad, _ = sm.aggregate(rho, m.analyze(rho))
    for _ in range(3):
        v = rng.normal(size=rho.size)
        fd = central_difference(lambda r: sm.aggregate(r, m.analyze(r), gradient=False)[0], rho, v)
        assert grad @ v == pytest.approx(fd, rel=1e-6)


def test_relaxed_stress_is_the_true_stress_in_solid_and_small_in_void():
    d = beam_problem(2, [10.0, 4.0], 1.0)
    m = Model(problem_from_dict(d))
    rho = np.ones(m.grid.n_elements)
    rho[:8] = 1e-3
    a = m.analyze(rho)
    s = StressMeasure(m).relaxed(rho, a)
    assert np.allclose(s[8:, 0], a.von_mises[8:, 0])
    assert np.allclose(s[:8, 0], 1e-3**0.5 * a.von_mises[:8, 0], rtol=1e-12)


def test_hole_in_a_wide_plate_shows_the_kirsch_concentration():
    # Quarter of a 200 × 200 mm plate in tension σ0 with a 20 mm hole (d/W = 0.1):
    # Kirsch's solution for an infinite plate gives σ_θθ = 3σ0 at the edge and
    # σ0 (1 + a²/2r² + 3a⁴/2r⁴) at radius r on the line across the load
    # (Timoshenko & Goodier, Theory of Elasticity, §35); the finite width raises the
    # edge value to about 3.03σ0 (Peterson's stress concentration factors, from memory).
    L, a, h, s0 = 100.0, 10.0, 0.5, 10.0
    d = {
        "name": "hole",
        "domain": {"size": [L, L], "element_size": h, "thickness": 1.0},
        "material": {"youngs_modulus": 70000.0, "poissons_ratio": 0.3, "density": 2700.0},
        "optimization": {"volume_fraction": 1.0},
        "support": [
            {"region": {"face": "x-min"}, "fix": ["x"]},
            {"region": {"face": "y-min"}, "fix": ["y"]},
        ],
        "load_case": [{"force": [{"region": {"face": "x-max"}, "total": [s0 * L, 0.0]}]}],
        "passive": [{"kind": "void", "region": {"cylinder": {"center": [0.0, 0.0], "radius": a}}}],
    }
    r = analyze(problem_from_dict(d))
    rho = r.density
    ue = r.analysis.displacements[r.model.grid.element_dofs][:, :, 0]
    sx = (ue @ (elasticity_matrix(2, 70000.0, 0.3) @ centre_strain_displacement(2, h)).T)[
        :, 0
    ].reshape(rho.shape)
    # Mesh effects, measured: element-centre stresses sit h/2 off the edge and the
    # bilinear elements under-read the steep gradient there by about 7 % (2.64σ0
    # against Kirsch's 2.83σ0 at that radius); the staircase outline of the hole
    # adds notch peaks that grow as the mesh is refined (2.9, 3.2, 3.5σ0 at h = 1,
    # 0.5, 0.25 mm). At h = 0.5 mm both land within 10 % of the references.
    j = int(np.argmax(rho[0] >= 0.5))
    r_sample = np.hypot(0.5 * h, (j + 0.5) * h)
    kirsch = 1 + a**2 / (2 * r_sample**2) + 3 * a**4 / (2 * r_sample**4)
    assert sx[0, j] / s0 == pytest.approx(kirsch, rel=0.10)
    peak = np.where(rho >= 0.5, r.analysis.von_mises[:, 0].reshape(rho.shape), 0).max() / s0
    assert peak == pytest.approx(3.0, rel=0.10)
    # far from the hole (and from the loaded edge, where even nodal shares are not
    # the consistent load) the plate carries the nominal stress
    assert sx[int(70 / h), int(90 / h)] / s0 == pytest.approx(1.0, abs=0.03)


def test_stress_limited_design_meets_its_limit():
    free = optimize(problem_from_dict(l_bracket()))
    limit = 0.7 * free.summary["optimizer"]["peak_relaxed_stress_MPa"]
    limited = optimize(problem_from_dict(l_bracket(stress_limit=limit)))
    s = limited.summary
    assert s["stress_limit_MPa"] == limit
    # the true peak, not the aggregate, within 10 % of the limit
    assert s["optimizer"]["peak_relaxed_stress_MPa"] == pytest.approx(limit, rel=0.10)
    assert (
        s["optimizer"]["compliance_Nmm"] > free.summary["optimizer"]["compliance_Nmm"]
    )  # stiffness paid for strength
    assert s["safety_factor"] == pytest.approx(3.0 / s["max_von_mises_MPa"])
    assert s["load_cases"][0]["safety_factor"] == pytest.approx(s["safety_factor"])
