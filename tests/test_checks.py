"""Every sign-off check, each outcome: PASS, FAIL and N/A where it applies."""

from dataclasses import replace

import pytest

from topo.checks import FAIL, NA, PASS, SignOffFigures, failed, run_checks


def good() -> SignOffFigures:
    return SignOffFigures(
        load_path_connected=True,
        cut_off_loads=[],
        loose_pieces=0,
        interfaces=[{"name": "boss", "solid_share": 1.0, "downfacing_area_mm2": 0.0}],
        compliance_gaps={"a": 0.01, "b": -0.02},
        safety_factor=2.0,
        required_safety_factor=1.5,
        max_von_mises_MPa=100.0,
        stress_limit_MPa=120.0,
        mass_kg=1.0,
        mass_limit_kg=1.2,
        deflections=[{"name": "tip", "load_case": "a", "value_mm": -0.9, "limit_mm": 1.0}],
        unsupported_fraction=0.0,
        unsupported_limit=0.0,
        cavities=[],
        min_wall_mm=1.0,
        min_gap_mm=2.0,
        wall_limit=0.8,
        gap_limit=2.0,
        element_size=0.5,
        fatigue_safety_factor=1.4,
        required_fatigue_safety_factor=1.2,
        fatigue_damage=0.3,
        fatigue_cycles=True,
    )


def status(figures) -> dict:
    return {r["name"]: r["status"] for r in run_checks(figures)}


def test_a_sound_design_passes_every_check():
    assert set(status(good()).values()) == {PASS}
    assert failed(run_checks(good())) == []


@pytest.mark.parametrize(
    "name,change",
    [
        ("load_path", {"load_path_connected": False, "cut_off_loads": ["tip"]}),
        ("load_path", {"load_path_connected": False, "loose_pieces": 2}),
        (
            "interfaces_whole",
            {"interfaces": [{"name": "boss", "solid_share": 0.875, "downfacing_area_mm2": 4.0}]},
        ),
        ("compliance_gap", {"compliance_gaps": {"a": 0.051}}),
        ("compliance_gap", {"compliance_gaps": {"a": -0.2}}),
        ("compliance_gap", {"compliance_gaps": {"a": None}}),
        ("safety_factor", {"safety_factor": 0.43}),
        ("stress_limit", {"max_von_mises_MPa": 130.8}),
        ("mass_limit", {"mass_kg": 1.3}),
        (
            "deflection_limits",
            {"deflections": [{"name": "tip", "load_case": "a", "value_mm": -1.2, "limit_mm": 1.0}]},
        ),
        ("unsupported_fraction", {"unsupported_fraction": 0.01}),
        ("enclosed_cavities", {"cavities": [{"volume_mm3": 8.0, "centre_mm": [1.0, 2.0, 3.0]}]}),
        ("min_wall", {"min_wall_mm": 0.5}),
        ("min_gap", {"min_gap_mm": 1.5}),
        ("fatigue_safety_factor", {"fatigue_safety_factor": 1.19}),
        ("fatigue_damage", {"fatigue_damage": 1.0}),
    ],
)
def test_each_check_fails_on_its_own_fault(name, change):
    s = status(replace(good(), **change))
    assert s[name] == FAIL
    assert [k for k, v in s.items() if v == FAIL] == [name]


@pytest.mark.parametrize(
    "name,change",
    [
        ("interfaces_whole", {"interfaces": []}),
        ("min_wall", {"wall_limit": None}),
        ("min_gap", {"gap_limit": None}),
        ("safety_factor", {"safety_factor": None}),
        ("stress_limit", {"stress_limit_MPa": None}),
        ("mass_limit", {"mass_limit_kg": None}),
        (
            "deflection_limits",
            {"deflections": [{"name": "tip", "load_case": "a", "value_mm": 5.0, "limit_mm": None}]},
        ),
        ("unsupported_fraction", {"unsupported_fraction": None}),
        ("fatigue_safety_factor", {"fatigue_cycles": False, "fatigue_safety_factor": None}),
        ("fatigue_damage", {"fatigue_cycles": False, "fatigue_damage": None}),
    ],
)
def test_checks_without_a_limit_say_not_applicable(name, change):
    assert status(replace(good(), **change))[name] == NA


def test_boundaries_pass():
    s = status(
        replace(
            good(),
            safety_factor=1.5,
            fatigue_safety_factor=1.2,
            fatigue_damage=0.999,
            compliance_gaps={"a": 0.05},
            mass_kg=1.2,
            deflections=[{"name": "t", "load_case": "a", "value_mm": 1.0, "limit_mm": 1.0}],
        )
    )
    assert set(s.values()) == {PASS}


def test_a_mechanism_fails_every_check_that_needs_its_analysis():
    # The printed part has a load region joined to no support, so it is not
    # analysed (printed.py): the figures are None and every check that would
    # judge them fails saying why, where None alone would read "N/A" or pass.
    reason = "not analysed: load region(s) tip reach no support"
    f = replace(
        good(),
        load_path_connected=False,
        cut_off_loads=["tip"],
        compliance_gaps={"a": None, "b": None},
        safety_factor=None,
        max_von_mises_MPa=None,
        deflections=[{"name": "tip", "load_case": "a", "value_mm": None, "limit_mm": 1.0}],
        fatigue_safety_factor=None,
        fatigue_damage=None,
        not_analysed=reason,
    )
    rows = {r["name"]: r for r in run_checks(f)}
    needs_analysis = (
        "compliance_gap",
        "safety_factor",
        "fatigue_safety_factor",
        "fatigue_damage",
        "stress_limit",
        "deflection_limits",
    )
    for name in needs_analysis:
        assert rows[name]["status"] == FAIL, name
        assert reason in rows[name]["detail"], name
    assert rows["load_path"]["status"] == FAIL
    # the geometric checks still judge the part
    for name in ("mass_limit", "unsupported_fraction", "min_wall", "min_gap"):
        assert rows[name]["status"] == PASS, name
    # a check with nothing to judge against stays N/A
    free = replace(f, stress_limit_MPa=None, fatigue_cycles=False)
    rows = {r["name"]: r["status"] for r in run_checks(free)}
    assert rows["stress_limit"] == NA and rows["fatigue_safety_factor"] == NA
    assert rows["fatigue_damage"] == NA
