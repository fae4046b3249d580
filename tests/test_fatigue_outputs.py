"""Fatigue outputs: fatigue.png (its S-N curves against Basquin's formula written
out here, its governing points against Goodman's), the comparison rows with their
governing load case and life, the console table and report.html."""

import math

import numpy as np
import pytest
from test_review import Tables

from problems import add_point_load, beam_problem
from topo.conditions import DATA
from topo.design import analyze
from topo.export import export
from topo.fatigue_figure import curve_label, fatigue_figure
from topo.problem import problem_from_dict
from topo.report import format_fatigue
from topo.review import fmt


def beam(cycles=True, **material):
    """beam_problem's 20 × 5 mm cantilever in as-built Ti-6Al-4V: 100 N down at the tip
    (hundreds of MPa at the root) for 10⁶ cycles at R = 0.1, and 30 N along x at the
    tip corner fully reversed for 10⁷ cycles."""
    d = beam_problem()
    d["material"] = {"preset": "Ti-6Al-4V", **material}
    d["load_case"][0]["force"][0]["total"] = [0.0, -100.0]
    add_point_load(d, "pull", [20.0, 5.0], [30.0, 0.0])
    if cycles:
        d["load_case"][0].update(cycles=1e6, load_ratio=0.1)
        d["load_case"][1].update(cycles=1e7, load_ratio=-1.0)
    return problem_from_dict(d)


def basquin(alloy, condition, surface, cycles):
    """σa = σf' (2N)^b, not below the endurance amplitude, times the surface factor
    for an as-built surface (O. H. Basquin, Proc. ASTM 10, 1910), written out here
    from the data's four numbers."""
    c = DATA[alloy][condition]
    s = c.fatigue_strength_coefficient * (2 * cycles) ** c.fatigue_strength_exponent
    if c.endurance_limit is not None:
        s = max(s, c.endurance_limit)
    return s * (c.surface_factor if surface == "as-built" else 1.0)


def lines_by_label(fig):
    return {line.get_label(): line for line in fig.axes[0].get_lines()}


def test_sn_curves_and_governing_points_of_the_figure():
    result = analyze(beam())
    block = result.summary["fatigue"]
    fig = fatigue_figure(result.problem, block)
    lines = lines_by_label(fig)
    curves = [k for k in lines if "surface" in k]
    assert len(curves) == 6  # three conditions × two surfaces of Ti-6Al-4V
    for condition in ("as-built", "heat-treated", "hip"):
        for surface in ("as-built", "machined"):
            label = curve_label(condition, surface)
            line = next(lines[k] for k in curves if k.startswith(label))
            x, y = line.get_xdata(), line.get_ydata()
            at = np.flatnonzero(x == 1e6)
            assert len(at) == 1
            assert y[at[0]] == pytest.approx(basquin("Ti-6Al-4V", condition, surface, 1e6))
            assert np.all(np.diff(y) <= 0)  # an S-N curve never rises with life
    assert fig.axes[0].get_xscale() == "log" and fig.axes[0].get_yscale() == "log"
    assert [k for k in curves if k.endswith("(this design)")] == [
        curve_label("as-built", "as-built") + " (this design)"
    ]
    # each case at its design life and the Goodman-equivalent amplitude σa/(1 − σm/Su)
    # (Goodman's line, Shigley's Mechanical Engineering Design, recalled from memory)
    data = DATA["Ti-6Al-4V"]["as-built"]
    ultimate = min(data.ultimate_parallel, data.ultimate_perpendicular)  # the weaker
    for case in block["load_cases"]:
        (point,) = [v for k, v in lines.items() if k.startswith(case["name"] + ":")]
        a, m = case["amplitude_at_weakest_MPa"], case["mean_at_weakest_MPa"]
        assert list(point.get_xdata()) == [case["cycles"]]
        assert point.get_ydata()[0] == pytest.approx(a / (1 - m / ultimate))
    caption = " ".join(t.get_text() for t in fig.texts)
    assert "Indicative" in caption and "qualified" in caption


