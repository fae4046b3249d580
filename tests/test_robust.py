"""The robust formulation (topo/robust.py): the length-scale relation against its
closed form and a brute-force 1D convolution, the filter profiles against summed
2D/3D kernels, every branch's gradient against central differences, the budget's
limit, the bad-input errors, and an optimised part whose walls and gaps, measured
with scikit-image, hold the request where the plain formulation's do not."""

import numpy as np
import pytest
from skimage.measure import label, regionprops
from skimage.morphology import opening

from problems import beam_problem, central_difference, fd_check, interrupt_at
from topo import optimize, problem_from_dict
from topo.design import build_chain
from topo.fem import Model
from topo.printability import unsupported_by_direction
from topo.problem import ProblemError
from topo.responses import Responses
from topo.robust import PaddedFilter, blueprint_width, cone_profile, shift_for

# --------------------------------------------------------------- the relation


@pytest.mark.parametrize("shift", [0.02, 0.1, 0.2, 0.25, 0.3, 0.4])
def test_1d_width_is_the_hand_derived_closed_form(shift):
    # closed form derived by hand (robust.blueprint_width): 2√Δη up to Δη = 1/4,
    # 2(1 − √(1/2 − Δη)) above; widths in filter radii
    closed = 2 * np.sqrt(shift) if shift <= 0.25 else 2 * (1 - np.sqrt(0.5 - shift))
    assert blueprint_width(shift, 1) == pytest.approx(closed, rel=1e-7)
    assert shift_for(closed, 1) == pytest.approx(shift, rel=1e-6)


@pytest.mark.parametrize("shift", [0.1, 0.2, 0.3])
def test_1d_width_bounds_every_design_by_brute_force_convolution(shift, rng):
    """On a fine 1D grid, filter many designs with numpy's convolution and a cone
    kernel: every solid feature at 0.5 that reaches 0.5 + Δη somewhere is at least
    the predicted width, and the extremal bar reaches it."""
    cells = 200  # per filter radius
    t = np.arange(-cells + 1, cells) / cells
    kernel = np.maximum(0.0, 1 - np.abs(t))
    kernel /= kernel.sum()
    least = np.inf
    for _ in range(300):
        x = np.zeros(8 * cells)
        for _ in range(rng.integers(1, 4)):  # bars of random width and grey level
            start, width = rng.integers(cells, 6 * cells), rng.integers(1, 2 * cells)
            x[start : start + width] = np.maximum(x[start : start + width], rng.uniform(0.3, 1))
        field = np.convolve(x, kernel, mode="same")
        labels, n = label((field >= 0.5)[None, :], return_num=True)
        for k in range(1, n + 1):
            part = labels[0] == k
            if field[part].max() >= 0.5 + shift:
                least = min(least, part.sum() / cells)
    predicted = blueprint_width(shift, 1)
    assert least >= predicted - 2 / cells
    # the extremal design of the derivation: a solid bar just wide enough to survive erosion
    c = 1 - np.sqrt(0.5 - shift)  # its half-width, from ∫ cone over |t| ≤ c = 0.5 + Δη
    x = np.zeros(8 * cells)
    x[4 * cells - int(c * cells) : 4 * cells + int(c * cells) + 1] = 1.0
    field = np.convolve(x, kernel, mode="same")
    assert field.max() >= 0.5 + shift - 2 / cells
    assert (field >= 0.5).sum() / cells == pytest.approx(predicted, abs=3 / cells)


@pytest.mark.parametrize("dim", [2, 3])
def test_wall_profile_is_the_summed_cone_kernel(dim):
    # the 2D/3D cone max(0, 1 − r) summed over a wall's plane on a fine grid
    n = 400
    y = (np.arange(-n, n + 1) + 0.0) / n
    for d in (0.0, 0.2, 0.5, 0.9):
        if dim == 2:
            summed = np.maximum(0, 1 - np.hypot(d, y)).sum() / n
        else:
            yy, zz = np.meshgrid(y, y, indexing="ij")
            summed = np.maximum(0, 1 - np.sqrt(d * d + yy**2 + zz**2)).sum() / n**2
        assert cone_profile(d, dim) == pytest.approx(summed, rel=2e-3, abs=1e-5)


# --------------------------------------------------------------- the chain


def _robust(**checks):
    d = beam_problem(2, [16.0, 8.0], 0.5, enforce_length_scale=True)
    d["checks"] = checks or {"min_wall": 1.5, "min_gap": 1.0}
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [14, 3], "max": [16, 5]}}}]
    return problem_from_dict(d)


@pytest.mark.parametrize("beta", [1.0, 8.0])
def test_every_branch_and_the_padded_filter_match_finite_differences(beta, rng):
    problem = _robust()
    model = Model(problem)
    chain, projections = build_chain(problem, model)
    projections.beta = beta
    x = rng.uniform(size=model.grid.n_elements)
    for branch in (chain, chain.intermediate, chain.dilated):
        fd_check(branch, x, rng, rtol=1e-5, atol=1e-8)
    fd_check(PaddedFilter((9, 7), 2.4, rng.uniform(size=63) > 0.7), rng.uniform(size=63), rng)


