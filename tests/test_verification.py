"""Body-fitted verification (topo/verification/): handbook references, load
mapping, checks, outputs and bad input."""

import json

import meshio
import numpy as np
import pytest

import topo
from problems import timoshenko_tip_deflection
from topo.cli import main
from topo.problem import ProblemError, problem_from_dict
from topo.verification import verify, write_verification
from topo.verification.figures import (
    apply_to_summary,
    convergence_row,
    safety_row,
    singular_row,
)
from topo.verification.outline import GeometryError, printed_outline


def plate_with_hole(length=100.0, width=40.0, diameter=5.0, stress=100.0, h=1.0):
    return {
        "name": "plate",
        "domain": {"size": [length, width], "element_size": h, "thickness": 1.0},
        "material": {
            "youngs_modulus": 200000.0,
            "poissons_ratio": 0.3,
            "density": 7800.0,
            "yield_strength": 500.0,
        },
        "optimization": {"volume_fraction": 0.5},
        "support": [
            {"name": "left", "region": {"face": "x-min"}, "fix": ["x"]},
            {"name": "corner", "region": {"point": [0.0, 0.0]}, "fix": ["y"]},
        ],
        "load_case": [
            {"name": "pull", "force": [{"region": {"face": "x-max"}, "total": [stress * width, 0]}]}
        ],
        "passive": [
            {
                "name": "hole",
                "kind": "void",
                "region": {"cylinder": {"center": [length / 2, width / 2], "radius": diameter / 2}},
            }
        ],
    }


@pytest.fixture(scope="module")
def plate():
    problem = problem_from_dict(plate_with_hole())
    return verify(topo.analyze(problem), exact=True)


def test_hole_in_finite_plate_matches_heywood(plate):
    # Heywood (1952), as quoted in Pilkey & Pilkey, "Peterson's Stress Concentration
    # Factors" (3rd ed., 2008), finite-width plate with a central hole in tension:
    # Kt_net = 2 + (1 − d/W)³ on the net-section stress σ_gross / (1 − d/W)
    # (formula recalled from memory). W/D = 8: Kt_net = 2.6699, peak 305.1 MPa at
    # 100 MPa gross (Kirsch's infinite plate: 300 MPa).
    ratio = 5.0 / 40.0
    expected = (2 + (1 - ratio) ** 3) * 100.0 / (1 - ratio)
    case = plate.figures["load_cases"][0]
    default = case["meshes"]["default"]["max_von_mises_MPa"]
    assert default == pytest.approx(expected, rel=0.05)
    assert case["max_von_mises_MPa"] == pytest.approx(expected, rel=0.02)
    # at the edge of the hole, on the section across the load
    x, y = case["peak_location_mm"]
    assert abs(x - 50.0) < 0.5 and abs(abs(y - 20.0) - 2.5) < 0.05
    assert case["nearest_region"]["name"] == "void hole"
    rows = {r["name"]: r for r in plate.figures["checks"]}
    assert rows["verify_convergence"]["status"] == "PASS"
    assert rows["verify_peak_not_singular"]["status"] == "PASS"


def test_traction_spread_keeps_the_total(plate):
    (load,) = [m for m in plate.figures["load_mapping"] if m["role"] == "force"]
    assert load["spread"] == "boundary"
    assert load["measure"] == pytest.approx(40.0)  # the length of the x-max edge
    assert load["applied_total_N"] == pytest.approx([4000.0, 0.0], abs=1e-6)


def cantilever(depth=10.0, length=100.0, load=100.0, tip=None):
    tip_region = {"point": tip} if tip else {"face": "x-max"}
    return {
        "name": "cantilever",
        "domain": {"size": [length, depth], "element_size": 1.0, "thickness": 5.0},
        "material": {
            "youngs_modulus": 200000.0,
            "poissons_ratio": 0.3,
            "density": 7800.0,
            "yield_strength": 500.0,
        },
        "optimization": {"volume_fraction": 0.5},
        "support": [{"name": "wall", "region": {"face": "x-min"}}],
        "load_case": [{"name": "tip", "force": [{"region": tip_region, "total": [0.0, -load]}]}],
        "deflection": [{"name": "end", "region": {"face": "x-max"}, "direction": "-y"}],
    }


def test_cantilever_matches_timoshenko_beam():
    ver = verify(topo.analyze(problem_from_dict(cantilever())), exact=True)
    L, H, t, P, E, nu = 100.0, 10.0, 5.0, 100.0, 200000.0, 0.3
    inertia = t * H**3 / 12
    # Timoshenko & Gere, Mechanics of Materials: bending plus shear (κ = 5/6)
    delta = timoshenko_tip_deflection(P, L, E, nu, t, H)
    case = ver.figures["load_cases"][0]
    assert case["deflections_mm"]["end"] == pytest.approx(delta, rel=0.02)
    # σx = M y / I at mid-span, top fibre (tension for a downward tip load)
    sol = ver.solution
    node = np.argmin(np.linalg.norm(sol.points - [L / 2, H], axis=1))
    expected = P * (L / 2) * (H / 2) / inertia
    assert sol.stress[node, 0, 0] == pytest.approx(expected, rel=0.02)


