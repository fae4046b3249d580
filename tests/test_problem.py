"""Problem files: loading, overrides and clear errors."""

import copy
import dataclasses
import math
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from problems import beam_problem
from topo import schema
from topo.cli import main
from topo.keyref import readme_block, reference
from topo.problem import (
    Build,
    Optimization,
    ProblemError,
    apply_override,
    load_problem,
    parse_override,
    problem_from_dict,
)

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
    assert parse_override("optimization.volume_fraction=0.25") == (
        "optimization.volume_fraction",
        0.25,
    )
    assert parse_override("build.direction=+z") == ("build.direction", "+z")
    assert parse_override("a.b=[1, 2]") == ("a.b", [1, 2])
    assert parse_override("optimization.projection=false") == ("optimization.projection", False)


@pytest.mark.parametrize(
    "key,value,fragment",
    [
        ("optimization.volume_fraction", 1.5, "optimization.volume_fraction"),
        ("optimization.volume_fracton", 0.3, "did you mean 'volume_fraction'"),
        ("domain.element_size", 0.3, "not a whole number"),
        ("domain.size", [20.0, -5.0], "domain.size[1]"),
        ("material.youngs_modulus", "stiff", "material.youngs_modulus"),
        ("material.preset", "Ti64x", "unknown preset"),
        ("build.direction", "up", "build.direction"),
        ("build.overhang_angle", 25.0, "build.overhang_angle: must lie in [30, 60], got 25"),
        ("build.overhang_angle", 61.0, "30° to 60° from the plate"),
        ("load_case.0.force.0.total", [0.0, 0.0], "zero total force"),
    ],
)
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


leaf = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-5, 50),
    st.floats(-1e3, 1e3),
    st.text(max_size=6),
    st.lists(st.floats(-10, 60), max_size=4),
)


@settings(max_examples=150, deadline=None, derandomize=True)
@given(
    st.dictionaries(
        st.sampled_from(
            [
                "domain.size",
                "domain.element_size",
                "domain.thickness",
                "material.preset",
                "material.youngs_modulus",
                "optimization.volume_fraction",
                "optimization.penalty",
                "optimization.solver",
                "support.0.fix",
                "support.0.region",
                "load_case.0.weight",
                "load_case.0.force.0.total",
                "passive",
                "build",
                "bogus",
            ]
        ),
        leaf,
        max_size=4,
    )
)
def test_random_overrides_load_or_raise_problem_error(overrides):
    d = copy.deepcopy(beam_problem())
    try:
        problem_from_dict(d, {k: v for k, v in overrides.items()})
    except ProblemError:
        pass


# ----------------------------------------------------------------- the key schema


README = Path(__file__).parent.parent / "README.md"


def test_readme_key_reference_is_the_generated_one():
    assert readme_block(README.read_text(encoding="utf-8")) == reference()


def full_problem():
    """The beam with a build table and one passive region of each table form, so
    that every declared scalar key has a place in it."""
    d = beam_problem()
    d["material"] = {"preset": "316L", "condition": "hip", "surface": "machined"}
    d["load_case"][0].update(cycles=1e6, load_ratio=0.1)
    d["build"] = {"direction": "+y"}
    d["passive"] = [
        {"kind": "void", "region": {"box": {"min": [8.0, 1.0], "max": [10.0, 3.0]}}},
        {"kind": "void", "region": {"cylinder": {"center": [14.0, 2.0], "radius": 1.0}}},
        {"kind": "solid", "region": {"sphere": {"center": [18.0, 2.0], "radius": 1.0}}},
    ]
    d["deflection"] = [{"region": {"point": [20.0, 2.5]}, "direction": "-y", "limit": 1.0}]
    d["checks"] = {"safety_factor": 1.5, "fatigue_safety_factor": 1.2}
    d["cost"] = {"batch": 20}
    d["report"] = {"verify": False}
    return d


