"""Atomic file writing: bytes, text, strict JSON, meshio files and figures.

Every writer goes through a temporary name in the target folder and renames it into
place, so a reader never sees a half-written file and an interrupted run leaves
none behind.
"""

from __future__ import annotations

import io
import json
import os
import tempfile
from pathlib import Path

_UMASK = os.umask(0)
os.umask(_UMASK)


def atomic_write(path: Path, data: bytes) -> None:
    """Write bytes to `path` through a temporary file in the same folder."""
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as exc:
        raise OSError(exc.errno, exc.strerror, str(path)) from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException as exc:
        if os.path.exists(tmp):
            os.unlink(tmp)
        if isinstance(exc, OSError) and exc.filename is None:  # a full disk: say which file
            raise OSError(exc.errno, exc.strerror, str(path)) from None
        raise


def write_text(path: Path, text: str) -> None:
    atomic_write(path, text.encode())


def strict_json(obj) -> str:
    """JSON text, indented; NaN and infinity are refused (ValueError), since they are
    not JSON and other readers reject them."""
    return json.dumps(obj, indent=2, allow_nan=False)


def write_json(path: Path, obj) -> None:
    write_text(path, strict_json(obj) + "\n")


def write_meshio(path: Path, mesh, fmt: str, **options) -> None:
    """meshio.write through a temporary name in the same folder, then rename."""
    import meshio

    path = Path(path)
    tmp = path.with_name(f".{path.stem}.tmp{path.suffix}")
    try:
        meshio.write(tmp, mesh, file_format=fmt, **options)
        os.chmod(tmp, 0o666 & ~_UMASK)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def figure_bytes(fig) -> bytes:
    """A matplotlib figure as PNG bytes; the figure is closed."""
    plt = pyplot()

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=120, bbox_inches="tight")
    plt.close(fig)
    return buf.getvalue()


def write_figure(path: Path, fig) -> None:
    atomic_write(path, figure_bytes(fig))


def pyplot():
    """matplotlib.pyplot on the non-interactive Agg back end (no display is needed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt
