"""design.png: the part as it will be printed, with what acts on it.

2D: the printed part (density ≥ 0.5 with its interfaces whole) over the grey
design, interfaces outlined, keep-out regions hatched, supports, load arrows whose
length follows the force, and the build plate with the build direction. 3D: the
design mesh, shaded, from three views, with the same marks. matplotlib only, no
display needed.
"""

from __future__ import annotations

import numpy as np

from .files import pyplot
from .regions import select_nodes

ARROW_SHARE = 0.2  # the largest force is drawn this share of the domain's span
LIGHT = np.array([0.4, -0.5, 0.75]) / np.linalg.norm([0.4, -0.5, 0.75])


def _forces(result):
    """(load-case index, case name, centre (dim,), total (dim,)) of every force."""
    grid, pts = result.model.grid, result.model.grid.node_coords
    out = []
    for i, case in enumerate(result.problem.load_cases):
        for force in case.forces:
            nodes = select_nodes(force.region, grid)
            out.append((i, case.name, pts[nodes].mean(axis=0), np.array(force.total, float)))
    return out


def _arrow_scale(result, forces) -> float:
    largest = max((np.linalg.norm(f[3]) for f in forces), default=0.0)
    return ARROW_SHARE * max(result.model.grid.size) / largest if largest > 0 else 0.0


def _plate(size, direction: str):
    """Axis index and coordinate of the build plate."""
    axis = "xyz".index(direction[1])
    return axis, (0.0 if direction[0] == "+" else size[axis])


def _figure_2d(result):
    plt = pyplot()
    problem, model = result.problem, result.model
    grid, size = model.grid, model.grid.size
    fig, ax = plt.subplots(figsize=(7.5, 7.5 * size[1] / size[0] + 1.0))
    shown = np.where(result.printed.density > 0.5, 1.0, 0.35 * result.density)
    ax.imshow(
        shown.T,
        origin="lower",
        extent=(0, size[0], 0, size[1]),
        cmap="gray_r",
        vmin=0,
        vmax=1,
        interpolation="nearest",
    )
    for kind, color, hatch in (("solid", "tab:blue", None), ("void", "tab:red", "//")):
        mask = (model.solid if kind == "solid" else model.void).reshape(grid.shape)
        if mask.any():
            x = (np.arange(grid.shape[0]) + 0.5) * grid.h
            y = (np.arange(grid.shape[1]) + 0.5) * grid.h
            ax.contour(x, y, mask.T.astype(float), levels=[0.5], colors=color, linewidths=1.2)
            if hatch:
                ax.contourf(
                    x, y, mask.T.astype(float), levels=[0.5, 1.5], colors="none", hatches=[hatch]
                )
            ax.plot(
                [],
                [],
                color=color,
                label="interface (kept solid)" if kind == "solid" else "keep-out region",
            )
    fixed = np.unique(model.fixed_dofs // grid.dim)
    ax.plot(*grid.node_coords[fixed].T, "^", ms=3, color="tab:green", ls="none", label="supports")
    forces = _forces(result)
    scale = _arrow_scale(result, forces)
    colors = ["tab:orange", "tab:purple", "tab:brown", "tab:pink", "tab:olive", "tab:cyan"]
    for i, name, centre, total in forces:
        color = colors[i % len(colors)]
        ax.annotate(
            "",
            xy=centre,
            xytext=centre - scale * total,
            arrowprops={"arrowstyle": "->", "color": color, "lw": 2},
        )
        ax.plot([], [], color=color, label=f"{name}: {np.linalg.norm(total):.4g} N")
    if problem.build is not None:
        axis, at = _plate(size, problem.build.direction)
        line = ([at, at], [0, size[1]]) if axis == 0 else ([0, size[0]], [at, at])
        ax.plot(
            *line,
            color="k",
            lw=5,
            solid_capstyle="butt",
            label=f"build plate, grown {problem.build.direction}",
        )
    ax.set_xlim(-0.05 * size[0], 1.05 * size[0])
    ax.set_ylim(-0.05 * size[1], 1.05 * size[1])
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=3, fontsize=8, frameon=False)
    ax.set_title(f"{problem.name}: the printed part (grey: below ρ = 0.5, not printed)")
    return fig


