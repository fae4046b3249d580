"""Writers for a Result, registered by output file name.

Every file is written atomically (files.py), and summary.json goes last. A whole
export of a design loop's Result then writes finished.json (runfolder.py), the mark
of a finished run; a re-export (`topo export`, load_run) never does. The writers
only write: the figures come from report.py and the Result is not changed.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import mesh as meshing
from .fatigue_figure import fatigue_figure
from .files import atomic_write, pyplot, strict_json, write_figure, write_meshio, write_text
from .pictures import deflection_figure, design_figure, stress_figure
from .problem import field_name
from .report import design_surface, run_summary
from .review import build_report
from .runfolder import MARKER, mark_finished

plt = pyplot()

MESH_FORMATS = ("stl", "obj", "ply")


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
    write_text(path, buf.getvalue())


def write_history_png(result, path: Path) -> None:
    """The objective against iteration; every constraint (material budget, stress,
    deflection limits) as the share of its limit with the limit dashed; each β step
    of the projection dotted."""
    history = result.history
    fig, ax = plt.subplots(figsize=(7.2, 3.8))
    it = [r["iteration"] for r in history]
    ax.plot(it, [r["objective"] for r in history], color="tab:blue")
    ax.set_xlabel("iteration")
    ax.set_ylabel("objective (weighted compliance, N·mm)", color="tab:blue")
    ax.set_yscale("log")
    ax2 = ax.twinx()
    names = list(history[0].get("constraints", {"material": None})) if history else []
    colors = ["tab:orange", "tab:red", "tab:green", "tab:purple", "tab:brown", "tab:pink"]
    for k, name in enumerate(names):
        # each constraint as the share of its limit, v/L = g + 1; the limit is 1
        use = [
            1.0 + r["constraints"][name] if "constraints" in r else 1.0 + r["constraint"]
            for r in history
        ]
        ax2.plot(it, use, color=colors[k % len(colors)], lw=1.2, label=name)
    ax2.axhline(1.0, color="k", ls="--", lw=1, label="limit")
    ax2.set_ylabel("value / limit of each constraint")
    ax2.legend(fontsize=7, loc="center right")
    for before, row in zip(history, history[1:]):
        if row["beta"] != before["beta"]:
            ax.axvline(row["iteration"], color="grey", ls=":", lw=1)
            ax.annotate(
                f"β {row['beta']:g}",
                (row["iteration"], 1),
                xycoords=("data", "axes fraction"),
                fontsize=7,
                color="grey",
                rotation=90,
                va="top",
                ha="right",
            )
    stop = result.stop_reason or ""
    ax.set_title(
        f"{result.problem.name}: convergence ({len(history)} iterations; {stop})", fontsize=9
    )
    write_figure(path, fig)


def _default_surface(result, surface):
    """The design mesh a 3D picture draws: `surface` when given, else the default
    one (iso 0.5, no smoothing); 2D pictures need none."""
    if result.density.ndim == 2:
        return None
    return surface if surface is not None else design_surface(result)


def write_design_png(result, path: Path, surface=None) -> None:
    """The printed part with its supports, loads, interfaces and build plate
    (pictures.py); 3D draws the design mesh at the default surface level."""
    write_figure(path, design_figure(result, _default_surface(result, surface)))


def write_stress_png(result, path: Path, surface=None) -> None:
    """The printed part's von Mises stress, the peak marked (pictures.py)."""
    write_figure(path, stress_figure(result, _default_surface(result, surface)))


def write_deflection_png(result, path: Path, surface=None) -> None:
    """How far the printed part moves, the largest marked (pictures.py)."""
    write_figure(path, deflection_figure(result, _default_surface(result, surface)))


def write_problem(result, path: Path) -> None:
    """The resolved problem (overrides applied), so a run folder can be re-read."""
    write_text(path, strict_json(result.problem.raw))


def write_mesh(mesh: meshing.TriMesh, path: Path, fmt: str = "stl") -> None:
    import meshio

    if fmt not in MESH_FORMATS:
        raise ValueError(f"unknown mesh format {fmt!r}; choose one of {', '.join(MESH_FORMATS)}")
    m = meshio.Mesh(mesh.vertices, [("triangle", mesh.faces.astype(np.int32))])
    write_meshio(path, m, fmt, **({} if fmt == "obj" else {"binary": True}))


# Cut of the grey design's stress field: the level of the printed part and design.stl.
GREY_STRESS_CUT = 0.5


