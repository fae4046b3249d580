"""Regions from closed surface meshes (topo/surfaces.py, region `mesh`)."""

import numpy as np
import pytest
import trimesh

from problems import beam_problem, l_prism, write_stl
from topo.fem import Model
from topo.problem import ProblemError, load_problem, problem_from_dict
from topo.surfaces import SurfaceError, inside, load_surface, winding_numbers


def test_the_l_prism_is_a_closed_non_convex_solid():
    # trimesh, independently: watertight, outward, volume of the L (10·3 + 3·5)·5
    v, f, _ = l_prism()
    mesh = trimesh.Trimesh(v, f, process=False)
    assert mesh.is_watertight and mesh.is_winding_consistent
    assert np.isclose(mesh.volume, (30 + 15) * 5) and not mesh.is_convex


def test_inside_test_against_the_exact_l_and_trimesh_volume(rng):
    # trimesh's own contains() needs rtree, which is not installed; the L's exact
    # membership is the reference, and the share of random points found inside
    # must match trimesh's volume over the box's.
    v, f, exact = l_prism(corner=(1.0, 2.0, 0.5), scale=1.5)
    pts = rng.uniform(0.0, 17.0, (4000, 3))
    got = inside(pts, v, f, on=False)
    assert np.array_equal(got, exact(pts))
    lo, hi = v.min(axis=0), v.max(axis=0)
    box = np.all((pts >= lo) & (pts <= hi), axis=1)
    share = got[box].mean()
    volume = trimesh.Trimesh(v, f, process=False).volume
    assert abs(share - volume / np.prod(hi - lo)) < 0.03  # 4000-point sampling error
    # reversed orientation: the same points (the winding number is −1 inside)
    assert np.array_equal(inside(pts, v, f[:, ::-1], on=False), got)


def test_winding_number_is_one_half_on_a_face_and_whole_elsewhere():
    v, f, _ = l_prism()
    w = winding_numbers(np.array([[1.0, 1.0, 2.5], [20.0, 1.0, 1.0], [5.0, 1.5, 0.0]]), v, f)
    assert np.allclose(w, [1.0, 0.0, 0.5], atol=1e-12)


def test_bad_surfaces_are_refused(tmp_path):
    v, f, _ = l_prism()
    with pytest.raises(SurfaceError, match="no such file"):
        load_surface(str(tmp_path / "missing.stl"))
    with pytest.raises(SurfaceError, match="holes"):
        load_surface(str(write_stl(tmp_path / "open.stl", v, f[1:])))
    bad = f.copy()
    bad[0] = bad[0][::-1]
    with pytest.raises(SurfaceError, match="flipped"):
        load_surface(str(write_stl(tmp_path / "flipped.stl", v, bad)))
    (tmp_path / "junk.stl").write_text("not a mesh")
    with pytest.raises(SurfaceError, match="cannot read"):
        load_surface(str(tmp_path / "junk.stl"))


def mesh_problem(tmp_path, v, f, role="passive"):
    """A 3D beam whose passive solid (or support) is the surface (v, f) in keep.stl."""
    write_stl(tmp_path / "keep.stl", v, f)
    d = beam_problem(3, [12.0, 10.0, 6.0], 1.0)
    if role == "passive":
        d["passive"] = [{"kind": "solid", "region": {"mesh": "keep.stl"}}]
    else:
        d["support"] = [{"region": {"mesh": "keep.stl"}}]
    return d, str(tmp_path / "p.toml")  # the mesh path is relative to the problem file


def closed_l(p):
    x, y, z = (p - np.array([1.0, 1.0, 0.0])).T
    in_l = ((x <= 10) & (y <= 3)) | ((x <= 3) & (y <= 8))
    return in_l & (x >= 0) & (y >= 0) & (z >= 0) & (z <= 5)


def test_a_mesh_region_selects_elements_by_centre_and_nodes_inside_or_on(tmp_path):
    v, f, exact = l_prism(corner=(1.0, 1.0, 0.0))
    d, source = mesh_problem(tmp_path, v, f)
    m = Model(problem_from_dict(d, source=source))
    assert np.array_equal(m.solid, exact(m.grid.element_centers))
    assert m.solid.sum() == 45 * 5  # the L's volume in unit elements
    d, source = mesh_problem(tmp_path, v, f, role="support")
    m = Model(problem_from_dict(d, source=source))
    nodes = m.support_nodes[0]
    assert np.array_equal(nodes, np.flatnonzero(closed_l(m.grid.node_coords)))


