"""Fatigue figures: Basquin, Goodman and Miner against hand calculations from
textbook data, a cantilever's bending amplitude against beam theory, the summary
block and the bad input that must exit 2."""

from dataclasses import replace

import numpy as np
import pytest

from problems import beam_problem, check_exits_2, plate_toml
from topo.conditions import DATA, Condition, condition_of
from topo.design import analyze
from topo.fatigue import (
    amplitude_and_mean,
    goodman_equivalent,
    goodman_safety_factor,
    miner_damage,
    sn_life,
    sn_strength,
)
from topo.materials import PRESETS
from topo.problem import ProblemError, problem_from_dict
from topo.report import format_fatigue


def machined(sf: float, b: float, endurance=None) -> Condition:
    return Condition("test", "hip", "machined", *[None] * 6, sf, b, endurance, 1.0, "test")


# AISI 4340 steel, σf' = 1758 MPa, b = -0.0977: N. E. Dowling, Mechanical Behavior of
# Materials, Table 9.1 (values recalled from memory). Hand calculation:
# σa(10⁶) = 1758 · (2·10⁶)^-0.0977 = 1758 · exp(-0.0977 · 14.5087) = 1758 · 0.24231.
def test_basquin_strength_and_life_against_a_hand_calculation():
    steel = machined(1758.0, -0.0977)
    assert sn_strength(steel, 1e6) == pytest.approx(425.98, rel=1e-4)
    # and back: life at that amplitude is 10⁶ cycles
    assert float(sn_life(steel, 425.98)) == pytest.approx(1e6, rel=2e-3)
    # a tenfold life lowers the strength by 10^b = 0.7985 (hand: 10^-0.0977)
    assert sn_strength(steel, 1e7) / sn_strength(steel, 1e6) == pytest.approx(0.7985, rel=1e-4)


def test_endurance_knee_and_surface_factor():
    steel = machined(1758.0, -0.0977, endurance=400.0)
    assert sn_strength(steel, 1e9) == 400.0  # the knee holds the curve flat
    assert np.isinf(sn_life(steel, 399.0))
    rough = replace(steel, surface="as-built", surface_factor=0.5)
    assert sn_strength(rough, 1e9) == 200.0
    assert float(sn_life(rough, 212.99)) == pytest.approx(float(sn_life(steel, 425.98)), rel=1e-9)


# The Goodman line 1/n = σa/Se + σm/Sut, as in Shigley's Mechanical Engineering Design
# (Budynas & Nisbett, ch. 6; equation number not quoted, recalled from memory).
# Hand calculation: Se = 200, Sut = 600, σa = 80, σm = 150 MPa:
# 1/n = 0.4 + 0.25 = 0.65, n = 1.5385; equivalent reversed amplitude 80/(1 − 0.25) = 106.67.
def test_goodman_against_a_hand_calculation():
    assert float(goodman_safety_factor(80.0, 150.0, 200.0, 600.0)) == pytest.approx(1 / 0.65)
    assert float(goodman_equivalent(80.0, 150.0, 600.0)) == pytest.approx(106.6667, rel=1e-5)
    assert np.isinf(goodman_equivalent(80.0, 600.0, 600.0))  # a mean at the ultimate
    # which fails in the first reversal: half a cycle, a finite damage
    assert float(sn_life(machined(1000.0, -0.1), goodman_equivalent(80.0, 600.0, 600.0))) == 0.5


def test_load_ratio_splits_the_peak():
    # R = 0.1, σmax = 200: σa = 90, σm = 110 (σa = σmax(1−R)/2, σm = σmax(1+R)/2)
    a, m = amplitude_and_mean(200.0, 0.1)
    assert (float(a), float(m)) == pytest.approx((90.0, 110.0))
    a, m = amplitude_and_mean(200.0, -1.0)
    assert (float(a), float(m)) == (200.0, 0.0)


