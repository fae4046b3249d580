"""Mean-stress corrections, S-N curves through two points, cycles between two load
cases, strength by the direction of the principal stress, and the static yield of
a named condition: against textbook numbers, hand calculations, beam theory and
numpy's eigen-solver, and the bad input that must exit 2."""

from dataclasses import replace

import numpy as np
import pytest

from problems import beam_problem, check_exits_2, plate_toml
from topo.anisotropy import (
    angle_to_build,
    directional_strength,
    principal_direction,
    strength_at,
    yield_safety,
)
from topo.cli import main
from topo.conditions import DATA, Condition, basquin_from_points, condition_of
from topo.design import analyze
from topo.fatigue import (
    equivalent_amplitude,
    gerber_equivalent,
    gerber_safety_factor,
    goodman_equivalent,
    goodman_safety_factor,
    safety_factor,
    signed_von_mises,
    sn_life,
    sn_strength,
    swt_equivalent,
    swt_safety_factor,
)
from topo.materials import PRESETS
from topo.problem import problem_from_dict

METHODS = ("goodman", "gerber", "swt")


def machined(sf: float, b: float, endurance=None) -> Condition:
    return Condition("test", "hip", "machined", *[None] * 6, sf, b, endurance, 1.0, "test")


# ----------------------------------------------------------------- corrections


# A machine part whose stress varies from 40 to 100 N/mm² (σa = 30, σm = 70), corrected
# endurance limit 270 N/mm², Sut = 600 N/mm²: the worked example as reproduced in a
# public lecture-note copy ("lecture machine design", 123dok.com, Example 5; the book it
# follows, V. B. Bhandari's Design of Machine Elements, is recalled from memory, and so
# are its printed answers, about 4.39 for Goodman and 5.41 for Gerber).
# Hand calculation:
#   Goodman 1/n = 30/270 + 70/600 = 0.111111 + 0.116667 = 0.227778, n = 4.3902;
#   Gerber (Shigley's form) n = ½ (600/70)² (30/270) [−1 + √(1 + (2·70·270/(600·30))²)]
#        = 4.08163 · (−1 + √(1 + 2.1²)) = 4.08163 · 1.325941 = 5.4120.
def test_goodman_and_gerber_against_a_textbook_example():
    assert float(goodman_safety_factor(30.0, 70.0, 270.0, 600.0)) == pytest.approx(4.3902, rel=1e-4)
    assert float(gerber_safety_factor(30.0, 70.0, 270.0, 600.0)) == pytest.approx(5.4120, rel=1e-4)
    # the Gerber root satisfies its own parabola n σa/Se + (n σm/Su)² = 1
    n = float(gerber_safety_factor(30.0, 70.0, 270.0, 600.0))
    assert n * 30 / 270 + (n * 70 / 600) ** 2 == pytest.approx(1.0)
    # equivalent reversed amplitudes: 30/(1 − 70/600) = 33.962, 30/(1 − (70/600)²) = 30.414
    assert float(goodman_equivalent(30.0, 70.0, 600.0)) == pytest.approx(33.962, rel=1e-4)
    assert float(gerber_equivalent(30.0, 70.0, 600.0)) == pytest.approx(30.414, rel=1e-4)


# Smith-Watson-Topper, σar = √(σmax σa) (Smith, Watson & Topper, J. Materials 5, 1970).
# Hand calculation with the same cycle: σmax = 100, σa = 30: √3000 = 54.772 MPa; at
# R = 0 (σm = σa) it is √2 σa; a cycle that never pulls does no damage.
def test_swt_against_hand_calculations():
    assert float(swt_equivalent(30.0, 70.0)) == pytest.approx(54.772, rel=1e-4)
    assert float(swt_equivalent(50.0, 50.0)) == pytest.approx(50.0 * 2**0.5)
    assert float(swt_safety_factor(30.0, 70.0, 270.0)) == pytest.approx(270.0 / 54.772, rel=1e-4)
    assert float(swt_equivalent(30.0, -40.0)) == 0.0
    assert np.isinf(swt_safety_factor(30.0, -40.0, 270.0))


