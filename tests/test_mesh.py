"""Design meshes against closed-form geometry and independent libraries (trimesh
for watertightness, volume and file reading; meshio for the VTU round trip)."""

import json
from pathlib import Path

import meshio
import numpy as np
import pytest
import trimesh

from topo import export, load_problem, optimize
from topo.cli import main
from topo.mesh import boundary_pins, downfacing_area, isosurface, remove_debris, taubin_smooth

ROOT = Path(__file__).parent.parent


def as_trimesh(m):
    return trimesh.Trimesh(m.vertices, m.faces, process=False)


def centres(shape, h):
    return (np.indices(shape).transpose(*range(1, len(shape) + 1), 0) + 0.5) * h


def test_box_field_gives_the_box():
    h = 1.5
    rho = np.zeros((30, 24, 20))
    rho[4:24, 3:19, 0:12] = 1.0  # 30 × 24 × 18 mm, touching the z = 0 side of the domain
    m = isosurface(rho, h)
    t = as_trimesh(m)
    assert t.is_watertight and t.is_winding_consistent
    assert np.allclose(t.bounds, [[6.0, 4.5, 0.0], [36.0, 28.5, 18.0]])
    # marching cubes chamfers the 12 edges by half an element: within 2 % here
    assert t.volume == pytest.approx(30 * 24 * 18, rel=0.02)
    assert m.volume == pytest.approx(t.volume, rel=1e-9) and m.area == pytest.approx(
        t.area, rel=1e-9
    )


@pytest.mark.parametrize("smooth_field", [True, False])
def test_sphere_field_volume(smooth_field):
    h, radius = 1.0, 12.0
    r = np.linalg.norm(centres((40, 40, 40), h) - 20.0, axis=-1)
    rho = np.clip(0.5 + (radius - r) / h, 0, 1) if smooth_field else (r < radius).astype(float)
    t = as_trimesh(isosurface(rho, h))
    assert t.is_watertight
    assert t.volume == pytest.approx(4 / 3 * np.pi * radius**3, rel=0.02)
    assert np.allclose(t.bounds, [[8.0] * 3, [32.0] * 3], atol=0.5 * h)


def test_2d_extrusion_volume_is_area_times_thickness():
    h, t_mm = 0.5, 6.0
    xy = centres((80, 60), h)
    rho = (np.linalg.norm(xy - [20.0, 15.0], axis=-1) < 10.0).astype(float)
    rho[10:30, 4:10] = 1.0  # a tab joined to the disc
    m = as_trimesh(isosurface(rho, h, thickness=t_mm))
    assert m.is_watertight
    assert m.volume == pytest.approx(rho.sum() * h * h * t_mm, rel=0.02)
    assert m.bounds[0][2] == pytest.approx(0.0) and m.bounds[1][2] == pytest.approx(t_mm)


def test_debris_removal_and_taubin_smoothing_keep_a_closed_solid():
    rho = np.zeros((30, 20, 20))
    rho[3:25, 4:16, 0:14] = 1.0
    rho[28, 18, 18] = 1.0  # one floating element
    m, dropped = remove_debris(isosurface(rho, 1.0))
    assert dropped == 1 and len(np.unique(m.pieces())) == 1
    s = taubin_smooth(m, 10, pinned=boundary_pins(m, (30.0, 20.0, 20.0)))
    t = as_trimesh(s)
    assert t.is_watertight
    assert t.volume == pytest.approx(m.volume, rel=0.01)
    on_floor = np.abs(m.vertices[:, 2]) < 1e-9
    assert on_floor.any() and np.all(np.abs(s.vertices[on_floor, 2]) < 1e-12)


