"""Orientation and cost study against hand calculations, and the study itself on a
small 2D problem."""

import csv

import numpy as np
import pytest

from problems import beam_problem
from topo import problem_from_dict
from topo.cost import (
    CostRates,
    break_even,
    build_hours,
    layers,
    machining_total,
    parts_per_build,
    printing_total,
    stock,
)
from topo.orient import orient, write_outputs
from topo.printability import support_needed
from topo.problem import ProblemError


def test_stock_and_buy_to_fly_of_a_block_by_hand():
    # A 100 × 40 × 20 mm bracket of 16,000 mm³ (a fifth of its box) in stock with
    # 5 mm on every side: 110 × 50 × 30 = 165,000 mm³, buy-to-fly 165000/16000.
    rates = CostRates(stock_allowance=5.0)
    blank = stock((100.0, 40.0, 20.0), 16_000.0, 4430.0, rates)
    assert blank.size_mm == (110.0, 50.0, 30.0)
    assert blank.buy_to_fly == pytest.approx(165_000 / 16_000)
    assert blank.mass_kg == pytest.approx(165_000e-9 * 4430.0)
    assert blank.removed_cm3 == pytest.approx(149.0)


def test_layers_and_build_time_by_hand():
    # 30 mm tall at 0.03 mm layers: 1000 layers of 8 s = 2.222 h of recoating; two
    # parts of 10 cm³ with 2 cm³ of support each at 15 cm³/h: 24/15 = 1.6 h.
    rates = CostRates(layer_thickness=0.03, recoat_time=8.0, build_rate=15.0)
    assert layers(30.0, rates) == 1000
    assert build_hours(2, 10_000.0, 2_000.0, 30.0, rates) == pytest.approx(8000 / 3600 + 1.6)
    # 40 × 30 mm footprints with 5 mm spacing on a 250 × 250 mm plate: 255 // 45 = 5
    # by 255 // 35 = 7 (or turned 6 by 5): 35
    assert parts_per_build((40.0, 30.0), CostRates()) == 35
    assert parts_per_build((300.0, 30.0), CostRates()) == 0


def test_break_even_of_two_linear_cost_lines():
    # printing 100 + 50 q against machining 1000 + 20 q: equal at q = 30
    assert break_even(lambda q: 100 + 50 * np.asarray(q), lambda q: 1000 + 20 * np.asarray(q)) == 30
    assert break_even(lambda q: 10 * np.asarray(q), lambda q: 1000 + 20 * np.asarray(q)) is None


def test_printing_cost_adds_a_build_when_the_plate_is_full():
    args = dict(
        part_mm3=1000.0,
        support_mm3=0.0,
        supported_mm2=0.0,
        height_mm=3.0,
        per_build=4,
        density=1000.0,
        interfaces=0,
    )
    rates = CostRates(powder_price=0.0, build_setup=100.0, heat_treatment=0.0, recoat_time=0.0)
    one, four, five = (printing_total(q, rates=rates, **args) for q in (1, 4, 5))
    melt = 1.0 / rates.build_rate * rates.machine_rate  # 1 cm³ per part
    assert one == pytest.approx(100 + melt)
    assert four == pytest.approx(100 + 4 * melt)
    assert five == pytest.approx(200 + 5 * melt)
    blank = stock((10.0, 10.0, 10.0), 1000.0, 1000.0, CostRates(stock_allowance=0.0))
    assert machining_total(1, blank, CostRates()) == pytest.approx(800 + 300 + 1e-3 * 30)


def test_support_of_an_l_block_by_hand():
    # An L grown in +z: a column 2 × 2 in plan, 6 tall, with an arm 4 long at the
    # top (z = 5) sticking out along x: the arm's first cell rests on the column
    # diagonally, the next 3 × 2 cells need 5-layer support columns.
    s = np.zeros((8, 4, 7), bool)
    s[0:2, 1:3, 0:6] = True
    s[2:6, 1:3, 5] = True
    assert support_needed(s, "+z", 1.0) == (6.0, 30.0, 6)


def test_bad_cost_values_are_refused_with_their_key():
    d = beam_problem()
    d["cost"] = {"layer_thickness": 0.0}
    with pytest.raises(ProblemError, match="cost.layer_thickness"):
        problem_from_dict(d)
    d["cost"] = {"machine_rate": -5.0}
    with pytest.raises(ProblemError, match="cost.machine_rate"):
        problem_from_dict(d)


def test_study_recommends_a_direction_whose_checks_pass(tmp_path):
    d = beam_problem(2, [30.0, 15.0], 1.0, max_iterations=30, beta_interval=6)
    d["name"] = "orient-beam"
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [28, 5], "max": [30, 10]}}}]
    d["load_case"][0]["force"][0]["region"] = {"box": {"min": [29, 6], "max": [30, 9]}}
    problem = problem_from_dict(d)
    rows, best, reason = orient(problem, ["+x", "-x", "+y"], out=tmp_path)
    assert len(rows) == 3 and best is not None
    assert rows[best]["checks_failed"] == "" and rows[best]["build.direction"] in reason
    for r in rows:  # the layer count follows the build height
        assert r["layers"] == pytest.approx(r["build_height_mm"] / 0.03, abs=1)
    written = write_outputs(problem, rows, best, reason, tmp_path)
    assert [p.name for p in written] == ["orient.csv", "orient.png", "cost.png"]
    table = [r for r in csv.reader(open(tmp_path / "orient.csv")) if not r[0].startswith("#")]
    assert table[1 + best][-1] == "True" and sum(r[-1] == "True" for r in table[1:]) == 1


def test_a_plate_smaller_than_the_domain_is_refused(tmp_path):
    d = beam_problem(2, [30.0, 30.0], 1.0)  # 30 mm across in x and in y
    d["cost"] = {"plate_size": [20.0, 20.0]}
    with pytest.raises(ProblemError, match="cost.plate_size"):
        orient(problem_from_dict(d), ["+x", "+y"], out=tmp_path)
    assert not any(tmp_path.iterdir())  # refused before any run
