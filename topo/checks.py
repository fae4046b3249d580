"""PASS/FAIL checks that say whether a printed design may be handed on.

Each check reads figures of the printed part (see printed.py) and returns one row:
name, status ("PASS", "FAIL" or "N/A" when the problem gives nothing to check
against), the value, the limit and a sentence that says what was checked. The
rows go into summary.json, the console and sweep.csv; `topo run --strict` exits 3
when any row fails, and a sweep keeps failing designs off its trade-off front.
"""

from __future__ import annotations

from dataclasses import dataclass, field

PASS, FAIL, NA = "PASS", "FAIL", "N/A"
CORRECTION_NAMES = {"goodman": "Goodman", "gerber": "Gerber", "swt": "Smith-Watson-Topper"}


@dataclass
class SignOffFigures:
    """What the checks read, gathered by report.py."""

    load_path_connected: bool
    cut_off_loads: list[str]
    loose_pieces: int
    interfaces: list[dict]  # {name, solid_share (optimiser's design), downfacing_area_mm2}
    compliance_gaps: dict[str, float | None]  # load case → (printed − grey)/grey
    safety_factor: float | None  # printed part, governing load case
    required_safety_factor: float
    max_von_mises_MPa: float | None
    stress_limit_MPa: float | None
    mass_kg: float
    mass_limit_kg: float | None
    deflections: list[dict]  # {name, load_case, value_mm, limit_mm}
    unsupported_fraction: float | None  # None without a build direction
    unsupported_limit: float
    cavities: list[dict] = field(default_factory=list)
    compliance_gap_limit: float = 0.05
    min_wall_mm: float | None = None  # realised in the printed part
    min_gap_mm: float | None = None
    wall_limit: float | None = None  # the machine's rule
    gap_limit: float | None = None
    element_size: float = 1.0
    fatigue_safety_factor: float | None = None  # None: no load case gives cycles
    required_fatigue_safety_factor: float = 1.0
    fatigue_damage: float | None = None  # Miner's sum at the worst element
    fatigue_cycles: bool = False  # some load case gives a design life
    fatigue_correction: str = "goodman"  # the mean-stress correction's name
    yield_basis: str = ""  # which yield strength the safety factor used
    # why the printed part has no analysis (a mechanism, printed.py); None: analysed
    not_analysed: str | None = None
    unattached_loads: list[str] = field(default_factory=list)  # loaded nodes on no element


def _unanalysed(name: str, f: SignOffFigures, limit) -> dict | None:
    """The FAIL row of a check that needs the printed part's analysis when there
    is none: the figure it would judge does not exist, so the design may not be
    handed on on its strength."""
    if f.not_analysed is None:
        return None
    return _row(name, False, None, limit, f"printed part {f.not_analysed}")


def _row(name: str, ok: bool | None, value, limit, detail: str) -> dict:
    status = NA if ok is None else PASS if ok else FAIL
    return {"name": name, "status": status, "value": value, "limit": limit, "detail": detail}


def load_path(f: SignOffFigures) -> dict:
    if f.load_path_connected:
        return _row(
            "load_path",
            True,
            0,
            0,
            "every load region joins a support through printed "
            "elements (face-connected), every loaded node is on a printed element, and no "
            "piece is loose",
        )
    parts = []
    if f.cut_off_loads:
        parts.append(f"load region(s) {', '.join(f.cut_off_loads)} reach no support")
    if f.unattached_loads:
        parts.append(
            f"load region(s) {', '.join(f.unattached_loads)} have loaded nodes on no printed "
            "element (that share of the load acts on the void)"
        )
    if f.loose_pieces:
        parts.append(f"{f.loose_pieces} printed piece(s) touch no support")
    count = len(f.cut_off_loads) + len(f.unattached_loads) + f.loose_pieces
    return _row("load_path", False, count, 0, "; ".join(parts))


