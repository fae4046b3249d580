"""Forces and moments at a point carried to the selected nodes (topo/loads.py)."""

import numpy as np
import pytest
from scipy.linalg import lstsq

from problems import beam_problem
from topo.fem import Model
from topo.loads import LoadError, moment_about, rigid_distribution
from topo.problem import ProblemError, problem_from_dict


def test_bolt_circle_moment_against_the_hand_calculation():
    # Six bolts on a circle of radius R, a moment M about the centre: each bolt takes
    # M / (6 R) perpendicular to its radius (elastic bolt-group method, Shigley's
    # Mechanical Engineering Design, eccentric loading of bolted joints; recalled).
    R, M = 25.0, 1200.0
    angle = np.arange(6) * np.pi / 3
    pts = R * np.column_stack([np.cos(angle), np.sin(angle)])
    f = rigid_distribution(pts, [0.0, 0.0], [M])
    assert np.allclose(np.linalg.norm(f, axis=1), M / (6 * R), rtol=1e-12)
    assert np.allclose(np.einsum("ij,ij->i", f, pts), 0.0, atol=1e-12)  # ⊥ to the radius
    assert np.allclose(pts[:, 0] * f[:, 1] - pts[:, 1] * f[:, 0], M / 6)  # anticlockwise


def test_eccentric_load_on_four_bolts_against_the_hand_calculation():
    # Four bolts at (±a, ±a), a downward load P at e to the right of the centroid.
    # By hand: primary P/4 down on each; moment P·e clockwise, r = a√2, Σr² = 8a²,
    # secondary P·e·r/Σr² ⊥ r. At the bolt (a, a) the secondary force of a clockwise
    # moment points along (+1, −1)/√2, so its components are P·e/(8a)·(1, −1); the
    # worst bolt's resultant is √((Pe/8a)² + (P/4 + Pe/8a)²).
    a, e, P = 20.0, 100.0, 1000.0
    pts = np.array([[a, a], [-a, a], [-a, -a], [a, -a]])
    f = rigid_distribution(pts, [0.0, -P], None, at=[e, 0.0])
    s = P * e / (8 * a)
    assert np.allclose(f[0], [s, -P / 4 - s])
    assert np.isclose(np.linalg.norm(f, axis=1).max(), np.hypot(s, P / 4 + s))


@pytest.mark.parametrize("dim", [2, 3])
def test_nodal_forces_sum_to_the_resultant_and_its_moment(dim, rng):
    pts = rng.uniform(0, 30, (17, dim))
    total = rng.uniform(-100, 100, dim)
    moment = rng.uniform(-1e4, 1e4, 1 if dim == 2 else 3)
    at = rng.uniform(-50, 80, dim)
    f = rigid_distribution(pts, total, moment, at)
    assert np.allclose(f.sum(axis=0), total, rtol=0, atol=1e-10 * np.abs(total).max())
    m = moment_about(pts, f, at)
    assert np.allclose(m, moment, rtol=0, atol=1e-10 * np.abs(moment).max())


def test_a_3d_moment_is_the_least_squares_distribution(rng):
    # Among all nodal forces with sum F and moment M, the rigid-link one is the
    # smallest Σ|f|²: compare with scipy's minimum-norm solution of the same equations.
    pts = rng.uniform(0, 10, (9, 3))
    total, moment, at = np.array([1.0, -2.0, 3.0]), np.array([40.0, -10.0, 25.0]), [5, 5, 20]
    sums = [np.tile(np.eye(3)[k], 9) for k in range(3)]
    # (r × f)·e_k = f·(e_k × r)
    moments = [np.cross(np.eye(3)[k], pts - at).ravel() for k in range(3)]
    a = np.array(sums + moments)
    expect = lstsq(a, np.concatenate([total, moment]))[0].reshape(9, 3)
    assert np.allclose(rigid_distribution(pts, total, moment, at), expect, atol=1e-10)


