"""Loop state saved to one file every `optimization.checkpoint_interval` iterations
and on interruption, and read back on resume so that the run continues to the design
an uninterrupted run would reach: design variables, iteration, β and its age, the
history, the state of each named part (optimizer, responses, the linear system's
warm start), the problem the run belongs to and, once the loop has ended, why it
ended (a resumed run then goes straight to the export, with no extra iteration).

A damaged file (truncated, emptied, from another grid) is refused with a
ProblemError that names it and says what to do."""

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
    # set when the loop has ended: {"stop_reason": str, "converged": bool}
    finished: dict | None = None


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
            finished=np.array(json.dumps(state.finished)),
        )
        atomic_write(self.path, buf.getvalue())

    def load(self) -> LoopState:
        if self.path is None or not self.path.exists():
            raise FileNotFoundError(f"no checkpoint to resume from at {self.path}")
        try:
            with np.load(self.path) as npz:
                data = {k: npz[k] for k in npz.files}
            problem = json.loads(str(data["problem"]))
        except Exception as exc:  # truncated, emptied, bit-flipped: numpy, zip or JSON errors
            raise self.damaged(f"it cannot be read ({type(exc).__name__}: {exc})") from None
        if problem != json.loads(json.dumps(self.problem.raw)):
            raise ProblemError(
                str(self.path),
                "",
                "the checkpoint belongs to a different problem "
                "(the problem file or an override changed since)",
            )
        try:
            state = self._state(data)
            for p, part in self.parts.items():
                part.restore({k[len(p) + 1 :]: v for k, v in data.items() if k.startswith(f"{p}_")})
        except Exception as exc:
            raise self.damaged(f"its contents do not fit the problem ({exc})") from None
        return state

    def _state(self, data: dict) -> LoopState:
        x = np.asarray(data["x"], dtype=float)
        if x.shape != (self.model.grid.n_elements,) or not np.all(np.isfinite(x)):
            raise ValueError(
                f"design of shape {x.shape}, the grid has {self.model.grid.n_elements}"
            )
        it, beta, since = data["scalars"]
        finished = json.loads(str(data["finished"])) if "finished" in data else None
        history = json.loads(str(data["history"]))
        if len(history) != int(it):
            raise ValueError(f"{len(history)} history rows for iteration {int(it)}")
        return LoopState(x.copy(), int(it), float(beta), int(since), history, finished)

    def damaged(self, why: str) -> ProblemError:
        return ProblemError(
            str(self.path),
            "",
            f"the checkpoint is damaged: {why}. Delete it and run the problem again "
            "without --resume",
        )