# Shigley's Mechanical Engineering Design (Budynas & Nisbett; the edition, 8th or 9th, is
# recalled from memory), solution of problem 6-15 as in a public copy of the solutions
# manual (coursehero.com, "Mechanical Design budynas SM ch06"): fully reversed
# σa = √3·207 = 358.5 MPa, Se = 276 MPa give
# n_f = 0.77 by Goodman, Gerber and ASME-elliptic alike; with f = 0.9 and Sut = 551 MPa
# the S-N line through (10³, 0.9 Sut) and (10⁶, Se) has a = 891.0 MPa, b = −0.084828,
# and 358.5 MPa lasts N = 45,800 cycles (S = a N^b, N in cycles).
def test_fully_reversed_shigley_solution_and_the_identity_for_every_correction():
    for method in METHODS:
        n = float(safety_factor(method, 358.5, 0.0, 276.0, 551.0))
        assert n == pytest.approx(0.77, abs=0.005), method
        # R = −1: every correction gives back the amplitude itself
        amp = np.array([10.0, 358.5, 1e3])
        assert equivalent_amplitude(method, amp, 0 * amp, 551.0) == pytest.approx(amp)
    sf, b = basquin_from_points([[1e3, 0.9 * 551.0], [1e6, 276.0]])
    assert b == pytest.approx(-0.084828, rel=1e-5)
    assert sf * 2**b == pytest.approx(891.0, rel=1e-3)  # Shigley's a, with N not 2N
    assert float(sn_life(machined(sf, b), 358.5)) == pytest.approx(45_800, rel=5e-3)


def test_a_compressive_mean_earns_no_credit_under_goodman_and_gerber():
    for f in (goodman_equivalent, gerber_equivalent):
        assert float(f(30.0, -200.0, 600.0)) == pytest.approx(30.0)
    # with no amplitude Gerber's root is the static Su/σm
    assert float(gerber_safety_factor(0.0, 150.0, 270.0, 600.0)) == pytest.approx(4.0)
    # Gerber's parabola lies outside Goodman's line: a larger factor for a tensile mean
    assert gerber_safety_factor(80.0, 150.0, 200.0, 600.0) > goodman_safety_factor(
        80.0, 150.0, 200.0, 600.0
    )


# ------------------------------------------------------------- S-N from points


def test_the_curve_through_two_points_passes_through_both():
    points = [[2e3, 700.0], [5e5, 310.0]]
    sf, b = basquin_from_points(points)
    cond = machined(sf, b)
    for n, s in points:
        assert sn_strength(cond, n) == pytest.approx(s, rel=1e-12)
        assert float(sn_life(cond, s)) == pytest.approx(n, rel=1e-9)
    # the order of the points does not matter
    assert basquin_from_points(points[::-1]) == pytest.approx((sf, b))


def test_sn_points_replace_the_condition_curve_in_the_problem():
    mat = replace(
        PRESETS["Ti-6Al-4V"],
        condition="hip",
        surface="machined",
        sn_points=((1e3, 900.0), (1e6, 450.0)),
    )
    cond = condition_of(mat)
    assert sn_strength(cond, 1e3) == pytest.approx(900.0)
    assert sn_strength(cond, 1e6) == pytest.approx(450.0)
    assert cond.endurance_limit is None  # no knee unless the file gives one
    assert "sn_points" in cond.source
    knee = condition_of(replace(mat, endurance_limit=400.0))
    assert sn_strength(knee, 1e9) == 400.0


# ---------------------------------------------------------------- orientation