def test_one_point_or_one_line_cannot_carry_a_moment():
    with pytest.raises(LoadError, match="one point"):
        rigid_distribution(np.array([[1.0, 2.0]] * 3), [0, 1], [5.0])
    line = np.column_stack([np.arange(5.0), np.zeros(5), np.zeros(5)])
    with pytest.raises(LoadError, match="one line"):
        rigid_distribution(line, [0, 0, 0], [3.0, 0, 0])  # about the line itself
    f = rigid_distribution(line, [0, 0, 0], [0, 0, 3.0])  # a line carries a moment across it
    assert np.allclose(moment_about(line, f, line.mean(axis=0)), [0, 0, 3.0])
    with pytest.raises(LoadError, match="one point"):  # a force off a single node
        rigid_distribution(np.array([[0.0, 0.0]]), [0, 1], None, at=[5.0, 0.0])


def test_cantilever_tip_moment_against_beam_theory():
    # A pure end moment M on a cantilever: tip rotation θ = ML/(EI), deflection
    # δ = ML²/(2EI) (Gere & Timoshenko, Mechanics of Materials, table of cantilever
    # deflections; recalled from memory). The bolt-group rule spreads M on the end
    # face linearly in y, as the bending stress is. Tolerance 1 % (h = 0.5 gives 0.2 % on θ,
    # 0.4 % on δ; h = 1 gives 1.0 % and 1.4 %): the clamped end
    # (no free contraction) and bilinear elements make the model slightly stiffer.
    L, H, E, M = 60.0, 6.0, 1000.0, 50.0
    d = beam_problem(2, [L, H], 0.5, E, 0.3)
    d["load_case"][0]["force"][0].update(total=[0.0, 0.0], moment=M)
    m = Model(problem_from_dict(d))
    u = m.analyze(np.ones(m.grid.n_elements)).displacements[:, 0].reshape(-1, 2)
    xy = m.grid.node_coords
    tip = np.isclose(xy[:, 0], L)
    inertia = H**3 / 12
    slope = np.polyfit(xy[tip, 1], u[tip, 0], 1)[0]  # u_x = −θ (y − H/2)
    assert abs(-slope / (M * L / (E * inertia)) - 1) < 0.01
    assert abs(u[tip, 1].mean() / (M * L**2 / (2 * E * inertia)) - 1) < 0.01


@pytest.mark.parametrize("dim", [2, 3])
def test_the_model_carries_force_and_moment_given_off_the_part(dim):
    d = beam_problem(dim)
    force = d["load_case"][0]["force"][0]
    at = [30.0, 8.0] if dim == 2 else [20.0, 8.0, -3.0]
    moment = 40.0 if dim == 2 else [40.0, -5.0, 12.0]
    force.update(at=at, moment=moment)
    m = Model(problem_from_dict(d))
    f = m.loads[:, 0].reshape(-1, dim)
    nodes = m.load_nodes[0][1]
    assert np.count_nonzero(np.abs(f).sum(axis=1)) == len(nodes)
    assert np.allclose(f.sum(axis=0), force["total"], atol=1e-12)
    expect = np.atleast_1d(moment)
    assert np.allclose(moment_about(m.grid.node_coords, f, at), expect, atol=1e-10)


def test_a_moment_on_one_node_fails_naming_the_key():
    d = beam_problem(2)
    d["load_case"][0]["force"][0].update(region={"point": [20.0, 2.0]}, moment=[10.0])
    with pytest.raises(ProblemError) as err:
        Model(problem_from_dict(d, source="p.toml"))
    assert err.value.key == "load_case[0].force[0].moment"
    assert "one point" in str(err.value)


@pytest.mark.parametrize(
    "value,message",
    [([1.0, 2.0], "a 2D moment is about z"), ("big", "expected a number"), (2e12, "N·mm")],
)
def test_bad_2d_moments_fail_naming_the_key(value, message):
    d = beam_problem(2)
    d["load_case"][0]["force"][0]["moment"] = value
    with pytest.raises(ProblemError, match=message) as err:
        problem_from_dict(d)
    assert err.value.key.startswith("load_case[0].force[0].moment")


def test_a_moment_alone_is_a_load():
    d = beam_problem(2)
    d["load_case"][0]["force"][0].update(total=[0.0, 0.0], moment=[7.0])
    assert problem_from_dict(d).load_cases[0].forces[0].moment == (7.0,)