def test_thresholds_order_the_three_designs(rng):
    problem = _robust()
    model = Model(problem)
    chain, projections = build_chain(problem, model)
    projections.beta = 16.0
    x = rng.uniform(size=model.grid.n_elements)
    e, i, d = chain.forward(x), chain.intermediate.forward(x), chain.dilated.forward(x)
    assert np.all(e <= i + 1e-12) and np.all(i <= d + 1e-12) and (d - e).max() > 0.5


def test_budget_sits_on_the_dilated_design_and_its_limit_meets_the_budget(rng):
    problem = _robust()
    model = Model(problem)
    chain, projections = build_chain(problem, model)
    projections.beta = 4.0
    responses = Responses(problem, model, chain)
    x = rng.uniform(0.2, 0.8, size=model.grid.n_elements)
    rho = chain.forward(x)
    ev = responses.evaluate(rho, model.analyze(rho, stresses=False), x)
    budget = ev.constraints[0]
    w = responses.material.weights
    dilated, intermediate = w @ chain.dilated.forward(x), w @ chain.intermediate.forward(x)
    assert budget.value == pytest.approx(dilated)
    # limit · V_i / V_d = the budget: the intermediate design meets it when the dilated one does
    assert budget.limit * intermediate / dilated == pytest.approx(0.5)
    responses.pull_back(x, ev)
    for _ in range(2):
        v = rng.normal(size=x.size)
        fd = central_difference(lambda y: w @ chain.dilated.forward(y), x, v)
        assert budget.gradient @ v == pytest.approx(fd, rel=1e-5)

        def compliance(y):
            r = chain.forward(y)
            return responses.objective.evaluate(r, model.analyze(r, stresses=False), False)[0]

        # a larger step: the compliance's round-off swamps ε = 1e-6
        assert ev.objective.gradient @ v == pytest.approx(
            central_difference(lambda y: compliance(y).value, x, v, eps=1e-4), rel=1e-5
        )


# --------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    "change,key,fragment",
    [
        ({"checks": {"min_wall": 0.6}}, "checks.min_wall", "use element_size ≤ 0.3 mm"),
        ({"checks": {"min_gap": 0.9}}, "checks.min_gap", "at least 2 elements across"),
        ({"checks": {}}, "optimization.enforce_length_scale", "checks.min_wall and/or"),
        (
            {"checks": {"min_wall": 4.0}, "optimization.filter_radius": 1.5},
            "optimization.filter_radius",
            "give filter_radius ≥",
        ),
        (
            {"checks": {"min_wall": 30.0}},
            "checks.min_wall",
            "use element_size ≥",
        ),
        (
            {"checks": {"min_wall": 2.0}, "optimization.projection": False},
            "optimization.enforce_length_scale",
            "needs projection = true",
        ),
    ],
)
def test_impossible_requests_name_file_key_and_a_remedy(change, key, fragment):
    d = beam_problem(2, [40.0, 20.0], 0.5, enforce_length_scale=True)
    for k, v in change.items():
        if k == "checks":
            d["checks"] = v
        else:
            d["optimization"][k.split(".")[1]] = v
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d, source="bracket.toml")
    assert err.value.key == key and fragment in err.value.message
    assert str(err.value).startswith(f"bracket.toml: {key}: ")


def test_radius_follows_the_wider_request_and_the_summary_says_so():
    p = _robust(min_wall=2.0, min_gap=1.0)
    # the gap of 1 mm takes a smaller shift at the radius the 2 mm wall sets
    scale = p.length_scale
    assert p.optimization.filter_radius == pytest.approx(2.0 / blueprint_width(0.2, 2))
    assert scale.erode == pytest.approx(0.2) and 0 < scale.dilate < scale.erode
    assert blueprint_width(scale.dilate, 2) * scale.filter_radius == pytest.approx(1.0)
    assert problem_from_dict(beam_problem()).length_scale is None


# --------------------------------------------------------------- an optimised part


def _thin(field: np.ndarray, diameter: int) -> bool:
    """True when opening `field` (scikit-image) by a round footprint of `diameter`
    elements trims a connected piece longer than the diameter: a member thinner than
    it (a trimmed convex corner is a short piece)."""
    c = np.arange(diameter) + 0.5 - diameter / 2
    footprint = np.hypot(*np.meshgrid(c, c, indexing="ij")) <= diameter / 2 + 1e-9
    padded = np.pad(field, diameter)
    trimmed = padded & ~opening(padded, footprint)
    return any(
        max(b1 - b0, b3 - b2) > diameter
        for b0, b2, b1, b3 in (r.bbox for r in regionprops(label(trimmed, connectivity=2)))
    )


