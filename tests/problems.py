"""Problems and helpers shared by the tests: each fixture is written once here.

pytest fixtures (``rng``) live in conftest.py; this module holds plain functions
and texts that tests import (``from problems import beam_problem``)."""

import numpy as np


def beam_problem(dim=2, size=None, h=1.0, E=1000.0, nu=0.3, **opt):
    """A cantilever clamped at x-min with a downward load on the x-max face."""
    size = size or ([20.0, 5.0] if dim == 2 else [12.0, 4.0, 4.0])
    d = {
        "name": "beam",
        "domain": {"size": list(size), "element_size": h},
        "material": {"youngs_modulus": E, "poissons_ratio": nu, "density": 1000.0},
        "optimization": {"volume_fraction": 0.5, **opt},
        "support": [{"region": {"face": "x-min"}}],
        "load_case": [
            {
                "name": "tip",
                "force": [
                    {
                        "region": {"face": "x-max"},
                        "total": [0.0, -1.0] + ([0.0] if dim == 3 else []),
                    }
                ],
            }
        ],
    }
    if dim == 2:
        d["domain"]["thickness"] = 1.0
    return d


def add_point_load(d, name, point, total, weight=None):
    """Append a load case of one point force to the problem dict ``d``; returns ``d``."""
    case = {"name": name, "force": [{"region": {"point": list(point)}, "total": list(total)}]}
    if weight is not None:
        case["weight"] = weight
    d["load_case"].append(case)
    return d


def mbb(**opt):
    # Half MBB beam: symmetry (x fixed) on the left edge, roller (y fixed) at the
    # lower right corner, unit load down at the upper left corner; unit data.
    return {
        "name": "mbb",
        "domain": {"size": [60.0, 20.0], "element_size": 1.0, "thickness": 1.0},
        "material": {"youngs_modulus": 1.0, "poissons_ratio": 0.3, "density": 1.0},
        "optimization": {
            "volume_fraction": 0.5,
            "penalty": 3.0,
            "filter_radius": 2.4,
            "projection": False,
            "max_iterations": 500,
            # 88-line code stops at max |Δx| < 0.01; our measure, ‖Δρ‖₂/‖ρ‖₂, is below
            # 0.01 from about iteration 28 here (c ≈ 240, 2.7 % above the converged
            # value) and below 0.001 from about iteration 77 (c within 0.5 %)
            "tolerance": 0.001,
            **opt,
        },
        "support": [
            {"region": {"face": "x-min"}, "fix": ["x"]},
            {"region": {"point": [60.0, 0.0]}, "fix": ["y"]},
        ],
        "load_case": [{"force": [{"region": {"point": [0.0, 20.0]}, "total": [0.0, -1.0]}]}],
    }


def plate_toml(*, name, size, thickness, preset, max_iterations, load, total, beta_interval=None):
    """Problem-file text of a 2D plate clamped on x-min with one point load "down"
    (volume fraction 0.4). Tests append further sections or `replace` lines.

    >>> print(plate_toml(name="p", size=[2.0, 1.0], thickness=1.0, preset="316L",
    ...                  max_iterations=3, load=[2.0, 0.5], total=[0.0, -1.0]))
    ... # doctest: +ELLIPSIS
    <BLANKLINE>
    name = "p"
    [domain]
    size = [2.0, 1.0]
    ...
      total = [0.0, -1.0]
    <BLANKLINE>
    """
    beta = "" if beta_interval is None else f"beta_interval = {beta_interval}\n"
    return f"""
name = "{name}"
[domain]
size = {list(size)}
element_size = 1.0
thickness = {thickness}
[material]
preset = "{preset}"
[optimization]
volume_fraction = 0.4
max_iterations = {max_iterations}
{beta}[[support]]
region = {{ face = "x-min" }}
[[load_case]]
name = "down"
  [[load_case.force]]
  region = {{ point = {list(load)} }}
  total = {list(total)}
"""


def interrupt_at(iteration):
    """A per-iteration callback that stops the run as Ctrl-C would at ``iteration``."""

    def callback(row):
        if row["iteration"] == iteration:
            raise KeyboardInterrupt

    return callback


def central_difference(f, x, v, eps=1e-6):
    """(f(x + εv) − f(x − εv)) / 2ε: the derivative of f at x along v, error O(ε²)."""
    return (f(x + eps * v) - f(x - eps * v)) / (2 * eps)


def fd_check(transform, x, rng, eps=1e-6, rtol=1e-6, atol=1e-9):
    """A transform's backward against central differences of f(x) = w·forward(x)
    along three random directions."""
    w = rng.normal(size=x.size)
    grad = transform.backward(x, w)
    for _ in range(3):
        d = rng.normal(size=x.size)
        fd = central_difference(lambda y: w @ transform.forward(y), x, d, eps)
        assert np.isclose(grad @ d, fd, rtol=rtol, atol=atol)