def test_directional_strength_interpolates_between_the_orientations():
    assert directional_strength(1100.0, 1050.0, 0.0) == pytest.approx(1100.0)
    assert directional_strength(1100.0, 1050.0, 90.0) == pytest.approx(1050.0)
    # 45°: 1/S² = ½/1100² + ½/1050² = ½ (8.26446e-7 + 9.07029e-7) = 8.66738e-7 (by hand),
    # S = 1074.13
    assert directional_strength(1100.0, 1050.0, 45.0) == pytest.approx(1074.13, rel=1e-5)
    assert strength_at(1100.0, 1050.0, None) == 1050.0  # no build direction: the weaker


def test_principal_direction_and_angle_against_rotated_uniaxial_stress(rng):
    """σ = S n nᵀ is uniaxial along n: its principal direction is ±n, and its angle to
    +z is arccos |n_z| (a construction independent of the eigen-solver)."""
    n = rng.normal(size=(50, 3))
    n /= np.linalg.norm(n, axis=1)[:, None]
    s = rng.uniform(-300, 300, size=50)
    t = s[:, None, None] * n[:, :, None] * n[:, None, :]
    voigt = np.stack([t[:, 0, 0], t[:, 1, 1], t[:, 2, 2], t[:, 1, 2], t[:, 0, 2], t[:, 0, 1]], 1)
    d = principal_direction(voigt)
    assert np.abs(np.einsum("ij,ij->i", d, n)) == pytest.approx(np.ones(50))
    expected = np.degrees(np.arccos(np.abs(n[:, 2])))
    assert angle_to_build(voigt, np.array([0.0, 0.0, 1.0])) == pytest.approx(expected, abs=1e-6)
    # 2D pure shear τ: principal stresses ±τ along the diagonals, 45° to y
    assert float(angle_to_build(np.array([0.0, 0.0, 80.0]), np.array([0.0, 1.0]))) == (
        pytest.approx(45.0)
    )
    # signed von Mises: the sign of the hydrostatic stress
    assert float(signed_von_mises(np.array([-100.0, 0.0, 0.0]))) == pytest.approx(-100.0)
    assert float(signed_von_mises(np.array([0.0, 50.0, 0.0]))) == pytest.approx(50.0)


# ------------------------------------------------- cycles between two load cases


def beam(cases, preset="Ti-6Al-4V", **material):
    """beam_problem's 20 × 5 mm cantilever (1 mm thick) in a printed alloy, with the
    given load cases: (name, tip force in N, fatigue keys)."""
    d = beam_problem()
    d["material"] = {"preset": preset, "condition": "hip", "surface": "machined", **material}
    base = d["load_case"][0]
    d["load_case"] = [
        {"name": n, "force": [{"region": base["force"][0]["region"], "total": [0.0, f]}], **k}
        for n, f, k in cases
    ]
    return problem_from_dict(d)


def at_mid_span_top(result):
    c = result.model.grid.element_centers
    return int(np.flatnonzero((np.abs(c[:, 0] - 10.5) < 1e-9) & (np.abs(c[:, 1] - 4.5) < 1e-9))[0])


def test_a_pair_of_opposite_cases_is_fully_reversed_at_the_beam_theory_amplitude():
    """Tip loads of −1 N and +1 N as the two ends of one cycle: the amplitude tensor
    is the stress of one of them and the mean is zero; at mid-span, outer row
    (centres 2 mm from the axis) σ = M c/I = 9.5·2/(125/12) = 1.824 MPa (Euler-
    Bernoulli beam theory, 10 %: bilinear elements sampled at the centre). The von
    Mises stresses of the two cases are equal, so their difference would say zero."""
    p = beam([("down", -1.0, {"cycles": 1e6, "cycles_with": "up"}), ("up", 1.0, {})])
    result = analyze(p)
    e = at_mid_span_top(result)
    vm = result.printed.analysis.von_mises[e]
    assert vm[0] == pytest.approx(vm[1])
    block = result.summary["fatigue"]
    (row,) = block["load_cases"]
    assert row["cycles_with"] == "up" and "between load cases" in row["cycle"]
    assert row["mean_at_weakest_MPa"] == pytest.approx(0.0, abs=1e-9)
    assert row["load_ratio"] == pytest.approx(-1.0)
    # the amplitude tensor is the stress of either case: its peak is theirs
    peak = result.printed.analysis.von_mises[:, 0].max()
    assert row["max_amplitude_MPa"] == pytest.approx(peak)
    assert "tensor" in block["stress_measure"]
    amp = _amplitudes(result)[0][e]
    assert amp == pytest.approx(9.5 * 2 / (125 / 12), rel=0.10)


