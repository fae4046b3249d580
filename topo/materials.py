"""Built-in material presets for laser powder-bed fusion alloys.

Every value below is recalled from memory of the named handbook or standard and must
be checked against the engineer's own qualified process data before sign-off. Yield
strengths of printed alloys depend strongly on build orientation and heat treatment;
the figures are the usual specification minima or typical values, as marked.
Units: MPa for moduli and strengths, kg/m³ for density.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Material:
    name: str
    youngs_modulus: float  # MPa
    poissons_ratio: float
    density: float  # kg/m³
    yield_strength: float | None = None  # MPa
    # fatigue: the build condition and surface (conditions.py), values given in place
    # of the condition's
    condition: str | None = None  # None: not named (fatigue takes as-built)
    surface: str = "as-built"
    ultimate_strength: float | None = None  # MPa
    fatigue_strength_coefficient: float | None = None  # MPa
    fatigue_strength_exponent: float | None = None
    endurance_limit: float | None = None  # MPa
    surface_factor: float | None = None
    mean_stress_correction: str = "goodman"  # "goodman" | "gerber" | "swt"
    sn_points: tuple[tuple[float, float], ...] | None = None  # [(cycles, MPa)] × 2
    preset: str | None = None  # the preset the values came from, if any
    # yield by loading direction relative to the build direction (set by the problem
    # parser from a named condition); None: yield_strength in every direction
    yield_parallel: float | None = None
    yield_perpendicular: float | None = None

    def lame(self) -> tuple[float, float]:
        """Lamé constants (λ, μ) of the solid material."""
        e, nu = self.youngs_modulus, self.poissons_ratio
        return e * nu / ((1 + nu) * (1 - 2 * nu)), e / (2 * (1 + nu))


PRESETS: dict[str, Material] = {
    # Ti-6Al-4V (UNS R56400). E, ν, density: ASM Handbook Vol. 2 (1990), titanium
    # alloy data sheet, E ≈ 110-114 GPa (from memory). Yield: ASTM F2924 minimum
    # for powder-bed-fusion Ti-6Al-4V, 825 MPa (from memory).
    "Ti-6Al-4V": Material("Ti-6Al-4V", 110_000.0, 0.34, 4430.0, 825.0),
    # AlSi10Mg (EN AC-43000 composition, EN 1706). E ≈ 70 GPa, ν 0.33, density
    # 2670 kg/m³ (EN 1706 typical values, from memory). Yield: a typical stress-
    # relieved LPBF value of about 170 MPa (from memory; as-built parts are higher,
    # but stress relief is the common practice for structural parts).
    "AlSi10Mg": Material("AlSi10Mg", 70_000.0, 0.33, 2670.0, 170.0),
    # 316L stainless (UNS S31603). E 193 GPa, ν 0.27 (ASM Handbook Vol. 1, wrought
    # austenitic stainless data, from memory), density 7990 kg/m³ (from memory).
    # Yield: ASTM F3184 minimum for powder-bed-fusion 316L, 205 MPa (from memory).
    "316L": Material("316L", 193_000.0, 0.27, 7990.0, 205.0),
    # Alloy 718 (UNS N07718). E 200 GPa, ν 0.29, density 8190 kg/m³ (ASM Handbook
    # Vol. 2, nickel alloy data, from memory). Yield: ASTM F3055 minimum after
    # solution treatment and ageing, 1034 MPa (150 ksi, from memory).
    "alloy 718": Material("alloy 718", 200_000.0, 0.29, 8190.0, 1034.0),
}

# Names an engineer is likely to type for the same preset.
ALIASES = {
    "ti64": "Ti-6Al-4V",
    "ti-6al-4v": "Ti-6Al-4V",
    "alsi10mg": "AlSi10Mg",
    "316l": "316L",
    "316l stainless": "316L",
    "718": "alloy 718",
    "alloy 718": "alloy 718",
    "in718": "alloy 718",
}


def find_preset(name: str) -> Material | None:
    """The preset called `name` (case-insensitive, common aliases), or None."""
    if name in PRESETS:
        return PRESETS[name]
    key = ALIASES.get(name.strip().lower())
    return PRESETS.get(key) if key else None
