"""Each region form selects exactly the expected nodes and elements on a small grid.
Expected sets are written out by hand from the geometry."""

import numpy as np

from topo.grid import Grid
from topo.problem import Box, Cylinder, Face, Point, Sphere
from topo.regions import outside_domain, select_elements, select_nodes

G2 = Grid((4, 3), 1.0)  # nodes 5 × 4, node n = i·4 + j
G3 = Grid((2, 2, 2), 2.0)  # nodes 3 × 3 × 3, node n = (i·3 + j)·3 + k, h = 2 mm


def nodes2(*ij):
    return sorted(i * 4 + j for i, j in ij)


def test_box_2d():
    b = Box((1.0, 0.0), (2.0, 1.0))
    assert list(select_nodes(b, G2)) == nodes2((1, 0), (1, 1), (2, 0), (2, 1))
    # element centres (i + .5, j + .5): only element (1, 0) lies inside
    assert list(select_elements(b, G2)) == [1 * 3 + 0]


def test_face_2d_and_3d():
    assert list(select_nodes(Face("x-max"), G2)) == nodes2((4, 0), (4, 1), (4, 2), (4, 3))
    assert list(select_elements(Face("y-min"), G2)) == [0, 3, 6, 9]
    top = select_nodes(Face("z-max"), G3)
    assert sorted(top) == sorted((i * 3 + j) * 3 + 2 for i in range(3) for j in range(3))
    assert list(select_elements(Face("z-max"), G3)) == [1, 3, 5, 7]


def test_point_picks_nearest_node_and_containing_element():
    assert list(select_nodes(Point((2.9, 1.2)), G2)) == nodes2((3, 1))
    assert list(select_elements(Point((2.9, 1.2)), G2)) == [2 * 3 + 1]


def test_disc_in_2d():
    # radius 1 around (2, 1.5), node tolerance 0.5: nodes within 1.5 of the centre
    c = Cylinder((2.0, 1.5), "z", 1.0, float("inf"))
    expected = nodes2(
        *[(i, j) for i in range(5) for j in range(4) if np.hypot(i - 2, j - 1.5) <= 1.5]
    )
    assert list(select_nodes(c, G2)) == expected
    # element centres within 1.0: (1.5, 1.5) and (2.5, 1.5) at 0.5
    assert list(select_elements(c, G2)) == [1 * 3 + 1, 2 * 3 + 1]


def test_cylinder_and_sphere_3d():
    # axis x through (·, 2, 2), radius 0.5, length 2 centred at x = 1
    c = Cylinder((1.0, 2.0, 2.0), "x", 0.5, 2.0)
    # nodes: radial ≤ 1.5 (only the axis line qualifies: the next node is at 2),
    # |x − 1| ≤ 2 → x = 0 and 2 (x = 4 is 3 away)
    assert sorted(select_nodes(c, G3)) == [(0 * 3 + 1) * 3 + 1, (1 * 3 + 1) * 3 + 1]
    s = Sphere((1.0, 1.0, 1.0), 0.2)
    assert list(select_elements(s, G3)) == [0]
    assert list(select_nodes(s, G3)) == []  # nearest node is √3 mm away, tolerance 1.2


def test_outside_domain():
    assert outside_domain(Box((10.0, 10.0), (12.0, 12.0)), G2)
    assert not outside_domain(Box((3.0, 2.0), (12.0, 12.0)), G2)
    assert outside_domain(Point((-3.0, 0.0)), G2)


def _every_point(shape, h, offset):
    """All grid points (index + offset)·h in C order, from numpy's own grid."""
    idx = np.indices(shape).reshape(len(shape), -1).T
    return (idx + offset) * h


def test_selection_tests_only_the_bounding_box_yet_matches_an_exhaustive_scan(rng):
    """Selections test only the points in a region's bounding box; an exhaustive
    scan of every point with numpy's formulas for a box, ball and cylinder (and the
    nearest point by a full argmin) picks the same sets, on and off grid lines."""
    g = Grid((9, 6, 5), 1.25)
    tol_n, tol_e = 0.5 * g.h * (1 + 1e-9), 1e-9 * g.h
    nodes, centres = _every_point(g.node_shape, g.h, 0.0), _every_point(g.shape, g.h, 0.5)
    size = np.array(g.size)
    for _ in range(60):
        c = rng.uniform(-0.1, 1.1, 3) * size
        if rng.random() < 0.4:
            c = np.round(c / (g.h / 2)) * (g.h / 2)  # on grid and half-grid lines
        r = float(rng.choice([0.4, g.h, 1.5 * g.h, 3.0]))
        lo, hi = c - rng.uniform(0, 0.4, 3) * size, c + rng.uniform(0, 0.4, 3) * size
        box, ball = Box(tuple(lo), tuple(hi)), Sphere(tuple(c), r)
        cyl = Cylinder(tuple(c), "y", r, 4.0)
        for pts, tol, select in ((nodes, tol_n, select_nodes), (centres, tol_e, select_elements)):
            in_box = np.all((pts >= lo - tol) & (pts <= hi + tol), axis=1)
            in_ball = np.linalg.norm(pts - c, axis=1) <= r + tol
            rel = pts - c
            in_cyl = (np.hypot(rel[:, 0], rel[:, 2]) <= r + tol) & (np.abs(rel[:, 1]) <= 2.0 + tol)
            assert np.array_equal(select(box, g), np.flatnonzero(in_box))
            assert np.array_equal(select(ball, g), np.flatnonzero(in_ball))
            assert np.array_equal(select(cyl, g), np.flatnonzero(in_cyl))
            nearest = int(np.argmin(np.linalg.norm(pts - c, axis=1)))
            assert list(select(Point(tuple(c)), g)) == [nearest]


def test_grid_tables_match_numpy_index_grids():
    """Element corner nodes and positions against np.indices / np.ravel_multi_index."""
    from topo.grid import H8_CORNERS

    g = Grid((4, 3, 5), 0.5)
    idx = np.indices(g.shape).reshape(3, -1)
    expect = np.stack(
        [
            np.ravel_multi_index(tuple(idx[a] + c[a] for a in range(3)), g.node_shape)
            for c in H8_CORNERS
        ],
        axis=1,
    )
    assert np.array_equal(g.element_nodes, expect)
    assert np.array_equal(g.node_coords, _every_point(g.node_shape, 0.5, 0.0))
    assert np.array_equal(g.element_centers, _every_point(g.shape, 0.5, 0.5))
