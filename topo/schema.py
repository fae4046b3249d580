"""The problem-file schema: every key declared once, with its type, unit, allowed
values, default and meaning.

The one table drives the parser (`Reader`, used by problem.py), its error messages,
the key reference in README.md (keyref.py writes it) and the settings that `topo
check` lists with where each came from. A new key is one `Key(...)` line; a
new table is one `Section(...)`. Rules that tie keys together stay in problem.py.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from .conditions import CONDITIONS, SURFACES
from .materials import PRESETS, find_preset

MEAN_STRESS_CORRECTIONS = ("goodman", "gerber", "swt")

AXES = ("x", "y", "z")
DIRECTIONS = ("+x", "-x", "+y", "-y", "+z", "-z")
FACES = tuple(f"{a}-{s}" for a in AXES for s in ("min", "max"))

# kinds of value
NUMBER, INTEGER, BOOL, STRING = "number", "whole number", "true/false", "string"
VECTOR, LIST, REGION, TABLE, TABLES = "list of numbers", "list", "region", "table", "[[tables]]"
MOMENT = "moment: Mz (2D) or [Mx, My, Mz] (3D)"
SN_POINTS = "two [cycles, MPa] points"
PLANES = 'list of axes or {axis, at} tables, e.g. ["x"] or [{axis = "x", at = 40.0}]'
SCALARS = (NUMBER, INTEGER, BOOL, STRING)


def show(value) -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (tuple, list)):
        return "[" + ", ".join(show(v) for v in value) + "]"
    return str(value)


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED = _Required()


@dataclass(frozen=True)
class Rule:
    """A default worked out from other settings: `value(env)` gets the context (dim,
    element_size, where) and the keys of the same table read so far."""

    text: str
    value: Callable[[dict], Any]


@dataclass(frozen=True)
class Key:
    name: str
    kind: str
    doc: str
    unit: str = ""
    default: Any = REQUIRED  # a value, None (optional), REQUIRED or a Rule
    bounds: str = ""  # interval with open "(" or closed "[" ends, e.g. "(0, 1]", "[1, inf)"
    choices: tuple | Callable[[int], tuple] = ()  # a callable gets the dimension
    dims: tuple[int, ...] = (2, 3)  # other dimensions refuse the key
    hint: str = ""  # what to give when the key is missing
    check: Callable[[Any], str | None] | None = None  # extra test: a fault or None
    why: str = ""  # the reason for the bounds, said when a value lies outside them

    def allowed(self, dim: int | None) -> tuple:
        return self.choices(dim or 3) if callable(self.choices) else self.choices


@dataclass(frozen=True)
class Section:
    path: str  # "" for the top level, "load_case.force" for a nested table
    doc: str
    keys: tuple[Key, ...]
    many: bool = False  # an array of tables, [[path]]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(k.name for k in self.keys)

    def key(self, name: str) -> Key:
        return self.keys[self.names.index(name)]


def _preset_known(name: str) -> str | None:
    if find_preset(name) is not None:
        return None
    hint = difflib.get_close_matches(name, list(PRESETS), n=1)
    tip = f"; did you mean '{hint[0]}'?" if hint else ""
    return f"unknown preset {name!r} (presets: {', '.join(PRESETS)}){tip}"


MAX_NAME = 100  # characters; folder names get suffixes and must stay below 255 bytes


def _label(name: str) -> str | None:
    """A name printed in reports, tables and field names: one line, not too long."""
    if not name.strip():
        return "must not be empty"
    if any(ord(c) < 32 or ord(c) == 127 for c in name):
        return f"must be one line of text without control characters, got {name!r}"
    if len(name) > MAX_NAME:
        return f"is {len(name)} characters long; at most {MAX_NAME}"
    return None


def _plain_name(name: str) -> str | None:
    bad = not name or any(c in name for c in "/\\\0") or name in (".", "..")
    return f"must be a plain folder name, got {name!r}" if bad else _label(name)


def _from_preset(field: str, otherwise: Any = REQUIRED) -> Rule:
    def value(env):
        preset = find_preset(env["preset"]) if env.get("preset") is not None else None
        return getattr(preset, field) if preset else otherwise

    text = "from the preset" + ("" if otherwise is REQUIRED else f", else {show(otherwise)}")
    return Rule(text, value)


_GIVE = f"give a preset or the value (presets: {', '.join(PRESETS)})"
_ENTRY_NAME = Rule("its key path, e.g. passive[1]", lambda env: env["where"])

_POSITIVE = "(0, inf)"

SCHEMA: tuple[Section, ...] = (
    Section(
        "",
        "the problem file",
        (
            Key(
                "name",
                STRING,
                "output folder name",
                check=_plain_name,  # load_problem gives the file's stem
                default=Rule("the file name without .toml", lambda env: "problem"),
            ),
            Key("description", STRING, "free text for the reports", default=""),
            Key("domain", TABLE, "the design domain"),
            Key("material", TABLE, "the solid material"),
            Key("optimization", TABLE, "the optimisation settings"),
            Key("build", TABLE, "build direction for the overhang rule", default=None),
            Key("support", TABLES, "fixed regions, at least one"),
            Key("load_case", TABLES, "load cases, at least one"),
            Key("passive", TABLES, "regions kept solid or void", default=()),
            Key("deflection", TABLES, "deflections reported (and limited) at points", default=()),
            Key("checks", TABLE, "thresholds of the sign-off checks", default=None),
            Key("cost", TABLE, "rates of the cost estimates of `topo orient`", default=None),
            Key("report", TABLE, "what is reported after a run", default=None),
        ),
    ),
    Section(
        "domain",
        "the design domain, a box from the origin",
        (
            Key(
                "size",
                VECTOR,
                "extent along x, y (2D) or x, y, z (3D); a whole number of elements",
                "mm",
                default=Rule(
                    "required; with an envelope, its bounding box in whole elements",
                    lambda env: env.get("envelope_size", REQUIRED),
                ),
                bounds=_POSITIVE,
                hint="give [x, y] (2D) or [x, y, z] (3D) in mm",
            ),
            Key(
                "envelope",
                STRING,
                "closed surface file (STL, OBJ or PLY, mm) the part must stay within, "
                "relative to the problem file: elements whose centres lie outside are void",
                default=None,
                dims=(3,),
            ),
            Key(
                "element_size",
                NUMBER,
                "edge of the square (2D) or cubic (3D) elements",
                "mm",
                bounds=_POSITIVE,
            ),
            Key(
                "thickness",
                NUMBER,
                "plate thickness of a 2D (plane stress) problem",
                "mm",
                bounds=_POSITIVE,
                dims=(2,),
                hint="2D problems are plane stress and need a thickness (mm)",
            ),
        ),
    ),
    Section(
        "material",
        "a preset or explicit values; explicit values override the preset",
        (
            Key(
                "preset", STRING, f"one of {', '.join(PRESETS)}", default=None, check=_preset_known
            ),
            Key(
                "name",
                STRING,
                "name in the reports",
                default=Rule(
                    'the preset\'s, else "custom"',
                    lambda env: find_preset(env["preset"]).name if env.get("preset") else "custom",
                ),
            ),
            Key(
                "youngs_modulus",
                NUMBER,
                "Young's modulus E",
                "MPa",
                _from_preset("youngs_modulus"),
                "[1, 1.2e6]",
                hint=_GIVE,
                why="solids lie between soft elastomers (about 1 MPa) and diamond (about "
                "1.2e6 MPa; both recalled from memory): is the value in MPa?",
            ),
            Key(
                "poissons_ratio",
                NUMBER,
                "Poisson's ratio ν",
                "",
                _from_preset("poissons_ratio"),
                "(-1, 0.5)",
                hint=_GIVE,
            ),
            Key(
                "density",
                NUMBER,
                "mass density",
                "kg/m³",
                _from_preset("density"),
                _POSITIVE,
                hint=_GIVE,
            ),
            Key(
                "yield_strength",
                NUMBER,
                "yield strength for the safety factors, in every direction; without it, a "
                "named condition gives its yield along and across the build direction",
                "MPa",
                Rule(
                    "from the preset, else none; with a named condition, its weaker orientation",
                    _from_preset("yield_strength", None).value,
                ),
                _POSITIVE,
            ),
            Key(
                "condition",
                STRING,
                "build condition whose strengths and S-N data the fatigue figures use; named, "
                "its yield by orientation also serves the static check (default: none named, "
                "fatigue takes as-built and the static check the preset's yield_strength)",
                default=None,
                choices=CONDITIONS,
            ),
            Key(
                "surface",
                STRING,
                "surface of the part: as printed, or machined (scales the S-N curve)",
                default="as-built",
                choices=SURFACES,
            ),
            Key(
                "ultimate_strength",
                NUMBER,
                "ultimate tensile strength for the Goodman correction (default: the condition's)",
                "MPa",
                None,
                _POSITIVE,
            ),
            Key(
                "fatigue_strength_coefficient",
                NUMBER,
                "Basquin σf' of the machined S-N curve, σa = σf' (2N)^b (default: the condition's)",
                "MPa",
                None,
                _POSITIVE,
            ),
            Key(
                "fatigue_strength_exponent",
                NUMBER,
                "Basquin exponent b (default: the condition's)",
                "",
                None,
                "(-1, 0)",
                why="the S-N curve must decrease with life, and b below -1 is no metal's",
            ),
            Key(
                "endurance_limit",
                NUMBER,
                "stress amplitude of unbounded life, machined surface (default: the condition's)",
                "MPa",
                None,
                _POSITIVE,
            ),
            Key(
                "surface_factor",
                NUMBER,
                "as-built over machined fatigue strength (default: the condition's)",
                "",
                None,
                "(0, 1]",
            ),
            Key(
                "mean_stress_correction",
                STRING,
                "mean-stress correction of the fatigue figures: Goodman or Gerber (with the "
                "ultimate strength, after Shigley's Mechanical Engineering Design) or "
                "Smith-Watson-Topper (1970)",
                default="goodman",
                choices=MEAN_STRESS_CORRECTIONS,
            ),
            Key(
                "sn_points",
                SN_POINTS,
                "the machined S-N curve through two points [[N1, S1], [N2, S2]] (cycles, "
                "fully reversed amplitude), converted to Basquin's form; replaces the "
                "condition's curve, with endurance_limit as its knee (none: no knee)",
                "cycles, MPa",
                None,
            ),
        ),
    ),
    Section(
        "optimization",
        "the optimisation settings",
        (
            Key(
                "volume_fraction",
                NUMBER,
                "share of the design domain to fill; give this or mass_limit",
                default=None,
                bounds="(0, 1]",
            ),
            Key(
                "mass_limit",
                NUMBER,
                "mass budget of the part, passive solids counted; or volume_fraction",
                "kg",
                None,
                _POSITIVE,
            ),
            Key(
                "objective",
                STRING,
                "weighted sum of the load-case compliances, or the largest (mma)",
                default="weighted",
                choices=("weighted", "worst_case"),
            ),
            Key("penalty", NUMBER, "SIMP penalty exponent p", default=3.0, bounds="[1, 10]"),
            Key(
                "filter_radius",
                NUMBER,
                "density filter radius; sets the smallest member",
                "mm",
                Rule("2.5 × element_size", lambda env: 2.5 * env["element_size"]),
                _POSITIVE,
            ),
            Key("projection", BOOL, "Heaviside projection towards solid/void", default=True),
            Key(
                "projection_threshold",
                NUMBER,
                "threshold η of the projection",
                default=0.5,
                bounds="[0.01, 0.99]",
            ),
            Key(
                "beta_max",
                NUMBER,
                "final projection sharpness β (β doubles from 1)",
                default=32.0,
                bounds="[1, 1024]",
            ),
            Key(
                "beta_interval",
                INTEGER,
                "iterations between doublings of β",
                default=25,
                bounds="[1, inf)",
            ),
            Key(
                "optimizer",
                STRING,
                "optimality criteria, MMA or globally convergent MMA",
                default="oc",
                choices=("oc", "mma", "gcmma"),
            ),
            Key(
                "move_limit",
                NUMBER,
                "largest density change per iteration",
                default=0.2,
                bounds="[0.001, 1]",
            ),
            Key("max_iterations", INTEGER, "iteration budget", default=200, bounds="[1, inf)"),
            Key(
                "tolerance",
                NUMBER,
                "stop (β at its maximum) when the relative change of the physical densities, "
                "‖Δρ‖₂/‖ρ‖₂ over the design elements, is below",
                default=0.01,
                bounds=_POSITIVE,
            ),
            Key(
                "min_stiffness",
                NUMBER,
                "E_min / E0 of modified SIMP",
                default=1e-9,
                bounds="[1e-12, 0.1]",
            ),
            Key(
                "symmetry",
                PLANES,
                "mirror planes normal to these axes, through the domain centre or at `at` "
                "(mm, an element boundary or centre), enforced on the design",
                default=(),
                choices=lambda dim: AXES[:dim],
            ),
            Key(
                "solver",
                STRING,
                "linear solver: CHOLMOD, multigrid-CG, or chosen by size",
                default="auto",
                choices=("auto", "direct", "iterative"),
            ),
            Key(
                "checkpoint_interval",
                INTEGER,
                "iterations between checkpoint.npz saves",
                default=10,
                bounds="[1, inf)",
            ),
            Key(
                "stress_limit",
                NUMBER,
                "bound on the relaxed von Mises stress peak (mma or gcmma)",
                "MPa",
                None,
                _POSITIVE,
            ),
            Key(
                "fatigue_life",
                NUMBER,
                "design life the loop holds every load case with cycles to: its peak stress "
                "is bounded where the mean-stress correction at the S-N strength of this life "
                "gives checks.fatigue_safety_factor (mma or gcmma; see README, Fatigue)",
                "cycles",
                None,
                "[1, 1e12]",
                why="under one cycle there is no fatigue; 1e12 lies far beyond any S-N data",
            ),
            Key(
                "enforce_length_scale",
                BOOL,
                "hold checks.min_wall and checks.min_gap in the design (robust formulation: "
                "eroded, intermediate and dilated projections; the filter radius follows "
                "from them unless given)",
                default=False,
            ),
        ),
    ),
    Section(
        "build",
        "printing: the overhang rule (optional table)",
        (
            Key(
                "direction",
                STRING,
                "build direction (±x, ±y only in 2D)",
                choices=lambda dim: DIRECTIONS if dim == 3 else DIRECTIONS[:4],
            ),
            Key(
                "overhang_angle",
                NUMBER,
                "self-supporting angle from the plate: the overhang rule of the filter and "
                "the printability check (see README, Overhang rule)",
                "degrees",
                45.0,
                "[30, 60]",
                why="the overhang rule is defined for 30° to 60° from the plate (common "
                "practice quotes 35–50° for powder-bed fusion); 0° is a flat overhang and "
                "90° a vertical wall, neither a self-supporting limit",
            ),
            Key(
                "overhang_filter",
                BOOL,
                "enforce the overhang rule (false: only report it)",
                default=True,
            ),
            Key(
                "interface_support",
                NUMBER,
                "weight that steers the design to support the passive solid regions "
                "(0: off; see README)",
                default=4.0,
                bounds="[0, inf)",
            ),
            Key(
                "no_enclosed_cavities",
                BOOL,
                "constrain the design to leave no void closed in by solid, where powder "
                "would stay trapped (virtual temperature method; 3D, mma or gcmma; see README)",
                default=False,
            ),
            Key(
                "cavity_bound",
                NUMBER,
                "bound on the p-norm of the virtual temperature, as a multiple of that of "
                "the design with every design element empty (with no_enclosed_cavities)",
                default=20.0,
                bounds="(1, 1000]",
                why="at 1 or below many designs with every void open fail (an open ring "
                "measured 3.4); above 1000 a small closed cavity on a large grid can pass",
            ),
        ),
    ),
    Section(
        "support",
        "a fixed region",
        (
            Key("name", STRING, "name in the reports", default=_ENTRY_NAME, check=_label),
            Key("region", REGION, "the fixed nodes"),
            Key(
                "fix",
                LIST,
                "the fixed displacement components",
                default=Rule("all axes", lambda env: AXES[: env["dim"]]),
                choices=lambda dim: AXES[:dim],
            ),
        ),
        many=True,
    ),
    Section(
        "load_case",
        "forces applied together",
        (
            Key("name", STRING, "name in the reports", default=_ENTRY_NAME, check=_label),
            Key(
                "weight", NUMBER, "weight in the weighted compliance", default=1.0, bounds=_POSITIVE
            ),
            Key(
                "cycles",
                NUMBER,
                "design life in load cycles; gives the case's fatigue figures",
                "cycles",
                None,
                _POSITIVE,
            ),
            Key(
                "load_ratio",
                NUMBER,
                "R = minimum over maximum stress of a cycle; -1 is fully reversed",
                "",
                -1.0,
                "[-1, 1)",
            ),
            Key(
                "cycles_with",
                STRING,
                "the load case at the other end of this case's stress cycle: the stress "
                "alternates between the two cases' stress tensors (needs cycles; in place "
                "of load_ratio)",
                default=None,
                check=_label,
            ),
            Key(
                "force",
                TABLES,
                "the forces, at least one",
                hint="a load case needs at least one [[load_case.force]]",
            ),
        ),
        many=True,
    ),
    Section(
        "load_case.force",
        "a force (and moment) on a region: shared evenly, a moment as by a bolt group",
        (
            Key("region", REGION, "the loaded nodes"),
            Key(
                "total",
                VECTOR,
                "total force on the region",
                "N",
                bounds="[-1e9, 1e9]",
                why="1e9 N is the weight of about 100,000 tonnes, beyond any bracket; larger "
                "forces overflow the compliance (N·mm): is the value in N?",
            ),
            Key(
                "at",
                VECTOR,
                "point of application, on or off the part (the equipment's centre of mass, "
                "a pin axis); the force and moment are carried to the region as by a rigid "
                "connection (default: the centroid of the region's nodes)",
                "mm",
                None,
            ),
            Key(
                "moment",
                MOMENT,
                "moment about `at`, carried like a bolt group: nodal forces proportional "
                "to the distance from the region's centroid",
                "N·mm",
                None,
                "[-1e12, 1e12]",
                why="1e12 N·mm is 1e9 N at a metre; is the value in N·mm?",
            ),
        ),
        many=True,
    ),
    Section(
        "passive",
        "a region kept solid or void",
        (
            Key("name", STRING, "name in the reports", default=_ENTRY_NAME, check=_label),
            Key("kind", STRING, "solid or void", choices=("solid", "void")),
            Key("region", REGION, "the elements"),
        ),
        many=True,
    ),
    Section(
        "deflection",
        "a point (or a small region, averaged) whose movement along a direction is signed off",
        (
            Key("name", STRING, "name in the reports", default=_ENTRY_NAME, check=_label),
            Key("region", REGION, "the nodes whose mean displacement is taken, e.g. a point"),
            Key(
                "direction",
                STRING,
                "the direction the deflection is measured along",
                choices=lambda dim: DIRECTIONS if dim == 3 else DIRECTIONS[:4],
            ),
            Key(
                "load_case",
                STRING,
                "the load case it applies to (default: every load case)",
                default=None,
            ),
            Key(
                "limit",
                NUMBER,
                "largest allowed |deflection|; a constraint with optimizer mma or gcmma, "
                "always a check",
                "mm",
                None,
                _POSITIVE,
            ),
        ),
        many=True,
    ),
    Section(
        "checks",
        "thresholds of the PASS/FAIL checks on the printed part (optional table)",
        (
            Key(
                "safety_factor",
                NUMBER,
                "required yield strength over peak von Mises stress of the printed part",
                default=1.0,
                bounds=_POSITIVE,
            ),
            Key(
                "fatigue_safety_factor",
                NUMBER,
                "required fatigue safety factor on stress amplitude at the design life",
                default=1.0,
                bounds=_POSITIVE,
            ),
            Key(
                "compliance_gap",
                NUMBER,
                "largest allowed relative gap between printed and optimiser compliance",
                default=0.05,
                bounds="(0, 1]",
            ),
            Key(
                "unsupported_fraction",
                NUMBER,
                "largest allowed share of printed elements that need support structures",
                default=0.0,
                bounds="[0, 1]",
            ),
            Key(
                "min_wall",
                NUMBER,
                "thinnest wall the machine prints; checked on the printed part, held in "
                "the design with optimization.enforce_length_scale",
                "mm",
                None,
                _POSITIVE,
            ),
            Key(
                "min_gap",
                NUMBER,
                "narrowest gap or hole the machine keeps clear; checked on the printed part, "
                "held in the design with optimization.enforce_length_scale",
                "mm",
                None,
                _POSITIVE,
            ),
        ),
    ),
    Section(
        "cost",
        "rates for `topo orient`'s estimates; every default is illustrative, give your own",
        (
            Key("layer_thickness", NUMBER, "powder layer thickness", "mm", 0.03, _POSITIVE),
            Key("recoat_time", NUMBER, "time to spread one layer", "s", 8.0, "[0, inf)"),
            Key("build_rate", NUMBER, "melted volume per hour", "cm³/h", 15.0, _POSITIVE),
            Key("machine_rate", NUMBER, "printer cost per hour", "per h", 90.0, "[0, inf)"),
            Key("powder_price", NUMBER, "powder price", "per kg", 250.0, "[0, inf)"),
            Key("powder_loss", NUMBER, "share of melted mass lost to reuse", "", 0.05, "[0, 1)"),
            Key("plate_size", VECTOR, "build plate size", "mm", (250.0, 250.0), _POSITIVE),
            Key("plate_spacing", NUMBER, "gap between parts on the plate", "mm", 5.0, "[0, inf)"),
            Key(
                "parts_per_build",
                INTEGER,
                "parts per build (default: as many as fit on the plate)",
                default=None,
                bounds="[1, inf)",
            ),
            Key("build_setup", NUMBER, "set-up per build", "per build", 250.0, "[0, inf)"),
            Key("heat_treatment", NUMBER, "stress relief or HIP", "per build", 150.0, "[0, inf)"),
            Key("support_removal", NUMBER, "support removal", "per cm²", 0.3, "[0, inf)"),
            Key(
                "interface_machining",
                NUMBER,
                "finishing one interface",
                "per interface",
                15.0,
                "[0, inf)",
            ),
            Key("support_density", NUMBER, "support mass over solid mass", "", 0.3, "(0, 1]"),
            Key(
                "stock_allowance",
                NUMBER,
                "stock beyond the part on every side",
                "mm",
                5.0,
                "[0, inf)",
            ),
            Key("stock_price", NUMBER, "stock price", "per kg", 30.0, "[0, inf)"),
            Key("removal_rate", NUMBER, "machining removal rate", "cm³/min", 20.0, _POSITIVE),
            Key("machining_rate", NUMBER, "machining cost per hour", "per h", 100.0, "[0, inf)"),
            Key("machining_setup", NUMBER, "machining set-up", "per batch", 300.0, "[0, inf)"),
            Key("programming", NUMBER, "machining programming", "once", 800.0, "[0, inf)"),
            Key(
                "batch",
                INTEGER,
                "parts the per-part figures are for",
                default=10,
                bounds="[1, inf)",
            ),
        ),
    ),
    Section(
        "report",
        "what is reported after a run (optional table)",
        (
            Key(
                "verify",
                BOOL,
                "after the run, verify the printed part with a body-fitted analysis "
                "(verify.json/.vtu/.png; the headline stress then comes from it)",
                default=False,
            ),
        ),
    ),
    Section(
        "region",
        'exactly one of these forms, e.g. region = { face = "x-min" }',
        (
            Key("box", TABLE, "axis-aligned box", default=None),
            Key("cylinder", TABLE, "circle (2D) or cylinder (3D)", default=None),
            Key("sphere", TABLE, "disc (2D) or ball (3D)", default=None),
            Key(
                "face",
                STRING,
                "a face of the domain",
                default=None,
                choices=lambda dim: FACES[: 2 * dim],
            ),
            Key("point", VECTOR, "the node nearest this point", "mm", None),
            Key(
                "mesh",
                STRING,
                "closed surface file (STL, OBJ or PLY, mm), relative to the problem file: "
                "elements whose centres lie inside, nodes inside or on it",
                default=None,
                dims=(3,),
            ),
        ),
    ),
    Section(
        "region.box",
        "box corners",
        (
            Key("min", VECTOR, "lower corner", "mm"),
            Key("max", VECTOR, "upper corner", "mm"),
        ),
    ),
    Section(
        "region.cylinder",
        "cylinder",
        (
            Key("center", VECTOR, "centre", "mm"),
            Key(
                "axis",
                STRING,
                "axis (3D)",
                default=Rule(
                    "z in 2D; required in 3D", lambda env: "z" if env["dim"] == 2 else REQUIRED
                ),
                choices=lambda dim: AXES if dim == 3 else ("z",),
            ),
            Key("radius", NUMBER, "radius", "mm", bounds=_POSITIVE),
            Key(
                "length",
                NUMBER,
                "total length along the axis, centred (3D; ignored in 2D)",
                "mm",
                Rule("required in 3D", lambda env: math.inf if env["dim"] == 2 else REQUIRED),
                _POSITIVE,
            ),
        ),
    ),
    Section(
        "region.sphere",
        "sphere",
        (
            Key("center", VECTOR, "centre", "mm"),
            Key("radius", NUMBER, "radius", "mm", bounds=_POSITIVE),
        ),
    ),
)

SECTIONS = {s.path: s for s in SCHEMA}


def interval(bounds: str) -> tuple[float, float, bool, bool]:
    """'(0, 1]' → (0.0, 1.0, lo_open=True, hi_open=False)."""
    lo, hi = (float(v) for v in bounds[1:-1].split(","))
    return lo, hi, bounds[0] == "(", bounds[-1] == ")"


def describe_bounds(bounds: str) -> str:
    lo, hi, lo_open, _ = interval(bounds)
    if math.isinf(hi):
        return "> 0" if lo == 0 and lo_open else f"≥ {lo:g}"
    return bounds


class Reader:
    """Reads tables against their declarations; `fail(key, message)` raises."""

    def fail(self, key: str, message: str):
        raise NotImplementedError

    def read(
        self, path: str, value, where: str, ctx: dict, names: tuple[str, ...] | None = None
    ) -> dict:
        """Every declared key of section `path` from the table `value`: checked, or defaulted."""
        section = SECTIONS[path]
        d = self.table(value, where, section.names)
        got: dict[str, Any] = {}
        for key in section.keys:
            if names is None or key.name in names:
                got[key.name] = self.field(
                    key,
                    d,
                    f"{where}.{key.name}" if where else key.name,
                    {**ctx, **got, "where": where},
                )
        return got

    def field(self, key: Key, d: dict, where: str, env: dict):
        dim = env.get("dim")
        if dim is not None and dim not in key.dims:
            if key.name in d:
                self.fail(where, f"only {'/'.join(map(str, key.dims))}D problems take a {key.name}")
            return None
        if key.name not in d or d[key.name] is None and key.kind in (TABLE, TABLES):  # None: absent
            value = key.default.value(env) if isinstance(key.default, Rule) else key.default
            if value is REQUIRED:
                self._missing(key, where, dim)
            return value
        value = self.value(key, d[key.name], where, dim)
        fault = key.check(value) if key.check else None
        if fault:
            self.fail(where, fault)
        return value

    def _missing(self, key: Key, where: str, dim):
        if key.kind == TABLES:
            self.fail(where, key.hint or f"at least one [[{where}]] is needed")
        if key.kind == TABLE:
            self.fail(where, "missing table")
        if key.kind == REGION:
            self.fail(where, f"missing: one of {', '.join(SECTIONS['region'].names)}")
        choices = key.allowed(dim)
        hint = key.hint or (f"one of {', '.join(choices)}" if choices else "")
        self.fail(
            where,
            f"missing: {hint}" if hint else f"missing ({key.unit})" if key.unit else "missing",
        )

    def value(self, key: Key, value, where: str, dim: int | None):
        kind = key.kind
        if kind == NUMBER:
            return self.number(value, where, key.bounds, key.why)
        if kind == INTEGER:
            if isinstance(value, bool) or not isinstance(value, int):
                self.fail(where, f"expected a whole number, got {value!r}")
            return int(self.bounded(value, value, where, key.bounds, key.why))
        if kind == BOOL:
            if not isinstance(value, bool):
                self.fail(where, f"expected true or false, got {value!r}")
            return value
        if kind == STRING:
            return self.string(value, where, key.allowed(dim) or None)
        if kind == VECTOR:
            return self.vector(value, where, dim, key.bounds, key.why)
        if kind == MOMENT:
            if dim == 2 and not isinstance(value, list):
                return (self.number(value, where, key.bounds, key.why),)
            if dim == 2:
                if len(value) != 1:
                    self.fail(where, f"a 2D moment is about z: a number Mz or [Mz], got {value!r}")
                return (self.number(value[0], f"{where}[0]", key.bounds, key.why),)
            return self.vector(value, where, dim, key.bounds, key.why)
        if kind == LIST:
            choices = key.allowed(dim)
            if not isinstance(value, list) or not value:
                self.fail(where, f"expected a list of values from {list(choices)}")
            return tuple(
                dict.fromkeys(self.string(v, f"{where}[{i}]", choices) for i, v in enumerate(value))
            )
        if kind == SN_POINTS:
            return self.sn_points(value, where)
        if kind == PLANES:
            return self.planes(value, where, key.allowed(dim))
        if kind == TABLE:
            return self.table(value, where, None)
        if kind == TABLES:
            tables = [value] if isinstance(value, dict) else value
            if not isinstance(tables, list) or not all(isinstance(v, dict) for v in tables):
                self.fail(where, f"expected [[{where}]] tables")
            if not tables and key.default is REQUIRED:
                self._missing(key, where, dim)
            return tables
        return value  # a region: problem.py reads its form

    def sn_points(self, value, where: str) -> tuple[tuple[float, float], ...]:
        pairs = value if isinstance(value, list) else []
        if len(pairs) != 2 or not all(isinstance(p, list) and len(p) == 2 for p in pairs):
            self.fail(
                where,
                f"expected two [cycles, MPa] points, e.g. [[1e3, 600], [1e6, 300]], got {value!r}",
            )
        return tuple(
            (
                self.number(n, f"{where}[{i}][0]", "[0.5, 1e15]", "a life in cycles"),
                self.number(s, f"{where}[{i}][1]", _POSITIVE),
            )
            for i, (n, s) in enumerate(pairs)
        )

    # the checks behind `value`, also used directly for a few structured fields
    def table(self, value, where: str, allowed: tuple[str, ...] | None) -> dict:
        if not isinstance(value, dict):
            self.fail(where, f"expected a table, got {type(value).__name__}")
        for k in value if allowed is not None else ():
            if k not in allowed:
                hint = difflib.get_close_matches(k, allowed, n=1)
                tip = (
                    f" (did you mean '{hint[0]}'?)"
                    if hint
                    else f" (valid keys: {', '.join(allowed)})"
                )
                self.fail(f"{where}.{k}" if where else k, f"unknown key{tip}")
        return value

    def planes(self, value, where: str, axes: tuple) -> tuple:
        """(axis, at in mm or None for the centre) per entry: "x" or {axis, at}."""
        if not isinstance(value, list) or not value:
            self.fail(where, f"expected a {PLANES}")
        out = []
        for i, v in enumerate(value):
            w = f"{where}[{i}]"
            if isinstance(v, dict):
                self.table(v, w, ("axis", "at"))
                if "axis" not in v:
                    self.fail(f"{w}.axis", f"missing: one of {', '.join(axes)}")
                axis = self.string(v["axis"], f"{w}.axis", axes)
                at = self.number(v["at"], f"{w}.at") if "at" in v else None
            else:
                axis, at = self.string(v, w, axes), None
            out.append((axis, at))
        return tuple(dict.fromkeys(out))

    def number(self, value, where: str, bounds: str = "", why: str = "") -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(where, f"expected a number, got {value!r}")
        try:
            x = float(value)
        except OverflowError:  # an integer beyond any float
            x = math.inf
        if not math.isfinite(x):
            self.fail(where, f"must be finite, got {value!r}")
        return self.bounded(x, value, where, bounds, why)

    def bounded(self, x, value, where: str, bounds: str, why: str = ""):
        if bounds:
            lo, hi, lo_open, hi_open = interval(bounds)
            if x < lo or x > hi or (lo_open and x == lo) or (hi_open and x == hi):
                if math.isinf(hi):
                    rule = "be positive" if lo == 0 and lo_open else f"be at least {lo:g}"
                else:
                    rule = f"lie in {bounds}"
                self.fail(where, f"must {rule}, got {value!r}" + (f": {why}" if why else ""))
        return x

    def string(self, value, where: str, choices: tuple[str, ...] | None = None) -> str:
        if not isinstance(value, str):
            self.fail(where, f"expected a string, got {value!r}")
        if choices is not None and value not in choices:
            hint = difflib.get_close_matches(value, choices, n=1)
            tip = f"; did you mean '{hint[0]}'?" if hint else ""
            self.fail(
                where, f"must be one of {', '.join(repr(c) for c in choices)}, got {value!r}{tip}"
            )
        return value

    def vector(
        self, value, where: str, dim: int | None, bounds: str = "", why: str = ""
    ) -> tuple[float, ...]:
        lengths = (dim,) if dim else (2, 3)
        if not isinstance(value, list) or len(value) not in lengths:
            self.fail(
                where, f"expected a list of {' or '.join(map(str, lengths))} numbers, got {value!r}"
            )
        return tuple(self.number(v, f"{where}[{i}]", bounds, why) for i, v in enumerate(value))


# ------------------------------------------------------------ settings in effect

SETTINGS = ("domain", "material", "optimization", "build")


def settings(problem) -> list[dict]:
    """Each scalar setting in effect, its unit and whether the file (or an override)
    gave it or a default did; a rule-based default says its rule."""
    rows = []
    for path in SETTINGS:
        obj, given = getattr(problem, path), (problem.raw or {}).get(path) or {}
        if obj is None:
            continue
        for key in SECTIONS[path].keys:
            if key.kind not in SCALARS + (VECTOR,) or problem.dim not in key.dims:
                continue
            value = getattr(obj, key.name, given.get(key.name))
            source = "file" if key.name in given else "default"
            if source == "default" and isinstance(key.default, Rule):
                source = f"default: {key.default.text}"
            radius = (path, key.name) == ("optimization", "filter_radius")
            if radius and source != "file" and problem.length_scale:
                source += "; set by checks.min_wall/min_gap (enforce_length_scale)"
            rows.append(
                {"key": f"{path}.{key.name}", "value": value, "unit": key.unit, "source": source}
            )
    return rows


def format_setting(row: dict) -> str:
    unit = f" {row['unit']}" if row["unit"] and row["value"] is not None else ""
    return f"{row['key']} = {show(row['value'])}{unit} ({row['source']})"
