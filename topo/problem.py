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
import dataclasses
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import tomllib

from .conditions import ConditionError, basquin_from_points, condition_of, condition_yields
from .cost import CostRates
from .materials import Material, find_preset
from .robust import LengthScale, LengthScaleError, length_scale
from .schema import SECTIONS, Reader

MAX_ELEMENTS = 20_000_000  # far above what fits in memory on a workstation
# common practice puts the filter radius at 1.5–4 elements; each filter pass costs
# (2R/h)^dim operations per element, so far beyond that a run is impractically slow
MAX_FILTER_ELEMENTS = 25


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


@dataclass(frozen=True)
class Mesh:
    path: str  # a closed surface file, resolved against the problem file's folder


Region = Box | Cylinder | Sphere | Face | Point | Mesh


@dataclass(frozen=True)
class Domain:
    size: tuple[float, ...]
    element_size: float
    thickness: float | None
    shape: tuple[int, ...]
    envelope: str | None = None  # closed surface; elements outside it are void

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
    filter_radius: float = 0.0  # mm; a file without one gets 2.5 × element_size (see schema.py)
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
    fatigue_life: float | None = None  # cycles; a stress bound per load case with cycles
    symmetry: tuple[SymmetryPlane, ...] = ()  # mirror planes enforced on the design
    enforce_length_scale: bool = False  # robust formulation holding checks.min_wall / min_gap


@dataclass(frozen=True)
class SymmetryPlane:
    axis: str  # the plane's normal
    at: float  # mm along it: an element boundary or centre


@dataclass(frozen=True)
class Build:
    direction: str
    overhang_angle: float = 45.0
    overhang_filter: bool = True  # false: report printability, do not enforce it
    # weight steering the design to support passive solids: 1 left two elements of the
    # 3D demo's pin boss unsupported, 4 supports every interface of both demos
    interface_support: float = 4.0
    no_enclosed_cavities: bool = False  # virtual temperature constraint (cavities.py)
    cavity_bound: float = 20.0  # on P(ρ)/P(every design element empty)


@dataclass(frozen=True)
class Support:
    name: str
    region: Region
    fix: tuple[str, ...]


@dataclass(frozen=True)
class Force:
    region: Region
    total: tuple[float, ...]  # N, the resultant, shared evenly by the selected nodes
    at: tuple[float, ...] | None = None  # mm, point of application (None: the centroid)
    moment: tuple[float, ...] | None = None  # N·mm about `at`; 2D: (Mz,)


@dataclass(frozen=True)
class LoadCase:
    name: str
    weight: float
    forces: tuple[Force, ...]
    cycles: float | None = None  # design life; None: no fatigue figures
    load_ratio: float = -1.0  # R = σmin/σmax; -1 fully reversed
    cycles_with: str | None = None  # the case at the cycle's other end, in place of R


@dataclass(frozen=True)
class Passive:
    name: str
    kind: str  # "solid" | "void"
    region: Region


@dataclass(frozen=True)
class DeflectionPoint:
    name: str
    region: Region
    direction: str  # "+x" … "-z"
    load_case: str | None  # None: every load case
    limit: float | None  # mm, on |deflection|


@dataclass(frozen=True)
class Checks:
    """Thresholds of the PASS/FAIL checks on the printed part."""

    safety_factor: float = 1.0
    fatigue_safety_factor: float = 1.0
    compliance_gap: float = 0.05
    unsupported_fraction: float = 0.0
    min_wall: float | None = None  # mm
    min_gap: float | None = None  # mm


@dataclass(frozen=True)
class Report:
    """What is reported after a run."""

    verify: bool = False  # body-fitted verification of the printed part


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
    deflections: tuple[DeflectionPoint, ...] = ()
    checks: Checks = Checks()
    cost: CostRates = CostRates()
    report: Report = Report()
    length_scale: LengthScale | None = None  # enforced wall and gap (robust.py)

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
    except UnicodeDecodeError as exc:
        raise ProblemError(
            source,
            "",
            f"not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at offset {exc.start}): "
            "a problem file is TOML text; is this the right file?",
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProblemError(source, "", f"TOML syntax error: {exc}") from None
    data.setdefault("name", path.stem)
    return problem_from_dict(data, overrides, source=source)


def problem_from_dict(
    data: dict, overrides: dict[str, Any] | None = None, source: str = "<dict>"
) -> Problem:
    """Validate an already-parsed problem dictionary (the TOML tables)."""
    if not isinstance(data, dict):
        raise ProblemError(source, "", "a problem must be a table of keys")
    data = copy.deepcopy(data)
    for key, value in (overrides or {}).items():
        apply_override(data, key, value, source)
    return _Parser(source).problem(data)


def field_name(name: str) -> str:
    """A name as it appears in output field and column names (fields.vtu)."""
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in name)