def _amplitudes(result):
    from topo.fatigue import stress_cycles
    from topo.stress import centre_stresses

    p = result.problem
    cases = [(i, c) for i, c in enumerate(p.load_cases) if c.cycles is not None]
    stress = centre_stresses(result.model, result.printed.analysis.displacements)
    cyc = stress_cycles(cases, [c.name for c in p.load_cases], stress=stress)
    return cyc.amplitudes[0], cyc.means[0]


def test_a_pair_equals_the_load_ratio_of_proportional_cases():
    """−1 N and −0.5 N at the ends of a cycle is R = 0.5 of the −1 N case: σa = σ/4 and
    σm = 3σ/4, tensile on the top fibre and compressive (signed) on the bottom."""
    pair = analyze(
        beam([("full", -1.0, {"cycles": 1e6, "cycles_with": "half"}), ("half", -0.5, {})])
    )
    ratio = analyze(beam([("full", -1.0, {"cycles": 1e6, "load_ratio": 0.5}), ("half", -0.5, {})]))
    (amp_p, mean_p), (amp_r, mean_r) = _amplitudes(pair), _amplitudes(ratio)
    assert amp_p == pytest.approx(amp_r) and mean_p == pytest.approx(mean_r)
    vm = pair.printed.analysis.von_mises[:, 0]
    assert amp_p == pytest.approx(vm / 4)
    c = pair.model.grid.element_centers
    top = (np.abs(c[:, 1] - 4.5) < 1e-9) & (c[:, 0] > 3) & (c[:, 0] < 17)
    bottom = (np.abs(c[:, 1] - 0.5) < 1e-9) & (c[:, 0] > 3) & (c[:, 0] < 17)
    assert (mean_p[top] > 0).all() and (mean_p[bottom] < 0).all()
    assert np.abs(mean_p) == pytest.approx(3 * vm / 4)
    a, b = pair.summary["fatigue"], ratio.summary["fatigue"]
    assert a["safety_factor"] == pytest.approx(b["safety_factor"])
    assert a["load_cases"][0]["load_ratio"] == pytest.approx(0.5)  # effective, at the weakest


# ------------------------------------------------------------ Miner by hand


# Two cases with σf' = 1000 MPa, b = −0.1 (N = ½ (σa/σf')^−10) given as two S-N points
# (10³ cycles: 1000·2000^−0.1, 10⁶: 1000·(2·10⁶)^−0.1), no knee, machined, fully reversed:
# the per-case lives at the governing element multiply out by hand, and Miner's sum is
# Σ n/N there (Miner, J. Appl. Mech. 12, 1945).
def test_miner_sum_of_two_cases_by_hand():
    pts = [[1e3, 1000 * 2000**-0.1], [1e6, 1000 * 2e6**-0.1]]
    p = beam(
        [("a", -100.0, {"cycles": 1e4}), ("b", -60.0, {"cycles": 2e5})],
        sn_points=pts,
    )
    result = analyze(p)
    block = result.summary["fatigue"]
    vm = result.printed.analysis.von_mises
    c = result.model.grid.element_centers
    j = int(np.argmin(np.linalg.norm(c - block["damage_location_mm"], axis=1)))
    lives = 0.5 * (vm[j] / 1000.0) ** -10  # fully reversed: amplitude = von Mises
    assert block["damage"] == pytest.approx(1e4 / lives[0] + 2e5 / lives[1], rel=1e-9)


