"""Overhang (additive-manufacturing) filter and the printability check."""

import numpy as np
import pytest

from problems import beam_problem, fd_check
from topo.design import check, optimize
from topo.printability import (
    directions,
    from_build_frame,
    to_build_frame,
    unsupported_by_direction,
    unsupported_fraction,
    unsupported_mask,
)
from topo.problem import problem_from_dict
from topo.transforms import OverhangFilter

CASES = [((7, 6), d) for d in directions(2)] + [((5, 4, 6), d) for d in directions(3)]


@pytest.mark.parametrize("shape,direction", CASES)
def test_backward_matches_central_differences(shape, direction, rng):
    f = OverhangFilter(shape, direction)
    fd_check(f, rng.uniform(0.05, 1.0, int(np.prod(shape))), rng, rtol=1e-5, atol=1e-8)


@pytest.mark.parametrize("shape,direction", CASES)
def test_build_frame_round_trip_puts_the_plate_first(shape, direction):
    a = np.arange(np.prod(shape)).reshape(shape)
    framed = to_build_frame(a, direction)
    assert np.array_equal(from_build_frame(framed, direction), a)
    axis = "xyz".index(direction[1])
    plate = np.take(a, 0 if direction[0] == "+" else shape[axis] - 1, axis=axis)
    assert np.array_equal(np.sort(framed[0].ravel()), np.sort(plate.ravel()))


