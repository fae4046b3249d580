"""Realised minimum wall and gap against shapes whose widths are known by
construction (bars, slots and plates drawn element by element)."""

import numpy as np
import pytest

from topo.lengthscale import digital_ball, minimum_wall_and_gap


@pytest.mark.parametrize("wall,gap", [(1, 1), (2, 3), (3, 2), (4, 5)])
def test_parallel_bars_give_their_width_and_spacing(wall, gap):
    # bars of `wall` elements along y, `gap` elements apart, inside a 40 × 30 domain
    field = np.zeros((40, 30))
    x = 2
    while x + wall <= 38:
        field[x : x + wall, 2:28] = 1.0
        x += wall + gap
    assert minimum_wall_and_gap(field, 0.5) == (0.5 * wall, 0.5 * gap)


def test_the_thinnest_member_and_the_narrowest_slot_govern():
    field = np.zeros((30, 20))
    field[2:10, 2:18] = 1.0  # a block 8 wide
    field[12:14, 2:18] = 1.0  # a wall 2 wide, 2 away from the block
    field[17:27, 2:18] = 1.0  # 3 away from the wall
    assert minimum_wall_and_gap(field, 1.0) == (2.0, 2.0)


def test_three_dimensional_plate_and_hole():
    field = np.zeros((12, 12, 12))
    field[2:10, 2:10, 5:8] = 1.0  # a plate 3 thick
    assert minimum_wall_and_gap(field, 2.0)[0] == 6.0
    solid = np.ones((12, 12, 12))
    solid[5:7, 5:7, :] = 0.0  # a 2 × 2 channel through the block
    assert minimum_wall_and_gap(solid, 1.0)[1] == 2.0


def test_gaps_to_the_domain_boundary_are_open_and_empty_fields_are_none():
    field = np.zeros((20, 10))
    field[1:19, 1:9] = 1.0  # one element from every boundary: no gap at all
    wall, gap = minimum_wall_and_gap(field, 1.0)
    assert wall == 8.0 and gap == 16.0  # the void is open all round (reported as at least 16)
    assert minimum_wall_and_gap(np.zeros((5, 5)), 1.0)[0] is None


def test_digital_ball_is_round():
    assert digital_ball(1, 2).sum() == 1
    assert digital_ball(3, 2).sum() == 9  # 3 × 3 fits: corners at 0.707·1... within 1.5
    assert digital_ball(4, 2).sum() == 12  # the 4 × 4 square less its corners


def test_a_staircase_strut_is_one_element_thick():
    field = np.zeros((30, 30))
    for i in range(3, 26):
        field[i, i : i + 2] = 1.0  # a 45° strut two cells tall in each column
    assert minimum_wall_and_gap(field, 1.0)[0] == 1.0


@pytest.mark.parametrize("shape", [(31, 27), (16, 14, 13)])
def test_ball_opening_equals_scipy_binary_opening(shape, rng):
    """The distance-based opening against scipy.ndimage.binary_opening with the
    digital ball as structure, odd and even diameters, on smooth random fields."""
    from scipy import ndimage

    from topo.lengthscale import ball_opening

    for level in (-0.3, 0.0, 0.4):
        field = ndimage.gaussian_filter(rng.standard_normal(shape), 1.5) > level
        for d in range(1, 10):
            padded = np.pad(field, d)
            expect = ndimage.binary_opening(padded, structure=digital_ball(d, len(shape)))
            assert np.array_equal(ball_opening(padded, d), expect), (level, d)
