"""Sign-off of the printed part end to end: figures against an independent
thresholded re-analysis, deflection limits as MMA constraints, `run --strict`, and
the refusal of a build direction that cannot reach a load."""

import copy
import json

import numpy as np
import pytest

from problems import beam_problem, tiny_bracket_toml
from topo import optimize, problem_from_dict
from topo.cli import main
from topo.fem import Model

SMALL = (
    tiny_bracket_toml(max_iterations=120, beta_interval=10)
    + """[[deflection]]
name = "tip"
region = { point = [24.0, 6.0] }
direction = "-y"
limit = 0.05
"""
)


@pytest.fixture
def small(tmp_path):
    f = tmp_path / "tiny.toml"
    f.write_text(SMALL)
    return f


def test_printed_figures_equal_an_independent_thresholded_reanalysis():
    d = beam_problem(2, [30.0, 10.0], 1.0, max_iterations=40)
    d["passive"] = [
        {"name": "pad", "kind": "solid", "region": {"box": {"min": [28, 0], "max": [30, 10]}}}
    ]
    problem = problem_from_dict(d)
    r = optimize(problem)
    # the threshold by hand: ρ ≥ 0.5 or inside the pad, analysed by a fresh model
    x, y = np.meshgrid(np.arange(30) + 0.5, np.arange(10) + 0.5, indexing="ij")
    by_hand = ((r.density >= 0.5) | (x >= 28)).astype(float)
    model = Model(problem)
    a = model.analyze(by_hand.ravel())
    s = r.summary
    assert np.array_equal(r.printed.density, by_hand)
    assert s["compliance_Nmm"] == pytest.approx(a.compliances[0], rel=1e-12)
    assert s["load_cases"][0]["max_displacement_mm"] == pytest.approx(
        a.max_displacement[0], rel=1e-12
    )
    assert s["mass_kg"] == pytest.approx(by_hand.sum() * 1.0 * 1e-9 * 1000.0, rel=1e-12)
    # the grey figures beside them, and the gap between the two
    grey = float(r.analysis.compliances[0])
    assert s["optimizer"]["compliance_Nmm"] == pytest.approx(grey, rel=1e-12)
    assert s["compliance_gap"] == pytest.approx(a.compliances[0] / grey - 1, rel=1e-9)
    json.dumps(s, allow_nan=False)


def test_deflection_limit_is_met_by_mma():
    # A cantilever with an end plate; the heavily weighted tip load sets the layout,
    # a light axial case carries a limit on the end's +x movement at 70 % of what
    # the unconstrained design gives.
    d = beam_problem(2, [40.0, 10.0], 1.0, optimizer="mma", max_iterations=100, volume_fraction=0.4)
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [38, 0], "max": [40, 10]}}}]
    d["load_case"].append(
        {
            "name": "side",
            "weight": 0.05,
            "force": [{"region": {"face": "x-max"}, "total": [1.0, 0.0]}],
        }
    )
    d["deflection"] = [
        {"name": "end", "region": {"face": "x-max"}, "direction": "+x", "load_case": "side"}
    ]
    free = optimize(problem_from_dict(d)).summary
    v0 = free["optimizer"]["load_cases"][1]["deflections_mm"]["end"]
    limited_problem = copy.deepcopy(d)
    limited_problem["deflection"][0]["limit"] = 0.7 * v0
    s = optimize(problem_from_dict(limited_problem)).summary
    assert s["optimizer"]["load_cases"][1]["deflections_mm"]["end"] <= 0.7 * v0 * 1.01
    assert s["deflections"] == [
        {
            "name": "end",
            "load_case": "side",
            "value_mm": s["load_cases"][1]["deflections_mm"]["end"],
            "limit_mm": 0.7 * v0,
        }
    ]
    row = {c["name"]: c for c in s["checks"]}["deflection_limits"]
    assert row["status"] == "PASS"
    assert (
        s["optimizer"]["compliance_Nmm"] > free["optimizer"]["compliance_Nmm"]
    )  # paid in stiffness