# -------------------------------------------- static yield of a named condition


def test_static_check_uses_the_named_condition_yield_and_its_orientation():
    """Ti-6Al-4V: the preset's 825 MPa (ASTM F2924 minimum, from memory) against the
    as-built condition's 1100 MPa along the build direction, 1050 MPa across (from
    memory). A tip load of 270 N puts the peak between them: FAIL with the preset's,
    PASS with the condition's."""

    def run(**material):
        d = beam_problem()
        d["material"] = {"preset": "Ti-6Al-4V", **material}
        d["load_case"][0]["force"][0]["total"] = [0.0, -270.0]
        return analyze(problem_from_dict(d))

    plain = run()
    peak = plain.summary["max_von_mises_MPa"]
    assert 825 < peak < 1050
    rows = {r["name"]: r for r in plain.summary["checks"]}
    assert rows["safety_factor"]["status"] == "FAIL"
    assert plain.summary["load_cases"][0]["yield_strength_MPa"] == 825.0
    assert "the same in every direction" in rows["safety_factor"]["detail"]

    named = run(condition="as-built")
    rows = {r["name"]: r for r in named.summary["checks"]}
    assert rows["safety_factor"]["status"] == "PASS"
    case = named.summary["load_cases"][0]
    assert case["yield_strength_MPa"] == 1050.0  # no build direction: the weaker
    assert case["yield_angle_to_build_deg"] is None
    assert "no build direction" in rows["safety_factor"]["detail"]
    assert named.summary["safety_factor"] == pytest.approx(1050.0 / peak)

    # along +x the bending stress runs with the build direction (across the layers)
    d = beam_problem()
    d["material"] = {"preset": "Ti-6Al-4V", "condition": "as-built"}
    d["load_case"][0]["force"][0]["total"] = [0.0, -270.0]
    d["build"] = {"direction": "+x", "overhang_filter": False}
    along = analyze(problem_from_dict(d))
    case = along.summary["load_cases"][0]
    angle = case["yield_angle_to_build_deg"]
    assert case["yield_strength_MPa"] == pytest.approx(directional_strength(1100, 1050, angle))
    assert case["yield_strength_MPa"] > 1050.0
    rows = {r["name"]: r for r in along.summary["checks"]}
    assert "Tsai-Hill" in rows["safety_factor"]["detail"]

    # a yield_strength in the file stands in every direction
    given = run(condition="as-built", yield_strength=900.0)
    assert given.summary["load_cases"][0]["yield_strength_MPa"] == 900.0
    assert given.problem.material.yield_parallel == 900.0


def test_yield_safety_picks_the_least_ratio_over_the_points():
    mat = replace(
        PRESETS["Ti-6Al-4V"],
        condition="as-built",
        yield_parallel=1100.0,
        yield_perpendicular=1000.0,
    )
    # two points: 500 MPa uniaxial along x (the build direction) and 480 MPa along y
    stress = np.array([[[500.0, 0.0, 0.0]], [[0.0, 480.0, 0.0]]])
    vm = np.array([[500.0], [480.0]])
    ((factor, fy, angle),) = yield_safety(mat, "+x", stress, vm)
    assert (factor, fy, angle) == pytest.approx((1000 / 480, 1000.0, 90.0))
    ((factor, fy, angle),) = yield_safety(mat, "+y", stress, vm)
    assert (factor, fy, angle) == pytest.approx((1000 / 500, 1000.0, 90.0))


