"""Bad input, rigid-body motion, faults and interruptions."""

import json

import numpy as np
import pytest
import tomllib
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from problems import beam_problem, interrupt_at, plate_toml
from topo import resources
from topo.cli import main
from topo.design import optimize
from topo.fem import Model
from topo.problem import ProblemError, problem_from_dict

GOOD = plate_toml(
    name="plate",
    size=[20.0, 10.0],
    thickness=2.0,
    preset="AlSi10Mg",
    max_iterations=12,
    load=[20.0, 5.0],
    total=[0.0, -10.0],
)


def run_check(tmp_path, text, capsys, command="check"):
    f = tmp_path / "p.toml"
    f.write_text(text)
    code = main([command, str(f)])
    return code, capsys.readouterr().err


ERRORS = [
    ("toml syntax", GOOD.replace("thickness = 2.0", "thickness = = 2.0"), "line 6"),
    (
        "unknown key",
        GOOD.replace("volume_fraction = 0.4", "volume_fracton = 0.4"),
        "optimization.volume_fracton: unknown key (did you mean 'volume_fraction'?)",
    ),
    (
        "wrong type",
        GOOD.replace("thickness = 2.0", 'thickness = "thin"'),
        "domain.thickness: expected a number",
    ),
    (
        "missing material",
        GOOD.replace('preset = "AlSi10Mg"', "poissons_ratio = 0.3"),
        "material.youngs_modulus: missing",
    ),
    (
        "non-positive size",
        GOOD.replace("size = [20.0, 10.0]", "size = [20.0, 0.0]"),
        "domain.size[1]: must be positive",
    ),
    ("not whole elements", GOOD.replace("element_size = 1.0", "element_size = 3.0"), "use 21 mm"),
    (
        "volume fraction",
        GOOD.replace("volume_fraction = 0.4", "volume_fraction = 0.0"),
        "optimization.volume_fraction",
    ),
    (
        "filter radius 0",
        GOOD.replace("max_iterations = 12", "max_iterations = 12\nfilter_radius = 0"),
        "optimization.filter_radius: must be positive, got 0",
    ),
    (
        "not a whole number",
        GOOD.replace("max_iterations = 12", "max_iterations = 12.5"),
        "optimization.max_iterations: expected a whole number, got 12.5",
    ),
    (
        "unknown key, no near match",
        GOOD.replace("max_iterations = 12", "iterations_max_count = 12"),
        "optimization.iterations_max_count: unknown key (valid keys: volume_fraction, ",
    ),
    (
        "selects no nodes",
        GOOD.replace(
            "region = { point = [20.0, 5.0] }",
            "region = { sphere = { center = [10.5, 5.5], radius = 0.05 } }",
        ),
        "load_case[0].force[0].region: the region selects no nodes",
    ),
    (
        "outside domain",
        GOOD.replace("[20.0, 5.0]", "[80.0, 5.0]"),
        "load_case[0].force[0].region: the region lies outside",
    ),
    ("zero force", GOOD.replace("total = [0.0, -10.0]", "total = [0.0, 0.0]"), "zero total force"),
    (
        "load in void",
        GOOD + '[[passive]]\nkind = "void"\nregion = { box = { min = [16, 2], max = [20, 8] } }\n',
        "load_case[0].force[0].region: the load lies inside a void",
    ),
    (
        "overlap",
        GOOD + '[[passive]]\nkind = "void"\nregion = { box = { min = [5, 2], max = [9, 8] } }\n'
        '[[passive]]\nkind = "solid"\nregion = { box = { min = [7, 2], max = [12, 8] } }\n',
        "solid and void regions overlap",
    ),
    (
        "build direction",
        GOOD + '[build]\ndirection = "+z"\n',
        "build.direction: must be one of '+x', '-x', '+y', '-y'",
    ),
    (
        "rigid body",
        GOOD.replace('region = { face = "x-min" }', 'region = { point = [0.0, 0.0] }\nfix = ["y"]'),
        "support: the supports leave the part free to move: translation along x; rotation about z",
    ),
]