def dense_stiffness(grid, ke, e):
    """The global stiffness matrix from plain loops over the elements, dense, with no
    supports: Σ_e e_e K_e scattered to the element's dofs."""
    k = np.zeros((grid.n_dofs,) * 2)
    for el, dofs in enumerate(grid.element_dofs):
        k[np.ix_(dofs, dofs)] += e[el] * ke
    return k


def tiny_bracket_toml(max_iterations, beta_interval):
    """The 24 × 12 mm 316L plate, 3 mm thick, 100 N down at the middle of its free end."""
    return plate_toml(
        name="tiny-bracket",
        size=[24.0, 12.0],
        thickness=3.0,
        preset="316L",
        max_iterations=max_iterations,
        beta_interval=beta_interval,
        load=[24.0, 6.0],
        total=[0.0, -100.0],
    )


def l_prism(corner=(0.0, 0.0, 0.0), scale=1.0):
    """A closed, outward-oriented triangle surface of an L-shaped prism (non-convex):
    the L of (0,0)-(10,0)-(10,3)-(3,3)-(3,8)-(0,8) in x, y, 5 deep in z, times
    `scale`, from `corner`. Returns (vertices, triangles) and the exact inside test."""
    outline = np.array([(0, 0), (10, 0), (10, 3), (3, 3), (3, 8), (0, 8)], float)
    n = len(outline)
    bottom = np.column_stack([outline, np.zeros(n)])
    top = np.column_stack([outline, np.full(n, 5.0)])
    vertices = np.concatenate([bottom, top]) * scale + np.array(corner)
    # the caps fan out from (0, 0), which sees the whole L
    caps = [(0, i + 1, i) for i in range(1, n - 1)] + [
        (n, n + i, n + i + 1) for i in range(1, n - 1)
    ]
    sides = []
    for i in range(n):
        j = (i + 1) % n
        sides += [(i, j, n + j), (i, n + j, n + i)]
    faces = np.array(caps + sides)

    def exact(pts):
        p = (np.asarray(pts) - np.array(corner)) / scale
        in_l = ((p[:, 0] < 10) & (p[:, 1] < 3)) | ((p[:, 0] < 3) & (p[:, 1] < 8))
        return in_l & np.all(p > 0, axis=1) & (p[:, 2] < 5)

    return vertices, faces, exact


def write_stl(path, vertices, faces):
    import meshio

    meshio.write(str(path), meshio.Mesh(vertices, [("triangle", faces)]), file_format="stl")
    return path


def timoshenko_tip_deflection(P, L, E, nu, width, height):
    """Tip deflection of a cantilever of rectangular section under an end load:
    bending PL³/(3EI) plus shear PL/(κGA) with κ = 5/6 for a rectangle (Timoshenko &
    Gere, Mechanics of Materials). The handbook reference of several tests."""
    inertia, area, shear = width * height**3 / 12, width * height, E / (2 * (1 + nu))
    return P * L**3 / (3 * E * inertia) + P * L / (5 / 6 * shear * area)


def l_bracket(**opt):
    """L-shaped plate: the re-entrant corner is the classic stress benchmark shape."""
    return {
        "name": "l-bracket",
        "domain": {"size": [40.0, 40.0], "element_size": 1.0, "thickness": 1.0},
        "material": {
            "youngs_modulus": 1000.0,
            "poissons_ratio": 0.3,
            "density": 1.0,
            "yield_strength": 3.0,
        },
        "optimization": {
            "volume_fraction": 0.4,
            "optimizer": "mma",
            "projection": False,
            "filter_radius": 1.5,
            "max_iterations": 150,
            **opt,
        },
        "support": [{"region": {"box": {"min": [0, 40], "max": [16, 40]}}}],
        "passive": [{"kind": "void", "region": {"box": {"min": [16, 16], "max": [40, 40]}}}],
        "load_case": [
            {
                "force": [
                    {"region": {"box": {"min": [40, 10], "max": [40, 16]}}, "total": [0.0, -1.0]}
                ]
            }
        ],
    }


def check_exits_2(text: str, fragment: str, tmp_path, capsys) -> None:
    """`topo check` of a problem file holding `text` exits 2 with `fragment` in its
    error and no traceback."""
    from topo.cli import main

    f = tmp_path / "p.toml"
    f.write_text(text)
    assert main(["check", str(f)]) == 2
    err = capsys.readouterr().err
    assert fragment in err and "Traceback" not in err


def bars_in_void(shape=(16, 8, 8)) -> np.ndarray:
    """A high-contrast density field for solver tests: two solid bars along x, a
    solid end block and a solid bottom layer in void of ρ = 1e-3 (flat, C order)."""
    rho = np.full(shape, 1e-3)
    rho[:, 2:4, 1:3] = rho[:, 5:7, 5:7] = 1.0
    rho[0:3] = 1.0
    rho[:, :, 0:1] = 1.0
    return rho.ravel()