def test_fatigue_png_is_written_with_cycles_and_removed_without(tmp_path):
    out = tmp_path / "run"
    files = export(analyze(beam()), out, mesh=False).files
    assert out / "fatigue.png" in files
    assert (out / "fatigue.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert 'alt="fatigue.png"' in (out / "report.html").read_text()
    # the same folder re-exported for a problem without cycles: no stale figure
    files = export(analyze(beam(cycles=False)), out, mesh=False).files
    assert not (out / "fatigue.png").exists() and out / "fatigue.png" not in files
    assert "fatigue.png" not in (out / "report.html").read_text()


def test_comparison_rows_name_the_governing_case_and_the_life_there():
    result = analyze(beam())
    block = result.summary["fatigue"]
    by = {(r["condition"], r["surface"]): r for r in block["comparison"]}
    mine = by[("as-built", "as-built")]
    assert mine["safety_factor"] == pytest.approx(block["safety_factor"])
    assert mine["governing_load_case"] == block["governing_load_case"]
    case = next(c for c in block["load_cases"] if c["name"] == block["governing_load_case"])
    # the life at the weakest element by hand: N = ½ (σeq / (ka σf'))^(1/b) with the
    # Goodman-equivalent amplitude σeq (above the knee here)
    c = DATA["Ti-6Al-4V"]["as-built"]
    eq = case["amplitude_at_weakest_MPa"] / (1 - case["mean_at_weakest_MPa"] / c.ultimate)
    assert eq > c.endurance_limit * c.surface_factor
    life = 0.5 * (eq / (c.surface_factor * c.fatigue_strength_coefficient)) ** (
        1 / c.fatigue_strength_exponent
    )
    assert mine["life_at_weakest_cycles"] == pytest.approx(life, rel=1e-9)
    # HIP and machined: a safety factor above one and the knee's unbounded life (null)
    best = by[("hip", "machined")]
    assert best["safety_factor"] > 1 and best["life_at_weakest_cycles"] is None
    assert all(r["governing_load_case"] in ("tip", "pull") for r in block["comparison"])


def test_console_table_shows_governing_case_and_life_and_the_loop_bounds():
    result = analyze(beam())
    lines = format_fatigue(result.summary)
    rows = [line for line in lines if line.startswith("     ")]
    assert len(rows) == 6  # three conditions × two surfaces
    chosen = [line for line in rows if line.startswith("     *")]
    assert len(chosen) == 1 and chosen[0].split()[:2] == ["*as-built", "as-built"]
    mine = result.summary["fatigue"]["comparison"][0]
    assert (
        f"{mine['governing_load_case']} (life {mine['life_at_weakest_cycles']:.3g} cycles)"
        in (chosen[0])
    )
    assert any("(life unbounded)" in line for line in rows)
    assert lines[2].endswith("life unbounded")  # the pull case, below the knee
    assert not any("bounded in the loop" in line for line in lines)
    # with fatigue_life in the problem the bound of each case is listed
    summary = dict(result.summary)
    summary["loop_stress_limits"] = [
        {"name": "tip", "limit_MPa": 235.1, "governed_by": "fatigue_life"},
        {"name": "pull", "limit_MPa": None, "governed_by": None},
    ]
    tail = format_fatigue(summary)[-2:]
    assert tail[0] == "    bounded in the loop (grey design, corrected p-norm):"
    assert tail[1].startswith("      tip: peak 235.1 MPa from fatigue_life; printed part's peak ")


def test_report_holds_the_fatigue_tables(tmp_path):
    out = tmp_path / "run"
    summary = export(analyze(beam()), out, mesh=False).summary
    parser = Tables()
    parser.feed((out / "report.html").read_text())
    parser.close()
    by_header = {t[0][0] + "|" + t[0][1]: t[1:] for t in parser.tables if len(t[0]) > 1}
    comparison = by_header["condition|surface"]
    assert [r[:4] for r in comparison] == [
        [r["condition"], r["surface"], fmt(r["safety_factor"]), fmt(r["damage"])]
        for r in summary["fatigue"]["comparison"]
    ]
    assert [r[4] for r in comparison] == [
        r["governing_load_case"] for r in summary["fatigue"]["comparison"]
    ]
    cases = by_header["load case|design life (cycles)"]
    assert [(r[0], r[6]) for r in cases] == [
        (c["name"], fmt(c["safety_factor"])) for c in summary["fatigue"]["load_cases"]
    ]
    assert math.isfinite(summary["fatigue"]["safety_factor"])