def interfaces_whole(f: SignOffFigures) -> dict:
    if not f.interfaces:
        return _row("interfaces_whole", None, None, None, "no passive solid regions")
    short = [i for i in f.interfaces if i["solid_share"] < 1.0]
    worst = min(i["solid_share"] for i in f.interfaces)
    if not short:
        return _row(
            "interfaces_whole",
            True,
            worst,
            1.0,
            "every passive solid region is solid in the optimiser's design as in the printed part",
        )
    names = ", ".join(f"{i['name']} ({100 * i['solid_share']:.1f} %)" for i in short)
    return _row(
        "interfaces_whole",
        False,
        worst,
        1.0,
        f"the optimiser's design leaves part of {names} "
        "below ρ = 0.5; the printed part has them whole, so its figures differ from the "
        "optimiser's and those regions may need support",
    )


def compliance_gap(f: SignOffFigures) -> dict:
    if row := _unanalysed("compliance_gap", f, f.compliance_gap_limit):
        return row
    gaps = {k: v for k, v in f.compliance_gaps.items() if v is not None}
    if not gaps:
        return _row(
            "compliance_gap",
            False,
            None,
            f.compliance_gap_limit,
            "no finite compliance of the printed part",
        )
    case, worst = max(gaps.items(), key=lambda kv: abs(kv[1]))
    ok = abs(worst) <= f.compliance_gap_limit
    return _row(
        "compliance_gap",
        ok,
        worst,
        f.compliance_gap_limit,
        f"largest relative difference of printed and optimiser compliance: {100 * worst:+.2f} % "
        f"(load case {case})",
    )


def safety_factor(f: SignOffFigures) -> dict:
    if row := _unanalysed("safety_factor", f, f.required_safety_factor):
        return row
    if f.safety_factor is None:
        return _row(
            "safety_factor",
            None,
            None,
            f.required_safety_factor,
            "no yield strength given, or no printed material",
        )
    ok = f.safety_factor >= f.required_safety_factor
    return _row(
        "safety_factor",
        ok,
        f.safety_factor,
        f.required_safety_factor,
        "yield strength over the peak von Mises stress of the printed part at element "
        "centres; weak at holes, fillets, supports and point loads, where the grid's stepped "
        "surface under- or over-states the peak: verify with a body-fitted analysis"
        + (f"; yield: {f.yield_basis}" if f.yield_basis else ""),
    )


def fatigue_safety_factor(f: SignOffFigures) -> dict:
    if not f.fatigue_cycles:
        return _row(
            "fatigue_safety_factor",
            None,
            None,
            f.required_fatigue_safety_factor,
            "no load case gives cycles",
        )
    if row := _unanalysed("fatigue_safety_factor", f, f.required_fatigue_safety_factor):
        return row
    value = f.fatigue_safety_factor  # None: no stress at all, unbounded
    ok = value is None or value >= f.required_fatigue_safety_factor
    return _row(
        "fatigue_safety_factor",
        ok,
        value,
        f.required_fatigue_safety_factor,
        f"{CORRECTION_NAMES.get(f.fatigue_correction, f.fatigue_correction)} safety factor "
        "on stress amplitude at the design life, least over the "
        "printed elements and load cases; indicative (defects and surface govern printed-"
        "metal fatigue)",
    )


def fatigue_damage(f: SignOffFigures) -> dict:
    if f.fatigue_cycles and (row := _unanalysed("fatigue_damage", f, 1.0)):
        return row
    if not f.fatigue_cycles or f.fatigue_damage is None:
        return _row("fatigue_damage", None, None, 1.0, "no load case gives cycles")
    return _row(
        "fatigue_damage",
        f.fatigue_damage < 1.0,
        f.fatigue_damage,
        1.0,
        "Miner's damage sum of the load cases' design lives at the worst printed element",
    )