def test_point_load_peak_is_flagged():
    problem = problem_from_dict(cantilever(depth=20.0, length=40.0, tip=[40.0, 10.0]))
    ver = verify(topo.analyze(problem), exact=True)
    case = ver.figures["load_cases"][0]
    (load,) = [m for m in ver.figures["load_mapping"] if m["role"] == "force"]
    assert load["spread"] == "node" and load["point_like"]
    assert case["peak_at_point_like"] == ["tip"]
    rows = {r["name"]: r for r in ver.figures["checks"]}
    assert rows["verify_peak_not_singular"]["status"] == "FAIL"


def test_convergence_row_outcomes():
    assert convergence_row({"a": 0.01, "b": -0.049})["status"] == "PASS"
    row = convergence_row({"a": 0.01, "b": -0.08})
    assert row["status"] == "FAIL" and row["value"] == pytest.approx(0.08)
    assert "load case b" in row["detail"]
    assert convergence_row({"a": None})["status"] == "N/A"


def test_singular_row_outcomes():
    assert singular_row([])["status"] == "PASS"
    assert singular_row(["tip: tip"])["status"] == "FAIL"


def test_safety_row_outcomes():
    assert safety_row(1.5, 1.2)["status"] == "PASS"
    assert safety_row(1.1, 1.2)["status"] == "FAIL"
    assert safety_row(None, 1.2)["status"] == "N/A"


def test_summary_headline_comes_from_the_verification(plate):
    grid = {
        "max_von_mises_MPa": 250.0,
        "safety_factor": 2.0,
        "stress_limit_MPa": 280.0,
        "stress_source": "grid",
        "checks": [
            {"name": "safety_factor", "status": "PASS"},
            {"name": "stress_limit", "status": "PASS"},
            {"name": "load_path", "status": "PASS"},
        ],
    }
    s = apply_to_summary(grid, plate.figures)
    assert s["stress_source"].startswith("body-fitted")
    assert s["max_von_mises_MPa"] == plate.figures["max_von_mises_MPa"]
    assert s["grid_max_von_mises_MPa"] == 250.0 and s["grid_safety_factor"] == 2.0
    rows = {r["name"]: r for r in s["checks"]}
    assert rows["stress_limit"]["status"] == "FAIL"  # ~305 MPa against 280
    assert [r["name"] for r in s["checks"]].count("safety_factor") == 1
    assert "stress_limit" in s["checks_failed"]
    # verifying again keeps the grid's figures beside the verified ones
    again = apply_to_summary(s, plate.figures)
    assert again["grid_max_von_mises_MPa"] == 250.0


def test_outputs_are_written(plate, tmp_path):
    write_verification(plate, tmp_path)
    body = json.loads((tmp_path / "verify.json").read_text())
    assert body["load_cases"][0]["name"] == "pull"
    mesh = meshio.read(tmp_path / "verify.vtu")
    assert "triangle6" in mesh.cells_dict
    vm = mesh.point_data["von_mises_pull"]
    assert vm.max() == pytest.approx(body["max_von_mises_MPa"])
    assert (tmp_path / "verify.png").read_bytes()[:4] == b"\x89PNG"
    assert not list(tmp_path.glob(".*tmp*"))


def test_empty_and_disconnected_designs_are_refused():
    with pytest.raises(GeometryError, match="empty"):
        printed_outline(np.zeros((10, 5)), 1.0)
    two = np.zeros((20, 6))
    two[1:8, 1:5] = 1
    two[12:19, 1:5] = 1
    with pytest.raises(GeometryError, match="2 separate pieces"):
        printed_outline(two, 1.0)


def test_printed_outline_keeps_straight_faces_and_holes():
    block = np.ones((20, 10))
    block[8:12, 4:7] = 0
    outline = printed_outline(block, 2.0)
    assert outline.outer[:, 0].min() == pytest.approx(0.0, abs=1e-6)
    assert outline.outer[:, 1].max() == pytest.approx(20.0, abs=1e-6)
    assert len(outline.holes) == 1


def test_support_outside_the_body_is_refused():
    d = plate_with_hole()
    d["support"].append(
        {"name": "in-hole", "region": {"box": {"min": [49.5, 19.5], "max": [50.5, 20.5]}}}
    )
    # the model refuses it before any mesh is made: the support lies in the hole
    with pytest.raises(ProblemError, match=r"support\[2\]\.region.*inside a void"):
        verify(topo.analyze(problem_from_dict(d)), exact=True)


