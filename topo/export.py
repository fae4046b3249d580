"""Writers for a Result, registered by output file name.

Every file is written to a temporary name in the output folder and renamed into
place, and summary.json goes last, so a folder with a summary is a finished run.
"""
from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from pathlib import Path
from typing import Callable

import numpy as np

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from . import mesh as meshing  # noqa: E402
from .regions import select_nodes  # noqa: E402

MESH_FORMATS = ("stl", "obj", "ply")
_UMASK = os.umask(0)
os.umask(_UMASK)


def atomic_write(path: Path, data: bytes) -> None:
    """Write bytes to `path` through a temporary file in the same folder."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _figure_bytes(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=120, bbox_inches="tight")
    plt.close(fig)
    return buf.getvalue()


def write_density(result, path: Path) -> None:
    buf = io.BytesIO()
    np.save(buf, result.density)
    atomic_write(path, buf.getvalue())


def write_history_csv(result, path: Path) -> None:
    buf = io.StringIO()
    cols = ["iteration", "objective", "volume_fraction", "change", "beta", "seconds"]
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for row in result.history:
        w.writerow(["" if row[c] is None else f"{row[c]:.10g}" for c in cols])
    atomic_write(path, buf.getvalue().encode())


def write_history_png(result, path: Path) -> None:
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    it = [r["iteration"] for r in result.history]
    ax.plot(it, [r["objective"] for r in result.history], color="tab:blue")
    ax.set_xlabel("iteration")
    ax.set_ylabel("weighted compliance (N·mm)", color="tab:blue")
    ax.set_yscale("log")
    ax2 = ax.twinx()
    ax2.plot(it, [r["volume_fraction"] for r in result.history], color="tab:orange")
    ax2.set_ylabel("volume fraction", color="tab:orange")
    ax.set_title(f"{result.problem.name}: convergence")
    atomic_write(path, _figure_bytes(fig))


def _mark_loads_and_supports(ax, result) -> None:
    model, problem = result.model, result.problem
    grid = model.grid
    pts = grid.node_coords
    fixed_nodes = np.unique(model.fixed_dofs // grid.dim)
    ax.plot(pts[fixed_nodes, 0], pts[fixed_nodes, 1], "^", ms=3, color="tab:blue",
            label="supports", ls="none")
    span = max(grid.size)
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"][1:]
    for i, case in enumerate(problem.load_cases):
        for j, force in enumerate(case.forces):
            nodes = select_nodes(force.region, grid)
            centre = pts[nodes].mean(axis=0)
            vec = np.array(force.total[:2])
            if np.linalg.norm(vec) == 0:
                continue
            arrow = 0.15 * span * vec / np.linalg.norm(vec)
            ax.annotate("", xy=centre, xytext=centre - arrow,
                        arrowprops={"arrowstyle": "->", "color": colors[i % len(colors)], "lw": 2})
            if j == 0:
                ax.plot([], [], color=colors[i % len(colors)], label=f"load: {case.name}")


def write_design_png(result, path: Path) -> None:
    rho = result.density
    grid = result.model.grid
    size = grid.size
    if rho.ndim == 2:
        fig, ax = plt.subplots(figsize=(7, 7 * size[1] / size[0] + 0.8))
        ax.imshow(rho.T, origin="lower", extent=(0, size[0], 0, size[1]), cmap="gray_r",
                  vmin=0, vmax=1, interpolation="nearest")
        _mark_loads_and_supports(ax, result)
        ax.set_xlabel("x (mm)")
        ax.set_ylabel("y (mm)")
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=4, fontsize=8, frameon=False)
        ax.set_title(f"{result.problem.name}: density")
    else:
        # Three orthographic views: the mean density along each viewing axis.
        views = [("top (along z)", 2, 0, 1), ("front (along y)", 1, 0, 2), ("side (along x)", 0, 1, 2)]
        fig, axes = plt.subplots(1, 3, figsize=(13, 4.2))
        for ax, (title, along, a, b) in zip(axes, views):
            img = rho.mean(axis=along)
            ax.imshow(img.T, origin="lower", extent=(0, size[a], 0, size[b]), cmap="gray_r",
                      vmin=0, vmax=1, interpolation="nearest")
            ax.set_xlabel(f"{'xyz'[a]} (mm)")
            ax.set_ylabel(f"{'xyz'[b]} (mm)")
            ax.set_title(title)
        fig.suptitle(f"{result.problem.name}: mean density through the part")
    atomic_write(path, _figure_bytes(fig))


def write_problem(result, path: Path) -> None:
    """The resolved problem (overrides applied), so a run folder can be re-read."""
    atomic_write(path, json.dumps(result.problem.raw, indent=2).encode())


def write_summary(result, path: Path) -> None:
    atomic_write(path, (json.dumps(result.summary, indent=2) + "\n").encode())


def design_mesh(result, iso: float = 0.5, smooth: int = 0,
                min_piece_fraction: float = 0.01) -> tuple[meshing.TriMesh, dict]:
    """The printable surface of a Result and its figures for summary.json."""
    problem, model = result.problem, result.model
    rho = np.maximum(result.density, model.solid.reshape(result.density.shape))  # passive solids in
    raw = meshing.isosurface(rho, problem.domain.element_size, iso, problem.domain.thickness)
    mesh, dropped = meshing.remove_debris(raw, min_piece_fraction)
    size = tuple(problem.domain.size) + ((problem.domain.thickness,) if problem.dim == 2 else ())
    if smooth > 0:
        mesh = meshing.taubin_smooth(mesh, smooth, pinned=meshing.boundary_pins(mesh, size))
    area = mesh.area
    info = {"iso": iso, "smoothing_passes": smooth, "volume_mm3": mesh.volume, "area_mm2": area,
            "watertight": mesh.watertight, "pieces": int(len(np.unique(mesh.pieces()))) if len(mesh.faces) else 0,
            "debris_pieces_removed": dropped, "vertices": int(len(mesh.vertices)),
            "faces": int(len(mesh.faces)), "downfacing_overhang_area_mm2": None,
            "downfacing_overhang_fraction": None}
    if problem.build is not None:
        d = problem.build.direction
        axis = "xyz".index(d[1])
        plate = 0.0 if d[0] == "+" else size[axis]
        down = meshing.downfacing_area(mesh, d, plate, problem.build.overhang_angle)
        info["downfacing_overhang_area_mm2"] = down
        info["downfacing_overhang_fraction"] = down / area if area > 0 else None
    return mesh, info


def write_mesh(mesh: meshing.TriMesh, path: Path, fmt: str = "stl") -> None:
    import meshio

    if fmt not in MESH_FORMATS:
        raise ValueError(f"unknown mesh format {fmt!r}; choose one of {', '.join(MESH_FORMATS)}")
    m = meshio.Mesh(mesh.vertices, [("triangle", mesh.faces.astype(np.int32))])
    _meshio_write(m, path, fmt, **({} if fmt == "obj" else {"binary": True}))


def _meshio_write(m, path: Path, fmt: str, **options) -> None:
    """meshio.write through a temporary name in the same folder, then rename."""
    import meshio

    tmp = path.with_name(f".{path.stem}.tmp{path.suffix}")
    try:
        meshio.write(tmp, m, file_format=fmt, **options)
        os.chmod(tmp, 0o666 & ~_UMASK)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in name)


def write_fields(result, path: Path) -> None:
    """Density, displacement per load case and von Mises stress on the grid (VTU)."""
    import meshio

    model, a = result.model, result.analysis
    grid = model.grid
    pts = grid.node_coords
    if grid.dim == 2:
        pts = np.column_stack([pts, np.zeros(len(pts))])
    cell_type = "quad" if grid.dim == 2 else "hexahedron"  # our corner order is VTK's
    point_data, cell_data = {}, {"density": [result.density.ravel()]}
    for i, case in enumerate(result.problem.load_cases):
        u = a.displacements[:, i].reshape(grid.n_nodes, grid.dim)
        if grid.dim == 2:
            u = np.column_stack([u, np.zeros(len(u))])
        point_data[f"displacement_{_safe(case.name)}"] = u
        cell_data[f"von_mises_{_safe(case.name)}"] = [a.von_mises[:, i]]
    cell_data["von_mises_max"] = [a.von_mises.max(axis=1)]
    m = meshio.Mesh(pts, [(cell_type, grid.element_nodes)], point_data=point_data, cell_data=cell_data)
    _meshio_write(m, path, "vtu")


# Order matters: summary.json last marks a complete folder.
EXPORTERS: dict[str, Callable] = {
    "problem.json": write_problem,
    "density.npy": write_density,
    "history.csv": write_history_csv,
    "history.png": write_history_png,
    "design.png": write_design_png,
    "fields.vtu": write_fields,
    "summary.json": write_summary,
}


def export(result, out_dir: str | Path, only: list[str] | None = None, iso: float = 0.5,
           smooth: int = 0, mesh_format: str = "stl", mesh: bool = True) -> list[Path]:
    """Write every output file (or those named in `only`) into `out_dir`, and the
    design mesh (design.stl, .obj or .ply) unless `mesh` is false."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    names = [n for n in EXPORTERS if only is None or n in only]
    written = []
    if mesh:
        surface, info = design_mesh(result, iso, smooth)
        result.summary["mesh"] = info
        target = out / f"design.{mesh_format}"
        write_mesh(surface, target, mesh_format)
        written.append(target)
    for name in names:
        if name in ("history.csv", "history.png") and not result.history:
            continue
        EXPORTERS[name](result, out / name)
        written.append(out / name)
    return written