def write_fields(result, path: Path) -> None:
    """The grid (VTU) with the grey and the printed density, displacement per load
    case of both, and von Mises stress only where material is: the printed part's in
    its solid elements, the grey design's where ρ ≥ 0.5 (fem.py's stress is that of
    the solid material, which in a void element at ρ ≈ 0 reads thousands of MPa and
    would swamp any colour scale). Zero elsewhere. Each field is made as it is
    written (vtu.py), so a fine grid's fields are never all in memory at once."""
    from .vtu import VTK_HEXAHEDRON, VTK_QUAD, write_vtu

    model, grey, printed = result.model, result.analysis, result.printed
    grid = model.grid

    def points():
        pts = grid.node_coords
        return np.column_stack([pts, np.zeros(len(pts))]) if grid.dim == 2 else pts

    made = printed.density.ravel() > 0.5
    grey_solid = result.density.ravel() >= GREY_STRESS_CUT

    def stress(analysis, where, case=None):
        vm = analysis.von_mises
        if case is None:
            return lambda: np.where(where, vm.max(axis=1), 0.0)
        return lambda: np.where(where, vm[:, case], 0.0)

    point_data, cell_data = {}, {}
    cell_data["density"] = lambda: result.density.ravel()
    cell_data["printed_density"] = lambda: made.astype(float)
    analysed = printed.analysis is not None  # a part not analysed has no printed fields
    for i, case in enumerate(result.problem.load_cases):
        name = field_name(case.name)
        if analysed:
            point_data[f"displacement_printed_{name}"] = lambda i=i: _vectors(
                grid, printed.analysis, i
            )
            cell_data[f"von_mises_printed_{name}"] = stress(printed.analysis, made, i)
        point_data[f"displacement_grey_{name}"] = lambda i=i: _vectors(grid, grey, i)
        cell_data[f"von_mises_grey_rho_ge_half_{name}"] = stress(grey, grey_solid, i)
    if analysed:
        cell_data["von_mises_printed_max"] = stress(printed.analysis, made)
    cell_data["von_mises_grey_rho_ge_half_max"] = stress(grey, grey_solid)
    cell_type = VTK_QUAD if grid.dim == 2 else VTK_HEXAHEDRON  # our corner order is VTK's
    write_vtu(path, points, lambda: grid.element_nodes, cell_type, point_data, cell_data)


def _vectors(grid, analysis, case: int) -> np.ndarray:
    """Nodal displacement of a load case as 3-vectors (z = 0 in 2D), as VTK wants."""
    u = analysis.displacements[:, case].reshape(grid.n_nodes, grid.dim)
    return np.column_stack([u, np.zeros(len(u))]) if grid.dim == 2 else u


# Written in this order; summary.json comes after all of them and marks a complete folder.
EXPORTERS: dict[str, Callable] = {
    "problem.json": write_problem,
    "density.npy": write_density,
    "history.csv": write_history_csv,
    "history.png": write_history_png,
    "design.png": write_design_png,
    "stress.png": write_stress_png,
    "deflection.png": write_deflection_png,
    "fields.vtu": write_fields,
}
# drawn on the default design mesh in 3D: export makes it once for all of them
PICTURES = ("design.png", "stress.png", "deflection.png")
FATIGUE = "fatigue.png"  # when a load case gives cycles: drawn from the summary's figures
SUMMARY = "summary.json"
REPORT = "report.html"  # read from the files above; written just before the summary


@dataclass(frozen=True)
class Exported:
    files: list[Path]  # in the order written
    summary: dict  # what summary.json holds (or would, when it was not asked for)


def export(
    result,
    out_dir: str | Path,
    only: list[str] | None = None,
    iso: float = 0.5,
    smooth: int = 0,
    mesh_format: str = "stl",
    mesh: bool = True,
) -> Exported:
    """Write every output file (or those named in `only`) into `out_dir`, and the
    design mesh (design.stl, .obj or .ply) unless `mesh` is false."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    surface = design_surface(result, iso, smooth) if mesh else None
    summary = run_summary(result, surface)
    summary_text = strict_json(summary) + "\n"  # a non-finite figure fails here, before any file
    if surface is not None:
        target = out / f"design.{mesh_format}"
        write_mesh(surface.mesh, target, mesh_format)
        written.append(target)
    # the exported mesh serves the pictures when it is the default one
    shown = surface if surface is not None and (iso, smooth) == (0.5, 0) else None
    for name, writer in EXPORTERS.items():
        if only is not None and name not in only:
            continue
        if name in ("history.csv", "history.png") and not result.history:
            continue
        if name in PICTURES:
            shown = _default_surface(result, shown)
            writer(result, out / name, shown)
        else:
            writer(result, out / name)
        written.append(out / name)
    if summary.get("fatigue") and (only is None or FATIGUE in only):
        write_figure(out / FATIGUE, fatigue_figure(result.problem, summary["fatigue"]))
        written.append(out / FATIGUE)
    elif only is None:  # one of an earlier run with cycles would mislead report.html
        (out / FATIGUE).unlink(missing_ok=True)
    if only is None or REPORT in only:
        write_text(out / REPORT, build_report(out, summary))
        written.append(out / REPORT)
    if only is None or SUMMARY in only:
        write_text(out / SUMMARY, summary_text)
        written.append(out / SUMMARY)
    if only is None and result.loop_ended:
        mark_finished(out, result)
        written.append(out / MARKER)
    return Exported(written, summary)