@pytest.mark.parametrize("label,text,fragment", ERRORS, ids=[e[0] for e in ERRORS])
def test_input_errors_exit_2_with_key_and_no_traceback(label, text, fragment, tmp_path, capsys):
    code, err = run_check(tmp_path, text, capsys)
    assert code == 2
    assert fragment in err
    assert str(tmp_path / "p.toml") in err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    # `topo run` refuses the same input before any solve
    code, err = run_check(tmp_path, text, capsys, "run")
    assert code == 2 and fragment in err


def test_small_filter_radius_warns(tmp_path, capsys):
    code, err = run_check(
        tmp_path,
        GOOD.replace("volume_fraction = 0.4", "volume_fraction = 0.4\nfilter_radius = 0.5"),
        capsys,
    )
    assert code == 0 and "optimization.filter_radius" in err and "below one element" in err


FREE_2D = [
    ({"face": "x-min"}, ["x"], ["translation along y"]),
    ({"point": [0.0, 0.0]}, ["x", "y"], ["rotation about z"]),
    ({"face": "y-min"}, ["y"], ["translation along x"]),
]
FREE_3D = [
    ({"face": "x-min"}, ["x"], ["translation along y", "translation along z", "rotation about x"]),
    (
        {"point": [0.0, 0.0, 0.0]},
        ["x", "y", "z"],
        ["rotation about x", "rotation about y", "rotation about z"],
    ),
    ({"box": {"min": [0, 0, 0], "max": [0, 4, 0]}}, ["x", "y", "z"], ["rotation about y"]),
    ({"face": "z-min"}, ["z"], ["translation along x", "translation along y", "rotation about z"]),
]


@pytest.mark.parametrize(
    "dim,region,fix,free", [(2, *c) for c in FREE_2D] + [(3, *c) for c in FREE_3D]
)
def test_rigid_body_modes_are_named(dim, region, fix, free):
    d = beam_problem(dim, [8.0, 4.0] if dim == 2 else [8.0, 4.0, 4.0], 1.0)
    d["support"] = [{"region": region, "fix": fix}]
    with pytest.raises(ProblemError) as err:
        Model(problem_from_dict(d))
    assert err.value.key == "support"
    assert err.value.message.split("move: ")[1].split(". ")[0] == "; ".join(free)


def small():
    d = beam_problem(
        2, [24.0, 12.0], 1.0, max_iterations=40, beta_interval=6, checkpoint_interval=5
    )
    return problem_from_dict(d)


def test_resume_reaches_the_uninterrupted_design(tmp_path):
    full = optimize(small())
    ckpt = tmp_path / "checkpoint.npz"
    with pytest.raises(KeyboardInterrupt):
        optimize(small(), callback=interrupt_at(17), checkpoint=ckpt)
    resumed = optimize(small(), checkpoint=ckpt, resume=True)
    assert len(resumed.history) == len(full.history)
    assert np.max(np.abs(resumed.density - full.density)) < 1e-8
    assert resumed.summary["compliance_Nmm"] == pytest.approx(
        full.summary["compliance_Nmm"], rel=1e-10
    )


def test_resume_refuses_a_changed_problem(tmp_path):
    ckpt = tmp_path / "checkpoint.npz"
    optimize(small(), checkpoint=ckpt)
    changed = problem_from_dict(
        beam_problem(2, [24.0, 12.0], 1.0, max_iterations=40, volume_fraction=0.3)
    )
    with pytest.raises(ProblemError, match="different problem"):
        optimize(changed, checkpoint=ckpt, resume=True)


def test_cli_resume_after_interrupt(tmp_path, capsys, monkeypatch):
    f = tmp_path / "p.toml"
    f.write_text(
        GOOD.replace("max_iterations = 12", "max_iterations = 12\ncheckpoint_interval = 2")
    )
    out = tmp_path / "run"
    # as Ctrl-C would, in the middle of the run
    monkeypatch.setattr("topo.cli._progress", interrupt_at(5))
    assert main(["run", str(f), "--out", str(out)]) == 130
    assert "topo run --resume" in capsys.readouterr().err
    assert (out / "checkpoint.npz").exists() and not (out / "summary.json").exists()
    assert main(["run", "--resume", str(out), "--quiet"]) == 0
    s = json.loads((out / "summary.json").read_text())
    assert s["iterations"] == 12 and not (out / "checkpoint.npz").exists()