def test_downfacing_area_of_boxes():
    rho = np.zeros((12, 10, 10))
    rho[2:8, 2:6, 3:7] = 1.0  # floating 12 × 8 × 8 mm box
    m = isosurface(rho, 2.0)
    down = downfacing_area(m, "+z", plate=0.0)
    # Its underside is flat but for the 45° chamfers marching cubes puts on the
    # edges (half an element, 1 mm, wide); faces at exactly 45° are at the limit
    # and do not count, so the figure is the flat part: (12 − 2) × (8 − 2) mm².
    assert down == pytest.approx(10 * 6)
    assert downfacing_area(m, "-z", plate=20.0) == pytest.approx(down)  # top face, seen upside down
    rho2 = np.zeros((12, 10, 10))
    rho2[2:8, 2:6, 0:4] = 1.0  # standing on the plate: nothing faces down but the plate face
    assert downfacing_area(isosurface(rho2, 2.0), "+z", plate=0.0) == pytest.approx(0.0)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo2d")
    result = optimize(load_problem(ROOT / "problems" / "bracket-2d.toml"))
    export(result, out)
    return result, out


def test_optimised_demo_mesh_is_one_watertight_piece(demo_run):
    result, out = demo_run
    t = trimesh.load(out / "design.stl")  # read back by an independent library
    assert t.is_watertight
    assert len(t.split(only_watertight=False)) == 1
    p = result.problem
    rho = np.maximum(result.density, result.model.solid.reshape(result.density.shape))
    solid_volume = (rho >= 0.5).sum() * p.domain.element_volume
    assert t.volume == pytest.approx(solid_volume, rel=0.05)
    m = json.loads((out / "summary.json").read_text())["mesh"]
    assert m["watertight"] and m["pieces"] == 1
    assert m["volume_mm3"] == pytest.approx(t.volume, rel=1e-6)
    assert 0.0 <= m["downfacing_overhang_fraction"] < 1.0


def test_fields_vtu_reads_back_with_meshio(demo_run):
    result, out = demo_run
    v = meshio.read(out / "fields.vtu")  # read back by an independent library
    assert len(v.points) == result.model.grid.n_nodes
    cells = {k: f[0] for k, f in v.cell_data.items()}
    printed = result.printed
    made = printed.density.ravel() == 1.0
    assert np.allclose(cells["density"], result.density.ravel())
    assert np.array_equal(cells["printed_density"], printed.density.ravel())
    for i, case in enumerate(result.problem.load_cases):
        for kind, analysis in (("printed", printed.analysis), ("grey", result.analysis)):
            u = v.point_data[f"displacement_{kind}_{case.name}"]
            assert np.allclose(u[:, :2].ravel(), analysis.displacements[:, i])
        vm = cells[f"von_mises_printed_{case.name}"]
        assert np.all(vm[~made] == 0.0)
        assert np.allclose(vm[made], printed.analysis.von_mises[made, i])
        grey_vm = cells[f"von_mises_grey_rho_ge_half_{case.name}"]
        solid = result.density.ravel() >= 0.5
        assert np.all(grey_vm[~solid] == 0.0)
        assert np.allclose(grey_vm[solid], result.analysis.von_mises[solid, i])
    # No stress outside the printed part above its peak, which the solid-material
    # stress of the grey design's near-void elements exceeds (so this can fail).
    peak = cells["von_mises_printed_max"].max()
    assert result.analysis.von_mises[~made].max() > peak
    for name, field in cells.items():
        if name.startswith("von_mises"):
            assert field[~made].max() <= peak, name


@pytest.mark.parametrize("fmt", ["obj", "ply", "stl"])
def test_export_command_reexports_in_each_format(demo_run, fmt, capsys):
    _, out = demo_run
    assert main(["export", str(out), "--format", fmt, "--smooth", "3"]) == 0
    t = trimesh.load(out / f"design.{fmt}", force="mesh")
    assert t.is_watertight
    summary = json.loads((out / "summary.json").read_text())
    assert summary["mesh"]["smoothing_passes"] == 3
    assert summary["mesh"]["volume_mm3"] == pytest.approx(t.volume, rel=1e-4)
