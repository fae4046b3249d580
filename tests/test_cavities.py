"""The virtual temperature constraint against enclosed cavities (topo/cavities.py):
the conduction scheme against the series solution of the Poisson equation, the
adjoint gradient against central differences, and the constraint's verdict on
hand-built designs against an independent flood fill (scipy.ndimage.label)."""

import itertools

import numpy as np
import pytest
from scipy import ndimage

from problems import central_difference
from topo.cavities import (
    FaceConduction,
    VirtualTemperature,
    p_norm,
    unavoidable_cavities,
)
from topo.design import build_chain, check
from topo.fem import Model
from topo.problem import ProblemError, problem_from_dict
from topo.responses import EnclosedCavities, Responses

BOUND = 20.0  # the default build.cavity_bound


def poisson_centre(dim: int, terms: int = 201) -> float:
    """u at the centre of the unit square / cube for −Δu = 1, u = 0 on the boundary,
    from the double / triple sine series (separation of variables, e.g. Carslaw &
    Jaeger, Conduction of Heat in Solids, §2): u = Σ_odd (4/π)^dim Π 1/n_k ·
    Π sin(n_k π/2) / (π² Σ n_k²). Independent of the code under test."""
    n = np.arange(1, terms + 1, 2, dtype=float)
    sines = np.where(((n - 1) / 2) % 2 == 0, 1.0, -1.0)
    grids = np.meshgrid(*([n] * dim), indexing="ij")
    signs = np.prod(np.meshgrid(*([sines] * dim), indexing="ij"), axis=0)
    denominators = np.prod(grids, axis=0) * sum(g**2 for g in grids) * np.pi**2
    return float((4.0 / np.pi) ** dim * np.sum(signs / denominators))


def test_series_reference_values():
    # 0.0736713 (2D) and 0.0562 (3D): the tabulated torsion-function constant of the
    # square (Timoshenko & Goodier, Theory of Elasticity, §109: k·a² with 2D value
    # 0.0737 for the unit square), recalled from memory
    assert poisson_centre(2) == pytest.approx(0.0736713, abs=2e-6)
    assert poisson_centre(3, 101) == pytest.approx(0.05621, abs=5e-5)