def test_fatigue_ultimate_follows_the_orientation():
    """Goodman at R = 0 on the bending cantilever of Ti-6Al-4V as-built (ultimate 1250
    MPa along the build direction, 1200 across, from memory): built along x, the
    bending stress runs along the build direction; built along y, across it."""

    def block(direction):
        d = beam_problem()
        d["material"] = {"preset": "Ti-6Al-4V", "condition": "as-built"}
        d["load_case"][0]["force"][0]["total"] = [0.0, -100.0]
        d["load_case"][0].update(cycles=1e6, load_ratio=0.0)
        if direction:
            d["build"] = {"direction": direction, "overhang_filter": False}
        return analyze(problem_from_dict(d)).summary["fatigue"]

    x, y, none = block("+x"), block("+y"), block(None)
    assert x["weakest_angle_to_build_deg"] < 30 < y["weakest_angle_to_build_deg"]
    assert x["weakest_ultimate_MPa"] > y["weakest_ultimate_MPa"]
    assert none["weakest_ultimate_MPa"] == 1200.0 and none["weakest_angle_to_build_deg"] is None
    assert "no build direction" in none["orientation"] and "Tsai-Hill" in x["orientation"]
    assert x["safety_factor"] > none["safety_factor"]


def test_every_correction_runs_through_the_summary():
    for method in METHODS:
        p = beam(
            [("tip", -100.0, {"cycles": 1e6, "load_ratio": 0.1})], mean_stress_correction=method
        )
        block = analyze(p).summary["fatigue"]
        assert block["mean_stress_method"] == method
        row = block["load_cases"][0]
        n = safety_factor(
            method,
            row["amplitude_at_weakest_MPa"],
            row["mean_at_weakest_MPa"],
            row["strength_at_life_MPa"],
            row["ultimate_at_weakest_MPa"],
        )
        assert block["safety_factor"] == pytest.approx(float(n))
    hip = DATA["Ti-6Al-4V"]["hip"]
    assert row["ultimate_at_weakest_MPa"] == hip.ultimate_perpendicular


# ------------------------------------------------------------------ bad input

TEXT = plate_toml(
    name="plate",
    size=[20.0, 10.0],
    thickness=2.0,
    preset="AlSi10Mg",
    max_iterations=2,
    load=[20.0, 5.0],
    total=[0.0, -10.0],
)
SECOND = """[[load_case]]
name = "up"
  [[load_case.force]]
  region = { point = [20.0, 5.0] }
  total = [0.0, 10.0]
"""


def material(lines):
    return TEXT.replace('preset = "AlSi10Mg"', f'preset = "AlSi10Mg"\n{lines}')


def with_case(lines, text=TEXT):
    return text.replace('name = "down"\n', f'name = "down"\n{lines}\n') + SECOND


BAD = [
    ("rising points", material("sn_points = [[1e3, 300.0], [1e6, 400.0]]"), "material.sn_points:"),
    ("flat points", material("sn_points = [[1e3, 300.0], [1e6, 300.0]]"), "material.sn_points:"),
    ("same life", material("sn_points = [[1e3, 300.0], [1e3, 200.0]]"), "material.sn_points:"),
    ("one point", material("sn_points = [[1e3, 300.0]]"), "material.sn_points: expected two"),
    ("zero stress", material("sn_points = [[1e3, 300.0], [1e6, 0.0]]"), "material.sn_points[1][1]"),
    (
        "points and exponent",
        material("sn_points = [[1e3, 300.0], [1e6, 200.0]]\nfatigue_strength_exponent = -0.1"),
        "material.sn_points: give either",
    ),
    (
        "knee above the points",
        with_case(
            "cycles = 1e6",
            material("sn_points = [[1e3, 300.0], [1e6, 150.0]]\nendurance_limit = 200.0"),
        ),
        "material.endurance_limit: 200 MPa is above",
    ),
    (
        "correction",
        material('mean_stress_correction = "soderberg"'),
        "material.mean_stress_correction",
    ),
    (
        "pair unknown",
        with_case('cycles = 1e6\ncycles_with = "sideways"'),
        "load_case[0].cycles_with",
    ),
    ("pair itself", with_case('cycles = 1e6\ncycles_with = "down"'), "load_case[0].cycles_with"),
    ("pair no life", with_case('cycles_with = "up"'), "load_case[0].cycles: missing"),
    (
        "pair and ratio",
        with_case('cycles = 1e6\ncycles_with = "up"\nload_ratio = 0.1'),
        "load_case[0].load_ratio: give either",
    ),
]