def stress_limit(f: SignOffFigures) -> dict:
    if f.stress_limit_MPa is None:
        return _row("stress_limit", None, None, None, "no stress_limit given")
    if row := _unanalysed("stress_limit", f, f.stress_limit_MPa):
        return row
    value = f.max_von_mises_MPa
    ok = value is not None and value <= f.stress_limit_MPa
    return _row(
        "stress_limit",
        ok,
        value,
        f.stress_limit_MPa,
        "peak von Mises stress of the printed part against optimization.stress_limit",
    )


def mass_limit(f: SignOffFigures) -> dict:
    if f.mass_limit_kg is None:
        return _row("mass_limit", None, f.mass_kg, None, "no mass_limit given")
    return _row(
        "mass_limit",
        f.mass_kg <= f.mass_limit_kg * (1 + 1e-9),
        f.mass_kg,
        f.mass_limit_kg,
        "mass of the printed part against optimization.mass_limit",
    )


def deflection_limits(f: SignOffFigures) -> dict:
    limited = [d for d in f.deflections if d["limit_mm"] is not None]
    if not limited:
        return _row("deflection_limits", None, None, None, "no deflection limits given")
    if row := _unanalysed("deflection_limits", f, min(d["limit_mm"] for d in limited)):
        return row
    ratios = [(abs(d["value_mm"]) / d["limit_mm"], d) for d in limited]
    ratio, worst = max(ratios, key=lambda r: r[0])
    return _row(
        "deflection_limits",
        ratio <= 1.0 + 1e-9,
        worst["value_mm"],
        worst["limit_mm"],
        f"governing: {worst['name']} in load case {worst['load_case']}, "
        f"{100 * ratio:.1f} % of its limit (printed part)",
    )


def unsupported(f: SignOffFigures) -> dict:
    if f.unsupported_fraction is None:
        return _row("unsupported_fraction", None, None, None, "no build direction given")
    ok = f.unsupported_fraction <= f.unsupported_limit + 1e-12
    return _row(
        "unsupported_fraction",
        ok,
        f.unsupported_fraction,
        f.unsupported_limit,
        "share of printed elements the overhang rule of build.overhang_angle leaves "
        "without support below (they need support structures)",
    )


def no_cavities(f: SignOffFigures) -> dict:
    if not f.cavities:
        return _row("enclosed_cavities", True, 0, 0, "no enclosed void: all powder can be removed")
    total = sum(c["volume_mm3"] for c in f.cavities)
    return _row(
        "enclosed_cavities",
        False,
        len(f.cavities),
        0,
        f"{len(f.cavities)} enclosed void(s), {total:.4g} mm³ of powder that cannot be "
        f"removed; first at {[round(v, 1) for v in f.cavities[0]['centre_mm']]} mm",
    )


def _width(name: str, value, limit, h: float, what: str) -> dict:
    if limit is None:
        return _row(name, None, value, None, f"no {name} given (realised {what}: {value} mm)")
    if value is None:
        return _row(name, True, None, limit, f"no {what} in the printed part")
    detail = f"narrowest {what} of the printed part, in whole elements of {h:g} mm"
    if limit < h:
        detail += f"; the grid cannot resolve {limit:g} mm, a finer element_size can"
    return _row(name, value >= limit - 1e-9, value, limit, detail)


def min_wall(f: SignOffFigures) -> dict:
    return _width("min_wall", f.min_wall_mm, f.wall_limit, f.element_size, "wall")


def min_gap(f: SignOffFigures) -> dict:
    return _width("min_gap", f.min_gap_mm, f.gap_limit, f.element_size, "gap")


CHECKS = (
    load_path,
    interfaces_whole,
    compliance_gap,
    safety_factor,
    fatigue_safety_factor,
    fatigue_damage,
    stress_limit,
    mass_limit,
    deflection_limits,
    unsupported,
    no_cavities,
    min_wall,
    min_gap,
)


def run_checks(f: SignOffFigures) -> list[dict]:
    return [check(f) for check in CHECKS]


def failed(rows: list[dict]) -> list[str]:
    return [r["name"] for r in rows if r["status"] == FAIL]
