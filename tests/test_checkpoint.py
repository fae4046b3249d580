"""Checkpoints carry every part of the loop state: an interrupted stress-limited MMA
run (optimizer history, objective scale, stress correction) resumes to the design of
the uninterrupted run. The stress limit is active, so a lost correction shows."""

import numpy as np
import pytest

from problems import beam_problem, interrupt_at
from topo.design import optimize
from topo.problem import problem_from_dict


def stress_limited():
    d = beam_problem(
        2,
        [16.0, 8.0],
        1.0,
        optimizer="mma",
        stress_limit=2.0,
        projection=False,
        max_iterations=12,
        checkpoint_interval=3,
        filter_radius=1.5,
    )
    d["material"]["yield_strength"] = 100.0
    return problem_from_dict(d)


def test_stress_limited_run_resumes_to_the_uninterrupted_design(tmp_path):
    full = optimize(stress_limited())
    ckpt = tmp_path / "checkpoint.npz"
    with pytest.raises(KeyboardInterrupt):
        optimize(stress_limited(), callback=interrupt_at(7), checkpoint=ckpt)
    saved = np.load(ckpt)
    assert {"opt_scale", "opt_mma_xold1", "resp_stress_correction"} <= set(saved.files)
    resumed = optimize(stress_limited(), checkpoint=ckpt, resume=True)
    assert [h["objective"] for h in resumed.history] == pytest.approx(
        [h["objective"] for h in full.history], rel=1e-10
    )
    assert np.max(np.abs(resumed.density - full.density)) < 1e-8


def test_resume_without_a_checkpoint_is_refused(tmp_path):
    with pytest.raises(FileNotFoundError, match="no checkpoint to resume from"):
        optimize(stress_limited(), checkpoint=tmp_path / "missing.npz", resume=True)