def test_mesh_region_errors_name_the_key(tmp_path):
    v, f, _ = l_prism(corner=(1.0, 1.0, 0.0))
    d, source = mesh_problem(tmp_path, v, f)
    d["passive"][0]["region"]["mesh"] = "nowhere.stl"
    with pytest.raises(ProblemError, match="no such file") as err:
        problem_from_dict(d, source=source)
    assert err.value.key == "passive[0].region.mesh"
    d, source = mesh_problem(tmp_path, v, f[2:])
    with pytest.raises(ProblemError, match="not a closed surface"):
        problem_from_dict(d, source=source)
    d, source = mesh_problem(tmp_path, v * 1000.0, f)  # a file in µm
    with pytest.raises(ProblemError, match="other units") as err:
        Model(problem_from_dict(d, source=source))
    assert err.value.key == "passive[0].region.mesh"
    d, source = mesh_problem(tmp_path, v * 0.02 + 2.2, f)  # between element centres
    with pytest.raises(ProblemError, match="selects no elements"):
        Model(problem_from_dict(d, source=source))
    d2 = beam_problem(2)
    d2["passive"] = [{"kind": "solid", "region": {"mesh": "keep.stl"}}]
    with pytest.raises(ProblemError, match="only 3D"):
        problem_from_dict(d2, source=source)


PROBLEM = """
[domain]
size = [12.0, 10.0, 6.0]
element_size = 1.0
[material]
preset = "316L"
[optimization]
volume_fraction = 0.5
[[support]]
region = { face = "x-min" }
[[load_case]]
[[load_case.force]]
region = { face = "x-max" }
total = [0.0, -1.0, 0.0]
[[passive]]
kind = "solid"
region = { mesh = "parts/keep.stl" }
"""


def test_a_mesh_path_is_relative_to_the_problem_file(tmp_path):
    v, f, exact = l_prism(corner=(1.0, 1.0, 0.0))
    (tmp_path / "parts").mkdir()
    write_stl(tmp_path / "parts" / "keep.stl", v, f)
    (tmp_path / "p.toml").write_text(PROBLEM)
    p = load_problem(tmp_path / "p.toml")
    assert p.passives[0].region.path == str(tmp_path / "parts" / "keep.stl")
    m = Model(p)
    assert np.array_equal(m.solid, exact(m.grid.element_centers))


def test_distance_to_a_mesh_region_for_the_verification_sizing(tmp_path):
    from topo.problem import Mesh
    from topo.verification.sizing import region_distance

    v, f, _ = l_prism()
    region = Mesh(str(write_stl(tmp_path / "l.stl", v, f)))
    pts = np.array([[1.0, 1.0, 1.0], [10.0, 3.0, 5.0], [13.0, 7.0, 9.0]])
    # inside, on a corner, and 3-4-4 off the corner (10, 3, 5): √41 by hand
    assert np.allclose(region_distance(region, pts, (20.0, 20.0, 20.0)), [0, 0, 41**0.5])


def envelope_problem(tmp_path, corner=(0.0, 0.0, 0.0)):
    v, f, exact = l_prism(corner=corner)
    write_stl(tmp_path / "envelope.stl", v, f)
    d = beam_problem(3, None, 1.0)
    d["domain"] = {"envelope": "envelope.stl", "element_size": 1.0}
    d["load_case"][0]["force"][0]["region"] = {"box": {"min": [10, 0, 0], "max": [10, 3, 5]}}
    return d, str(tmp_path / "p.toml"), exact


def test_an_envelope_sizes_the_grid_and_voids_what_lies_outside(tmp_path):
    d, source, exact = envelope_problem(tmp_path)
    p = problem_from_dict(d, source=source)
    assert p.domain.size == (10.0, 8.0, 5.0)  # the L's bounding box
    m = Model(p)
    assert np.array_equal(m.void, ~exact(m.grid.element_centers))
    assert m.void.sum() == 10 * 8 * 5 - 45 * 5
    d["domain"]["size"] = [12.0, 9.0, 6.0]  # a given size wins; the rest is void too
    m = Model(problem_from_dict(d, source=source))
    assert m.grid.shape == (12, 9, 6) and m.void.sum() == 12 * 9 * 6 - 45 * 5


def test_envelope_errors_name_the_key(tmp_path):
    d, source, _ = envelope_problem(tmp_path, corner=(-1.0, 0.0, 0.0))
    with pytest.raises(ProblemError, match="below the origin along x") as err:
        problem_from_dict(d, source=source)
    assert err.value.key == "domain.envelope"
    d, source, _ = envelope_problem(tmp_path)
    d["passive"] = [{"kind": "solid", "region": {"box": {"min": [5, 5, 0], "max": [8, 8, 5]}}}]
    with pytest.raises(ProblemError, match="outside the envelope") as err:
        Model(problem_from_dict(d, source=source))
    assert err.value.key == "passive[0].region"


def test_the_cad_demo_builds_with_its_meshes_and_its_load_off_the_part():
    from pathlib import Path

    from topo.loads import moment_about

    demo = Path(__file__).parent.parent / "problems" / "bracket-cad-3d.toml"
    p = load_problem(demo)
    assert p.domain.size == (90.0, 40.0, 60.0)  # the envelope's bounding box
    m = Model(p)
    assert m.void.sum() > 0 and m.solid.sum() > 0
    force = p.load_cases[0].forces[0]
    f = m.loads[:, 0].reshape(-1, 3)
    assert np.allclose(f.sum(axis=0), force.total, atol=1e-9)
    assert np.allclose(moment_about(m.grid.node_coords, f, force.at), force.moment, atol=1e-7)