def pyramid_2d(n=12):
    """A 45° pyramid standing on the plate (y = 0), building +y: self-supporting."""
    rho = np.zeros((n, n // 2))
    for j in range(n // 2):
        rho[j : n - j, j] = 1.0
    return rho


def test_self_supporting_field_passes_within_the_smoothing_error():
    # Documented in OverhangFilter: solid comes out within about 1 % of 1, void
    # within √ε/2 = 0.005 of 0.
    rho = pyramid_2d()
    out = OverhangFilter(rho.shape, "+y").forward(rho.ravel()).reshape(rho.shape)
    assert np.all(np.abs(out - rho) <= 0.01)
    # 3D: a stepped pyramid on the z = 0 plate
    cube = np.zeros((9, 9, 4))
    for k in range(4):
        cube[k : 9 - k, k : 9 - k, k] = 1.0
    out = OverhangFilter(cube.shape, "+z").forward(cube.ravel()).reshape(cube.shape)
    assert np.all(np.abs(out - cube) <= 0.01)


def test_an_element_with_nothing_below_is_removed():
    rho = np.zeros((8, 8))
    rho[2:6, 0] = 1.0  # on the plate
    rho[3:5, 5:7] = 1.0  # floating block, building +y
    out = OverhangFilter(rho.shape, "+y").forward(rho.ravel()).reshape(rho.shape)
    assert np.all(out[3:5, 5:7] < 0.01)
    assert np.all(out[2:6, 0] == 1.0)  # the plate layer is printed as designed
    # The same block is fine building −x when it rests on a wall at x = max.
    rho2 = np.zeros((8, 8))
    rho2[7, :] = 1.0
    rho2[6, 3:5] = 1.0
    out2 = OverhangFilter(rho2.shape, "-x").forward(rho2.ravel()).reshape(rho2.shape)
    assert np.all(out2[6, 3:5] > 0.99)


@pytest.mark.parametrize("shape,direction", CASES + [((30, 20), "+y"), ((10, 12, 9), "-z")])
def test_any_input_thresholded_after_the_filter_passes_the_check(shape, direction):
    rng = np.random.default_rng(7)
    f = OverhangFilter(shape, direction)
    for _ in range(20):
        x = rng.uniform(size=int(np.prod(shape))) ** rng.uniform(0.2, 3.0)
        out = f.forward(x).reshape(shape)
        assert unsupported_fraction(out, direction) == 0.0


def test_check_on_hand_made_2d_field():
    # Building +y; rows are y layers. Columns x = 0..4.
    layers = np.array(
        [
            [1, 0, 0, 0, 0],  # plate layer: always supported
            [0, 1, 0, 0, 1],  # x=1 rests diagonally on x=0 (45°): ok; x=4 has nothing below
            [0, 0, 0, 1, 0],  # x=3: below it x=2,3,4 of layer 1 → x=4 solid: ok
            [1, 0, 0, 0, 0],  # x=0: below x=0,1 of layer 2 are void: unsupported
        ]
    )
    rho = layers.T.astype(float)  # to [i, j] = [x, y]
    mask = unsupported_mask(rho >= 0.5, "+y")
    assert set(zip(*np.nonzero(mask))) == {(4, 1), (0, 3)}
    assert unsupported_fraction(rho, "+y") == pytest.approx(2 / 5)
    # Building −y, layer 3 is the plate: x=0 in layer 3 on the plate; layer 2's x=3
    # has nothing at x=2..4 in layer 3 → unsupported; layer 1: x=1 has nothing
    # in layer 2 at 0..2 → unsupported, x=4 rests on x=3; layer 0: x=0 on x=1.
    assert set(zip(*np.nonzero(unsupported_mask(rho >= 0.5, "-y")))) == {(3, 2), (1, 1)}


def test_check_on_hand_made_3d_field_diagonal_is_not_support():
    rho = np.zeros((3, 3, 3))
    rho[1, 1, 0] = 1.0  # on the +z plate
    rho[2, 1, 1] = 1.0  # (1,1,0) is a face neighbour of the cell below it: supported
    rho[0, 0, 1] = 1.0  # (1,1,0) is only diagonal to the cell below: unsupported
    rho[2, 2, 2] = 1.0  # (2,1,1) is a face neighbour of the cell below: supported
    mask = unsupported_mask(rho >= 0.5, "+z")
    assert set(zip(*np.nonzero(mask))) == {(0, 0, 1)}
    by_dir = unsupported_by_direction(rho)
    assert by_dir["+z"] == pytest.approx(1 / 4)
    # −z: (2,2,2) on the plate; (2,1,1) under it is a face neighbour; (0,0,1) has
    # nothing at z = 2 near it; (1,1,0) rests on (2,1,1).
    assert by_dir["-z"] == pytest.approx(1 / 4)
    # +x: (0,0,1) on the plate; (1,1,0) sees only the diagonal (0,0,1); (2,1,1)
    # rests on (1,1,0); (2,2,2) has nothing at x = 1 near it.
    assert set(zip(*np.nonzero(unsupported_mask(rho >= 0.5, "+x")))) == {(1, 1, 0), (2, 2, 2)}
    assert by_dir["+x"] == pytest.approx(2 / 4)


def small_bracket(direction="+y", enforce=True):
    d = beam_problem(
        2, [40.0, 20.0], 1.0, max_iterations=80, beta_interval=10, volume_fraction=0.35
    )
    d["support"] = [{"region": {"face": "x-min"}}]
    d["load_case"] = [
        {"name": "tip", "force": [{"region": {"point": [40.0, 10.0]}, "total": [0.0, -1.0]}]}
    ]
    d["build"] = {"direction": direction, "overhang_filter": enforce}
    return problem_from_dict(d)


def test_optimised_design_with_the_filter_is_printable():
    free = optimize(small_bracket(enforce=False))
    printable = optimize(small_bracket(enforce=True))
    assert free.summary["unsupported_fraction"] > 0.01  # the unconstrained cantilever overhangs
    assert printable.summary["unsupported_fraction"] == 0.0
    # the price of printability: never stiffer than the unconstrained design (5 % slack
    # for the different local optima a nonconvex problem can end in)
    assert printable.summary["compliance_Nmm"] > 0.95 * free.summary["compliance_Nmm"]
    assert set(printable.summary["unsupported_by_direction"]) == {"+x", "-x", "+y", "-y"}


def test_check_reports_solid_region_that_cannot_be_supported():
    d = beam_problem(2, [20.0, 10.0], 1.0)
    d["build"] = {"direction": "+y"}
    d["passive"] = [
        {"name": "shelf", "kind": "void", "region": {"box": {"min": [0, 3], "max": [20, 5]}}},
        {"name": "boss", "kind": "solid", "region": {"box": {"min": [8, 6], "max": [12, 9]}}},
        {"name": "foot", "kind": "solid", "region": {"box": {"min": [8, 0], "max": [12, 2]}}},
    ]
    rep = check(problem_from_dict(d))
    assert [r["name"] for r in rep["unsupportable_solid_regions"]] == ["boss"]
    assert rep["unsupportable_solid_regions"][0]["unsupportable_elements"] == 12
