"""Mirror symmetry enforced on the design: the transform against central
differences and an explicit flip, a design symmetric to round-off under a load
that is not, and the refusals that keep the promise honest."""

import numpy as np
import pytest

from problems import beam_problem, fd_check
from topo import optimize, problem_from_dict
from topo.problem import ProblemError
from topo.transforms import MirrorSymmetry


@pytest.mark.parametrize("shape,axes", [((8, 5), (1,)), ((6, 5, 4), (0, 2)), ((7, 6), (0, 1))])
def test_mirror_average_backward_matches_finite_differences(shape, axes, rng):
    fd_check(MirrorSymmetry(shape, axes), rng.uniform(size=int(np.prod(shape))), rng)


def test_mirror_average_is_symmetric_and_leaves_symmetric_fields_alone(rng):
    t = MirrorSymmetry((6, 5, 4), (1,))
    y = t.forward(rng.uniform(size=120)).reshape(6, 5, 4)
    assert np.array_equal(y, np.flip(y, 1))
    assert np.array_equal(t.forward(y.ravel()), y.ravel())


def _mbb_with_offset_load(**opt):
    # A beam clamped at both ends with its load off the centre (at x = 8 of 24): the
    # stiffest layout is lopsided, the symmetric one is asked for.
    d = beam_problem(2, [24.0, 6.0], 1.0, max_iterations=40, **opt)
    d["support"] = [{"region": {"face": "x-min"}}, {"region": {"face": "x-max"}}]
    d["load_case"][0]["force"][0]["region"] = {"point": [8.0, 6.0]}
    return d


def test_design_is_mirror_symmetric_to_round_off_whatever_the_loads():
    free = optimize(problem_from_dict(_mbb_with_offset_load())).density
    assert np.abs(free - np.flip(free, 0)).max() > 0.5  # the load makes it lopsided
    for optimizer in ("oc", "mma"):
        rho = optimize(
            problem_from_dict(_mbb_with_offset_load(symmetry=["x"], optimizer=optimizer))
        ).density
        assert np.abs(rho - np.flip(rho, 0)).max() < 1e-12


def test_symmetry_refuses_asymmetric_passives_and_the_build_axis():
    d = _mbb_with_offset_load(symmetry=["x"])
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [0, 0], "max": [3, 6]}}}]
    with pytest.raises(ProblemError, match="optimization.symmetry.*not mirror-symmetric"):
        optimize(problem_from_dict(d))
    d = _mbb_with_offset_load(symmetry=["y"])
    d["build"] = {"direction": "+y"}
    with pytest.raises(ProblemError, match="optimization.symmetry.*build direction"):
        problem_from_dict(d)
    d["build"] = {"direction": "+x"}
    d["support"] = [{"region": {"face": "x-min"}}]  # grown from the clamped end
    d["load_case"][0]["force"][0]["region"] = {"point": [24.0, 3.0]}
    rho = optimize(problem_from_dict(d)).density  # across the build axis: allowed
    assert np.abs(rho - np.flip(rho, 1)).max() < 1e-12


@pytest.mark.parametrize("at,mirrored", [(10.0, 20), (10.5, 21)])
def test_plane_off_the_centre_is_held_to_round_off_where_mirrors_exist(at, mirrored):
    # a plane on an element boundary (x = 10) or centre (x = 10.5) of the 24 mm beam:
    # the first `mirrored` columns are mirror images (index i ↔ 2·at − 1 − i), the
    # rest have no image inside and stay free; the load at x = 8 is not symmetric
    d = _mbb_with_offset_load(symmetry=[{"axis": "x", "at": at}])
    rho = optimize(problem_from_dict(d)).density
    part = rho[:mirrored]
    assert np.abs(part - np.flip(part, 0)).max() < 1e-12
    assert np.abs(rho[mirrored:]).max() > 0.5  # the free columns carry material
    shifted = MirrorSymmetry((24, 6), (0,), (at,))
    assert np.array_equal(shifted.forward(rho.ravel()), rho.ravel())


def test_off_centre_mirror_backward_matches_finite_differences(rng):
    t = MirrorSymmetry((9, 6, 4), (0, 1), (3.5, 2.0))
    fd_check(t, rng.uniform(size=216), rng)
    y = t.forward(rng.uniform(size=216))
    assert np.allclose(t.forward(y), y, rtol=0, atol=1e-15)  # a projection


@pytest.mark.parametrize(
    "plane,key,fragment",
    [
        (
            {"axis": "x", "at": 10.3},
            "optimization.symmetry[0].at",
            "nearest allowed are 10 and 10.5",
        ),
        ({"axis": "x", "at": 30.0}, "optimization.symmetry[0].at", "outside the domain"),
        ({"axis": "w"}, "optimization.symmetry[0].axis", "must be one of 'x', 'y'"),
        ({"at": 3.0}, "optimization.symmetry[0].axis", "missing"),
        ({"axis": "x", "where": 3.0}, "optimization.symmetry[0].where", "unknown key"),
    ],
)
def test_bad_planes_name_the_key_and_the_nearest_allowed(plane, key, fragment):
    d = _mbb_with_offset_load(symmetry=[plane])
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d, source="b.toml")
    assert err.value.key == key and fragment in err.value.message


def test_off_centre_plane_refused_with_the_overhang_rule_and_one_plane_per_axis():
    d = _mbb_with_offset_load(symmetry=[{"axis": "y", "at": 2.0}])
    d["build"] = {"direction": "+x"}
    with pytest.raises(ProblemError, match=r"symmetry\[0\]\.at.*overhang rule"):
        problem_from_dict(d)
    d = _mbb_with_offset_load(symmetry=["x", {"axis": "x", "at": 10.0}])
    with pytest.raises(ProblemError, match=r"symmetry\[1\].*one plane per axis"):
        problem_from_dict(d)
    p = problem_from_dict(_mbb_with_offset_load(symmetry=["x", {"axis": "y", "at": 3.0}]))
    assert [(s.axis, s.at) for s in p.optimization.symmetry] == [("x", 12.0), ("y", 3.0)]


def test_passives_need_symmetry_only_where_mirror_images_exist():
    # plane x = 10: columns 0..19 mirror each other, 20..23 are free
    d = _mbb_with_offset_load(symmetry=[{"axis": "x", "at": 10.0}])
    d["optimization"]["max_iterations"] = 3
    pad = {"kind": "solid", "region": {"box": {"min": [21, 0], "max": [24, 2]}}}  # free columns
    pair = [
        {"kind": "void", "region": {"box": {"min": [2, 2], "max": [4, 4]}}},
        {"kind": "void", "region": {"box": {"min": [16, 2], "max": [18, 4]}}},  # its image
    ]
    d["passive"] = [pad, *pair]
    optimize(problem_from_dict(d))  # accepted
    d["passive"] = [pad, pair[0]]
    with pytest.raises(ProblemError, match="void regions are not mirror-symmetric.*x = 10 mm"):
        optimize(problem_from_dict(d))
