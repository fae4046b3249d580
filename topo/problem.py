"""Problem files (TOML, schema v1) → frozen dataclasses, with validation.

Every error names the file, the key path and what is wrong. Overrides are dotted
keys applied to the parsed file before validation, e.g.
``{"optimization.volume_fraction": 0.25}`` or ``{"load_case.landing.weight": 2}``
(list entries by index or by their ``name``).

>>> p = problem_from_dict({"domain": {"size": [4.0, 2.0], "element_size": 1.0,
...     "thickness": 1.0}, "material": {"preset": "316L"},
...     "optimization": {"volume_fraction": 0.5},
...     "support": [{"region": {"face": "x-min"}, "fix": ["x", "y"]}],
...     "load_case": [{"force": [{"region": {"point": [4, 1]}, "total": [0, -1]}]}]})
>>> p.domain.shape
(4, 2)
"""
from __future__ import annotations

import copy
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .materials import PRESETS, Material, find_preset

AXES = ("x", "y", "z")
MAX_ELEMENTS = 20_000_000  # far above what fits in memory on a workstation
DIRECTIONS = ("+x", "-x", "+y", "-y", "+z", "-z")
FACES = tuple(f"{a}-{s}" for a in AXES for s in ("min", "max"))


class ProblemError(ValueError):
    """An invalid problem file or override: names the file, the key and the fault."""

    def __init__(self, source: str, key: str, message: str):
        self.source, self.key, self.message = source, key, message
        where = f"{source}: {key}" if key else source
        super().__init__(f"{where}: {message}")


# ----------------------------------------------------------------------------- data

@dataclass(frozen=True)
class Box:
    min: tuple[float, ...]
    max: tuple[float, ...]


@dataclass(frozen=True)
class Cylinder:
    center: tuple[float, ...]
    axis: str
    radius: float
    length: float  # total length along the axis, centred on `center`


@dataclass(frozen=True)
class Sphere:
    center: tuple[float, ...]
    radius: float


@dataclass(frozen=True)
class Face:
    face: str  # "x-min" …


@dataclass(frozen=True)
class Point:
    point: tuple[float, ...]


Region = Box | Cylinder | Sphere | Face | Point


@dataclass(frozen=True)
class Domain:
    size: tuple[float, ...]
    element_size: float
    thickness: float | None
    shape: tuple[int, ...]

    @property
    def dim(self) -> int:
        return len(self.size)

    @property
    def element_volume(self) -> float:
        """mm³ per element (2D: area × thickness)."""
        h = self.element_size
        return h * h * self.thickness if self.dim == 2 else h**3


@dataclass(frozen=True)
class Optimization:
    volume_fraction: float | None  # exactly one of volume_fraction and mass_limit
    mass_limit: float | None = None  # kg, passive solids counted
    objective: str = "weighted"  # "weighted" | "worst_case"
    penalty: float = 3.0
    filter_radius: float = 0.0  # mm; 0 in the file means the default 2.5·h
    projection: bool = True
    projection_threshold: float = 0.5  # η of the Heaviside projection
    beta_max: float = 32.0
    beta_interval: int = 25
    optimizer: str = "oc"
    move_limit: float = 0.2
    max_iterations: int = 200
    tolerance: float = 0.01
    min_stiffness: float = 1e-9  # E_min / E0 of modified SIMP
    solver: str = "auto"
    checkpoint_interval: int = 10  # iterations between checkpoint.npz saves
    stress_limit: float | None = None  # MPa, on the corrected p-norm of the relaxed stress


@dataclass(frozen=True)
class Build:
    direction: str
    overhang_angle: float = 45.0
    overhang_filter: bool = True  # false: report printability, do not enforce it


@dataclass(frozen=True)
class Support:
    name: str
    region: Region
    fix: tuple[str, ...]


@dataclass(frozen=True)
class Force:
    region: Region
    total: tuple[float, ...]  # N, shared evenly by the selected nodes