# Miner's rule by hand with σf' = 1000 MPa, b = -0.1 (N = ½ (σa/σf')^-10):
# σa = 500 → N = ½ · 2¹⁰ = 512; σa = 250 → N = ½ · 4¹⁰ = 524 288.
# 128 cycles of the first and 262 144 of the second: D = 0.25 + 0.5 = 0.75.
def test_miner_sum_against_a_hand_calculation():
    cond = machined(1000.0, -0.1)
    lives = [sn_life(cond, [500.0]), sn_life(cond, [250.0])]
    assert float(lives[0][0]) == pytest.approx(512.0)
    assert float(lives[1][0]) == pytest.approx(524288.0)
    assert float(miner_damage([[128.0], [262144.0]], lives)[0]) == pytest.approx(0.75)
    assert float(miner_damage([[1e9]], [[np.inf]])[0]) == 0.0  # below the knee


def cantilever(**case):
    """beam_problem's 20 × 5 mm cantilever (1 mm thick, 1 N down at x = 20) in
    Ti-6Al-4V, with the given fatigue keys on its load case."""
    d = beam_problem()
    d["material"] = {"preset": "Ti-6Al-4V", "condition": "hip", "surface": "machined"}
    d["load_case"][0].update(case)
    return problem_from_dict(d)


def test_cantilever_amplitude_matches_beam_theory_away_from_the_root():
    """Fully reversed tip load: the amplitude at the outer fibre is M·c/I (Euler-Bernoulli
    beam theory; I = t·h³/12). Checked at mid-span, x = 10.5 mm, in the outer row of
    elements (centres 2 mm from the axis), where M = 1 N · 9.5 mm: σ = 9.5·2/(125/12)
    = 1.824 MPa. Tolerance 10 %: bilinear elements and the element-centre sampling."""
    result = analyze(cantilever(cycles=1e6, load_ratio=-1.0))
    centers = result.model.grid.element_centers
    at = np.flatnonzero(
        (np.abs(centers[:, 0] - 10.5) < 1e-9) & (np.abs(centers[:, 1] - 4.5) < 1e-9)
    )
    amplitude, mean = amplitude_and_mean(result.printed.analysis.von_mises[at, 0], -1.0)
    assert float(amplitude[0]) == pytest.approx(9.5 * 2 / (125 / 12), rel=0.10)
    assert float(mean[0]) == 0.0
    block = result.summary["fatigue"]
    (case,) = block["load_cases"]
    assert case["cycles"] == 1e6 and case["load_ratio"] == -1.0
    # the governing point sits at the clamped root, where bending peaks
    assert block["weakest_location_mm"][0] < 2.0
    hip = DATA["Ti-6Al-4V"]["hip"]
    strength = max(hip.fatigue_strength_coefficient * 2e6**hip.fatigue_strength_exponent, 425)
    assert case["strength_at_life_MPa"] == pytest.approx(strength)
    assert block["safety_factor"] == pytest.approx(strength / case["max_amplitude_MPa"])
    assert block["damage"] == 0.0  # a few MPa lie far below the endurance knee
    rows = {r["name"]: r["status"] for r in result.summary["checks"]}
    assert rows["fatigue_safety_factor"] == "PASS" and rows["fatigue_damage"] == "PASS"


def test_summary_compares_conditions_and_surfaces_and_fails_an_overload():
    # 100 N on a 5 mm deep beam: hundreds of MPa, beyond the as-built curve
    d = beam_problem()
    d["material"] = {"preset": "Ti-6Al-4V"}
    d["load_case"][0]["force"][0]["total"] = [0.0, -100.0]
    d["load_case"][0].update(cycles=1e7, load_ratio=0.1)
    result = analyze(problem_from_dict(d))
    block = result.summary["fatigue"]
    by = {(r["condition"], r["surface"]): r for r in block["comparison"]}
    assert len(by) == 6
    # HIP and machining each raise the safety factor of the same design
    assert by[("hip", "machined")]["safety_factor"] > by[("hip", "as-built")]["safety_factor"]
    assert by[("hip", "as-built")]["safety_factor"] > by[("as-built", "as-built")]["safety_factor"]
    assert block["safety_factor"] == pytest.approx(by[("as-built", "as-built")]["safety_factor"])
    rows = {r["name"]: r["status"] for r in result.summary["checks"]}
    assert block["safety_factor"] < 1.0 and rows["fatigue_safety_factor"] == "FAIL"
    assert block["damage"] >= 1.0 and rows["fatigue_damage"] == "FAIL"
    assert "indicative" in block["caution"]


