"""The output folder of a command: checked, locked, cleaned, and marked finished.

- Before anything is written the target is checked: not a file, not below a file,
  writable (a non-writable folder would otherwise be found at the first checkpoint).
- A lock file refuses a second process writing into the same folder; a lock left
  by a process that no longer runs is taken over.
- Temporary files of an interrupted atomic write (files.py) are removed.
- A folder this command created is removed again when it fails and leaves it empty.
- `finished.json` is written by a run whose design loop ended, after every other
  file, with a digest of density.npy: `topo export` never writes it, so a folder
  re-exported after an interruption is not taken for a finished run.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from .files import write_json
from .problem import ProblemError

LOCK = ".topo.lock"
MARKER = "finished.json"
TEMPORARY = (".*.tmp", ".*.tmp.*")  # files.atomic_write and files.write_meshio


def check_target(path: Path, key: str = "--out") -> None:
    """Refuse a folder path that is a file or lies below one."""
    path = Path(path)
    for p in [path, *path.parents]:
        if p.exists() and not p.is_dir():
            where = "is a file" if p == path else f"lies below the file {p}"
            raise ProblemError(
                str(path), key, f"the output folder {where}; give a folder path (--out)"
            )


class OutputFolder:
    """`with OutputFolder(path): ...` around everything a command writes there."""

    def __init__(self, path, key: str = "--out"):
        self.path, self.key = Path(path), key
        self.created: list[Path] = []
        self.locked = False

    def __enter__(self) -> OutputFolder:
        check_target(self.path, self.key)
        missing = [p for p in [self.path, *self.path.parents] if not p.exists()]
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise self._fault(f"cannot create it ({exc.strerror})") from None
        self.created = missing  # deepest first
        try:
            self._lock()
            clean_temporaries(self.path)
        except BaseException:
            self.__exit__(ProblemError, None, None)
            raise
        return self

    def __exit__(self, kind, exc, tb) -> None:
        if self.locked:
            (self.path / LOCK).unlink(missing_ok=True)
            self.locked = False
        if kind is not None:
            for p in self.created:  # only what this command made, and only if empty
                try:
                    p.rmdir()
                except OSError:
                    break

    def _fault(self, message: str) -> ProblemError:
        return ProblemError(str(self.path), self.key, message)

    def _lock(self) -> None:
        lock = self.path / LOCK
        for _ in range(2):
            try:
                fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                pid = _pid_in(lock)
                if pid is not None and _running(pid):
                    raise self._fault(
                        f"another topo process (pid {pid}) is writing to this folder; "
                        "wait for it to end or give another folder"
                    ) from None
                lock.unlink(missing_ok=True)  # left by a process that ended
                continue
            except OSError as exc:
                raise self._fault(f"the folder is not writable ({exc.strerror})") from None
            with os.fdopen(fd, "w") as fh:
                fh.write(f"{os.getpid()}\n")
            self.locked = True
            return
        raise self._fault("cannot take the folder's lock")


def _pid_in(lock: Path) -> int | None:
    try:
        return int(lock.read_text().strip())
    except (OSError, ValueError):
        return None


def _running(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def clean_temporaries(folder: Path) -> list[Path]:
    """Remove the temporary files an interrupted atomic write left in `folder`."""
    gone = []
    for pattern in TEMPORARY:
        for p in Path(folder).glob(pattern):
            if p.is_file():
                p.unlink(missing_ok=True)
                gone.append(p)
    return gone


def _digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def mark_finished(folder, result) -> None:
    """Record that the design loop of the run in `folder` ended (after the export)."""
    folder = Path(folder)
    write_json(
        folder / MARKER,
        {
            "iterations": len(result.history),
            "converged": bool(result.converged),
            "stop_reason": result.stop_reason,
            "density_sha256": _digest(folder / "density.npy"),
        },
    )


def unmark(folder) -> None:
    """A new run into a folder: the mark of an earlier run there no longer holds."""
    (Path(folder) / MARKER).unlink(missing_ok=True)


def finished(folder) -> dict | None:
    """The marker of a finished run whose density.npy is the one the run wrote, or None."""
    folder = Path(folder)
    try:
        mark = json.loads((folder / MARKER).read_text())
        return mark if mark["density_sha256"] == _digest(folder / "density.npy") else None
    except (OSError, ValueError, KeyError, TypeError):
        return None