def _figure_3d(result, surface):
    from mpl_toolkits.mplot3d.art3d import Poly3DCollection

    plt = pyplot()
    problem, model = result.problem, result.model
    size = model.grid.size
    mesh = surface.mesh
    tri = mesh.vertices[mesh.faces]
    normals = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    normals /= np.maximum(np.linalg.norm(normals, axis=1, keepdims=True), 1e-12)
    shade = 0.35 + 0.65 * np.clip(normals @ LIGHT, 0, 1)
    colors = np.column_stack([0.55 * shade, 0.62 * shade, 0.72 * shade, np.ones_like(shade)])
    forces = _forces(result)
    scale = _arrow_scale(result, forces)
    fixed = result.model.grid.node_coords[np.unique(model.fixed_dofs // 3)]
    views = (("isometric", 25, -60), ("front (along y)", 0, -90), ("top (along z)", 90, -90))
    fig = plt.figure(figsize=(15, 5.2))
    for k, (title, elev, azim) in enumerate(views):
        ax = fig.add_subplot(1, 3, k + 1, projection="3d")
        ax.add_collection3d(
            Poly3DCollection(tri, facecolors=colors, edgecolors=colors, linewidths=0.2)
        )
        ax.scatter(*fixed.T, s=2, color="tab:green", label="supports")
        for mask, color in ((model.void, "tab:red"), (model.solid, "tab:blue")):
            if mask.any():  # keep-out regions red, interfaces blue: their element centres
                where = np.flatnonzero(mask)
                where = where[:: -(-len(where) // MAX_MARKERS)]  # every k-th, k = ⌈n / max⌉
                ax.scatter(*_centres(model.grid, where).T, s=1, color=color, alpha=0.25)
        for _, _, centre, total in forces:
            ax.quiver(*(centre - scale * total), *(scale * total), color="tab:orange", lw=2)
        if problem.build is not None:
            axis, at = _plate(size, problem.build.direction)
            corners = np.zeros((4, 3))
            others = [a for a in range(3) if a != axis]
            corners[:, axis] = at
            corners[:, others[0]] = [0, size[others[0]], size[others[0]], 0]
            corners[:, others[1]] = [0, 0, size[others[1]], size[others[1]]]
            ax.add_collection3d(Poly3DCollection([corners], facecolors=(0, 0, 0, 0.15)))
        ax.set_xlim(0, size[0])
        ax.set_ylim(0, size[1])
        ax.set_zlim(0, size[2])
        ax.set_box_aspect(size)
        ax.view_init(elev, azim)
        ax.set_title(title, fontsize=9)
        ax.set_xlabel("x (mm)", fontsize=7)
        ax.set_ylabel("y (mm)", fontsize=7)
        ax.set_zlabel("z (mm)", fontsize=7)
        ax.tick_params(labelsize=6)
    build = f"; grown {problem.build.direction} from the shaded plate" if problem.build else ""
    loads = ", ".join(f"{name} {np.linalg.norm(t):.4g} N" for _, name, _, t in forces)
    fig.suptitle(
        f"{problem.name}: the design mesh; supports green, loads orange ({loads}), "
        f"arrow length ∝ force; interfaces blue, keep-out red{build}",
        fontsize=10,
    )
    return fig


def _centres(grid, elements: np.ndarray) -> np.ndarray:
    """(n, dim) centres in mm of the given elements, as Grid.element_centers."""
    idx = np.stack(np.unravel_index(elements, grid.shape), axis=1)
    return (idx + 0.5) * grid.h


def design_figure(result, surface):
    """The figure of design.png; `surface` is the design mesh (report.design_surface)."""
    return _figure_2d(result) if result.density.ndim == 2 else _figure_3d(result, surface)


def _field_figure(result, surface, values: np.ndarray, label: str, title: str, scaled=True):
    """A per-element field of the printed part (NaN where nothing is printed), its
    peak marked: an image in 2D, the design mesh coloured in 3D. scaled=False
    draws no colour bar and no peak (the part only)."""
    plt = pyplot()
    grid = result.model.grid
    peak = int(np.nanargmax(values)) if np.isfinite(values).any() else None
    if grid.dim == 2:
        size = grid.size
        fig, ax = plt.subplots(figsize=(7.5, 7.5 * size[1] / size[0] + 1.0))
        image = ax.imshow(
            values.reshape(grid.shape).T,
            origin="lower",
            cmap="viridis",
            extent=(0, size[0], 0, size[1]),
            interpolation="nearest",
        )
        ax.set_xlabel("x (mm)")
        ax.set_ylabel("y (mm)")
    else:
        from mpl_toolkits.mplot3d.art3d import Poly3DCollection

        tri = surface.mesh.vertices[surface.mesh.faces]
        # the element under each triangle: half an element inwards from its centroid
        # (the mesh is closed with outward normals)
        normals = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
        normals /= np.maximum(np.linalg.norm(normals, axis=1, keepdims=True), 1e-12)
        inside = tri.mean(axis=1) - 0.5 * grid.h * normals
        cells = np.clip((inside / grid.h).astype(int), 0, np.array(grid.shape) - 1)
        shown = np.nan_to_num(values[np.ravel_multi_index(cells.T, grid.shape)], nan=0.0)
        norm = plt.Normalize(0.0, values[peak] if peak is not None else 1.0)
        fig = plt.figure(figsize=(8, 6))
        ax = fig.add_subplot(projection="3d")
        colors = plt.get_cmap("viridis")(norm(shown))
        ax.add_collection3d(
            Poly3DCollection(tri, facecolors=colors, edgecolors=colors, linewidths=0.2)
        )
        ax.set_xlim(0, grid.size[0])
        ax.set_ylim(0, grid.size[1])
        ax.set_zlim(0, grid.size[2])
        ax.set_box_aspect(grid.size)
        ax.view_init(25, -60)
        image = plt.cm.ScalarMappable(norm=norm, cmap="viridis")
    if not scaled:
        peak = None
    else:
        fig.colorbar(image, ax=ax, shrink=0.7, label=label)
    if peak is not None:
        centre = _centres(grid, np.array([peak]))[0]
        ax.plot(*[[c] for c in centre], "r*", ms=12, label=f"peak {values[peak]:.4g}")
        ax.legend(loc="upper right", fontsize=8)
    ax.set_title(f"{result.problem.name}: {title}", fontsize=8)
    return fig


def _corner_mean(grid, nodal: np.ndarray) -> np.ndarray:
    """(n_elements, c): the mean of each element's corner values of a nodal field
    (n_nodes, c), as shifted slices of the node grid (no (n_elements, corners, c)
    gather)."""
    field = nodal.reshape(grid.node_shape + nodal.shape[1:])
    total = np.zeros(grid.shape + nodal.shape[1:])
    for corner in grid.corners:
        total += field[tuple(slice(c, c + n) for c, n in zip(corner, grid.shape))]
    return (total / len(grid.corners)).reshape(grid.n_elements, *nodal.shape[1:])


# Region markers drawn at most this many element centres each: on a print-resolution
# grid a keep-out region holds hundreds of thousands, which only slow the drawing.
MAX_MARKERS = 20000


def stress_figure(result, surface):
    """stress.png: the printed part's von Mises stress (largest over the load cases)
    at element centres, MPa, with the peak marked."""
    part = result.printed
    if part.analysis is None:
        return _unanalysed_figure(result, surface, "von Mises (MPa)")
    printed = part.density.ravel() > 0.5
    vm = np.where(printed, part.analysis.von_mises.max(axis=1), np.nan)
    return _field_figure(
        result,
        surface,
        vm,
        "von Mises (MPa)",
        "von Mises stress of the printed part at element centres, MPa (largest "
        "over the load cases)\nstepped grid: peaks at holes, corners and loads "
        "are not converged",
    )


def _unanalysed_figure(result, surface, label: str):
    """The printed part drawn in one colour, with no field, no colour bar and the
    reason it has none (a part that does not carry its loads is not analysed,
    printed.py)."""
    import textwrap

    made = result.printed.density.ravel() > 0.5
    values = np.where(made, 0.5, np.nan)
    reason = textwrap.fill(f"printed part {result.printed.why_not_analysed()}", 90)
    return _field_figure(result, surface, values, label, reason, scaled=False)


def deflection_figure(result, surface):
    """deflection.png: how far the printed part moves (displacement magnitude, mm,
    the mean of each element's corners, largest over the load cases)."""
    model = result.model
    if result.printed.analysis is None:
        return _unanalysed_figure(result, surface, "displacement magnitude (mm)")
    u = result.printed.analysis.displacements.reshape(model.grid.n_nodes, model.dim, -1)
    magnitude = np.linalg.norm(u, axis=1)  # (nodes, cases)
    per_element = _corner_mean(model.grid, magnitude).max(axis=1)
    printed = result.printed.density.ravel() > 0.5
    moved = np.where(printed, per_element, np.nan)
    return _field_figure(
        result,
        surface,
        moved,
        "displacement magnitude (mm)",
        "displacement of the printed part, mm (largest over the load cases)",
    )