def parse_override(text: str) -> tuple[str, Any]:
    """'a.b=VALUE' from the command line → (key, value); VALUE is read as TOML."""
    if "=" not in text:
        raise ProblemError(
            "--set", text, "expected KEY=VALUE, e.g. optimization.volume_fraction=0.25"
        )
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
                raise ProblemError(
                    source, where, f"no entry '{part}' (give an index 0..{len(node) - 1} or a name)"
                )
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


class _Parser(Reader):
    """The sections of a problem file: the declared keys come from schema.SCHEMA;
    here are the rules that tie keys together and the building of the dataclasses."""

    def __init__(self, source: str):
        self.source = source
        self.warnings: list[str] = []

    def fail(self, key: str, message: str):
        raise ProblemError(self.source, key, message)

    def problem(self, d: dict) -> Problem:
        top = self.read("", d, "", {})
        domain = self.domain(top["domain"])
        material = self.material(top["material"])
        opt = self.optimization(top["optimization"], domain)
        dim = domain.dim
        build = self.build(top["build"], dim)
        self.cavity_rules(build, opt, dim)
        if build and build.overhang_filter and build.direction[1] in [p.axis for p in opt.symmetry]:
            self.fail(
                "optimization.symmetry",
                f"a mirror plane normal to {build.direction[1]} cannot hold with the overhang "
                f"rule of build direction {build.direction}: the layers grow one way along "
                "that axis",
            )
        for i, plane in enumerate(opt.symmetry if build and build.overhang_filter else ()):
            centre = domain.size["xyz".index(plane.axis)] / 2
            if abs(plane.at - centre) > 1e-9 * centre:
                self.fail(
                    f"optimization.symmetry[{i}].at",
                    f"a plane off the domain centre ({plane.axis} = {plane.at:g} mm) cannot "
                    "hold with the overhang rule: the layers' support stops at the domain "
                    f"edge, which has no mirror image about it; put it at {centre:g} mm or "
                    "set build.overhang_filter = false",
                )
        supports = tuple(
            self.support(s, f"support[{i}]", dim) for i, s in enumerate(top["support"])
        )
        loads = tuple(
            self.load_case(c, f"load_case[{i}]", dim) for i, c in enumerate(top["load_case"])
        )
        self.unique([s.name for s in supports], "support")
        self.unique([c.name for c in loads], "load_case")
        self.unique([c.name for c in loads], "load_case", field_name, "as field names")
        for i, c in enumerate(loads):
            self.cycle_pair(c, f"load_case[{i}]", top["load_case"][i], [x.name for x in loads])
        if any(c.cycles is not None for c in loads):
            try:
                condition_of(material)
            except ConditionError as exc:
                self.fail(exc.key, exc.message)
        self.fatigue_life(opt, loads)
        passives = tuple(
            self.passive(p, f"passive[{i}]", dim) for i, p in enumerate(top["passive"])
        )
        self.unique([p.name for p in passives], "passive")
        names = [c.name for c in loads]
        deflections = tuple(
            self.deflection(p, f"deflection[{i}]", dim, names, opt.optimizer)
            for i, p in enumerate(top["deflection"])
        )
        self.unique([p.name for p in deflections], "deflection")
        checks = Checks(**self.read("checks", top["checks"] or {}, "checks", {}))
        scale = self.length_scale(opt, checks, domain, top["optimization"])
        if scale is not None:
            opt = dataclasses.replace(opt, filter_radius=scale.filter_radius)
        cost = CostRates(**self.read("cost", top["cost"] or {}, "cost", {"dim": 2}))
        report = Report(**self.read("report", top["report"] or {}, "report", {"dim": dim}))
        return Problem(
            top["name"],
            top["description"],
            domain,
            material,
            opt,
            build,
            supports,
            loads,
            passives,
            self.source,
            d,
            tuple(self.warnings),
            deflections,
            checks,
            cost,
            report,
            scale,
        )

    def fatigue_life(self, opt: Optimization, loads: tuple[LoadCase, ...]) -> None:
        """optimization.fatigue_life bounds the stress of the cases with cycles: it
        needs one, and a constraint-taking optimizer. A loop life below a case's own
        design life is allowed (the check on the printed part still asks for the
        case's cycles) but said."""
        if opt.fatigue_life is None:
            return
        key = "optimization.fatigue_life"
        if opt.optimizer == "oc":
            self.fail(key, 'a fatigue stress bound needs optimizer = "mma" or "gcmma"')
        if not any(c.cycles is not None for c in loads):
            self.fail(
                key,
                "no load case gives cycles: the bound applies to the cases with "
                "load_case.cycles (and their load_ratio)",
            )
        for c in loads:
            if c.cycles is not None and c.cycles > opt.fatigue_life:
                self.warnings.append(
                    f"{self.source}: {key}: {opt.fatigue_life:g} cycles is below load case "
                    f"{c.name!r}'s design life ({c.cycles:g}): the loop designs for fewer "
                    "cycles than its fatigue check asks"
                )

    def length_scale(
        self, opt: Optimization, checks: Checks, domain: Domain, given: dict
    ) -> LengthScale | None:
        """The robust formulation's settings, when the length scale is enforced."""
        if not opt.enforce_length_scale:
            return None
        if not opt.projection or opt.projection_threshold != 0.5:
            self.fail(
                "optimization.enforce_length_scale",
                "needs projection = true with projection_threshold = 0.5 (the intermediate "
                "design, the one printed, is thresholded at 0.5)",
            )
        radius = given.get("filter_radius") if isinstance(given, dict) else None
        try:
            return length_scale(
                checks.min_wall,
                checks.min_gap,
                domain.element_size,
                domain.dim,
                None if radius is None else opt.filter_radius,
            )
        except LengthScaleError as exc:
            self.fail(exc.key, exc.message)

    def unique(self, names: list[str], key: str, form=None, how: str = "") -> None:
        """Refuse two entries with one name (or one `form(name)`, said `how`)."""
        seen = {}
        for i, n in enumerate(names):
            k = form(n) if form else n
            if k in seen:
                other = f" (as {seen[k]!r} {how}: {k!r})" if how else ""
                self.fail(f"{key}[{i}].name", f"duplicate name {n!r}{other}")
            seen[k] = n

    def domain(self, value) -> Domain:
        ctx = self.envelope_size(value)
        dim = len(self.read("domain", value, "domain", ctx, ("size",))["size"])
        got = self.read("domain", value, "domain", {**ctx, "dim": dim})
        if got["envelope"] is not None:
            got["envelope"] = self.mesh(got["envelope"], "domain.envelope").path
        size, h = got["size"], got["element_size"]
        shape = []
        for i, s in enumerate(size):
            n = s / h
            if not math.isfinite(n) or n > MAX_ELEMENTS:
                self.fail(
                    "domain.element_size",
                    f"{h:g} mm makes {n:g} elements along axis {i}, more than topo handles "
                    f"({MAX_ELEMENTS:,}); use a coarser element_size",
                )
            if abs(n - round(n)) > 1e-6 * max(1.0, n) or round(n) < 1:
                self.fail(
                    f"domain.size[{i}]",
                    f"{s} mm is not a whole number of {h} mm elements "
                    f"({n:.3f}); use {max(1, round(n)) * h:g} mm or another element_size",
                )
            shape.append(int(round(n)))
        total = math.prod(shape)
        if total > MAX_ELEMENTS:
            self.fail(
                "domain.element_size",
                f"{total:,} elements is more than topo handles "
                f"({MAX_ELEMENTS:,}); use a coarser element_size",
            )
        return Domain(size, h, got["thickness"], tuple(shape), got["envelope"])

    def envelope_size(self, value) -> dict:
        """{"envelope_size": the envelope's bounding box from the origin in whole
        elements} when the domain has an envelope, else {}."""
        if not isinstance(value, dict) or value.get("envelope") is None:
            return {}
        got = self.read("domain", value, "domain", {"dim": 3}, ("envelope", "element_size"))
        from .surfaces import load_surface

        mesh = self.mesh(got["envelope"], "domain.envelope")
        vertices, _ = load_surface(mesh.path)
        lo, hi = vertices.min(axis=0), vertices.max(axis=0)
        h = got["element_size"]
        for i, axis in enumerate("xyz"):
            if lo[i] < -1e-9 * max(1.0, hi[i] - lo[i]):
                self.fail(
                    "domain.envelope",
                    f"the envelope reaches below the origin along {axis} (to {lo[i]:g} mm); "
                    "the domain is a box from the origin: move the envelope to x, y, z ≥ 0",
                )
        return {"envelope_size": tuple(math.ceil(x / h - 1e-9) * h for x in hi)}

    def material(self, value) -> Material:
        got = self.read("material", value, "material", {})
        preset = got.pop("preset")  # its values are the defaults of the others
        mat = Material(**got, preset=find_preset(preset).name if preset else None)
        if mat.sn_points is not None:
            for k in ("fatigue_strength_coefficient", "fatigue_strength_exponent"):
                if getattr(mat, k) is not None:
                    self.fail(
                        "material.sn_points",
                        f"give either sn_points or the Basquin parameters, not both "
                        f"(material.{k} is given too)",
                    )
            try:
                basquin_from_points(mat.sn_points)
            except ConditionError as exc:
                self.fail(exc.key, exc.message)
        yields = condition_yields(mat)
        if yields is None:
            return mat
        if "yield_strength" in value:  # the file's value stands in every direction
            yields = (mat.yield_strength, mat.yield_strength)
        known = [v for v in yields if v]
        return replace(
            mat,
            yield_strength=min(known) if known else mat.yield_strength,
            yield_parallel=yields[0],
            yield_perpendicular=yields[1],
        )

    def optimization(self, value, domain: Domain) -> Optimization:
        got = self.read(
            "optimization", value, "optimization", {"element_size": domain.element_size}
        )
        if (got["volume_fraction"] is None) == (got["mass_limit"] is None):
            self.fail(
                "optimization.volume_fraction",
                "give exactly one of volume_fraction (the share of "
                "the design domain to fill, in (0, 1]) and mass_limit (kg)",
            )
        if got["objective"] == "worst_case" and got["optimizer"] != "mma":
            self.fail(
                "optimization.objective",
                'worst_case needs optimizer = "mma" (the bound '
                "formulation has one constraint per load case)",
            )
        if got["stress_limit"] is not None and got["optimizer"] == "oc":
            self.fail(
                "optimization.stress_limit",
                'a stress constraint needs optimizer = "mma" or "gcmma"',
            )
        h, radius = domain.element_size, got["filter_radius"]
        if radius > max(domain.size) or radius > MAX_FILTER_ELEMENTS * h:
            self.fail(
                "optimization.filter_radius",
                f"{radius:g} mm is {radius / h:.3g} elements; at most the domain's longest "
                f"side ({max(domain.size):g} mm) and {MAX_FILTER_ELEMENTS} elements "
                f"({MAX_FILTER_ELEMENTS * h:g} mm): a wider filter blurs the design into grey "
                "and each pass costs (2R/h)^dim per element (common practice: 1.5–4 elements)",
            )
        if radius < h:
            self.warnings.append(
                f"{self.source}: optimization.filter_radius: {radius} mm is below one "
                f"element ({h} mm): the filter does nothing and the design may show "
                "checkerboards; use at least 1.5 elements"
            )
        got["symmetry"] = self.symmetry_planes(got["symmetry"], domain)
        return Optimization(**got)

    def symmetry_planes(self, planes: tuple, domain: Domain) -> tuple[SymmetryPlane, ...]:
        """Each plane at its coordinate (the centre when none is given), on an element
        boundary or centre, one per axis."""
        h, out = domain.element_size, []
        for i, (axis, at) in enumerate(planes):
            size = domain.size["xyz".index(axis)]
            key = f"optimization.symmetry[{i}]"
            if any(p.axis == axis for p in out):
                self.fail(key, f"a second plane normal to {axis}: give one plane per axis")
            if at is None:
                out.append(SymmetryPlane(axis, size / 2))
                continue
            if not 0 < at < size:
                self.fail(f"{key}.at", f"{at:g} mm is outside the domain (0 to {size:g} mm)")
            halves = 2 * at / h
            if abs(halves - round(halves)) > 1e-6 * max(1.0, halves):
                below = math.floor(halves) * h / 2
                self.fail(
                    f"{key}.at",
                    f"{at:g} mm is neither an element boundary nor an element centre "
                    f"({h:g} mm elements): the nearest allowed are {below:g} and "
                    f"{below + h / 2:g} mm",
                )
            out.append(SymmetryPlane(axis, round(halves) * h / 2))
        return tuple(out)

    def build(self, value, dim: int) -> Build | None:
        if value is None:
            return None
        got = self.read("build", value, "build", {"dim": dim})
        return Build(**got)

    def cavity_rules(self, build: Build | None, opt: Optimization, dim: int) -> None:
        if build is None or not build.no_enclosed_cavities:
            return
        if dim == 2:
            self.fail(
                "build.no_enclosed_cavities",
                "a 2D design is a section extruded through the thickness: every hole "
                "is open at both ends and holds no powder; the constraint is for 3D problems",
            )
        if opt.optimizer == "oc":
            self.fail(
                "build.no_enclosed_cavities",
                'the cavity constraint needs optimizer = "mma" or "gcmma" (OC handles '
                "the material budget only)",
            )

    def region(self, value, key: str, dim: int) -> Region:
        if not isinstance(value, dict) or len(value) != 1:
            forms = SECTIONS["region"].names
            self.fail(key, f"expected one of {{{', '.join(f'{f} = …' for f in forms)}}}")
        form = next(iter(value))
        spec = self.read("region", value, key, {"dim": dim}, (form,))[form]
        if spec is None:  # `box = null` from JSON or Python
            self.fail(f"{key}.{form}", "missing")
        if form == "mesh":
            return self.mesh(spec, f"{key}.mesh")
        if form in ("face", "point"):
            return Face(spec) if form == "face" else Point(spec)
        if form == "cylinder" and dim == 2:
            spec = {n: v for n, v in spec.items() if n != "length"}  # a 2D cylinder is a circle
        k = f"{key}.{form}"
        got = self.read(f"region.{form}", spec, k, {"dim": dim})
        if form == "box":
            for i in range(dim):
                if got["min"][i] > got["max"][i]:
                    self.fail(f"{k}.min[{i}]", f"min {got['min'][i]} is above max {got['max'][i]}")
            return Box(**got)
        return Cylinder(**got) if form == "cylinder" else Sphere(**got)

    def mesh(self, name: str, key: str) -> Mesh:
        from .surfaces import SurfaceError, load_surface

        folder = Path(self.source).parent if not self.source.startswith("<") else Path.cwd()
        path = folder / name
        try:
            load_surface(str(path))  # read and checked once here; cached for the regions
        except SurfaceError as exc:
            self.fail(key, str(exc))
        return Mesh(str(path))

    def support(self, d: dict, key: str, dim: int) -> Support:
        got = self.read("support", d, key, {"dim": dim})
        return Support(got["name"], self.region(got["region"], f"{key}.region", dim), got["fix"])

    def load_case(self, d: dict, key: str, dim: int) -> LoadCase:
        got = self.read("load_case", d, key, {"dim": dim})
        forces = []
        for i, f in enumerate(got["force"]):
            fk = f"{key}.force[{i}]"
            force = self.read("load_case.force", f, fk, {"dim": dim})
            region = self.region(force["region"], f"{fk}.region", dim)
            forces.append(Force(region, force["total"], force["at"], force["moment"]))
        if all(not any(f.total) and not any(f.moment or ()) for f in forces):
            self.fail(f"{key}.force", "the load case has zero total force and moment")
        return LoadCase(
            got["name"],
            got["weight"],
            tuple(forces),
            got["cycles"],
            got["load_ratio"],
            got["cycles_with"],
        )

    def cycle_pair(self, case: LoadCase, key: str, raw: dict, names: list[str]) -> None:
        """A case whose cycle runs to another case: that case exists, is another one,
        and the cycle has a life but no load ratio."""
        other = case.cycles_with
        if other is None:
            return
        where = f"{key}.cycles_with"
        if other not in names:
            self.fail(where, f"no load case {other!r} (load cases: {', '.join(names)})")
        if other == case.name:
            self.fail(where, "names the load case itself: a cycle needs two different cases")
        if case.cycles is None:
            self.fail(f"{key}.cycles", "missing: a cycle between two load cases needs its life")
        if "load_ratio" in raw:
            self.fail(
                f"{key}.load_ratio",
                "give either load_ratio or cycles_with: the two load cases set the cycle",
            )

    def deflection(
        self, d: dict, key: str, dim: int, cases: list[str], optimizer: str
    ) -> DeflectionPoint:
        got = self.read("deflection", d, key, {"dim": dim})
        if got["load_case"] is not None and got["load_case"] not in cases:
            self.fail(
                f"{key}.load_case",
                f"no load case {got['load_case']!r} (load cases: {', '.join(cases)})",
            )
        if got["limit"] is not None and optimizer == "oc":
            self.warnings.append(
                f'{self.source}: {key}.limit: with optimizer = "oc" a deflection limit is '
                'checked on the printed part but not enforced; use "mma" to constrain it'
            )
        region = self.region(got["region"], f"{key}.region", dim)
        return DeflectionPoint(
            got["name"], region, got["direction"], got["load_case"], got["limit"]
        )

    def passive(self, d: dict, key: str, dim: int) -> Passive:
        got = self.read("passive", d, key, {"dim": dim})
        return Passive(got["name"], got["kind"], self.region(got["region"], f"{key}.region", dim))
