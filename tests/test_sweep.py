"""Parameter sweeps: folders, rows, trends, Dask and resume."""

import csv

import pytest

from problems import beam_problem, plate_toml
from topo import problem_from_dict, sweep
from topo.cli import main
from topo.sweep import pareto


def small():
    d = beam_problem(2, [24.0, 12.0], 1.0, max_iterations=25, beta_interval=5)
    d["name"] = "sweep-plate"
    # a solid end plate under the tip load, so that every printed design carries it
    # (a load on nodes of no printed element leaves the part unanalysed, printed.py)
    d["passive"] = [
        {"name": "pad", "kind": "solid", "region": {"box": {"min": [23, 0], "max": [24, 12]}}}
    ]
    return problem_from_dict(d)


VARY = {"optimization.volume_fraction": [0.4, 0.6], "optimization.filter_radius": [1.5, 2.5]}


def test_two_by_two_sweep_rows_folders_and_trend(tmp_path):
    rows = sweep(small(), VARY, jobs=2, out=tmp_path)
    assert len(rows) == 4 and all(r["ran"] for r in rows)
    folders = sorted(p.name for p in tmp_path.iterdir() if p.is_dir())
    assert folders == sorted(
        [
            "volume_fraction-0.4_filter_radius-1.5",
            "volume_fraction-0.4_filter_radius-2.5",
            "volume_fraction-0.6_filter_radius-1.5",
            "volume_fraction-0.6_filter_radius-2.5",
        ]
    )
    for r in rows:
        assert (tmp_path / r["folder"].split("/")[-1] / "design.stl").exists()
    # More material, stiffer: at a fixed filter radius compliance falls as the
    # volume fraction rises (and the mass grows with it).
    for radius in (1.5, 2.5):
        lo, hi = [r for r in rows if r["optimization.filter_radius"] == radius]
        assert (
            lo["optimization.volume_fraction"] == 0.4
            and hi["compliance_Nmm"] < lo["compliance_Nmm"]
        )
        assert hi["mass_kg"] > lo["mass_kg"]
    with open(tmp_path / "sweep.csv") as fh:
        table = list(csv.DictReader(fh))
    assert len(table) == 4 and "compliance_tip_Nmm" in table[0] and "pareto" in table[0]
    assert (tmp_path / "sweep.png").stat().st_size > 0


def test_resume_runs_only_the_missing_folder(tmp_path):
    first = sweep(small(), VARY, out=tmp_path)
    import shutil

    shutil.rmtree(first[2]["folder"])
    again = sweep(small(), VARY, out=tmp_path)
    assert [r["ran"] for r in again] == [False, False, True, False]
    assert again[2]["compliance_Nmm"] == pytest.approx(first[2]["compliance_Nmm"], rel=1e-9)


def test_dask_local_cluster_gives_the_same_rows(tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    vary = {"optimization.volume_fraction": [0.4, 0.6]}
    local = sweep(small(), vary, jobs=1, out=tmp_path / "local")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        remote = sweep(small(), vary, out=tmp_path / "dask", scheduler=cluster.scheduler_address)
    for a, b in zip(local, remote):
        assert b["compliance_Nmm"] == pytest.approx(a["compliance_Nmm"], rel=1e-8)
        assert b["mass_kg"] == pytest.approx(a["mass_kg"], rel=1e-8)


def test_pareto_marks_runs_not_dominated():
    rows = [
        {"mass_kg": 1.0, "compliance_Nmm": 10.0, "checks_failed": ""},
        {"mass_kg": 2.0, "compliance_Nmm": 5.0, "checks_failed": ""},
        {"mass_kg": 2.5, "compliance_Nmm": 6.0, "checks_failed": ""},
        {"mass_kg": 0.5, "compliance_Nmm": 20.0, "checks_failed": ""},
    ]
    assert pareto(rows) == [True, True, False, True]


def test_a_design_that_fails_a_check_is_never_on_the_front():
    # The lightest and stiffest run is disconnected: it must neither stand on the
    # front nor push the sound designs off it.
    rows = [
        {"mass_kg": 1.0, "compliance_Nmm": 10.0, "checks_failed": ""},
        {"mass_kg": 2.0, "compliance_Nmm": 5.0, "checks_failed": ""},
        {"mass_kg": 0.4, "compliance_Nmm": 1.0, "checks_failed": "load_path"},
        {"mass_kg": 0.5, "compliance_Nmm": None, "checks_failed": "compliance_gap"},
    ]
    assert pareto(rows) == [True, True, False, False]


def test_sweep_over_build_directions_keeps_unreachable_designs_off_the_front(tmp_path):
    # Grown in +y a keep-out band across the width cuts the tip load off from the
    # plate; the sweep runs it anyway and its load-path check fails.
    d = beam_problem(2, [24.0, 12.0], 1.0, max_iterations=15, beta_interval=5)
    d["name"] = "sweep-directions"
    d["build"] = {"direction": "+x"}
    d["passive"] = [{"kind": "void", "region": {"box": {"min": [0.0, 4.0], "max": [24.0, 6.0]}}}]
    d["load_case"][0]["force"][0]["region"] = {"point": [24.0, 9.0]}
    rows = sweep(problem_from_dict(d), {"build.direction": ["+x", "+y"]}, out=tmp_path)
    plus_y = rows[1]
    assert "load_path" in plus_y["checks_failed"].split()
    assert pareto(rows)[1] is False
    with open(tmp_path / "sweep.csv") as fh:
        table = list(csv.DictReader(fh))
    assert "load_path" in table[1]["checks_failed"] and table[1]["pareto"] == "False"


def test_sweep_command(tmp_path, capsys):
    f = tmp_path / "p.toml"
    f.write_text(
        plate_toml(
            name="cli-sweep",
            size=[16.0, 8.0],
            thickness=1.0,
            preset="316L",
            max_iterations=10,
            load=[16.0, 4.0],
            total=[0.0, -1.0],
        )
    )
    assert (
        main(
            [
                "sweep",
                str(f),
                "--vary",
                "optimization.volume_fraction=0.3,0.4",
                "--out",
                str(tmp_path / "s"),
            ]
        )
        == 0
    )
    text = capsys.readouterr().out
    assert "[2/2]" in text and "2 run(s) made" in text
    assert (
        main(
            [
                "sweep",
                str(f),
                "--vary",
                "optimization.volume_fracton=0.3",
                "--out",
                str(tmp_path / "s"),
            ]
        )
        == 2
    )