def test_nan_in_the_solve_keeps_the_last_good_design(monkeypatch):
    p = small()
    original = Model.analyze
    count = {"n": 0}

    def faulty(self, density, stresses=True, timer=None):
        count["n"] += 1
        a = original(self, density, stresses, timer)
        if count["n"] == 8:
            raise FloatingPointError("the linear solve returned non-finite displacements")
        return a

    monkeypatch.setattr(Model, "analyze", faulty)
    r = optimize(p)
    assert not r.converged and r.stop_reason.startswith("numerical fault")
    assert len(r.history) == 7
    assert np.all(np.isfinite(r.density))


def test_internal_error_exits_1_with_a_log(tmp_path, capsys, monkeypatch):
    f = tmp_path / "p.toml"
    f.write_text(GOOD)

    def boom(*a, **k):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr("topo.cli.optimize", boom)
    out = tmp_path / "run"
    assert main(["run", str(f), "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert "simulated failure" in err and "Traceback" not in err
    assert "RuntimeError: simulated failure" in (out / "error.log").read_text()


def test_run_refuses_a_problem_larger_than_free_memory(tmp_path, capsys, monkeypatch):
    f = tmp_path / "p.toml"
    f.write_text(GOOD)
    need = resources.estimate(problem_from_dict(tomllib.loads(GOOD)))["memory_bytes"]
    monkeypatch.setattr(resources, "available_memory", lambda: int(need * 0.6))
    assert main(["run", str(f), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert "domain.element_size" in err and "GiB" in err and "would fit" in err and "--force" in err
    assert main(["run", str(f), "--out", str(tmp_path / "r"), "--force", "--quiet"]) == 0


leaf = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-3, 30),
    st.floats(allow_nan=True),
    st.text(max_size=5),
    st.lists(st.integers(-2, 25), max_size=4),
    st.dictionaries(
        st.sampled_from(["box", "point", "face", "min", "max"]), st.integers(0, 5), max_size=2
    ),
)
tables = st.dictionaries(
    st.sampled_from(
        [
            "size",
            "element_size",
            "thickness",
            "preset",
            "youngs_modulus",
            "poissons_ratio",
            "density",
            "volume_fraction",
            "direction",
            "region",
            "fix",
            "total",
            "kind",
            "force",
            "weight",
        ]
    ),
    leaf,
    max_size=5,
)


@settings(
    max_examples=200, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)
@given(
    st.dictionaries(
        st.sampled_from(
            [
                "name",
                "domain",
                "material",
                "optimization",
                "build",
                "support",
                "load_case",
                "passive",
                "extra",
            ]
        ),
        st.one_of(leaf, tables, st.lists(tables, max_size=2)),
        max_size=8,
    )
)
def test_random_problem_dictionaries_load_or_raise_problem_error(data):
    try:
        p = problem_from_dict(data)
    except ProblemError:
        return
    if np.prod(p.domain.shape) > 20000:  # valid but too slow for a unit test
        return
    try:
        Model(p)
    except ProblemError:
        pass


def test_error_log_goes_to_the_folder_of_the_failing_command_only(tmp_path, capsys, monkeypatch):
    f = tmp_path / "p.toml"
    f.write_text(GOOD)

    def boom(*a, **k):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr("topo.cli.optimize", boom)
    monkeypatch.setattr("topo.cli.check", boom)
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(f), "--out", str(tmp_path / "run")]) == 1
    assert (tmp_path / "run" / "error.log").exists()
    # `check` writes no folder: its log goes to ./outputs, not to the previous run's folder
    (tmp_path / "run" / "error.log").unlink()
    assert main(["check", str(f)]) == 1
    assert "simulated failure" in (tmp_path / "outputs" / "error.log").read_text()
    assert not (tmp_path / "run" / "error.log").exists()
