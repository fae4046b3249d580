"""The command line end to end on a small problem: files written, exit codes."""

import copy
import dataclasses
import json

import numpy as np
import pytest

from problems import tiny_bracket_toml
from topo import runfolder
from topo.cli import main

SMALL = (
    tiny_bracket_toml(max_iterations=30, beta_interval=5)
    + """[[load_case]]
name = "pull"
  [[load_case.force]]
  region = { point = [24.0, 6.0] }
  total = [50.0, 0.0]
[[passive]]
kind = "void"
region = { box = { min = [8.0, 4.0], max = [12.0, 8.0] } }
"""
)

SUMMARY_KEYS = {
    "name",
    "dimension",
    "elements",
    "element_size_mm",
    "volume_fraction",
    "mass_kg",
    "compliance_Nmm",
    "load_cases",
    "iterations",
    "converged",
    "runtime_s",
    "build_direction",
    "unsupported_fraction",
    "max_von_mises_MPa",
}


@pytest.fixture
def small(tmp_path):
    f = tmp_path / "tiny.toml"
    f.write_text(SMALL)
    return f


def test_run_writes_every_output(small, tmp_path, capsys):
    out = tmp_path / "run"
    assert (
        main(["run", str(small), "--out", str(out), "--set", "optimization.volume_fraction=0.35"])
        == 0
    )
    for name in ["summary.json", "density.npy", "history.csv", "history.png", "design.png"]:
        assert (out / name).stat().st_size > 0
    s = json.loads((out / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(s)
    assert abs(s["optimizer"]["volume_fraction"] - 0.35) < 1e-3
    assert [c["name"] for c in s["load_cases"]] == ["down", "pull"]
    assert np.load(out / "density.npy").shape == (24, 12)
    lines = (out / "history.csv").read_text().splitlines()
    assert lines[0] == "iteration,objective,volume_fraction,change,beta,seconds"
    assert len(lines) == s["iterations"] + 1
    printed = capsys.readouterr().out
    assert "iter    1" in printed and "Concept design only" in printed
    assert not list(out.glob(".*.tmp"))


def test_check_and_analyze(small, tmp_path, capsys):
    assert main(["check", str(small)]) == 0
    text = capsys.readouterr().out
    assert "24×12 = 288 elements" in text and "total force [0, -100] N" in text
    out = tmp_path / "an"
    assert main(["analyze", str(small), "--out", str(out)]) == 0
    s = json.loads((out / "summary.json").read_text())
    assert s["load_cases"][0]["compliance_Nmm"] > 0
    # a given design: the empty design with one solid row is far more compliant
    design = np.full((24, 12), 1e-3)
    design[:, 5:7] = 1.0
    np.save(tmp_path / "d.npy", design)
    assert (
        main(["analyze", str(small), "--design", str(tmp_path / "d.npy"), "--out", str(out)]) == 0
    )
    s2 = json.loads((out / "summary.json").read_text())
    assert s2["optimizer"]["compliance_Nmm"] > s["load_cases"][0]["compliance_Nmm"]
    # printed, the row joins no load to a support: a mechanism, not analysed
    assert s2["printed_part"]["analysed"] is False
    assert s2["load_cases"][0]["compliance_Nmm"] is None
    assert "printed part not analysed" in capsys.readouterr().out


def test_input_error_exits_2_with_one_clean_line(small, capsys):
    assert main(["run", str(small), "--set", "optimization.volume_fraction=1.4"]) == 2
    err = capsys.readouterr().err
    assert "optimization.volume_fraction" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


# Strict JSON: summary.json must parse in readers that reject NaN and Infinity
# (RFC 8259 has no such numbers).


def _reject(constant):
    raise ValueError(f"non-finite number {constant} in JSON")


def test_summary_of_round_off_negative_densities_is_strict_json(tmp_path):
    from problems import beam_problem
    from topo import analyze, export, problem_from_dict, summarize
    from topo.stress import relax

    problem = problem_from_dict(beam_problem(2, [24.0, 12.0], 1.0))
    design = np.ones((24, 12))
    design[8:16, 4:8] = 0.0
    zero = analyze(problem, design)
    # -1e-17 is zero material up to round-off, as a filter or projection can leave it
    negative = dataclasses.replace(
        zero, density=np.where(zero.density == 0.0, -1e-17, zero.density), summary={}
    )
    with np.errstate(invalid="ignore"):  # the hazard: (-1e-17) ** 0.5 is NaN
        assert np.isnan(relax(negative.density.ravel(), negative.analysis.von_mises)).any()
    s = summarize(negative)
    json.dumps(s, allow_nan=False)
    assert (
        s["optimizer"]["peak_relaxed_stress_MPa"]
        == summarize(zero)["optimizer"]["peak_relaxed_stress_MPa"]
    )
    export(negative, tmp_path)
    json.loads((tmp_path / "summary.json").read_text(), parse_constant=_reject)


def test_export_writes_the_summary_without_changing_the_result(small, tmp_path):
    from topo import export, load_problem, optimize

    result = optimize(load_problem(small, {"optimization.max_iterations": 5}))
    before = copy.deepcopy(result.summary)
    written = export(result, tmp_path, mesh_format="ply")
    assert result.summary == before and "mesh" not in result.summary
    on_disk = json.loads((tmp_path / "summary.json").read_text())
    assert on_disk == written.summary and on_disk["mesh"]["faces"] > 0
    assert {k: v for k, v in on_disk.items() if k != "mesh"} == json.loads(json.dumps(before))
    # summary last of the outputs; then the mark of a finished run, over density.npy
    assert written.files[-2:] == [tmp_path / "summary.json", tmp_path / "finished.json"]
    assert runfolder.finished(tmp_path)["iterations"] == 5


def test_strict_json_writer_refuses_non_finite_numbers_and_leaves_no_file(tmp_path):
    from topo.files import write_json

    path = tmp_path / "s.json"
    with pytest.raises(ValueError):
        write_json(path, {"peak": float("nan")})
    with pytest.raises(ValueError):
        write_json(path, {"peak": [1.0, float("inf")]})
    assert list(tmp_path.iterdir()) == []
    write_json(path, {"peak": 1.5, "cases": [None, 2]})
    assert json.loads(path.read_text(), parse_constant=_reject) == {"peak": 1.5, "cases": [None, 2]}