def test_three_dimensional_cantilever_matches_timoshenko_beam():
    L, B, H, P, E, nu = 30.0, 4.0, 6.0, 100.0, 200000.0, 0.3
    d = {
        "name": "beam-3d",
        "domain": {"size": [L, B, H], "element_size": 1.0},
        "material": {"youngs_modulus": E, "poissons_ratio": nu, "density": 7800.0},
        "optimization": {"volume_fraction": 0.5},
        "support": [{"name": "wall", "region": {"face": "x-min"}}],
        "load_case": [
            {"name": "tip", "force": [{"region": {"face": "x-max"}, "total": [0, 0, -P]}]}
        ],
        "deflection": [{"name": "end", "region": {"face": "x-max"}, "direction": "-z"}],
    }
    ver = verify(topo.analyze(problem_from_dict(d)), exact=True)
    inertia = B * H**3 / 12
    # Timoshenko & Gere, as in the 2D test: bending plus shear (κ = 5/6)
    delta = timoshenko_tip_deflection(P, L, E, nu, B, H)
    case = ver.figures["load_cases"][0]
    assert case["deflections_mm"]["end"] == pytest.approx(delta, rel=0.03)
    sol = ver.solution
    node = np.argmin(np.linalg.norm(sol.points - [L / 2, B / 2, H], axis=1))
    x = sol.points[node, 0]
    assert sol.stress[node, 0, 0] == pytest.approx(P * (L - x) * (H / 2) / inertia, rel=0.03)
    assert [m["spread"] for m in ver.figures["load_mapping"]][0] == "boundary"


def test_printed_3d_block_is_meshed_and_written(tmp_path):
    from topo.verification.surface import printed_surface

    with pytest.raises(GeometryError, match="separate pieces"):
        two = np.zeros((12, 4, 4))
        two[0:5, 1:3, 1:3] = 1
        two[7:12, 1:3, 1:3] = 1
        printed_surface(two, 1.0)
    d = {
        "name": "block",
        "domain": {"size": [12.0, 4.0, 4.0], "element_size": 1.0},
        "material": {"preset": "316L"},
        "optimization": {"volume_fraction": 0.5},
        "support": [{"name": "wall", "region": {"face": "x-min"}}],
        "load_case": [
            {"name": "tip", "force": [{"region": {"face": "x-max"}, "total": [0, 0, -50]}]}
        ],
    }
    folder = tmp_path / "run"
    _run_folder(folder, d, np.ones((12, 4, 4)))
    assert main(["verify", str(folder)]) == 0
    mesh = meshio.read(folder / "verify.vtu")
    assert "tetra10" in mesh.cells_dict
    body = json.loads((folder / "verify.json").read_text())
    (load,) = [m for m in body["load_mapping"] if m["role"] == "force"]
    assert load["applied_total_N"] == pytest.approx([0.0, 0.0, -50.0], abs=1e-9)
    assert (folder / "verify.png").read_bytes()[:4] == b"\x89PNG"


PLATE_FILE = """
name = "plate"
[domain]
size = [100.0, 40.0]
element_size = 1.0
thickness = 1.0
[material]
youngs_modulus = 200000.0
poissons_ratio = 0.3
density = 7800.0
yield_strength = 500.0
[optimization]
volume_fraction = 0.5
[[support]]
region = { face = "x-min" }
fix = ["x"]
[[support]]
region = { point = [0.0, 0.0] }
fix = ["y"]
[[load_case]]
name = "pull"
  [[load_case.force]]
  region = { face = "x-max" }
  total = [4000.0, 0.0]
[[passive]]
kind = "void"
region = { cylinder = { center = [50.0, 20.0], radius = 2.5 } }
"""


def test_analyze_verify_on_the_command_line(tmp_path, capsys):
    problem = tmp_path / "plate.toml"
    problem.write_text(PLATE_FILE)
    out = tmp_path / "out"
    assert main(["analyze", str(problem), "--verify", "--out", str(out)]) == 0
    said = capsys.readouterr().out
    assert "body-fitted verification" in said and "peak von Mises" in said
    summary = json.loads((out / "summary.json").read_text())
    assert summary["stress_source"].startswith("body-fitted")
    assert summary["max_von_mises_MPa"] == pytest.approx(305.1, rel=0.02)
    for name in ("verify.json", "verify.vtu", "verify.png"):
        assert (out / name).exists()


def _run_folder(folder, d, density):
    result = topo.analyze(problem_from_dict(d), density)
    topo.export(result, folder, only=["problem.json", "density.npy", "summary.json"], mesh=False)
    return result