def _widths_hold(printed: np.ndarray, wall_elements: int, gap_elements: int) -> tuple[bool, bool]:
    """Whether walls and gaps are at least the given widths less one element."""
    solid = printed > 0.5
    void = np.pad(~solid, 20, constant_values=True)  # gaps open to the outside are no gaps
    return not _thin(solid, wall_elements - 1), not _thin(void, gap_elements - 1)


def _cantilever(enforce: bool):
    # 40 × 20 mm, 0.5 mm elements, load at the middle of the free end on a solid pad;
    # the machine's limits 2.5 mm (5 elements) for walls and gaps
    d = beam_problem(2, [40.0, 20.0], 0.5, max_iterations=200, volume_fraction=0.4)
    d["optimization"]["enforce_length_scale"] = enforce
    d["load_case"][0]["force"][0]["region"] = {"point": [40.0, 10.0]}
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [35, 7.5], "max": [40, 12.5]}}}]
    d["checks"] = {"min_wall": 2.5, "min_gap": 2.5}
    return optimize(problem_from_dict(d))


def test_optimised_part_holds_wall_and_gap_where_the_plain_one_does_not():
    robust, plain = _cantilever(True), _cantilever(False)
    assert _widths_hold(robust.printed.density, 5, 5) == (True, True)
    assert _widths_hold(plain.printed.density, 5, 5) != (True, True)  # the test can fail
    checks = {c["name"]: c["status"] for c in robust.summary["checks"]}
    assert checks["min_wall"] == checks["min_gap"] == "PASS"
    assert robust.summary["length_scale"]["min_wall_mm"] == 2.5
    assert checks["load_path"] == "PASS"
    # the budget is the intermediate (printed) design's
    assert robust.summary["volume_fraction"] == pytest.approx(0.4, abs=0.01)


def test_each_design_keeps_the_overhang_guarantee(rng):
    # the overhang layer follows each projection: every one of the three designs,
    # thresholded at 0.5, has each element resting on one in its 45° support region
    d = beam_problem(2, [16.0, 8.0], 0.5, enforce_length_scale=True)
    d["checks"] = {"min_wall": 1.5, "min_gap": 1.0}
    d["build"] = {"direction": "+x"}
    problem = problem_from_dict(d)
    model = Model(problem)
    chain, projections = build_chain(problem, model)
    projections.beta = 16.0
    for _ in range(3):
        x = rng.uniform(size=model.grid.n_elements)
        for branch in (chain, chain.intermediate, chain.dilated):
            field = branch.forward(x).reshape(model.grid.shape) >= 0.5
            assert field.any() and unsupported_by_direction(field)["+x"] == 0.0


def test_settings_say_the_radius_came_from_the_widths():
    from topo.schema import settings

    rows = {r["key"]: r["source"] for r in settings(_robust())}
    assert rows["optimization.filter_radius"].endswith(
        "set by checks.min_wall/min_gap (enforce_length_scale)"
    )
    given = problem_from_dict(_robust().raw, {"optimization.filter_radius": 3.0})
    assert {r["key"]: r["source"] for r in settings(given)}["optimization.filter_radius"] == "file"
    assert given.optimization.filter_radius == 3.0


def test_an_interrupted_run_resumes_to_the_same_design(tmp_path):
    # the three projections' β and the budget's limit come back from the checkpoint
    problem = problem_from_dict(
        _robust().raw, {"optimization.max_iterations": 24, "optimization.beta_interval": 6}
    )
    whole = optimize(problem)
    saved = tmp_path / "checkpoint.npz"
    with pytest.raises(KeyboardInterrupt):
        optimize(problem, checkpoint=saved, callback=interrupt_at(13))
    resumed = optimize(problem, checkpoint=saved, resume=True)
    assert len(resumed.history) == len(whole.history) == 24
    assert np.array_equal(resumed.density, whole.density)


def test_symmetry_holds_with_the_padded_filter_and_a_load_off_the_plane():
    # the filter's solid padding follows the load, which is not symmetric about y = 4;
    # the mirror average after the filter keeps the design symmetric all the same
    d = _robust().raw
    d["optimization"].update(symmetry=["y"], max_iterations=15)
    d["load_case"][0]["force"][0]["region"] = {"point": [16.0, 6.0]}
    rho = optimize(problem_from_dict(d)).density
    assert np.abs(rho - np.flip(rho, 1)).max() < 1e-12


def test_the_demo_problems_load_with_their_rules():
    from pathlib import Path

    from topo import load_problem

    folder = Path(__file__).parent.parent / "problems"
    scale = load_problem(folder / "length-scale-2d.toml").length_scale
    assert (scale.min_wall, scale.min_gap) == (1.5, 2.0)
    assert scale.erode < scale.dilate == pytest.approx(0.2)
    plane = load_problem(folder / "symmetry-offset-2d.toml").optimization.symmetry
    assert [(p.axis, p.at) for p in plane] == [("x", 25.0)]