# where each section lives in full_problem(): dotted override prefix, error key prefix, object
PLACES = {
    "": ("", "", lambda p: p),
    "domain": ("domain.", "domain.", lambda p: p.domain),
    "material": ("material.", "material.", lambda p: p.material),
    "optimization": ("optimization.", "optimization.", lambda p: p.optimization),
    "build": ("build.", "build.", lambda p: p.build),
    "support": ("support.0.", "support[0].", lambda p: p.supports[0]),
    "load_case": ("load_case.0.", "load_case[0].", lambda p: p.load_cases[0]),
    "load_case.force": (
        "load_case.0.force.0.",
        "load_case[0].force[0].",
        lambda p: p.load_cases[0].forces[0],
    ),
    "passive": ("passive.1.", "passive[1].", lambda p: p.passives[1]),
    "deflection": ("deflection.0.", "deflection[0].", lambda p: p.deflections[0]),
    "checks": ("checks.", "checks.", lambda p: p.checks),
    "cost": ("cost.", "cost.", lambda p: p.cost),
    "report": ("report.", "report.", lambda p: p.report),
    "region": ("support.0.region.", "support[0].region.", lambda p: p.supports[0].region),
    "region.box": (
        "passive.0.region.box.",
        "passive[0].region.box.",
        lambda p: p.passives[0].region,
    ),
    "region.cylinder": (
        "passive.1.region.cylinder.",
        "passive[1].region.cylinder.",
        lambda p: p.passives[1].region,
    ),
    "region.sphere": (
        "passive.2.region.sphere.",
        "passive[2].region.sphere.",
        lambda p: p.passives[2].region,
    ),
}
SCALAR_KEYS = [
    (s.path, k)
    for s in schema.SCHEMA
    for k in s.keys
    if k.kind in schema.SCALARS and 2 in k.dims and not (s.path == "region" and k.name != "face")
]
# a 2D cylinder is a circle and ignores its length: that one is tested in 3D below
BAD_KEYS = [(path, k) for path, k in SCALAR_KEYS if (path, k.name) != ("region.cylinder", "length")]
DEFAULT_KEYS = [
    (path, k) for path, k in SCALAR_KEYS if k.default is not schema.REQUIRED and path != "region"
]


def test_every_section_has_a_place_in_the_test_problem():
    assert set(PLACES) == set(schema.SECTIONS)


def without(d: dict, path: str, name: str) -> dict:
    node = d
    for part in PLACES[path][0].split(".")[:-1]:
        node = node[int(part)] if isinstance(node, list) else node[part]
    node.pop(name, None)
    return d


@pytest.mark.parametrize("path,key", DEFAULT_KEYS, ids=[f"{p}.{k.name}" for p, k in DEFAULT_KEYS])
def test_every_default_round_trips(path, key):
    """Leaving a key out and writing its default give the same problem."""
    prefix, _, obj = PLACES[path]
    base = full_problem()
    for k, v in PARTNERS.get(prefix + key.name, {}).items():
        apply_override(base, k, v)
    p = problem_from_dict(without(copy.deepcopy(base), path, key.name))
    value = getattr(obj(p), key.name, None)
    if not isinstance(key.default, schema.Rule):
        assert value == key.default
    if value is not None and key.name != "length":  # a 2D cylinder has no length
        written = problem_from_dict(base, {prefix + key.name: value})
        assert written == p


# keys that may be left out only when another key stands in for them
PARTNERS = {
    "optimization.volume_fraction": {"optimization.mass_limit": 0.01},
    "material.preset": {
        "material.youngs_modulus": 1000.0,
        "material.poissons_ratio": 0.3,
        "material.density": 1000.0,
        # with cycles, a material without fatigue data gives its S-N values
        "material.ultimate_strength": 500.0,
        "material.fatigue_strength_coefficient": 900.0,
        "material.fatigue_strength_exponent": -0.1,
    },
}


@pytest.mark.parametrize(
    "field",
    [
        f
        for f in dataclasses.fields(Optimization) + dataclasses.fields(Build)
        if f.default is not dataclasses.MISSING and f.name != "filter_radius"
    ],
    ids=lambda f: f.name,
)
def test_dataclass_defaults_match_the_schema(field):
    path = "optimization" if field.name in Optimization.__dataclass_fields__ else "build"
    assert schema.SECTIONS[path].key(field.name).default == field.default