@pytest.mark.parametrize("dim,sizes,tol", [(2, (11, 21, 41), 1e-3), (3, (5, 9, 17), 3e-3)])
def test_uniform_void_matches_the_poisson_series_with_second_order_error(dim, sizes, tol):
    """All void: κ = 1, unit source per element, T = 0 outside, so T/N² at the
    centre cell converges to u(½, …) of −Δu = 1 on the unit square / cube."""
    errors = []
    for n in sizes:
        t = VirtualTemperature((n,) * dim).temperature(np.zeros(n**dim))
        centre = t.reshape((n,) * dim)[(n // 2,) * dim] / n**2
        errors.append(abs(centre / poisson_centre(dim, 101 if dim == 3 else 401) - 1.0))
    assert errors[-1] < tol
    # halving the element size divides the error by about four (a second-order scheme)
    for coarse, fine in zip(errors, errors[1:]):
        assert 3.0 < coarse / fine < 5.0


def test_face_matrix_equals_a_dense_construction():
    """K from the sparse slots against a loop over faces written here: harmonic-mean
    conductances between face neighbours, 2κ to the outside at the domain faces."""
    shape = (3, 4, 2)
    rng = np.random.default_rng(3)
    kappa = rng.uniform(0.01, 1.0, np.prod(shape))
    dense = np.zeros((kappa.size,) * 2)
    index = np.arange(kappa.size).reshape(shape)
    for cell in itertools.product(*map(range, shape)):
        e = index[cell]
        for axis, step in itertools.product(range(3), (-1, 1)):
            other = list(cell)
            other[axis] += step
            if 0 <= other[axis] < shape[axis]:
                f = index[tuple(other)]
                g = 2 * kappa[e] * kappa[f] / (kappa[e] + kappa[f])
                dense[e, e] += g
                dense[e, f] -= g
            else:
                dense[e, e] += 2 * kappa[e]
    assert np.allclose(FaceConduction(shape).matrix(kappa).toarray(), dense)


@pytest.mark.parametrize("shape", [(7, 6), (5, 4, 4)])
def test_aggregate_gradient_matches_finite_differences(shape, rng):
    vt = VirtualTemperature(shape)
    rho = rng.uniform(0.05, 0.95, int(np.prod(shape)))
    value, grad, _ = vt.aggregate(rho)
    for _ in range(3):
        v = rng.normal(size=rho.size)
        fd = central_difference(lambda r: vt.aggregate(r, False)[0], rho, v)
        assert grad @ v == pytest.approx(fd, rel=1e-6)


def test_multigrid_cg_agrees_with_cholesky_on_closed_pockets(rng, monkeypatch):
    """Four levels (1,920 → 240 → 36 → 8 cells) on a small grid; the design holds closed pockets,
    the near-null modes that defeat plain Jacobi-CG."""
    import topo.cavities as cavities

    monkeypatch.setattr(cavities, "COARSE_CELLS", 30)
    shape = (16, 12, 10)
    noise = ndimage.gaussian_filter(rng.normal(size=shape), 1.5)
    solid = noise > np.quantile(noise, 0.6)
    solid[2:8, 2:8, 2:8] = True  # a closed shell among the random blobs
    solid[3:7, 3:7, 3:7] = False
    assert flood_fill_enclosed(solid) >= 64
    rho = np.where(solid, 0.98, 0.02).ravel()
    direct = VirtualTemperature(shape, "direct").aggregate(rho)
    iterative = VirtualTemperature(shape, "iterative")
    assert len(iterative.system.multigrid.transfers) == 3
    value, grad, _ = iterative.aggregate(rho)
    assert value == pytest.approx(direct[0], rel=1e-8)
    assert np.allclose(grad, direct[1], rtol=1e-6, atol=1e-8 * np.abs(direct[1]).max())


def test_p_norm_gradient_matches_finite_differences(rng):
    t = rng.uniform(0.0, 5.0, 30)
    value, grad = p_norm(t)
    assert value == pytest.approx(np.sum(t**8) ** (1 / 8))
    v = rng.normal(size=t.size)
    assert grad @ v == pytest.approx(central_difference(lambda s: p_norm(s)[0], t, v), rel=1e-6)


# ------------------------------------------------------------- verdicts on designs


def flood_fill_enclosed(solid: np.ndarray) -> int:
    """Void elements not face-connected to the domain boundary, by scipy's labelling."""
    labels, _ = ndimage.label(~solid)
    border = np.zeros_like(solid)
    for axis in range(solid.ndim):
        border[(slice(None),) * axis + (0,)] = True
        border[(slice(None),) * axis + (-1,)] = True
    return int((~solid & ~np.isin(labels, labels[border & ~solid])).sum())


def ratio(solid: np.ndarray) -> float:
    vt = VirtualTemperature(solid.shape)
    reference = vt.aggregate(np.zeros(solid.size), False)[0]
    return vt.aggregate(solid.ravel().astype(float), False)[0] / reference


def hollow_box(n=12, lo=3, hi=9, wall=1, dim=3) -> np.ndarray:
    solid = np.zeros((n,) * dim, dtype=bool)
    solid[(slice(lo, hi),) * dim] = True
    solid[(slice(lo + wall, hi - wall),) * dim] = False
    return solid


def designs():
    """(name, solid mask): closed shells, shells with a vent, shells whose void
    touches an open void only along an edge, and plain open frames."""
    out = {"ring-2d": hollow_box(dim=2), "box-3d": hollow_box(), "thick-box": hollow_box(wall=2)}
    vented = hollow_box()
    vented[3, 5:7, 5:7] = False  # a 2 × 2 hole through one wall
    out["box-vented"] = vented
    ring = hollow_box(dim=2)
    ring[3, 5:7] = False
    out["ring-cut"] = ring
    # void inside touches an outside void only along an edge: still closed for powder
    edge = np.zeros((10, 10, 10), dtype=bool)
    edge[2:8, 2:8, :] = True
    edge[3:7, 3:7, 1:9] = False  # closed tube with end caps
    edge[2, 2, :] = False  # the shell's corner column removed: inside meets it at an edge
    out["edge-contact"] = edge
    out["open-frame"] = np.pad(np.ones((4, 4, 4), dtype=bool), 4)
    bars = np.zeros((12, 12, 12), dtype=bool)
    bars[:, 5:7, 5:7] = bars[5:7, :, 5:7] = bars[5:7, 5:7, :] = True
    out["cross-of-bars"] = bars
    return out


@pytest.mark.parametrize("name", list(designs()))
def test_constraint_verdict_agrees_with_an_independent_flood_fill(name):
    solid = designs()[name]
    enclosed = flood_fill_enclosed(solid)
    r = ratio(solid)
    if enclosed:
        assert r > 10 * BOUND, (name, enclosed, r)
    else:
        assert r < BOUND, (name, r)


def test_a_one_element_vent_counts_as_nearly_closed():
    """Open for the flood fill, but its 64-element pocket vents through a single
    element face: hotter than the same pocket behind a 2 × 2 vent, about at the
    default bound, and still far cooler than any closed design above."""
    solid = hollow_box()
    solid[3, 6, 6] = False
    assert flood_fill_enclosed(solid) == 0
    r = ratio(solid)
    assert ratio(designs()["box-vented"]) < 0.5 * r
    assert r < 0.01 * min(ratio(designs()[k]) for k in ("box-3d", "thick-box"))


def test_edge_contact_design_is_enclosed_for_the_flood_fill():
    """The edge-contact design really is closed for face connectivity, and open if
    edges counted: the case a nodal discretisation would get wrong."""
    solid = designs()["edge-contact"]
    assert flood_fill_enclosed(solid) > 0
    labels, _ = ndimage.label(~solid, structure=np.ones((3, 3, 3)))
    assert labels[5, 5, 5] == labels[0, 0, 0]


def test_unavoidable_cavities_follow_the_flood_fill():
    shell = hollow_box()
    assert unavoidable_cavities(shell).sum() == flood_fill_enclosed(shell) == 64
    assert not unavoidable_cavities(designs()["box-vented"]).any()


# --------------------------------------------------------------- the problem file


def twisted_tube(**build):
    """A 16 × 10 × 10 mm block between two passive end plates, clamped at x-min and
    twisted at x-max: stiffest as a closed tube, whose inside holds powder."""
    return {
        "domain": {"size": [16.0, 10.0, 10.0], "element_size": 1.0},
        "material": {"youngs_modulus": 1000.0, "poissons_ratio": 0.3, "density": 1000.0},
        "optimization": {
            "volume_fraction": 0.3,
            "optimizer": "mma",
            "filter_radius": 1.5,
            "max_iterations": 60,
            "beta_interval": 15,
            "beta_max": 16.0,
        },
        "build": {"direction": "+z", "overhang_filter": False, **build},
        "support": [{"region": {"face": "x-min"}}],
        "load_case": [
            {"force": [{"region": {"face": "x-max"}, "total": [0, 0, 0], "moment": [100, 0, 0]}]}
        ],
        "passive": [
            {"kind": "solid", "region": {"box": {"min": [0, 0, 0], "max": [1, 10, 10]}}},
            {"kind": "solid", "region": {"box": {"min": [15, 0, 0], "max": [16, 10, 10]}}},
        ],
    }


def test_cavity_term_gradient_through_the_chain_matches_finite_differences(rng):
    problem = problem_from_dict(twisted_tube(no_enclosed_cavities=True))
    model = Model(problem)
    chain, projection = build_chain(problem, model)
    projection.beta = 4.0
    responses = Responses(problem, model, chain)
    term = responses.constraints[-1]
    assert isinstance(term, EnclosedCavities)
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)
    rho = chain.forward(x)
    r = term.evaluate(rho, None)
    g = chain.backward(x, r.gradient)
    for _ in range(2):
        v = rng.normal(size=x.size)
        fd = central_difference(lambda y: term.evaluate(chain.forward(y), None, False).value, x, v)
        assert g @ v == pytest.approx(fd, rel=1e-5)


@pytest.mark.parametrize(
    "change,fault",
    [
        ({"domain": {"size": [12.0, 8.0], "element_size": 1.0, "thickness": 1.0}}, "3D"),
        ({"optimization": {"volume_fraction": 0.3, "optimizer": "oc"}}, "mma"),
    ],
)
def test_impossible_settings_are_refused(change, fault):
    d = twisted_tube(no_enclosed_cavities=True)
    d.update(change)
    if "thickness" in d["domain"]:
        d["load_case"][0]["force"][0]["moment"] = 100.0
        d["passive"] = []
        d["build"]["direction"] = "+y"
    with pytest.raises(ProblemError, match="build.no_enclosed_cavities") as err:
        problem_from_dict(d)
    assert fault in str(err.value)


def test_cavity_closed_by_passive_solids_alone_is_refused():
    d = twisted_tube(no_enclosed_cavities=True)
    slabs = [  # a closed shell around [5, 7] × [3, 5] × [3, 5]
        ([4, 2, 2], [5, 6, 6]),
        ([7, 2, 2], [8, 6, 6]),
        ([5, 2, 2], [7, 3, 6]),
        ([5, 5, 2], [7, 6, 6]),
        ([5, 3, 2], [7, 5, 3]),
        ([5, 3, 5], [7, 5, 6]),
    ]
    d["passive"] += [
        {"kind": "solid", "region": {"box": {"min": lo, "max": hi}}} for lo, hi in slabs
    ]
    problem = problem_from_dict(d)
    with pytest.raises(ProblemError, match="build.no_enclosed_cavities.*close in 8 elements"):
        Responses(problem, Model(problem), build_chain(problem, Model(problem))[0])
    with pytest.raises(ProblemError, match="close in 8 elements"):  # `topo check` too
        check(problem)
    d["build"]["no_enclosed_cavities"] = False
    assert check(problem_from_dict(d))  # the same passives without the key: fine


def test_the_constraint_opens_the_tube_that_the_stiffest_design_closes():
    """Without the constraint the twisted block becomes a closed tube between the end
    plates, with powder trapped inside; with it the printed part has no closed void
    (both judged by the flood fill above, on the printed part's 0/1 field), still
    joins the load to the support, and its summary's check passes."""
    from topo.design import optimize

    outcomes = {}
    for on in (False, True):
        r = optimize(problem_from_dict(twisted_tube(no_enclosed_cavities=on)))
        solid = r.printed.density > 0.5
        checks = {c["name"]: c["status"] for c in r.summary["checks"]}
        outcomes[on] = (flood_fill_enclosed(solid), checks, r.history[-1]["constraints"])
    trapped, checks, _ = outcomes[False]
    assert trapped > 100 and checks["enclosed_cavities"] == "FAIL"
    trapped, checks, constraints = outcomes[True]
    assert trapped == 0 and checks["enclosed_cavities"] == "PASS"
    assert checks["load_path"] == "PASS" and "cavities" in constraints


def test_a_run_resumed_with_the_multigrid_solve_repeats_the_uninterrupted_one(
    tmp_path, monkeypatch
):
    """The CG warm start is part of the checkpoint, so the resumed run repeats the
    constraint values and the design bit for bit (a cold start after the resume
    moves the values in their last digits)."""
    import topo.cavities as cavities
    from problems import interrupt_at
    from topo.design import optimize

    monkeypatch.setattr(cavities, "DIRECT_CELLS", 0)
    monkeypatch.setattr(cavities, "COARSE_CELLS", 100)
    d = twisted_tube(no_enclosed_cavities=True)
    d["optimization"].update(max_iterations=8, checkpoint_interval=1)
    problem = problem_from_dict(d)
    whole = optimize(problem)
    saved = tmp_path / "checkpoint.npz"
    with pytest.raises(KeyboardInterrupt):
        optimize(problem, callback=interrupt_at(5), checkpoint=saved)
    resumed = optimize(problem, checkpoint=saved, resume=True)
    np.testing.assert_array_equal(resumed.density, whole.density)
    values = [[row["constraints"]["cavities"] for row in r.history] for r in (whole, resumed)]
    assert values[0] == values[1]


def test_the_example_problem_reads_and_turns_the_constraint_on():
    from pathlib import Path

    from topo.problem import load_problem

    path = Path(__file__).parent.parent / "problems" / "torque-link-3d.toml"
    problem = load_problem(path)
    assert problem.build.no_enclosed_cavities and problem.optimization.optimizer == "mma"
    assert check(problem)
    model = Model(problem)
    terms = Responses(problem, model, build_chain(problem, model)[0]).constraints
    assert [t.name for t in terms] == ["material", "cavities"]


def test_with_the_length_scale_held_the_cavity_term_reads_the_dilated_design(rng):
    """In the robust formulation the loop analyses the eroded design, whose voids are
    the widest; the cavity term must judge the dilated one, the most solid (Wang,
    Lazarov & Sigmund 2011: each requirement on its worst-case design). Its value is
    that of the dilated field and its gradient, pulled back through the dilated
    chain by Responses, matches central differences in x."""
    d = twisted_tube(no_enclosed_cavities=True)
    d["optimization"].update(enforce_length_scale=True, filter_radius=2.5)
    d["optimization"].pop("beta_max")
    d["checks"] = {"min_wall": 2.0}
    problem = problem_from_dict(d)
    model = Model(problem)
    chain, projections = build_chain(problem, model)
    projections.beta = 4.0
    responses = Responses(problem, model, chain)
    term = responses.constraints[-1]
    assert isinstance(term, EnclosedCavities)
    x = rng.uniform(0.2, 0.9, model.grid.n_elements)
    rho = chain.forward(x)
    ev = responses.evaluate(rho, model.analyze(rho, stresses=False), x)
    got = ev.constraints[-1]
    on_dilated = term.temperature.aggregate(chain.dilated.forward(x), False)[0]
    assert got.value == pytest.approx(np.log(on_dilated / term.reference))
    on_eroded = term.temperature.aggregate(rho, False)[0]
    assert not np.isclose(on_dilated, on_eroded)
    responses.pull_back(x, ev)

    def value(y):
        return term.evaluate(None, None, False, design=y).value

    for _ in range(2):
        v = rng.normal(size=x.size)
        assert got.gradient @ v == pytest.approx(central_difference(value, x, v), rel=1e-5)