@pytest.mark.parametrize("label,text,fragment", BAD, ids=[b[0] for b in BAD])
def test_bad_fatigue_input_exits_2_naming_the_key(label, text, fragment, tmp_path, capsys):
    check_exits_2(text, fragment, tmp_path, capsys)


def test_good_pair_and_points_pass_the_check(tmp_path, capsys):
    text = with_case(
        'cycles = 1e6\ncycles_with = "up"',
        material('sn_points = [[1e3, 300.0], [1e6, 150.0]]\nmean_stress_correction = "gerber"'),
    )
    f = tmp_path / "p.toml"
    f.write_text(text)
    assert main(["check", str(f)]) == 0


# ------------------------------------------------ stresses of the verification


def verified_cantilever():
    """A 100 × 10 mm cantilever, 5 mm thick, 100 N down on its end face, in HIP
    Ti-6Al-4V (machined) under fully reversed load, verified body-fitted."""
    from topo.verification import verify

    d = beam_problem(size=[100.0, 10.0])
    d["domain"]["thickness"] = 5.0
    d["material"] = {"preset": "Ti-6Al-4V", "condition": "hip", "surface": "machined"}
    d["load_case"][0]["force"][0]["total"] = [0.0, -100.0]
    d["load_case"][0].update(cycles=1e6)
    result = analyze(problem_from_dict(d))
    return result, verify(result, exact=True)


def test_the_verification_feeds_the_fatigue_block():
    """At mid-span on the top fibre σx = M c/I = 100·50·5/(5·10³/12) = 60 MPa (beam
    theory), the fully reversed amplitude; 2 % on the quadratic body-fitted mesh."""
    from topo.verification.figures import STRESS_SOURCE, apply_to_summary

    result, ver = verified_cantilever()
    block = ver.figures["fatigue"]
    assert block["stress_source"].startswith(STRESS_SOURCE)
    sol = ver.solution
    node = int(np.argmin(np.linalg.norm(sol.points - [50.0, 10.0], axis=1)))
    from topo.fatigue import stress_cycles

    case = result.problem.load_cases[0]
    cyc = stress_cycles([(0, case)], ["tip"], stress=np.transpose(sol.stress, (0, 2, 1)))
    assert cyc.amplitudes[0][node] == pytest.approx(60.0, rel=0.02)
    (row,) = block["load_cases"]
    assert row["max_amplitude_MPa"] == pytest.approx(float(sol.von_mises[:, 0].max()))
    assert block["safety_factor"] == pytest.approx(
        row["strength_at_life_MPa"] / row["max_amplitude_MPa"]
    )
    # the static check takes the named condition's yield (880 MPa both ways, from memory)
    assert ver.figures["safety_factor"] == pytest.approx(880.0 / ver.figures["max_von_mises_MPa"])
    # the run's summary gets the verified block, the grid's headline beside it
    grid = result.summary
    out = apply_to_summary(grid, ver.figures)
    assert out["fatigue"] is block
    assert out["grid_fatigue"]["safety_factor"] == grid["fatigue"]["safety_factor"]
    assert out["grid_fatigue"]["stress_source"].startswith("grid")
    rows = {r["name"]: r for r in out["checks"]}
    assert "body-fitted" in rows["fatigue_safety_factor"]["detail"]
    assert [r["name"] for r in out["checks"]].count("fatigue_damage") == 1
    again = apply_to_summary(out, ver.figures)
    assert again["grid_fatigue"]["safety_factor"] == grid["fatigue"]["safety_factor"]