@dataclass(frozen=True)
class LoadCase:
    name: str
    weight: float
    forces: tuple[Force, ...]


@dataclass(frozen=True)
class Passive:
    name: str
    kind: str  # "solid" | "void"
    region: Region


@dataclass(frozen=True)
class Problem:
    name: str
    description: str
    domain: Domain
    material: Material
    optimization: Optimization
    build: Build | None
    supports: tuple[Support, ...]
    load_cases: tuple[LoadCase, ...]
    passives: tuple[Passive, ...]
    source: str = "<dict>"
    raw: dict = field(default_factory=dict, compare=False, repr=False)
    warnings: tuple[str, ...] = ()

    @property
    def dim(self) -> int:
        return self.domain.dim


# ----------------------------------------------------------------------- file level

def load_problem(path: str | Path, overrides: dict[str, Any] | None = None) -> Problem:
    """Read and validate a problem file, applying dotted-key overrides first."""
    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ProblemError(source, "", f"cannot read the file ({exc.strerror})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProblemError(source, "", f"TOML syntax error: {exc}") from None
    data.setdefault("name", path.stem)
    return problem_from_dict(data, overrides, source=source)


def problem_from_dict(data: dict, overrides: dict[str, Any] | None = None,
                      source: str = "<dict>") -> Problem:
    """Validate an already-parsed problem dictionary (the TOML tables)."""
    if not isinstance(data, dict):
        raise ProblemError(source, "", "a problem must be a table of keys")
    data = copy.deepcopy(data)
    for key, value in (overrides or {}).items():
        apply_override(data, key, value, source)
    return _Parser(source).problem(data)


def parse_override(text: str) -> tuple[str, Any]:
    """'a.b=VALUE' from the command line → (key, value); VALUE is read as TOML."""
    if "=" not in text:
        raise ProblemError("--set", text, "expected KEY=VALUE, e.g. optimization.volume_fraction=0.25")
    key, value = text.split("=", 1)
    key, value = key.strip(), value.strip()
    try:
        return key, tomllib.loads(f"v = {value}")["v"]
    except tomllib.TOMLDecodeError:
        return key, value  # a bare word is a string


def apply_override(data: dict, dotted: str, value: Any, source: str = "<overrides>") -> None:
    """Set data[a][b]… = value for the dotted key 'a.b…' (lists by index or name)."""
    parts = dotted.split(".")
    node: Any = data
    for depth, part in enumerate(parts):
        last = depth == len(parts) - 1
        where = ".".join(parts[: depth + 1])
        if isinstance(node, list):
            index = _list_index(node, part)
            if index is None:
                raise ProblemError(source, where, f"no entry '{part}' (give an index 0..{len(node) - 1} or a name)")
            if last:
                node[index] = value
            else:
                node = node[index]
        elif isinstance(node, dict):
            if last:
                node[part] = value
            else:
                node = node.setdefault(part, {})
        else:
            raise ProblemError(source, where, "cannot set a key inside a plain value")


def _list_index(items: list, part: str) -> int | None:
    if part.lstrip("-").isdigit():
        i = int(part)
        return i if -len(items) <= i < len(items) else None
    for i, item in enumerate(items):
        if isinstance(item, dict) and item.get("name") == part:
            return i
    return None


# -------------------------------------------------------------------------- parsing

TOP_KEYS = ("name", "description", "domain", "material", "optimization", "build",
            "support", "load_case", "passive")
DOMAIN_KEYS = ("size", "element_size", "thickness")
MATERIAL_KEYS = ("preset", "name", "youngs_modulus", "poissons_ratio", "density", "yield_strength")
OPT_KEYS = tuple(Optimization.__dataclass_fields__)
BUILD_KEYS = ("direction", "overhang_angle", "overhang_filter")
SUPPORT_KEYS = ("name", "region", "fix")
LOAD_KEYS = ("name", "weight", "force")
FORCE_KEYS = ("region", "total")
PASSIVE_KEYS = ("name", "kind", "region")
REGION_FORMS = ("box", "cylinder", "sphere", "face", "point")


class _Parser:
    def __init__(self, source: str):
        self.source = source
        self.warnings: list[str] = []

    def fail(self, key: str, message: str):
        raise ProblemError(self.source, key, message)

    # generic readers
    def table(self, value, key: str, allowed: tuple[str, ...], required: bool = True) -> dict:
        if value is None:
            if required:
                self.fail(key, "missing table")
            return {}
        if not isinstance(value, dict):
            self.fail(key, f"expected a table, got {type(value).__name__}")
        for k in value:
            if k not in allowed:
                hint = difflib.get_close_matches(k, allowed, n=1)
                tip = f" (did you mean '{hint[0]}'?)" if hint else f" (valid keys: {', '.join(allowed)})"
                self.fail(f"{key}.{k}" if key else k, f"unknown key{tip}")
        return value

    def number(self, value, key: str, positive: bool = False, lo=None, hi=None) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"expected a number, got {value!r}")
        x = float(value)
        if not math.isfinite(x):
            self.fail(key, f"must be finite, got {value!r}")
        if positive and x <= 0:
            self.fail(key, f"must be positive, got {value!r}")
        if lo is not None and x < lo or hi is not None and x > hi:
            self.fail(key, f"must lie in [{lo}, {hi}], got {value!r}")
        return x

    def integer(self, value, key: str, minimum: int = 1) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            self.fail(key, f"expected a whole number, got {value!r}")
        if value < minimum:
            self.fail(key, f"must be at least {minimum}, got {value}")
        return int(value)

    def string(self, value, key: str, choices: tuple[str, ...] | None = None) -> str:
        if not isinstance(value, str):
            self.fail(key, f"expected a string, got {value!r}")
        if choices is not None and value not in choices:
            hint = difflib.get_close_matches(value, choices, n=1)
            tip = f"; did you mean '{hint[0]}'?" if hint else ""
            self.fail(key, f"must be one of {', '.join(repr(c) for c in choices)}, got {value!r}{tip}")
        return value

    def vector(self, value, key: str, dim: int) -> tuple[float, ...]:
        if not isinstance(value, list) or len(value) != dim:
            self.fail(key, f"expected a list of {dim} numbers, got {value!r}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))

    def array_of_tables(self, value, key: str) -> list:
        if value is None:
            return []
        if isinstance(value, dict):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            self.fail(key, f"expected [[{key}]] tables")
        return value

    # sections
    def problem(self, d: dict) -> Problem:
        self.table(d, "", TOP_KEYS)
        name = self.string(d.get("name", "problem"), "name")
        if not name or any(c in name for c in "/\\\0") or name in (".", ".."):
            self.fail("name", f"must be a plain folder name, got {name!r}")
        description = self.string(d.get("description", ""), "description")
        domain = self.domain(d.get("domain"))
        material = self.material(d.get("material"))
        opt = self.optimization(d.get("optimization"), domain)
        build = self.build(d.get("build"), domain.dim)
        supports = tuple(self.support(s, f"support[{i}]", domain.dim)
                         for i, s in enumerate(self.array_of_tables(d.get("support"), "support")))
        if not supports:
            self.fail("support", "at least one [[support]] is needed")
        loads = tuple(self.load_case(c, f"load_case[{i}]", domain.dim)
                      for i, c in enumerate(self.array_of_tables(d.get("load_case"), "load_case")))
        if not loads:
            self.fail("load_case", "at least one [[load_case]] is needed")
        self.unique([c.name for c in loads], "load_case")
        passives = tuple(self.passive(p, f"passive[{i}]", domain.dim)
                         for i, p in enumerate(self.array_of_tables(d.get("passive"), "passive")))
        return Problem(name, description, domain, material, opt, build, supports, loads,
                       passives, self.source, d, tuple(self.warnings))

    def unique(self, names: list[str], key: str) -> None:
        seen = set()
        for i, n in enumerate(names):
            if n in seen:
                self.fail(f"{key}[{i}].name", f"duplicate name {n!r}")
            seen.add(n)

    def domain(self, value) -> Domain:
        d = self.table(value, "domain", DOMAIN_KEYS)
        if "size" not in d:
            self.fail("domain.size", "missing: give [x, y] (2D) or [x, y, z] (3D) in mm")
        size = d["size"]
        if not isinstance(size, list) or len(size) not in (2, 3):
            self.fail("domain.size", f"expected 2 or 3 numbers (mm), got {size!r}")
        size = tuple(self.number(v, f"domain.size[{i}]", positive=True) for i, v in enumerate(size))
        if "element_size" not in d:
            self.fail("domain.element_size", "missing (mm)")
        h = self.number(d["element_size"], "domain.element_size", positive=True)
        shape = []
        for i, s in enumerate(size):
            n = s / h
            if abs(n - round(n)) > 1e-6 * max(1.0, n) or round(n) < 1:
                self.fail(f"domain.size[{i}]", f"{s} mm is not a whole number of {h} mm elements "
                          f"({n:.3f}); use {max(1, round(n)) * h:g} mm or another element_size")
            shape.append(int(round(n)))
        total = math.prod(shape)
        if total > MAX_ELEMENTS:
            self.fail("domain.element_size", f"{total:,} elements is more than topo handles "
                      f"({MAX_ELEMENTS:,}); use a coarser element_size")
        thickness = None
        if len(size) == 2:
            if "thickness" not in d:
                self.fail("domain.thickness", "missing: 2D problems are plane stress and need a thickness (mm)")
            thickness = self.number(d["thickness"], "domain.thickness", positive=True)
        elif "thickness" in d:
            self.fail("domain.thickness", "only 2D problems take a thickness")
        return Domain(size, h, thickness, tuple(shape))

    def material(self, value) -> Material:
        d = self.table(value, "material", MATERIAL_KEYS)
        base = None
        if "preset" in d:
            name = self.string(d["preset"], "material.preset")
            base = find_preset(name)
            if base is None:
                hint = difflib.get_close_matches(name, list(PRESETS), n=1)
                tip = f"; did you mean '{hint[0]}'?" if hint else ""
                self.fail("material.preset", f"unknown preset {name!r} (presets: {', '.join(PRESETS)}){tip}")
        fields = {}
        for key in ("youngs_modulus", "poissons_ratio", "density", "yield_strength"):
            if key in d:
                fields[key] = self.number(d[key], f"material.{key}", positive=key != "poissons_ratio")
            elif base is not None:
                fields[key] = getattr(base, key)
            elif key != "yield_strength":
                self.fail(f"material.{key}", "missing: give a preset or the value "
                          f"(presets: {', '.join(PRESETS)})")
            else:
                fields[key] = None
        if not -1.0 < fields["poissons_ratio"] < 0.5:
            self.fail("material.poissons_ratio", f"must lie in (-1, 0.5), got {fields['poissons_ratio']}")
        name = self.string(d.get("name", base.name if base else "custom"), "material.name")
        return Material(name, **fields)

    def optimization(self, value, domain: Domain) -> Optimization:
        d = self.table(value, "optimization", OPT_KEYS)
        has_vf, has_mass = "volume_fraction" in d, "mass_limit" in d
        if has_vf == has_mass:
            self.fail("optimization.volume_fraction", "give exactly one of volume_fraction (the share of "
                      "the design domain to fill, in (0, 1]) and mass_limit (kg)")
        vf = mass = None
        if has_vf:
            vf = self.number(d["volume_fraction"], "optimization.volume_fraction")
            if not 0.0 < vf <= 1.0:
                self.fail("optimization.volume_fraction", f"must lie in (0, 1], got {vf}")
        else:
            mass = self.number(d["mass_limit"], "optimization.mass_limit", positive=True)
        h = domain.element_size
        kw: dict[str, Any] = {"volume_fraction": vf, "mass_limit": mass}
        if "objective" in d:
            kw["objective"] = self.string(d["objective"], "optimization.objective", ("weighted", "worst_case"))
        num = lambda k, **a: self.number(d[k], f"optimization.{k}", **a)  # noqa: E731
        if "penalty" in d:
            kw["penalty"] = num("penalty", lo=1.0, hi=10.0)
        kw["filter_radius"] = num("filter_radius", positive=True) if "filter_radius" in d else 2.5 * h
        if kw["filter_radius"] < h:
            self.warnings.append(f"{self.source}: optimization.filter_radius: {kw['filter_radius']} mm is "
                                 f"below one element ({h} mm): the filter does nothing and the design "
                                 "may show checkerboards; use at least 1.5 elements")
        if "projection" in d:
            if not isinstance(d["projection"], bool):
                self.fail("optimization.projection", f"expected true or false, got {d['projection']!r}")
            kw["projection"] = d["projection"]
        if "projection_threshold" in d:
            kw["projection_threshold"] = num("projection_threshold", lo=0.01, hi=0.99)
        if "beta_max" in d:
            kw["beta_max"] = num("beta_max", lo=1.0, hi=1024.0)
        if "beta_interval" in d:
            kw["beta_interval"] = self.integer(d["beta_interval"], "optimization.beta_interval")
        if "optimizer" in d:
            kw["optimizer"] = self.string(d["optimizer"], "optimization.optimizer", ("oc", "mma", "gcmma"))
        if kw.get("objective") == "worst_case" and kw.get("optimizer", "oc") != "mma":
            self.fail("optimization.objective", "worst_case needs optimizer = \"mma\" (the bound "
                      "formulation has one constraint per load case)")
        if "move_limit" in d:
            kw["move_limit"] = num("move_limit", lo=0.001, hi=1.0)
        if "max_iterations" in d:
            kw["max_iterations"] = self.integer(d["max_iterations"], "optimization.max_iterations")
        if "tolerance" in d:
            kw["tolerance"] = num("tolerance", positive=True)
        if "min_stiffness" in d:
            kw["min_stiffness"] = num("min_stiffness", lo=1e-12, hi=0.1)
        if "stress_limit" in d:
            kw["stress_limit"] = num("stress_limit", positive=True)
            if kw.get("optimizer", "oc") == "oc":
                self.fail("optimization.stress_limit", "a stress constraint needs optimizer = \"mma\" "
                          "or \"gcmma\"")
        if "checkpoint_interval" in d:
            kw["checkpoint_interval"] = self.integer(d["checkpoint_interval"], "optimization.checkpoint_interval")
        if "solver" in d:
            kw["solver"] = self.string(d["solver"], "optimization.solver", ("auto", "direct", "iterative"))
        return Optimization(**kw)

    def build(self, value, dim: int) -> Build | None:
        if value is None:
            return None
        d = self.table(value, "build", BUILD_KEYS)
        choices = DIRECTIONS if dim == 3 else DIRECTIONS[:4]
        if "direction" not in d:
            self.fail("build.direction", f"missing: one of {', '.join(choices)}")
        direction = self.string(d["direction"], "build.direction", choices)
        angle = self.number(d.get("overhang_angle", 45.0), "build.overhang_angle")
        if angle != 45.0:
            self.fail("build.overhang_angle", f"only 45 degrees is supported (the self-supporting limit "
                      f"on a square/cubic grid), got {angle}")
        enforce = d.get("overhang_filter", True)
        if not isinstance(enforce, bool):
            self.fail("build.overhang_filter", f"expected true or false, got {enforce!r}")
        return Build(direction, angle, enforce)

    def region(self, value, key: str, dim: int) -> Region:
        if not isinstance(value, dict) or len(value) != 1:
            self.fail(key, f"expected one of {{{', '.join(f'{f} = …' for f in REGION_FORMS)}}}")
        (form, spec), = value.items()
        self.table({form: spec}, key, REGION_FORMS)
        k = f"{key}.{form}"
        if form == "box":
            self.table(spec, k, ("min", "max"))
            for end in ("min", "max"):
                if end not in spec:
                    self.fail(f"{k}.{end}", "missing corner")
            lo, hi = self.vector(spec["min"], f"{k}.min", dim), self.vector(spec["max"], f"{k}.max", dim)
            for i in range(dim):
                if lo[i] > hi[i]:
                    self.fail(f"{k}.min[{i}]", f"min {lo[i]} is above max {hi[i]}")
            return Box(lo, hi)
        if form == "cylinder":
            self.table(spec, k, ("center", "axis", "radius", "length"))
            for part in ("center", "radius") + (("axis", "length") if dim == 3 else ()):
                if part not in spec:
                    self.fail(f"{k}.{part}", "missing")
            center = self.vector(spec["center"], f"{k}.center", dim)
            axis = self.string(spec.get("axis", "z"), f"{k}.axis", AXES[:dim] if dim == 3 else ("z",))
            radius = self.number(spec["radius"], f"{k}.radius", positive=True)
            length = self.number(spec.get("length", math.inf), f"{k}.length", positive=True) \
                if dim == 3 else math.inf
            return Cylinder(center, axis, radius, length)
        if form == "sphere":
            self.table(spec, k, ("center", "radius"))
            if "center" not in spec or "radius" not in spec:
                self.fail(k, "needs center and radius")
            return Sphere(self.vector(spec["center"], f"{k}.center", dim),
                          self.number(spec["radius"], f"{k}.radius", positive=True))
        if form == "face":
            return Face(self.string(spec, k, FACES[: 2 * dim]))
        return Point(self.vector(spec, k, dim))

    def support(self, d: dict, key: str, dim: int) -> Support:
        self.table(d, key, SUPPORT_KEYS)
        if "region" not in d:
            self.fail(f"{key}.region", "missing")
        fix = d.get("fix", list(AXES[:dim]))
        if not isinstance(fix, list) or not fix:
            self.fail(f"{key}.fix", f"expected a list of axes from {list(AXES[:dim])}")
        fix = tuple(self.string(a, f"{key}.fix[{i}]", AXES[:dim]) for i, a in enumerate(fix))
        name = self.string(d.get("name", key), f"{key}.name")
        return Support(name, self.region(d["region"], f"{key}.region", dim), tuple(dict.fromkeys(fix)))

    def load_case(self, d: dict, key: str, dim: int) -> LoadCase:
        self.table(d, key, LOAD_KEYS)
        name = self.string(d.get("name", key), f"{key}.name")
        weight = self.number(d.get("weight", 1.0), f"{key}.weight", positive=True)
        forces = []
        for i, f in enumerate(self.array_of_tables(d.get("force"), f"{key}.force")):
            fk = f"{key}.force[{i}]"
            self.table(f, fk, FORCE_KEYS)
            if "region" not in f or "total" not in f:
                self.fail(fk, "needs region and total (N)")
            forces.append(Force(self.region(f["region"], f"{fk}.region", dim),
                                self.vector(f["total"], f"{fk}.total", dim)))
        if not forces:
            self.fail(f"{key}.force", "a load case needs at least one [[load_case.force]]")
        if all(not any(f.total) for f in forces):
            self.fail(f"{key}.force", "the load case has zero total force")
        return LoadCase(name, weight, tuple(forces))

    def passive(self, d: dict, key: str, dim: int) -> Passive:
        self.table(d, key, PASSIVE_KEYS)
        if "region" not in d or "kind" not in d:
            self.fail(key, "needs kind ('solid' or 'void') and region")
        kind = self.string(d["kind"], f"{key}.kind", ("solid", "void"))
        name = self.string(d.get("name", key), f"{key}.name")
        return Passive(name, kind, self.region(d["region"], f"{key}.region", dim))