def bad_values(key):
    """A wrong type and, where the key has bounds or choices, values just outside."""
    wrong = {schema.NUMBER: "abc", schema.INTEGER: 2.5, schema.BOOL: "yes", schema.STRING: 7}[
        key.kind
    ]
    out = [wrong]
    if key.bounds:
        lo, hi, lo_open, hi_open = schema.interval(key.bounds)
        out.append(
            lo
            if lo_open
            else lo - max(1e-3 * abs(lo), 1e-13)
            if key.kind == schema.NUMBER
            else lo - 1
        )
        if math.isfinite(hi):
            out.append(hi if hi_open else hi + max(1e-3 * abs(hi), 1e-13))
    if key.choices:
        out.append("no-such-choice")
    return out


@pytest.mark.parametrize("path,key", BAD_KEYS, ids=[f"{p}.{k.name}" for p, k in BAD_KEYS])
def test_bad_values_fail_naming_the_key(path, key):
    prefix, where, _ = PLACES[path]
    for value in bad_values(key):
        with pytest.raises(ProblemError) as err:
            problem_from_dict(full_problem(), {prefix + key.name: value}, source="p.toml")
        assert err.value.key == where + key.name, value
        assert str(err.value).startswith(f"p.toml: {where}{key.name}: ")


# Written out by hand, not read from the schema, so that a wrong declaration shows.
@pytest.mark.parametrize(
    "key,value,message",
    [
        ("optimization.penalty", 0.5, "must lie in [1, 10], got 0.5"),
        ("optimization.beta_interval", 0, "must be at least 1, got 0"),
        ("optimization.max_iterations", 2.5, "expected a whole number, got 2.5"),
        ("optimization.projection", "yes", "expected true or false, got 'yes'"),
        ("optimization.filter_radius", 0, "must be positive, got 0"),  # 0 is not "the default"
        ("optimization.tolerance", -0.01, "must be positive"),
        ("optimization.min_stiffness", 0.5, "must lie in [1e-12, 0.1]"),
        ("optimization.move_limit", 0.0, "must lie in [0.001, 1]"),
        ("optimization.projection_threshold", 1.0, "must lie in [0.01, 0.99]"),
        ("optimization.solver", "cholmod", "must be one of 'auto', 'direct', 'iterative'"),
        ("optimization.optimizer", "mmma", "did you mean 'mma'?"),
        ("optimization.volume_fraction", 0.0, "must lie in (0, 1]"),
        ("material.poissons_ratio", 0.5, "must lie in (-1, 0.5)"),
        ("material.density", 0, "must be positive"),
        ("load_case.0.weight", 0, "must be positive"),
        ("passive.0.kind", "hollow", "must be one of 'solid', 'void'"),
        ("support.0.fix", ["x", "w"], "must be one of 'x', 'y'"),
        ("domain.thickness", True, "expected a number, got True"),
        ("optimization.penalty", math.nan, "must be finite"),
        ("optimization.bogus_setting", 1, "unknown key (valid keys: volume_fraction, mass_limit,"),
    ],
)
def test_hand_written_bad_values(key, value, message):
    d = full_problem()
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d, {key: value})
    assert message in err.value.message
    assert err.value.key.startswith(key.replace(".0.", "[0]."))


@pytest.mark.parametrize(
    "key,value,get",
    [
        (
            "optimization.volume_fraction",
            1.0,
            lambda p: p.optimization.volume_fraction,
        ),  # closed end
        ("optimization.penalty", 1.0, lambda p: p.optimization.penalty),
        ("optimization.penalty", 10, lambda p: p.optimization.penalty),
        ("optimization.move_limit", 0.001, lambda p: p.optimization.move_limit),
        ("optimization.min_stiffness", 1e-12, lambda p: p.optimization.min_stiffness),
        ("optimization.beta_max", 1024, lambda p: p.optimization.beta_max),
        ("material.poissons_ratio", -0.99, lambda p: p.material.poissons_ratio),
        ("optimization.beta_interval", 1, lambda p: p.optimization.beta_interval),
    ],
)
def test_hand_written_edge_values_are_accepted(key, value, get):
    assert get(problem_from_dict(full_problem(), {key: value})) == value


