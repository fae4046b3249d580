"""Material conditions of the printed alloys: static strengths and S-N data per
build condition, with the surface as a modifier.

Printed-metal fatigue is dominated by defects (gas and lack-of-fusion pores) and
by the rough as-built surface; every figure here is indicative and does not
replace qualified test data for the process, machine and powder lot.

S-N data are Basquin parameters for fully reversed stress amplitude on machined
(polished or turned) specimens, σa = σf' (2N)^b (O. H. Basquin, "The exponential
law of endurance tests", Proc. ASTM 10, 1910), with an endurance amplitude below
which life is taken as unbounded (None: no knee, as for aluminium). The as-built
surface scales the whole curve by a surface factor.

Every value below is RECALLED FROM MEMORY of the trends reported in published
fatigue studies of laser powder-bed fusion alloys, named per alloy; they are
round figures, not quotations of a table. "parallel" is loading along the build
direction (across the layers), "perpendicular" loading within the layers.
Units: MPa, elongation in %.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

CONDITIONS = ("as-built", "heat-treated", "hip")
SURFACES = ("as-built", "machined")


@dataclass(frozen=True)
class Condition:
    alloy: str
    condition: str  # one of CONDITIONS
    surface: str  # one of SURFACES
    yield_parallel: float | None  # MPa, loading along the build direction
    yield_perpendicular: float | None
    ultimate_parallel: float | None
    ultimate_perpendicular: float | None
    elongation_parallel: float | None  # %
    elongation_perpendicular: float | None
    fatigue_strength_coefficient: float  # σf' (MPa), machined surface
    fatigue_strength_exponent: float  # b < 0
    endurance_limit: float | None  # MPa amplitude, machined surface; None: no knee
    surface_factor: float  # as-built surface over machined, on the S-N curve
    source: str

    @property
    def ultimate(self) -> float | None:
        """The lower of the two orientations: the principal-stress direction relative
        to the layers is not yet resolved, so the weaker one is taken."""
        values = [v for v in (self.ultimate_parallel, self.ultimate_perpendicular) if v]
        return min(values) if values else None

    @property
    def surface_knockdown(self) -> float:
        return self.surface_factor if self.surface == "as-built" else 1.0


def _c(alloy, cond, ys, uts, el, sf, b, se, ka, source) -> Condition:
    return Condition(alloy, cond, "as-built", *ys, *uts, *el, sf, b, se, ka, source)


_TI = (
    "recalled from memory: trends of Leuders et al., Int. J. Fatigue 48 (2013) and the "
    "review of Li, Warner, Fatemi, Phan, Int. J. Fatigue 85 (2016); surface factor from "
    "the as-built versus machined curves of the same review (from memory)"
)
_AL = (
    "recalled from memory: trends of Brandl et al., Materials & Design 34 (2012) and "
    "Aboulkhair et al., Materials & Design 104 (2016); no endurance knee (aluminium)"
)
_SS = (
    "recalled from memory: trends of Spierings et al., Rapid Prototyping J. 19 (2013) "
    "and Riemer et al., Eng. Fract. Mech. 120 (2014)"
)
_NI = (
    "recalled from memory: trends of Amsterdam & Kool, ICAF 2009, and Konečná et al., "
    "Procedia Eng. 160 (2016)"
)

# alloy → condition → Condition (machined values; surface set per problem)
DATA: dict[str, dict[str, Condition]] = {
    "Ti-6Al-4V": {
        "as-built": _c(
            "Ti-6Al-4V", "as-built", (1100, 1050), (1250, 1200), (6, 8), 1300, -0.11, 200, 0.45, _TI
        ),
        "heat-treated": _c(
            "Ti-6Al-4V",
            "heat-treated",
            (1000, 980),
            (1080, 1060),
            (10, 11),
            1400,
            -0.10,
            260,
            0.45,
            _TI,
        ),
        "hip": _c(
            "Ti-6Al-4V", "hip", (880, 880), (980, 980), (14, 14), 1500, -0.075, 425, 0.45, _TI
        ),
    },
    "AlSi10Mg": {
        "as-built": _c(
            "AlSi10Mg", "as-built", (250, 270), (430, 450), (3, 5), 700, -0.13, None, 0.6, _AL
        ),
        "heat-treated": _c(
            "AlSi10Mg", "heat-treated", (170, 170), (280, 280), (9, 10), 550, -0.12, None, 0.6, _AL
        ),
        "hip": _c("AlSi10Mg", "hip", (140, 140), (220, 220), (12, 12), 500, -0.11, None, 0.6, _AL),
    },
    "316L": {
        "as-built": _c(
            "316L", "as-built", (480, 520), (600, 640), (30, 40), 1300, -0.11, 200, 0.6, _SS
        ),
        "heat-treated": _c(
            "316L", "heat-treated", (430, 450), (600, 620), (35, 45), 1250, -0.11, 195, 0.6, _SS
        ),
        "hip": _c("316L", "hip", (300, 300), (590, 590), (55, 55), 1000, -0.09, 220, 0.6, _SS),
    },
    "alloy 718": {
        "as-built": _c(
            "alloy 718", "as-built", (620, 650), (950, 1000), (22, 25), 1500, -0.10, 280, 0.5, _NI
        ),
        "heat-treated": _c(
            "alloy 718",
            "heat-treated",
            (1100, 1150),
            (1300, 1350),
            (12, 15),
            1900,
            -0.09,
            420,
            0.5,
            _NI,
        ),
        "hip": _c(
            "alloy 718", "hip", (1100, 1100), (1350, 1350), (20, 20), 2000, -0.08, 520, 0.5, _NI
        ),
    },
}

# the problem-file keys that override a condition's value
OVERRIDES = (
    "ultimate_strength",
    "fatigue_strength_coefficient",
    "fatigue_strength_exponent",
    "endurance_limit",
    "surface_factor",
)


class ConditionError(ValueError):
    """A fault in the fatigue data: `key` is the problem-file key to mend."""

    def __init__(self, key: str, message: str):
        self.key, self.message = key, message
        super().__init__(f"{key}: {message}")


DEFAULT_CONDITION = "as-built"  # the fatigue figures' condition when the file names none


def basquin_from_points(points) -> tuple[float, float]:
    """Basquin σf' and b of the curve through two S-N points [[N₁, S₁], [N₂, S₂]]
    (cycles, fully reversed amplitude in MPa): S = σf' (2N)^b gives exactly
    b = log(S₂/S₁) / log(N₂/N₁) and σf' = S₁ / (2N₁)^b.

    >>> sf, b = basquin_from_points([[1e3, 495.9], [1e6, 276.0]])
    >>> round(b, 6)
    -0.084828
    """
    (n1, s1), (n2, s2) = sorted((float(n), float(s)) for n, s in points)
    if n1 == n2:
        raise ConditionError(
            "material.sn_points", f"the two points have the same life ({n1:g} cycles)"
        )
    if s2 >= s1:
        raise ConditionError(
            "material.sn_points",
            f"the S-N curve must decrease with life: {s2:g} MPa at {n2:g} cycles is not "
            f"below {s1:g} MPa at {n1:g} cycles",
        )
    b = np.log(s2 / s1) / np.log(n2 / n1)
    return float(s1 / (2 * n1) ** b), float(b)


def condition_yields(material) -> tuple[float | None, float | None] | None:
    """(parallel, perpendicular) yield strengths of the condition the material names,
    or None when it names none or its alloy has no data for it."""
    if material.condition is None:
        return None
    alloy = getattr(material, "preset", None) or material.name
    cond = DATA.get(alloy, {}).get(material.condition)
    return None if cond is None else (cond.yield_parallel, cond.yield_perpendicular)


def condition_of(material) -> Condition:
    """The condition of a problem's Material: its preset's data for
    `material.condition` (as-built when none is named) and `material.surface`, with
    any value the problem gives in place of the preset's. A material without data
    must give the S-N values (Basquin parameters or two S-N points)."""
    alloy = getattr(material, "preset", None) or material.name
    condition = material.condition or DEFAULT_CONDITION
    base = DATA.get(alloy, {}).get(condition)
    given = {k: getattr(material, k, None) for k in OVERRIDES}
    points = getattr(material, "sn_points", None)
    if points is not None:
        sf, b = basquin_from_points(points)
        # the two points and the file's endurance level (none: no knee) replace the curve
        given.update(fatigue_strength_coefficient=sf, fatigue_strength_exponent=b)
    if base is None:
        for k in ("ultimate_strength", "fatigue_strength_coefficient", "fatigue_strength_exponent"):
            if given[k] is None:
                raise ConditionError(
                    f"material.{k}",
                    f"no fatigue data for material {material.name!r} in condition "
                    f"{condition!r} (data for: {', '.join(DATA)}): give the value"
                    + (" (or material.sn_points)" if k != "ultimate_strength" else ""),
                )
        base = Condition(
            material.name,
            condition,
            "as-built",
            material.yield_strength,
            material.yield_strength,
            None,
            None,
            None,
            None,
            0.0,
            -0.1,
            None,
            1.0,
            "given in the problem file",
        )
    changes = {k: v for k, v in given.items() if v is not None and k not in ("ultimate_strength",)}
    if points is not None:
        changes["endurance_limit"] = given["endurance_limit"]
    if given["ultimate_strength"] is not None:
        changes["ultimate_parallel"] = changes["ultimate_perpendicular"] = given[
            "ultimate_strength"
        ]
    if changes:
        named = [k for k in OVERRIDES if getattr(material, k, None) is not None]
        if points is not None:
            named.insert(0, "sn_points (two S-N points, converted to Basquin's form)")
        changes["source"] = f"{base.source}; given in the problem file: {', '.join(named)}"
    cond = replace(base, surface=material.surface, **changes)
    check_sn(cond)
    if points is not None and cond.endurance_limit is not None:
        low = min(float(s) for _, s in points)
        if cond.endurance_limit > low:
            raise ConditionError(
                "material.endurance_limit",
                f"{cond.endurance_limit:g} MPa is above the S-N point of {low:g} MPa "
                "(material.sn_points): the curve could not pass through it",
            )
    return cond


def check_sn(cond: Condition) -> None:
    """The S-N curve must fall with life and stay below the ultimate strength."""
    if cond.fatigue_strength_exponent >= 0:
        raise ConditionError(
            "material.fatigue_strength_exponent",
            f"the S-N curve must decrease with life: Basquin exponent b must be negative, "
            f"got {cond.fatigue_strength_exponent:g}",
        )
    if (
        cond.endurance_limit is not None
        and cond.endurance_limit >= cond.fatigue_strength_coefficient
    ):
        raise ConditionError(
            "material.endurance_limit",
            f"{cond.endurance_limit:g} MPa is not below the fatigue strength coefficient "
            f"{cond.fatigue_strength_coefficient:g} MPa: the S-N curve must decrease",
        )
