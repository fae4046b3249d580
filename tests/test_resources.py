"""The resource estimates' arithmetic: what each term scales with, the solver each
assumes, and the coarser element size offered when a problem does not fit. (How
close the estimates come to measured runs is `topo bench`'s business: its
matrix-free cases print measured / estimate.)"""

import numpy as np

from problems import add_point_load, beam_problem
from topo import resources
from topo.problem import problem_from_dict


def cube(size, h=1.0, solver="iterative"):
    return problem_from_dict(beam_problem(3, size, h, solver=solver))


def test_matrix_free_memory_grows_per_element_and_per_load_case():
    # large enough for the matrix-free path (solvers.AUTO_MATRIX_FREE_DOFS)
    small = resources.estimate(cube([80.0, 40.0, 40.0]))
    big = resources.estimate(cube([160.0, 40.0, 40.0]))
    assert small["solver"] == big["solver"] == "iterative"
    assert big["elements"] == 2 * small["elements"]
    extra_dofs = big["dofs"] - small["dofs"]
    assert big["memory_bytes"] - small["memory_bytes"] == (
        resources.MF_BYTES_PER_ELEMENT * small["elements"]
        + resources.MF_BYTES_PER_DOF_CASE * extra_dofs
    )
    # a second load case costs the solver's vectors once more, nothing per element
    d = beam_problem(3, [80.0, 40.0, 40.0], 1.0, solver="iterative")
    two = resources.estimate(problem_from_dict(add_point_load(d, "side", [80, 40, 40], [0, 1, 0])))
    assert two["memory_bytes"] - small["memory_bytes"] == (
        resources.MF_BYTES_PER_DOF_CASE * small["dofs"]
    )
    # time: CG iterations per element and load case, the rest per element
    cg = resources.MF_CG_ITERATIONS * resources.MF_CG_SECONDS_PER_ELEMENT_CASE
    rest = resources.MF_REBUILD_SECONDS_PER_ELEMENT
    assert np.isclose(small["seconds_per_iteration"], (cg + rest) * small["elements"])
    assert np.isclose(two["seconds_per_iteration"], (2 * cg + rest) * small["elements"])


def test_small_and_2d_problems_are_estimated_for_the_direct_solver():
    assert resources.estimate(cube([8.0, 4.0, 4.0], solver="auto"))["solver"] == "direct"
    # a medium 3D problem goes matrix-free (solvers.AUTO_MATRIX_FREE_DOFS); the
    # assembled multigrid's per-node figures are for an iterative solve in 2D
    mid = resources.estimate(cube([40.0, 20.0, 20.0]))
    assert mid["solver"] == "iterative"
    assert mid["memory_bytes"] == (
        resources.MF_BYTES_FIXED
        + resources.MF_BYTES_PER_ELEMENT * mid["elements"]
        + resources.MF_BYTES_PER_DOF_CASE * mid["dofs"]
    )
    nodes = 201 * 101
    plate = resources.estimate(
        problem_from_dict(beam_problem(2, [200.0, 100.0], 1.0, solver="iterative"))
    )
    assert plate["solver"] == "iterative"
    assert plate["memory_bytes"] == resources.ITERATIVE_BYTES_PER_NODE * nodes + 80 * 2 * nodes
    flat = problem_from_dict(beam_problem(2, [200.0, 100.0], 1.0))
    assert resources.estimate(flat)["solver"] == "direct"


def test_coarser_element_size_is_the_smallest_that_fits():
    p = cube([48.0, 24.0, 24.0], solver="auto")
    need = {
        f: resources.estimate(cube([48.0, 24.0, 24.0], 1.0 * f, solver="auto"))["memory_bytes"]
        for f in (2, 3, 4)
    }
    assert need[2] > need[3] > need[4]
    assert resources.coarser_element_size(p, need[2]) == 2.0
    assert resources.coarser_element_size(p, need[3]) == 3.0
    assert resources.coarser_element_size(p, need[2] - 1) == 3.0
    # nothing that divides the domain fits
    assert resources.coarser_element_size(p, 1) is None