@pytest.mark.parametrize(
    "length,message", [(-1.0, "must be positive"), ("long", "expected a number")]
)
def test_cylinder_length_in_3d(length, message):
    d = beam_problem(3)
    d["passive"] = [
        {
            "kind": "void",
            "region": {
                "cylinder": {
                    "center": [6.0, 2.0, 2.0],
                    "radius": 1.0,
                    "axis": "x",
                    "length": length,
                }
            },
        }
    ]
    with pytest.raises(ProblemError) as err:
        problem_from_dict(d)
    assert err.value.key == "passive[0].region.cylinder.length" and message in err.value.message
    del d["passive"][0]["region"]["cylinder"]["length"]
    with pytest.raises(ProblemError, match=r"passive\[0\]\.region\.cylinder\.length: missing"):
        problem_from_dict(d)


def test_hand_written_defaults():
    p = problem_from_dict(full_problem(), {"domain.element_size": 0.5})
    assert p.optimization.filter_radius == 1.25  # 2.5 elements of 0.5 mm
    assert (p.optimization.penalty, p.optimization.optimizer, p.optimization.max_iterations) == (
        3.0,
        "oc",
        200,
    )
    assert p.build.overhang_angle == 45.0 and p.build.overhang_filter is True
    assert p.supports[0].fix == ("x", "y") and p.load_cases[0].weight == 1.0
    assert p.passives[1].name == "passive[1]" and p.passives[1].region.axis == "z"
    m = problem_from_dict(beam_problem()).material
    assert m.name == "custom" and m.yield_strength is None
    m = problem_from_dict(
        full_problem(), {"material": {"preset": "316L", "density": 8000.0}}
    ).material
    # the preset's values (materials.py) except the density given in the file
    assert (m.name, m.youngs_modulus, m.poissons_ratio, m.density) == (
        "316L",
        193_000.0,
        0.27,
        8000.0,
    )


def test_settings_say_where_each_value_came_from():
    p = problem_from_dict(full_problem(), {"optimization.penalty": 3.5})
    rows = {r["key"]: r for r in schema.settings(p)}
    assert (
        rows["optimization.penalty"]["value"] == 3.5
        and rows["optimization.penalty"]["source"] == "file"
    )
    assert (
        rows["optimization.beta_max"]["value"] == 32.0
        and rows["optimization.beta_max"]["source"] == "default"
    )
    assert rows["optimization.filter_radius"]["value"] == 2.5
    assert rows["optimization.filter_radius"]["source"] == "default: 2.5 × element_size"
    assert rows["domain.thickness"]["unit"] == "mm"
    p3 = problem_from_dict(beam_problem(3))
    assert "domain.thickness" not in {r["key"] for r in schema.settings(p3)}
    assert "build.direction" not in {r["key"] for r in schema.settings(p3)}  # no [build] table


def test_check_prints_the_settings(tmp_path, capsys):
    f = tmp_path / "p.toml"
    f.write_text((PROBLEMS / "bracket-2d.toml").read_text())
    assert main(["check", str(f), "--set", "optimization.beta_max=16"]) == 0
    out = capsys.readouterr().out
    assert "optimization.beta_max = 16 (file)" in out
    assert "optimization.filter_radius = 2.5 mm (file)" in out
    assert "optimization.move_limit = 0.2 (default)" in out
    assert 'material.name = "AlSi10Mg" (default' in out


@pytest.mark.parametrize("form", ["box", "cylinder", "sphere", "face", "point"])
def test_a_null_region_form_is_refused(form):
    """JSON and Python can say null where TOML cannot."""
    with pytest.raises(ProblemError) as err:
        problem_from_dict(beam_problem(), {"support.0.region": {form: None}})
    assert err.value.key == f"support[0].region.{form}"


def test_a_null_optional_table_is_absent():
    assert problem_from_dict(beam_problem(), {"build": None, "passive": None}).build is None
