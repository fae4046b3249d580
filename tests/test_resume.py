"""Interruption at every phase of `topo run` (loop, checkpoint write, each export
file), then `topo run --resume`: the design must equal the uninterrupted run's bit
for bit, with the same number of iterations, and nothing temporary left behind.

The problem converges at iteration 22 and saves a checkpoint every 11 iterations, so
the loop ends exactly on a checkpoint iteration: the case where a resume used to run
one iteration more than the uninterrupted run."""

import json
import os
import signal
import sys

import numpy as np
import pytest

from topo import files
from topo.cli import main

export_module = sys.modules["topo.export"]  # the package's `export` is the function

PROBLEM = """
name = "plate"
[domain]
size = [24.0, 12.0]
element_size = 1.0
thickness = 2.0
[material]
preset = "AlSi10Mg"
[optimization]
volume_fraction = 0.4
max_iterations = 120
beta_interval = 10
beta_max = 4
tolerance = 0.02
checkpoint_interval = 11
[[support]]
region = { face = "x-min" }
[[load_case]]
name = "down"
  [[load_case.force]]
  region = { point = [24.0, 6.0] }
  total = [0.0, -10.0]
"""
ITERATIONS = 22  # of the uninterrupted run (asserted below)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    root = tmp_path_factory.mktemp("reference")
    f = root / "p.toml"
    f.write_text(PROBLEM)
    assert main(["run", str(f), "--out", str(root / "run"), "--quiet"]) == 0
    done = json.loads((root / "run" / "finished.json").read_text())
    assert done["iterations"] == ITERATIONS and done["converged"]
    assert ITERATIONS % 11 == 0  # the loop ends on a checkpoint iteration
    return f, np.load(root / "run" / "density.npy")


def leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def interrupt(*_a, **_k):
    raise KeyboardInterrupt


def stop_in_loop(monkeypatch, at=5):
    def progress(row):
        if row["iteration"] == at:
            raise KeyboardInterrupt

    monkeypatch.setattr("topo.cli._progress", progress)


def sigterm_in_loop(monkeypatch, at=7):
    def progress(row):
        if row["iteration"] == at:
            os.kill(os.getpid(), signal.SIGTERM)  # handled after this iteration

    monkeypatch.setattr("topo.cli._progress", progress)


def stop_in_checkpoint_write(at):
    def setup(monkeypatch):
        original = files.atomic_write
        seen = {"n": 0}

        def write(path, data):
            if path.name == "checkpoint.npz":
                seen["n"] += 1
                if seen["n"] * 11 >= at:  # this save and the one on the way out
                    # a kill part-way through leaves a temporary file behind
                    (path.parent / f".{path.name}.killed.tmp").write_bytes(data[:100])
                    raise KeyboardInterrupt
            original(path, data)

        monkeypatch.setattr(files, "atomic_write", write)

    return setup


def stop_in_export(name):
    def setup(monkeypatch):
        if name == "design.stl":
            monkeypatch.setattr(export_module, "write_mesh", interrupt)
        elif name == "summary.json":
            original = export_module.write_text

            def write_text(path, text):
                if path.name == "summary.json":
                    raise KeyboardInterrupt
                original(path, text)

            monkeypatch.setattr(export_module, "write_text", write_text)
        elif name == "finished.json":
            monkeypatch.setattr(export_module, "mark_finished", interrupt)
        else:
            monkeypatch.setitem(export_module.EXPORTERS, name, interrupt)

    return setup


PHASES = {
    "loop": stop_in_loop,
    "SIGTERM in the loop": sigterm_in_loop,
    "checkpoint write at 11": stop_in_checkpoint_write(11),
    "final checkpoint write": stop_in_checkpoint_write(22),
    **{
        f"export {name}": stop_in_export(name)
        for name in ["design.stl", *export_module.EXPORTERS, "summary.json", "finished.json"]
    },
}


@pytest.mark.parametrize("phase", list(PHASES))
def test_interrupted_run_resumes_to_the_same_design_bit_for_bit(
    phase, reference, tmp_path, monkeypatch, capsys
):
    problem_file, density = reference
    out = tmp_path / "run"
    with monkeypatch.context() as m:
        PHASES[phase](m)
        assert main(["run", str(problem_file), "--out", str(out)]) == 130
    err = capsys.readouterr().err
    assert not (out / "finished.json").exists()
    # `topo export` cannot pass the half-written folder off as a finished run
    assert main(["export", str(out)]) == 2
    assert "not a finished run" in capsys.readouterr().err
    if phase == "checkpoint write at 11":  # killed before any checkpoint was complete
        assert "run the same command again" in err and not (out / "checkpoint.npz").exists()
        assert main(["run", str(problem_file), "--out", str(out), "--quiet"]) == 0
    else:
        assert f"topo run --resume {out}" in err and (out / "checkpoint.npz").exists()
        assert main(["run", "--resume", str(out), "--quiet"]) == 0
    np.testing.assert_array_equal(np.load(out / "density.npy"), density)
    done = json.loads((out / "finished.json").read_text())
    assert done["iterations"] == ITERATIONS
    assert len((out / "history.csv").read_text().splitlines()) == ITERATIONS + 1
    assert not (out / "checkpoint.npz").exists()
    assert leftovers(out) == []  # no lock, no temporary file
