"""verify.json, verify.vtu and verify.png, and the run's summary.json with the
verified headline figures. Everything is made in memory first and then written
atomically (files.py), summary last, so a failure leaves no half-written file."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import files
from ..export import FATIGUE
from ..fatigue_figure import fatigue_figure
from ..report import CAUTION
from .figures import apply_to_summary

# the four straight sub-triangles of a 6-node triangle (corners 0-2, mid-edges 3-5)
_SPLIT = np.array([[0, 3, 5], [3, 1, 4], [5, 4, 2], [3, 4, 5]])


def _xyz(values: np.ndarray) -> np.ndarray:
    """(n, 2 or 3) → (n, 3), z = 0 in 2D."""
    return np.column_stack([values, np.zeros((len(values), 3 - values.shape[1]))])


def _mesh(ver):
    import meshio

    sol = ver.solution
    dim = sol.points.shape[1]
    names = "xx_yy_xy" if dim == 2 else "xx_yy_zz_yz_xz_xy"
    data = {}
    for c, case in enumerate(ver.problem.load_cases):
        key = files_safe(case.name)
        data[f"displacement_{key}"] = _xyz(sol.displacement[:, :, c])
        data[f"von_mises_{key}"] = sol.von_mises[:, c]
        data[f"stress_{names}_{key}"] = sol.stress[:, :, c]
    kind = "triangle6" if dim == 2 else "tetra10"
    return meshio.Mesh(_xyz(sol.points), [(kind, sol.cells)], point_data=data)


def boundary_triangles(tets: np.ndarray) -> np.ndarray:
    """The faces (corner nodes) of tetrahedra that belong to one tetrahedron only."""
    faces = np.concatenate([tets[:, f] for f in ([0, 1, 2], [0, 1, 3], [0, 2, 3], [1, 2, 3])])
    _, index, counts = np.unique(
        np.sort(faces, axis=1), axis=0, return_index=True, return_counts=True
    )
    return faces[index[counts == 1]]


def picture_3d(ver) -> bytes:
    plt = files.pyplot()
    from matplotlib import cm, colors
    from mpl_toolkits.mplot3d.art3d import Poly3DCollection

    sol, cases = ver.solution, ver.figures["load_cases"]
    faces = boundary_triangles(sol.cells[:, :4])
    size = ver.problem.domain.size
    fig = plt.figure(figsize=(7.0, 5.5 * len(cases)))
    for c, case in enumerate(cases):
        ax = fig.add_subplot(len(cases), 1, c + 1, projection="3d")
        vm = sol.von_mises[:, c]
        norm = colors.Normalize(0.0, float(vm.max()))
        colour = cm.viridis(norm(vm[faces].mean(axis=1)))
        ax.add_collection3d(Poly3DCollection(sol.points[faces], facecolors=colour, linewidths=0))
        x, y, z = case["peak_location_mm"]
        ax.scatter([x], [y], [z], color="red", marker="x", s=80, depthshade=False)
        ax.text(x, y, z, f"  peak {case['max_von_mises_MPa']:.4g} MPa", color="red")
        ax.set_xlim(0, size[0])
        ax.set_ylim(0, size[1])
        ax.set_zlim(0, size[2])
        ax.set_box_aspect(size)
        ax.set_xlabel("x (mm)")
        ax.set_ylabel("y (mm)")
        ax.set_zlabel("z (mm)")
        ax.set_title(f"{case['name']}: body-fitted verification, finest mesh")
        bar = cm.ScalarMappable(norm=norm, cmap="viridis")
        fig.colorbar(bar, ax=ax, label="von Mises stress (MPa)", shrink=0.7, pad=0.12)
    return files.figure_bytes(fig)


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
    png = picture(ver) if ver.solution.points.shape[1] == 2 else picture_3d(ver)
    new_summary = apply_to_summary(summary, ver.figures) if summary is not None else None
    summary_text = files.strict_json(new_summary) + "\n" if new_summary is not None else None
    out.mkdir(parents=True, exist_ok=True)
    files.write_meshio(out / "verify.vtu", _mesh(ver), "vtu")
    files.atomic_write(out / "verify.png", png)
    files.write_text(out / "verify.json", text)
    if new_summary is not None and new_summary.get("fatigue") and (out / FATIGUE).exists():
        # the run's S-N figure marks the verified weakest points, as summary.json does
        files.write_figure(out / FATIGUE, fatigue_figure(ver.problem, new_summary["fatigue"]))
    if summary_text is not None:
        files.write_text(out / "summary.json", summary_text)
    return new_summary