def test_a_verification_redraws_the_runs_fatigue_figure(tmp_path, monkeypatch):
    """fatigue.png of a run marks the same weakest points as its summary: after a
    verification both come from the body-fitted stresses; where the run wrote no
    fatigue.png (an analysis's summary only), none is made."""
    import topo.verification.output as output
    from topo.verification.figures import STRESS_SOURCE

    result, ver = verified_cantilever()
    drawn = []
    monkeypatch.setattr(output, "fatigue_figure", lambda problem, block: drawn.append(block))
    monkeypatch.setattr(output.files, "write_figure", lambda path, fig: path.write_bytes(b"x"))
    output.write_verification(ver, tmp_path, result.summary)
    assert drawn == [] and not (tmp_path / "fatigue.png").exists()
    (tmp_path / "fatigue.png").write_bytes(b"grid")
    summary = output.write_verification(ver, tmp_path, result.summary)
    assert drawn == [summary["fatigue"]] and drawn[0]["stress_source"].startswith(STRESS_SOURCE)
    assert (tmp_path / "fatigue.png").read_bytes() == b"x"


def test_fatigue_rows_of_the_verification_both_ways():
    from topo.verification.figures import fatigue_rows

    def block(sf, damage):
        return {"mean_stress_method": "gerber", "safety_factor": sf, "damage": damage}

    ok = {r["name"]: r["status"] for r in fatigue_rows(block(1.3, 0.2), 1.2)}
    assert ok == {"fatigue_safety_factor": "PASS", "fatigue_damage": "PASS"}
    bad = {r["name"]: r["status"] for r in fatigue_rows(block(1.1, 1.0), 1.2)}
    assert bad == {"fatigue_safety_factor": "FAIL", "fatigue_damage": "FAIL"}
    assert "Gerber" in fatigue_rows(block(1.3, 0.2), 1.2)[0]["detail"]
    assert fatigue_rows(None, 1.2) == []  # no cycles: the grid's N/A rows stand


def test_without_tensors_a_pair_is_bounded_from_above(rng):
    """Von Mises is a seminorm, so vm((σ₁ ∓ σ₂)/2) ≤ (vm(σ₁) + vm(σ₂))/2: the bound the
    von-Mises-only path takes for both amplitude and mean holds for random tensors."""
    from topo.elements import von_mises
    from topo.fatigue import stress_cycles

    s = rng.normal(scale=100.0, size=(200, 2, 6))
    vm = von_mises(s)
    p = beam([("a", -1.0, {"cycles": 1e6, "cycles_with": "b"}), ("b", 1.0, {})])
    cases = [(0, p.load_cases[0])]
    bound = stress_cycles(cases, ["a", "b"], von_mises=vm)
    exact = stress_cycles(cases, ["a", "b"], stress=s)
    assert (exact.amplitudes[0] <= bound.amplitudes[0] + 1e-9).all()
    assert (np.abs(exact.means[0]) <= bound.means[0] + 1e-9).all()
    assert bound.amplitudes[0] == pytest.approx((vm[:, 0] + vm[:, 1]) / 2)


def test_three_dimensional_bending_lies_within_the_layers_when_built_upwards():
    """A 3D cantilever along x under a tip load in −z, built along +z: the bending
    stress at the weakest point runs along x, within the layers (θ near 90°), so the
    perpendicular ultimate governs (Ti-6Al-4V as-built: 1200 MPa, from memory)."""
    d = beam_problem(dim=3)
    d["material"] = {"preset": "Ti-6Al-4V", "condition": "as-built"}
    d["load_case"][0]["force"][0]["total"] = [0.0, 0.0, -10.0]
    d["load_case"][0].update(cycles=1e6, load_ratio=0.0)
    d["build"] = {"direction": "+z", "overhang_filter": False}
    block = analyze(problem_from_dict(d)).summary["fatigue"]
    assert block["weakest_angle_to_build_deg"] > 60
    assert 1200.0 <= block["weakest_ultimate_MPa"] < directional_strength(1250, 1200, 60)