def test_without_cycles_the_fatigue_checks_say_not_applicable():
    result = analyze(cantilever())
    assert result.summary["fatigue"] is None
    rows = {r["name"]: r["status"] for r in result.summary["checks"]}
    assert rows["fatigue_safety_factor"] == "N/A" and rows["fatigue_damage"] == "N/A"


def test_problem_values_override_the_condition():
    mat = replace(PRESETS["316L"], condition="hip", fatigue_strength_exponent=-0.05)
    cond = condition_of(mat)
    assert cond.fatigue_strength_exponent == -0.05
    assert cond.fatigue_strength_coefficient == DATA["316L"]["hip"].fatigue_strength_coefficient
    assert "fatigue_strength_exponent" in cond.source


def test_every_preset_has_every_condition_with_falling_sn_data():
    for alloy in PRESETS:
        for name, cond in DATA[alloy].items():
            assert cond.fatigue_strength_exponent < 0, (alloy, name)
            assert cond.endurance_limit is None or cond.endurance_limit < sn_strength(
                replace(cond, surface="machined", endurance_limit=None), 1e3
            )
            assert "recalled from memory" in cond.source


TEXT = plate_toml(
    name="plate",
    size=[20.0, 10.0],
    thickness=2.0,
    preset="AlSi10Mg",
    max_iterations=2,
    load=[20.0, 5.0],
    total=[0.0, -10.0],
)


def with_case(text, lines):
    return text.replace('name = "down"\n', f'name = "down"\n{lines}\n')


BAD = [
    (
        "condition",
        TEXT.replace('preset = "AlSi10Mg"', 'preset = "AlSi10Mg"\ncondition = "annealed"'),
        "material.condition: must be one of",
    ),
    ("cycles zero", with_case(TEXT, "cycles = 0"), "load_case[0].cycles: must be positive"),
    ("cycles negative", with_case(TEXT, "cycles = -5"), "load_case[0].cycles: must be positive"),
    ("ratio one", with_case(TEXT, "load_ratio = 1.0"), "load_case[0].load_ratio: must lie in"),
    ("ratio below", with_case(TEXT, "load_ratio = -1.5"), "load_case[0].load_ratio: must lie in"),
    (
        "rising S-N",
        TEXT.replace('preset = "AlSi10Mg"', 'preset = "AlSi10Mg"\nfatigue_strength_exponent = 0.1'),
        "material.fatigue_strength_exponent: must lie in (-1, 0)",
    ),
    (
        "flat S-N",
        with_case(
            TEXT.replace('preset = "AlSi10Mg"', 'preset = "AlSi10Mg"\nendurance_limit = 900.0'),
            "cycles = 1e6",
        ),
        "material.endurance_limit: 900 MPa is not below",
    ),
    (
        "no data",
        with_case(
            TEXT.replace(
                'preset = "AlSi10Mg"',
                "youngs_modulus = 70000.0\npoissons_ratio = 0.3\ndensity = 2700.0",
            ),
            "cycles = 1e6",
        ),
        "material.ultimate_strength: no fatigue data",
    ),
]


@pytest.mark.parametrize("label,text,fragment", BAD, ids=[b[0] for b in BAD])
def test_bad_fatigue_input_exits_2_naming_the_key(label, text, fragment, tmp_path, capsys):
    check_exits_2(text, fragment, tmp_path, capsys)


def test_condition_errors_reach_the_problem_error():
    d = beam_problem()
    d["load_case"][0]["cycles"] = 1e6
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d)
    assert err.value.key == "material.ultimate_strength"


def test_console_lines_show_the_fatigue_figures_and_the_comparison():
    result = analyze(cantilever(cycles=2e6, load_ratio=0.0))
    lines = format_fatigue(result.summary)
    assert lines[0].startswith("  fatigue (Ti-6Al-4V, hip, machined surface")
    assert "2e+06 cycles at R = 0" in lines[1]
    assert len(lines) == 2 + 1 + 6  # headline, one case, the table's title and rows
    assert format_fatigue({"fatigue": None}) == []
