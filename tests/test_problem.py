"""Problem files: loading, overrides and clear errors."""
import copy
from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

from topo.problem import ProblemError, load_problem, parse_override, problem_from_dict
from conftest import beam_problem

PROBLEMS = Path(__file__).parent.parent / "problems"


@pytest.mark.parametrize("name", ["bracket-2d.toml", "bracket-3d.toml"])
def test_demo_problems_load(name):
    p = load_problem(PROBLEMS / name)
    assert len(p.load_cases) == 2
    assert any(x.kind == "solid" for x in p.passives) and any(x.kind == "void" for x in p.passives)


def test_overrides_by_key_index_and_name():
    d = beam_problem()
    p = problem_from_dict(d, {"optimization.volume_fraction": 0.25, "load_case.tip.weight": 2.0})
    assert p.optimization.volume_fraction == 0.25
    assert p.load_cases[0].weight == 2.0
    p = problem_from_dict(d, {"load_case.0.name": "renamed"})
    assert p.load_cases[0].name == "renamed"
    assert d["optimization"]["volume_fraction"] == 0.5  # the input is not modified


def test_parse_override_reads_toml_values():
    assert parse_override("optimization.volume_fraction=0.25") == ("optimization.volume_fraction", 0.25)
    assert parse_override("build.direction=+z") == ("build.direction", "+z")
    assert parse_override("a.b=[1, 2]") == ("a.b", [1, 2])
    assert parse_override("optimization.projection=false") == ("optimization.projection", False)


@pytest.mark.parametrize("key,value,fragment", [
    ("optimization.volume_fraction", 1.5, "optimization.volume_fraction"),
    ("optimization.volume_fracton", 0.3, "did you mean 'volume_fraction'"),
    ("domain.element_size", 0.3, "not a whole number"),
    ("domain.size", [20.0, -5.0], "domain.size[1]"),
    ("material.youngs_modulus", "stiff", "material.youngs_modulus"),
    ("material.preset", "Ti64x", "unknown preset"),
    ("build.direction", "up", "build.direction"),
    ("build.overhang_angle", 30.0, "only 45 degrees"),
    ("load_case.0.force.0.total", [0.0, 0.0], "zero total force"),
])
def test_errors_name_the_key(key, value, fragment):
    d = beam_problem()
    if key.startswith("build"):
        d["build"] = {"direction": "+y"}
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d, {key: value}, source="demo.toml")
    assert fragment in str(err.value)
    assert str(err.value).startswith("demo.toml")


def test_material_needs_preset_or_values():
    d = beam_problem()
    d["material"] = {"poissons_ratio": 0.3}
    with pytest.raises(ProblemError, match="material.youngs_modulus"):
        problem_from_dict(d)


def test_toml_syntax_error_names_the_file(tmp_path):
    f = tmp_path / "bad.toml"
    f.write_text("[domain\nsize = [1, 2]\n")
    with pytest.raises(ProblemError, match="bad.toml.*TOML syntax error.*line 1"):
        load_problem(f)


leaf = st.one_of(st.none(), st.booleans(), st.integers(-5, 50), st.floats(-1e3, 1e3),
                 st.text(max_size=6), st.lists(st.floats(-10, 60), max_size=4))


@settings(max_examples=150, deadline=None, derandomize=True)
@given(st.dictionaries(st.sampled_from(["domain.size", "domain.element_size", "domain.thickness",
                                        "material.preset", "material.youngs_modulus",
                                        "optimization.volume_fraction", "optimization.penalty",
                                        "optimization.solver", "support.0.fix", "support.0.region",
                                        "load_case.0.weight", "load_case.0.force.0.total",
                                        "passive", "build", "bogus"]), leaf, max_size=4))
def test_random_overrides_load_or_raise_problem_error(overrides):
    d = copy.deepcopy(beam_problem())
    try:
        problem_from_dict(d, {k: v for k, v in overrides.items()})
    except ProblemError:
        pass
