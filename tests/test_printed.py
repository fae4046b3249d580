"""The printed part and its sign-off figures: deflection probes against beam theory
and finite differences, support needs against hand counts, load paths and
enclosed cavities against independent constructions."""

import numpy as np
import pytest
from scipy import ndimage

from problems import beam_problem, central_difference, timoshenko_tip_deflection
from topo.deflection import Probe, deflection_gradient, deflections, unit_direction
from topo.fem import Model
from topo.integrity import enclosed_cavities, load_path
from topo.printability import support_needed, unsupported_mask
from topo.printed import printed_density, relative_gap
from topo.problem import Face, problem_from_dict
from topo.regions import select_nodes


def _tip_probe(model, limit=None):
    tip = select_nodes(Face("x-max"), model.grid)
    return Probe("tip", tip, unit_direction("-y", model.dim), (0,), limit)


def test_tip_deflection_along_the_load_matches_timoshenko():
    # Cantilever L = 100, H = 10, unit thickness, E = 1000, ν = 0.3, tip load 1 N:
    # δ = PL³/(3EI) + PL/(κGA), κ = 5/6 (Timoshenko & Gere, Mechanics of Materials).
    L, H, E, nu = 100.0, 10.0, 1000.0, 0.3
    model = Model(problem_from_dict(beam_problem(2, [L, H], 0.5, E, nu)))
    a = model.analyze(np.ones(model.grid.n_elements))
    reference = timoshenko_tip_deflection(1.0, L, E, nu, 1.0, H)
    delta = deflections(_tip_probe(model), a.displacements)[0]
    assert delta > 0  # the load points along -y, the probe too
    assert abs(delta / reference - 1) < 0.01


@pytest.mark.parametrize("dim", [2, 3])
def test_deflection_gradient_matches_finite_differences(dim, rng):
    model = Model(problem_from_dict(beam_problem(dim, h=1.0)))
    probe = _tip_probe(model)
    rho = rng.uniform(0.3, 1.0, model.grid.n_elements)
    a = model.analyze(rho, stresses=False)
    delta, grad = deflection_gradient(model, rho, a, probe, 0)
    assert np.isclose(delta, deflections(probe, a.displacements)[0])

    def tip(r):
        return deflections(probe, model.analyze(r, stresses=False).displacements)[0]

    for _ in range(3):
        d = rng.normal(size=rho.size)
        assert np.isclose(grad @ d, central_difference(tip, rho, d), rtol=1e-5)


def test_support_of_an_overhanging_block_by_hand():
    # A 2 mm grid grown in +z. A 3×3×2 block floats 4 layers above the plate: its
    # 9 lowest elements are unsupported, 9 × 2² = 36 mm² down-facing, and the
    # support columns fill the 4 empty layers under them: 36 × 4 × 2 = 288 mm³.
    s = np.zeros((6, 6, 8), bool)
    s[1:4, 1:4, 4:6] = True
    assert support_needed(s, "+z", 2.0) == (36.0, 288.0, 9)
    # A ledge off a wall: wall x = 0 full height, ledge at z = 5 reaching 3 cells
    # out (x = 1..3). The first cell rests on the wall diagonally (45° rule);
    # cells 2 and 3 need support: 2 × 6 columns (ny) = 12 elements, each a column
    # of 5 empty layers down to the plate.
    s = np.zeros((5, 6, 8), bool)
    s[0] = True
    s[1:4, :, 5] = True
    area, volume, n = support_needed(s, "+z", 1.0)
    assert (area, volume, n) == (12.0, 60.0, 12)
    # The same part grown in -x sits on its ledge tips... and along +x it grows
    # from the wall: the ledge is horizontal in that frame, so nothing is needed.
    assert support_needed(s, "+x", 1.0)[2] == 0
    # Counted within a region only.
    region = np.zeros_like(s)
    region[3] = True
    assert support_needed(s, "+z", 1.0, within=region)[2] == 6


def test_unsupported_mask_agrees_with_a_geometric_45_degree_rule(rng):
    # Independent counter: an element is supported when some solid element of the
    # layer below lies within one element step sideways along a grid axis (the 45°
    # cone on the grid); brute force over all cells.
    s = rng.uniform(size=(7, 6, 5)) > 0.45
    bad = unsupported_mask(s, "+z")
    for i, j, k in np.argwhere(s):
        if k == 0:
            assert not bad[i, j, k]
            continue
        near = [
            (i + di, j + dj)
            for di, dj in [(0, 0), (1, 0), (-1, 0), (0, 1), (0, -1)]
            if 0 <= i + di < 7 and 0 <= j + dj < 6
        ]
        assert bad[i, j, k] == (not any(s[a, b, k - 1] for a, b in near))


