"""verify.json, verify.vtu and verify.png, and the run's summary.json with the
verified headline figures. Everything is made in memory first and then written
atomically (files.py), summary last, so a failure leaves no half-written file."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import files
from ..report import CAUTION
from .figures import apply_to_summary

# the four straight sub-triangles of a 6-node triangle (corners 0-2, mid-edges 3-5)
_SPLIT = np.array([[0, 3, 5], [3, 1, 4], [5, 4, 2], [3, 4, 5]])


def _mesh(ver):
    import meshio

    sol = ver.solution
    points = np.column_stack([sol.points, np.zeros(len(sol.points))])
    data = {}
    for c, case in enumerate(ver.problem.load_cases):
        key = files_safe(case.name)
        disp = np.column_stack([sol.displacement[:, :, c], np.zeros(len(sol.points))])
        data[f"displacement_{key}"] = disp
        data[f"von_mises_{key}"] = sol.von_mises[:, c]
        data[f"stress_xx_yy_xy_{key}"] = sol.stress[:, :, c]
    return meshio.Mesh(points, [("triangle6", sol.cells)], point_data=data)


def files_safe(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name)


def picture(ver) -> bytes:
    plt = files.pyplot()
    from matplotlib.tri import Triangulation

    sol, cases = ver.solution, ver.figures["load_cases"]
    tri = Triangulation(sol.points[:, 0], sol.points[:, 1], sol.cells[:, _SPLIT].reshape(-1, 3))
    size = ver.problem.domain.size
    n = len(cases)
    width = 7.0
    fig, axes = plt.subplots(
        n, 1, figsize=(width, n * width * size[1] / size[0] + 0.8 * n), squeeze=False
    )
    for c, (ax, case) in enumerate(zip(axes[:, 0], cases)):
        art = ax.tripcolor(tri, sol.von_mises[:, c], shading="gouraud", cmap="viridis")
        fig.colorbar(art, ax=ax, label="von Mises stress (MPa)", shrink=0.9)
        x, y = case["peak_location_mm"]
        ax.plot([x], [y], marker="x", color="red", markersize=10, mew=2)
        ax.annotate(
            f"peak {case['max_von_mises_MPa']:.4g} MPa",
            (x, y),
            xytext=(6, 6),
            textcoords="offset points",
            color="red",
        )
        ax.set_title(f"{case['name']}: body-fitted verification, finest mesh")
        ax.set_aspect("equal")
        ax.set_xlim(0, size[0])
        ax.set_ylim(0, size[1])
        ax.set_xlabel("x (mm)")
        ax.set_ylabel("y (mm)")
    return files.figure_bytes(fig)


def write_verification(ver, out: Path, summary: dict | None = None) -> dict | None:
    """Write verify.json/.vtu/.png to `out`; with `summary` (the run's), also
    summary.json with the verified headline figures, which is returned."""
    out = Path(out)
    body = dict(ver.figures)
    body["caution"] = CAUTION
    text = files.strict_json(body) + "\n"  # refuses NaN before anything is written
    png = picture(ver)
    new_summary = apply_to_summary(summary, ver.figures) if summary is not None else None
    summary_text = files.strict_json(new_summary) + "\n" if new_summary is not None else None
    out.mkdir(parents=True, exist_ok=True)
    files.write_meshio(out / "verify.vtu", _mesh(ver), "vtu")
    files.atomic_write(out / "verify.png", png)
    files.write_text(out / "verify.json", text)
    if summary_text is not None:
        files.write_text(out / "summary.json", summary_text)
    return new_summary