def test_verify_command_refuses_a_disconnected_design(tmp_path, capsys):
    # a beam that carries the tip load, beside a loose block: analysed on the
    # grid (the load reaches the wall), but not one connected part to mesh (a
    # part whose load reaches no support is refused before: test_signoff.py)
    d = cantilever(depth=6.0, length=20.0, tip=[20.0, 2.0])
    two = np.zeros((20, 6))
    two[:, 0:4] = 1
    two[8:12, 5] = 1
    folder = tmp_path / "run"
    result = _run_folder(folder, d, two)
    assert result.summary["stress_source"].startswith("grid")
    before = (folder / "summary.json").read_text()
    assert main(["verify", str(folder)]) == 2
    assert "2 separate pieces" in capsys.readouterr().err
    assert not list(folder.glob("verify*")) and not list(folder.glob(".*"))
    assert (folder / "summary.json").read_text() == before


def test_verify_command_on_a_run(tmp_path, capsys):
    d = cantilever(depth=6.0, length=20.0)
    folder = tmp_path / "run"
    _run_folder(folder, d, np.ones((20, 6)))
    assert main(["verify", str(folder)]) == 0
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["stress_source"].startswith("body-fitted")
    assert summary["grid_max_von_mises_MPa"] is not None
    names = [r["name"] for r in summary["checks"]]
    assert "verify_convergence" in names and names.count("safety_factor") == 1


def test_mesher_failure_is_an_internal_error_with_a_log(tmp_path, monkeypatch, capsys):
    from topo import verification
    from topo.verification.mesher import MeshingError

    def fail(*args, **kwargs):
        raise MeshingError("gmsh failed to mesh the outline: test")

    monkeypatch.setattr(verification, "make_mesh", fail)
    folder = tmp_path / "run"
    _run_folder(folder, cantilever(depth=6.0, length=20.0), np.ones((20, 6)))
    before = (folder / "summary.json").read_text()
    assert main(["verify", str(folder)]) == 1
    assert "gmsh failed" in capsys.readouterr().err
    assert "MeshingError" in (folder / "error.log").read_text()
    assert not list(folder.glob("verify*"))
    assert (folder / "summary.json").read_text() == before


RUN_FILE = """
name = "short-beam"
[domain]
size = [30.0, 10.0]
element_size = 1.0
thickness = 2.0
[material]
preset = "316L"
[optimization]
volume_fraction = 0.5
max_iterations = 15
[[support]]
region = { face = "x-min" }
[[load_case]]
name = "down"
  [[load_case.force]]
  region = { box = { min = [27.0, 3.0], max = [30.0, 7.0] } }
  total = [0.0, -100.0]
[[passive]]
kind = "solid"
region = { box = { min = [26.0, 2.0], max = [30.0, 8.0] } }
[report]
verify = true
"""


def test_report_verify_runs_after_a_design(tmp_path, capsys):
    problem = tmp_path / "beam.toml"
    problem.write_text(RUN_FILE)
    out = tmp_path / "out"
    code = main(["run", str(problem), "--out", str(out), "--quiet"])
    said = capsys.readouterr().out
    assert code == 0, said
    assert "body-fitted verification" in said
    summary = json.loads((out / "summary.json").read_text())
    assert summary["stress_source"].startswith("body-fitted")
    body = json.loads((out / "verify.json").read_text())
    (load,) = [m for m in body["load_mapping"] if m["role"] == "force"]
    assert load["spread"] == "area"
    assert load["applied_total_N"] == pytest.approx([0.0, -100.0], abs=1e-9)


def test_geometry_volume_matches_the_plate(plate):
    # the exact plate less its hole: 100 × 40 − π 2.5², thickness 1 (straight chords
    # of the quadratic elements' corners cut the hole by well under a percent)
    expected = 100.0 * 40.0 - np.pi * 2.5**2
    assert plate.figures["volume_mm3"] == pytest.approx(expected, rel=1e-3)


def test_grid_figures_stand_beside_the_verified_ones():
    problem = problem_from_dict(cantilever())
    result = topo.analyze(problem)
    ver = verify(result, exact=True)
    case = ver.figures["load_cases"][0]
    grid = result.summary["load_cases"][0]
    assert case["grid"]["deflections_mm"]["end"] == grid["deflections_mm"]["end"]
    gap = case["verified_vs_grid"]["deflections"]["end"]
    expected = (case["deflections_mm"]["end"] - grid["deflections_mm"]["end"]) / abs(
        grid["deflections_mm"]["end"]
    )
    assert gap == pytest.approx(expected)
    # away from stress raisers the grid's deflection is good (issue record: within 0.5 %
    # for mid-span stress; the Q4 grid is a little stiffer in bending)
    assert abs(gap) < 0.05