def test_load_path_finds_a_cut_member():
    model = Model(problem_from_dict(beam_problem(2, [20.0, 5.0], 1.0)))
    grid = model.grid
    support = [select_nodes(Face("x-min"), grid)]
    load = [("tip", select_nodes(Face("x-max"), grid))]
    whole = np.ones(grid.shape)
    assert load_path(whole, grid, support, load, 1.0).connected
    cut = whole.copy()
    cut[10, :] = 0.0  # a slot through the beam
    lp = load_path(cut, grid, support, load, 1.0)
    assert not lp.connected and lp.cut_off == ["tip"] and lp.pieces == 2 and lp.loose_pieces == 1
    assert lp.loose_volume_mm3 == 9 * 5
    # Elements meeting only at a corner are not a load path.
    diagonal = np.zeros(grid.shape)
    diagonal[:10, :3] = 1.0
    diagonal[10:, 3:] = 1.0
    assert not load_path(diagonal, grid, support, load, 1.0).connected


def test_load_path_finds_loaded_nodes_on_no_printed_element():
    # The tip load acts on all six nodes of the x-max face; a beam two elements
    # deep leaves the top three on no printed element (counted by hand), so that
    # share of the load would be held by the void's E_min alone.
    model = Model(problem_from_dict(beam_problem(2, [20.0, 5.0], 1.0)))
    grid = model.grid
    support = [select_nodes(Face("x-min"), grid)]
    load = [("tip", select_nodes(Face("x-max"), grid))]
    shallow = np.zeros(grid.shape)
    shallow[:, :2] = 1.0
    lp = load_path(shallow, grid, support, load, 1.0)
    assert lp.cut_off == [] and lp.unattached == ["tip"]
    assert not lp.connected and lp.mechanism
    deep = shallow.copy()
    deep[-1, :] = 1.0  # a full-depth end plate under the load
    lp = load_path(deep, grid, support, load, 1.0)
    assert lp.connected and not lp.mechanism and lp.unattached == []


def test_enclosed_cavities_against_scipy_fill_holes():
    # Independent reference: scipy.ndimage.binary_fill_holes fills exactly the void
    # pockets not connected to the outside.
    s = np.ones((8, 8, 8))
    s[2:4, 2:5, 2:4] = 0.0  # closed pocket, 12 elements
    s[5:7, 5:7, 5:8] = 0.0  # open to the z-max face
    cavities = enclosed_cavities(s, 2.0, 8.0)
    filled = ndimage.binary_fill_holes(s > 0.5)
    assert len(cavities) == 1
    assert cavities[0].volume_mm3 == 8.0 * (filled.sum() - (s > 0.5).sum()) == 96.0
    assert cavities[0].centre_mm == [6.0, 7.0, 6.0]
    assert enclosed_cavities(np.ones((5, 5)), 1.0, 1.0) == []


def test_printed_density_keeps_passive_solids_whole_and_voids_empty():
    d = beam_problem(2, [20.0, 5.0], 1.0)
    d["passive"] = [
        {"kind": "solid", "region": {"box": {"min": [15, 0], "max": [20, 5]}}},
        {"kind": "void", "region": {"box": {"min": [5, 0], "max": [7, 5]}}},
    ]
    model = Model(problem_from_dict(d))
    grey = np.full(model.grid.shape, 0.49)
    grey[:3] = 0.5
    grey[5:7] = 0.9  # inside the void region: never printed
    p = printed_density(grey, model)
    assert p[:3].all() and p[15:].all() and not p[5:7].any() and not p[3:5].any()
    assert relative_gap(110.0, 100.0) == pytest.approx(0.1)
    assert relative_gap(1.0, 0.0) is None


def test_printed_part_drops_floating_debris_but_keeps_interfaces():
    d = beam_problem(2, [40.0, 10.0], 1.0)
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [39, 9], "max": [40, 10]}}}]
    model = Model(problem_from_dict(d))
    grey = np.zeros(model.grid.shape)
    grey[:30, 1:9] = 1.0  # the part, 240 elements
    grey[35, 0] = 0.9  # one floating element: under 1 % of the part, debris
    grey[32:36, 4:8] = 0.8  # a floating block of 16 elements: not debris, kept (and flagged)
    p = printed_density(grey, model)
    assert p[:30, 1:9].all() and p[35, 0] == 0.0 and p[32:36, 4:8].all()
    assert p[39, 9] == 1.0  # the passive solid stays though it floats


def test_elements_at_nodes_matches_the_element_node_table(rng):
    """The elements touching a node set, computed from node indices, against a scan
    of every element's corner nodes (numpy isin over the whole table)."""
    from topo.grid import Grid
    from topo.integrity import _elements_at_nodes

    for shape in [(6, 4), (5, 4, 3)]:
        g = Grid(shape, 1.0)
        for size in (1, 5, 40):
            nodes = rng.choice(g.n_nodes, size=min(size, g.n_nodes), replace=False)
            expect = np.isin(g.element_nodes, nodes).any(axis=1)
            assert np.array_equal(_elements_at_nodes(g, nodes), expect)