def test_strict_run_exits_0_when_every_check_passes_and_3_when_one_fails(small, tmp_path, capsys):
    assert main(["run", str(small), "--out", str(tmp_path / "a"), "--quiet", "--strict"]) == 0
    s = json.loads((tmp_path / "a" / "summary.json").read_text())
    assert s["checks_failed"] == []
    assert "all checks passed" in capsys.readouterr().out
    args = [
        "run",
        str(small),
        "--out",
        str(tmp_path / "b"),
        "--quiet",
        "--set",
        "checks.safety_factor=1000",
    ]
    assert main(args + ["--strict"]) == 3
    captured = capsys.readouterr()
    assert "FAIL  safety_factor" in captured.out and "checks failed: safety_factor" in captured.err
    assert (tmp_path / "b" / "summary.json").exists()  # the outputs are written all the same
    assert main(args) == 0  # without --strict a failing check is reported, not an error


def test_unreachable_load_is_refused_unless_allowed(small, tmp_path, capsys):
    # Grown in +y, a keep-out band across the whole width at y = 4..6 cuts the load at
    # y = 6 off from the plate: no self-supporting material can reach it.
    text = (
        small.read_text()
        + """
[build]
direction = "+y"
[[passive]]
kind = "void"
region = { box = { min = [0.0, 4.0], max = [24.0, 6.0] } }
"""
    )
    text = text.replace("point = [24.0, 6.0] }\n  total", "point = [24.0, 9.0] }\n  total")
    small.write_text(text)
    assert main(["check", str(small)]) == 0
    assert "load down: no self-supporting material can reach it" in capsys.readouterr().out
    assert main(["run", str(small), "--out", str(tmp_path / "r"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "build.direction" in err and "load down" in err and "--allow-unreachable" in err
    assert not (tmp_path / "r" / "summary.json").exists()
    go_on = ["run", str(small), "--out", str(tmp_path / "r"), "--quiet", "--allow-unreachable"]
    assert main(go_on + ["--strict"]) == 3
    s = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert "load_path" in s["checks_failed"]
    # The printed part is a mechanism, held only by E_min: not analysed, so no
    # stiffness, deflection or stress figure, and the checks that need one fail.
    assert s["printed_part"]["analysed"] is False and s["printed_part"]["cut_off_loads"]
    assert s["compliance_Nmm"] is None and s["max_von_mises_MPa"] is None
    assert s["load_cases"][0]["deflections_mm"] == {"tip": None}
    assert s["optimizer"]["compliance_Nmm"] is not None  # the grey figures stay beside
    assert s["mass_kg"] > 0
    rows = {r["name"]: r for r in s["checks"]}
    for name in ("compliance_gap", "safety_factor", "deflection_limits"):
        assert rows[name]["status"] == "FAIL" and "not analysed" in rows[name]["detail"]
    assert (tmp_path / "r" / "stress.png").exists() and (tmp_path / "r" / "deflection.png").exists()
    assert "not analysed" in s["figures_of"] and s["printed_part"]["not_analysed"]
    assert "), not analysed: load region(s) down reach no support" in capsys.readouterr().out
    # a body-fitted verification would move the load onto the nearest printed node
    # and report a part that is not the one made: refused, the summary untouched
    assert main(["verify", str(tmp_path / "r")]) == 2
    assert "not verified" in capsys.readouterr().err
    after = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert after["checks"] == s["checks"] and not (tmp_path / "r" / "verify.json").exists()


def test_a_cut_interface_is_flagged_with_the_support_it_needs():
    # A load boss hanging from the top of a cantilever grown in +y, with a keep-out
    # zone right under it: the overhang layer cannot support the boss, the optimiser
    # sees only part of it, the printed part has it whole.
    d = beam_problem(2, [30.0, 12.0], 1.0, max_iterations=40)
    d["build"] = {"direction": "+y"}
    d["passive"] = [
        {"name": "boss", "kind": "solid", "region": {"box": {"min": [24, 8], "max": [30, 12]}}},
        {"name": "keep-out", "kind": "void", "region": {"box": {"min": [20, 0], "max": [30, 8]}}},
    ]
    d["load_case"][0]["force"][0]["region"] = {"face": "x-max"}
    s = optimize(problem_from_dict(d), allow_unreachable=True).summary
    boss = s["interfaces"][0]
    assert boss["solid_share"] < 1.0
    # by hand: the boss's lowest row, 6 elements of 1 mm × 1 mm thickness, hangs over
    # the keep-out zone (no element within 45° below it); its support columns run 8
    # layers down to the plate: 6 mm² and 6 × 8 × 1 = 48 mm³
    assert boss["downfacing_area_mm2"] == 6.0
    assert boss["support_volume_mm3"] == 48.0
    assert {c["name"]: c["status"] for c in s["checks"]}["interfaces_whole"] == "FAIL"
