"""The print-resolution bracket (300 × 160 × 120 elements of 0.5 mm, 5.76 million)
and every stage of its pipeline but the linear solve, timed one by one with the
peak memory each reaches.

The stages run on a synthetic design (a smooth random field, thresholded to the
volume fraction and softened so that the filter and projection see grey values)
and synthetic displacements (a smooth field per load case, zero on the supports)
from a stand-in linear system, so the figures do not wait for a solve. Peak memory
is the kernel's high-water mark of resident memory (VmHWM), reset before each
stage (/proc/self/clear_refs, Linux): each stage's figure is its own.
"""

from __future__ import annotations

import json
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

import numpy as np
from scipy import ndimage

from .linear import LinearSystem

SHAPE = (300, 160, 120)  # 150 × 80 × 60 mm at 0.5 mm


def print_bracket(shape=SHAPE, h: float = 0.5, solver: str = "auto") -> dict:
    """A hinge bracket for an instrument door, grown on its base plate (+z): four
    bolts through base pads, a hinge eye at the far upper end, a cable passage kept
    clear through the middle, three load cases. A scenario of our own."""
    nx, ny, nz = shape
    L, W, H = nx * h, ny * h, nz * h
    bolts = [(0.1 * L, 0.2 * W), (0.1 * L, 0.8 * W), (0.4 * L, 0.2 * W), (0.4 * L, 0.8 * W)]
    eye = [0.9 * L, 0.5 * W, 0.8 * H]
    r = 0.04 * L
    eye_region = {"cylinder": {"center": eye, "axis": "y", "radius": r, "length": 0.5 * W}}
    return {
        "name": f"print-bracket-{nx}x{ny}x{nz}",
        "description": "hinge bracket at print resolution (benchmark)",
        "domain": {"size": [L, W, H], "element_size": h},
        "material": {"preset": "Ti-6Al-4V"},
        "optimization": {
            "volume_fraction": 0.12,
            "filter_radius": 3 * h,
            "projection": True,
            "optimizer": "oc",
            "solver": solver,
            "max_iterations": 100,
            "checkpoint_interval": 10,
        },
        "build": {"direction": "+z", "overhang_angle": 45.0, "overhang_filter": True},
        "support": [
            {
                "name": f"bolt-{i}",
                "region": {
                    "cylinder": {
                        "center": [x, y, 2 * h],
                        "axis": "z",
                        "radius": 0.02 * L,
                        "length": 4 * h,
                    }
                },
                "fix": ["x", "y", "z"],
            }
            for i, (x, y) in enumerate(bolts)
        ],
        "load_case": [
            {"name": "door-weight", "force": [{"region": eye_region, "total": [0, 0, -3000.0]}]},
            {"name": "door-slam", "force": [{"region": eye_region, "total": [0, 1500.0, 0]}]},
            {"name": "door-pull", "force": [{"region": eye_region, "total": [2000.0, 0, 0]}]},
        ],
        "passive": [
            *(
                {
                    "name": f"pad-{i}",
                    "kind": "solid",
                    "region": {
                        "cylinder": {
                            "center": [x, y, 3 * h],
                            "axis": "z",
                            "radius": 0.045 * L,
                            "length": 6 * h,
                        }
                    },
                }
                for i, (x, y) in enumerate(bolts)
            ),
            {
                "name": "eye",
                "kind": "solid",
                "region": {
                    "cylinder": {
                        "center": eye,
                        "axis": "y",
                        "radius": 1.8 * r,
                        "length": 0.5 * W,
                    }
                },
            },
            {
                "name": "cable-passage",
                "kind": "void",
                "region": {
                    "box": {
                        "min": [0.55 * L, 0.3 * W, 0.25 * H],
                        "max": [0.7 * L, 0.7 * W, 0.45 * H],
                    }
                },
            },
        ],
        "deflection": [{"name": "eye", "region": {"point": eye}, "direction": "-z"}],
    }


class SyntheticSystem(LinearSystem):
    """Stands in for the linear solver: smooth displacements that grow with the
    distance from the plate, one pattern per right-hand side, zero on the fixed dofs."""

    name = "synthetic"
    iterations = None

    def __init__(self, grid, ke, fixed):
        self.grid, self.fixed = grid, np.asarray(fixed)

    def assemble(self, moduli, timer=None) -> None:
        pass

    def solve(self, rhs):
        rhs = np.asarray(rhs)
        cols = rhs.reshape(len(rhs), -1).shape[1]
        g = self.grid
        z = (np.arange(g.node_shape[2]) * g.h / g.size[2])[None, None, :]
        x = (np.arange(g.node_shape[0]) * g.h / g.size[0])[:, None, None]
        out = np.zeros((g.n_dofs, cols))
        for c in range(cols):
            shape = np.broadcast_to((0.01 * (1 + c)) * z * z * (1 + x), g.node_shape)
            field = out[:, c].reshape(-1, 3)
            field[:, c % 3] = shape.ravel()
            field[:, (c + 1) % 3] = 0.3 * shape.ravel()
        out[self.fixed] = 0.0
        return out.reshape(rhs.shape)

    def state(self) -> dict:
        return {}

    def restore(self, state) -> None:
        pass


