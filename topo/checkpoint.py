"""Loop state saved to one file every `optimization.checkpoint_interval` iterations
and on interruption, and read back on resume so that the run continues to the design
an uninterrupted run would reach: design variables, iteration, β and its age, the
history, the state of each named part (optimizer, responses, the linear system's
warm start) and the problem the run belongs to."""

from __future__ import annotations

import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .problem import ProblemError


@dataclass
class LoopState:
    x: np.ndarray
    iteration: int = 0
    beta: float = 1.0
    since_beta: int = 0
    history: list = field(default_factory=list)


class Checkpoint:
    """`parts`: prefix → object with state() / restore(state)."""

    def __init__(self, path, problem, model, parts: dict):
        self.path = Path(path) if path else None
        self.problem, self.model, self.parts = problem, model, parts
        self.interval = problem.optimization.checkpoint_interval

    def due(self, iteration: int) -> bool:
        return bool(self.path) and iteration % self.interval == 0

    def save(self, state: LoopState) -> None:
        from .files import atomic_write

        if not self.path:
            return
        parts = {
            f"{p}_{k}": np.asarray(v)
            for p, part in self.parts.items()
            for k, v in part.state().items()
        }
        buf = io.BytesIO()
        np.savez(
            buf,
            x=state.x,
            **parts,
            scalars=np.array([state.iteration, state.beta, state.since_beta], dtype=float),
            history=np.array(json.dumps(state.history)),
            problem=np.array(json.dumps(self.problem.raw)),
        )
        atomic_write(self.path, buf.getvalue())

    def load(self) -> LoopState:
        if self.path is None or not self.path.exists():
            raise FileNotFoundError(f"no checkpoint to resume from at {self.path}")
        data = np.load(self.path)
        if json.loads(str(data["problem"])) != json.loads(json.dumps(self.problem.raw)):
            raise ProblemError(
                str(self.path),
                "",
                "the checkpoint belongs to a different problem "
                "(the problem file or an override changed since)",
            )
        it, beta, since = data["scalars"]
        state = LoopState(
            data["x"].copy(), int(it), float(beta), int(since), json.loads(str(data["history"]))
        )
        for p, part in self.parts.items():
            part.restore({k[len(p) + 1 :]: data[k] for k in data.files if k.startswith(f"{p}_")})
        return state
