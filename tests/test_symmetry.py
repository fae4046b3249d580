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