def synthetic_design(shape, fraction: float, seed: int = 0) -> np.ndarray:
    """Design variables: a smooth random field (Gaussian-filtered noise, 4 elements),
    its top `fraction` solid, the rest void, with a grey rim."""
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.standard_normal(shape, dtype=np.float32), 4.0)
    level = np.quantile(field[::4, ::4, ::4], 1.0 - fraction)
    spread = float(field.std()) * 0.2
    return (0.5 + 0.5 * np.tanh((field - level) / spread)).astype(float).ravel()


def rounded_part(shape, radius: float = 12.0, spacing: int = 40) -> np.ndarray:
    """0/1 field of balls of `radius` elements centred `spacing` apart, each wholly
    inside the domain: walls wider than lengthscale.MAX_DIAMETER, so the wall
    measure tries every diameter (a random design stops at its first thin sliver)."""
    dim = len(shape)
    r2 = np.zeros(shape)
    for axis, n in enumerate(shape):
        a = np.arange(n, dtype=float)
        centre = (a // spacing) * spacing + spacing / 2
        d = np.where(centre + radius + 0.5 <= n, a + 0.5 - centre, np.inf)  # cut balls left out
        r2 = r2 + (d**2).reshape([-1 if b == axis else 1 for b in range(dim)])
    return (r2 <= radius * radius).astype(float)


def _status(key: str) -> float:
    """A /proc/self/status figure (kB) in MB."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key):
                return int(line.split()[1]) / 1024
    return float("nan")


def _reset_peak() -> bool:
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return True
    except OSError:
        return False


class Stages:
    """`with stages("name"): ...` records seconds, the peak resident memory during
    the block (MB) and that peak less the memory held when it began."""

    def __init__(self, echo=None):
        self.rows: dict[str, dict] = {}
        self.echo = echo

    @contextmanager
    def __call__(self, name: str):
        _reset_peak()
        before = _status("VmRSS")
        start = time.perf_counter()
        try:
            yield
        finally:
            seconds = time.perf_counter() - start
            peak = _status("VmHWM")
            row = {"s": seconds, "peak_MB": peak, "extra_MB": peak - before}
            self.rows[name] = row
            if self.echo:
                self.echo(
                    f"  {name:32s} {seconds:8.2f} s  peak {peak:7.0f} MB  "
                    f"(+{peak - before:6.0f} MB)"
                )


def run_stages(shape=SHAPE, echo=None, skip: tuple[str, ...] = ()) -> dict:
    """Every non-solver stage of the pipeline on the bracket of `shape`, with
    numpy's BLAS on one thread as in a run (solvers.blas_for_solver). `skip` may
    name "stress" to leave out the stress aggregate (a stage whose memory once
    exceeded the others' by far)."""
    from .solvers import blas_for_solver

    with blas_for_solver():
        return _run_stages(shape, echo, skip)


def _run_stages(shape, echo, skip: tuple[str, ...]) -> dict:
    from .checkpoint import Checkpoint, LoopState
    from .continuation import density_change
    from .design import Result, _refuse_unreachable, build_chain
    from .fem import Analysis, Model
    from .integrity import enclosed_cavities, load_path
    from .lengthscale import minimum_wall_and_gap
    from .optimizers import MMAStep, OptimalityCriteria
    from .printability import support_needed, unsupported_by_direction
    from .printed import PrintedPart, printed_density
    from .problem import problem_from_dict
    from .responses import Responses
    from .signoff import sign_off
    from .stress import StressMeasure

    stages = Stages(echo)
    with stages("problem"):
        problem = problem_from_dict(print_bracket(shape))
    with stages("model set-up (no solver)"):
        model = Model(problem, system_factory=SyntheticSystem)
    with stages("unreachable-region check"):
        _refuse_unreachable(problem, model)
    with stages("transform chain set-up"):
        chain, projection = build_chain(problem, model)
        projection.beta = 8.0
    filt, heavi, passive, overhang = chain.transforms
    x = synthetic_design(model.grid.shape, 0.15)
    x[model.solid], x[model.void] = 1.0, 0.0
    g = np.random.default_rng(1).standard_normal(x.size)
    with stages("density filter forward"):
        xf = filt.forward(x)
    with stages("density filter backward"):
        filt.backward(x, g)
    with stages("Heaviside forward"):
        xh = heavi.forward(xf)
    with stages("Heaviside backward"):
        heavi.backward(xf, g)
    xp = passive.forward(xh)
    with stages("overhang filter forward"):
        rho = overhang.forward(xp)
    with stages("overhang filter backward"):
        overhang.backward(xp, g)
    with stages("chain forward"):
        rho = chain.forward(x)
    responses = Responses(problem, model, chain)
    with stages("analysis (synthetic solve)"):
        analysis = _synthetic_analysis(model, rho, Analysis)
    with stages("sensitivities (compliance, budget)"):
        ev = responses.evaluate(rho, analysis)
    with stages("pull-back through the chain"):
        responses.pull_back(x, ev)
    oc = OptimalityCriteria(model.active, 0.2)
    with stages("OC update (exact budget)"):
        x_new = oc.step(x, ev)
    mma = MMAStep(model.active, 1, 0.2)
    with stages("MMA update"):
        mma.step(x, ev)
    with stages("continuation (density change)"):
        density_change(chain.forward(x_new), rho, model.active)
    with tempfile.TemporaryDirectory() as tmp:
        saved = Checkpoint(
            Path(tmp) / "checkpoint.npz",
            problem,
            model,
            {"opt": oc, "resp": responses, "sys": model.system},
        )
        state = LoopState(x_new, 10, 8.0, 2, [{"iteration": i} for i in range(10)])
        with stages("checkpoint save"):
            saved.save(state)
        checkpoint_mb = saved.path.stat().st_size / 2**20
        with stages("checkpoint load"):
            saved.load()
    del ev, responses, oc, mma, g, xf, xh, xp
    if "stress" not in skip:
        measure = StressMeasure(model)
        with stages("stress aggregate and gradient"):
            measure.aggregate(rho, analysis)
        del measure
    shape3 = model.grid.shape
    with stages("printed part (threshold, debris)"):
        printed = printed_density(rho.reshape(shape3), model)
    with stages("printed part analysis (synthetic)"):
        part_analysis = _synthetic_analysis(model, printed.ravel(), Analysis)
    part = PrintedPart(printed, part_analysis, 0, 0, 0)
    result = Result(
        problem, model, rho.reshape(shape3), x_new.reshape(shape3), analysis, printed=part
    )
    result.history = [
        {
            "iteration": i,
            "objective": 1.0 / i,
            "volume_fraction": 0.12,
            "change": 0.1,
            "beta": 8.0,
            "seconds": 1.0,
            "constraint": 0.0,
            "constraints": {"material": 0.0},
        }
        for i in range(1, 101)
    ]
    dom = problem.domain
    with stages("load path"):
        load_path(printed, model.grid, model.support_nodes, model.load_nodes, dom.element_volume)
    with stages("enclosed cavities"):
        enclosed_cavities(printed, dom.element_size, dom.element_volume)
    with stages("minimum wall and gap"):
        wall_gap = minimum_wall_and_gap(printed, dom.element_size)
    rounded = rounded_part(shape3)
    with stages("minimum wall and gap, rounded part"):
        rounded_wall_gap = minimum_wall_and_gap(rounded, dom.element_size)
    del rounded
    with stages("unsupported, every direction"):
        unsupported_by_direction(printed)
    with stages("support needed (one interface)"):
        support_needed(printed > 0.5, "+z", dom.element_size, None, model.solid.reshape(shape3))
    with stages("sign-off (whole)"):
        sign_off(result)
    from .export import (
        write_deflection_png,
        write_density,
        write_design_png,
        write_fields,
        write_history_png,
        write_mesh,
        write_stress_png,
    )
    from .report import design_surface, run_summary
    from .review import build_report

    with stages("summary (sign-off included)"):
        from .report import summarize

        result.summary = summarize(result)
    with stages("design surface (marching cubes, debris)"):
        surface = design_surface(result)
    sizes = {}
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        with stages("design.stl"):
            write_mesh(surface.mesh, out / "design.stl")
        with stages("summary with mesh figures"):
            summary = run_summary(result, surface)
        with stages("density.npy"):
            write_density(result, out / "density.npy")
        with stages("fields.vtu"):
            write_fields(result, out / "fields.vtu")
        with stages("history.png"):
            write_history_png(result, out / "history.png")
        with stages("design.png"):
            write_design_png(result, out / "design.png", surface)
        with stages("stress.png"):
            write_stress_png(result, out / "stress.png", surface)
        with stages("deflection.png"):
            write_deflection_png(result, out / "deflection.png", surface)
        with stages("report.html"):
            build_report(out, summary)
        sizes = {p.name: p.stat().st_size / 2**20 for p in out.iterdir()}
    sizes["checkpoint.npz"] = checkpoint_mb
    return {
        "elements": int(model.grid.n_elements),
        "stages": stages.rows,
        "file_MB": sizes,
        "min_wall_gap_mm": list(wall_gap),
        "rounded_part_min_wall_gap_mm": list(rounded_wall_gap),
        "mesh_faces": int(len(surface.mesh.faces)),
        "summary_bytes": len(json.dumps(summary, default=str)),
    }


def _synthetic_analysis(model, rho, analysis_type):
    """An Analysis from the stand-in system's displacements, with element energies
    and centre stresses as the model computes them."""
    from .elementfields import element_energies_and_stresses

    u = model.system.solve(model.loads)
    compliances = np.einsum("dc,dc->c", model.loads, u)
    energies, vm = element_energies_and_stresses(model, u)
    mag = np.sqrt((u.reshape(model.grid.n_nodes, model.dim, -1) ** 2).sum(axis=1))
    return analysis_type(u, compliances, energies, mag.max(axis=0), vm)
