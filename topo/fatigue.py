"""Fatigue figures of the printed part: stress amplitude and mean per load case,
Goodman's mean-stress correction, Basquin life, the safety factor on amplitude at
the design life and Miner's damage sum across the load cases.

The stress of a cycle is the von Mises stress of its load case at its peak: a load
ratio R = σmin/σmax gives σa = σmax (1 − R)/2 and σm = σmax (1 + R)/2. Von Mises
carries no sign, so a compressive mean is counted as tensile (conservative under
Goodman). The stresses come from the grid unless a caller supplies better ones
(the body-fitted verification): `assess(..., von_mises=...)`.

Printed-metal fatigue is dominated by pores and surfaces: the figures are
indicative and do not replace qualified test data for the process, machine and lot.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .conditions import CONDITIONS, SURFACES, Condition, condition_of

CAUTION = (
    "indicative: printed-metal fatigue is dominated by pores, surface roughness and "
    "residual stress; the S-N data are round figures recalled from published studies, "
    "not qualified data for this process, machine and powder lot"
)
MEAN_STRESS = (
    "Goodman with the ultimate strength (J. Goodman, Mechanics Applied to Engineering, "
    "1899): σa/Sa + σm/Su = 1/n, proportional loading (as in Shigley's Mechanical "
    "Engineering Design); the weaker orientation's ultimate"
)
STRESS_MEASURE = "von Mises stress of each load case at the centres of the printed elements"


def amplitude_and_mean(peak, load_ratio: float):
    """σa and σm of a cycle from its peak stress and R = σmin/σmax."""
    peak = np.asarray(peak, dtype=float)
    return peak * (1 - load_ratio) / 2, peak * (1 + load_ratio) / 2


def sn_strength(cond: Condition, cycles: float) -> float:
    """Fully reversed stress amplitude the condition survives for `cycles`: Basquin
    σf' (2N)^b, not below the endurance amplitude, scaled by the surface."""
    s = cond.fatigue_strength_coefficient * (2 * cycles) ** cond.fatigue_strength_exponent
    if cond.endurance_limit is not None:
        s = max(s, cond.endurance_limit)
    return s * cond.surface_knockdown


def sn_life(cond: Condition, amplitude):
    """Cycles to failure at a fully reversed amplitude (inverse of sn_strength);
    unbounded (inf) at or below the endurance amplitude."""
    a = np.asarray(amplitude, dtype=float) / cond.surface_knockdown
    with np.errstate(divide="ignore", over="ignore"):
        life = 0.5 * (a / cond.fatigue_strength_coefficient) ** (1 / cond.fatigue_strength_exponent)
    # at or beyond σf' (or a mean at the ultimate) the part fails in its first
    # reversal: half a cycle, which keeps the damage sum finite
    life = np.maximum(np.nan_to_num(life, nan=0.5), 0.5)
    if cond.endurance_limit is not None:
        life = np.where(a <= cond.endurance_limit, np.inf, life)
    return np.where(a <= 0, np.inf, life)


def goodman_equivalent(amplitude, mean, ultimate: float):
    """The fully reversed amplitude as damaging as (σa, σm): σa / (1 − σm/Su);
    unbounded when the mean reaches the ultimate."""
    amplitude, mean = np.asarray(amplitude, float), np.asarray(mean, float)
    room = 1 - np.maximum(mean, 0.0) / ultimate
    with np.errstate(divide="ignore"):
        return np.where(room > 0, amplitude / np.where(room > 0, room, 1.0), np.inf)


def goodman_safety_factor(amplitude, mean, strength: float, ultimate: float):
    """n with σa/Sa + σm/Su = 1/n, Sa the S-N strength at the design life."""
    amplitude, mean = np.asarray(amplitude, float), np.asarray(mean, float)
    used = amplitude / strength + np.maximum(mean, 0.0) / ultimate
    with np.errstate(divide="ignore"):
        return np.where(used > 0, 1 / np.where(used > 0, used, 1.0), np.inf)


def miner_damage(cycles, lives):
    """Palmgren-Miner damage sum Σ nᵢ/Nᵢ (M. A. Miner, J. Appl. Mech. 12, 1945)."""
    cycles = np.asarray(cycles, float)
    lives = np.asarray(lives, float)
    with np.errstate(divide="ignore"):
        return np.sum(np.where(np.isinf(lives), 0.0, cycles / lives), axis=0)


def _finite(x):
    x = float(x)
    return x if math.isfinite(x) else None


def evaluate(cond: Condition, cases, von_mises: np.ndarray) -> dict:
    """Per-element fatigue of the cases with cycles; von_mises is (n, n_cases) over
    the printed elements. Returns arrays: safety factor per case and damage sum."""
    ultimate = cond.ultimate
    factors, lives, amps, means, strengths = [], [], [], [], []
    for i, case in cases:
        amp, mean = amplitude_and_mean(von_mises[:, i], case.load_ratio)
        strength = sn_strength(cond, case.cycles)
        life = sn_life(cond, goodman_equivalent(amp, mean, ultimate))
        factors.append(goodman_safety_factor(amp, mean, strength, ultimate))
        lives.append(life)
        amps.append(amp)
        means.append(mean)
        strengths.append(strength)
    damage = miner_damage([[c.cycles] for _, c in cases], lives)
    return {
        "factors": factors,
        "lives": lives,
        "amplitudes": amps,
        "means": means,
        "strengths": strengths,
        "damage": damage,
    }


def assess(problem, centers: np.ndarray, von_mises: np.ndarray, solid: np.ndarray) -> dict | None:
    """summary.json's `fatigue` block: None when no load case gives cycles.
    `centers` (n_elements, dim) mm, `von_mises` (n_elements, n_cases) MPa of the
    printed part, `solid` the printed elements."""
    cases = [(i, c) for i, c in enumerate(problem.load_cases) if c.cycles is not None]
    if not cases or not solid.any():
        return None
    cond = condition_of(problem.material)
    where = np.flatnonzero(solid)
    stress = von_mises[where]
    got = evaluate(cond, cases, stress)
    rows = []
    for k, (_, case) in enumerate(cases):
        factor = got["factors"][k]
        j = int(np.argmin(factor))
        rows.append(
            {
                "name": case.name,
                "cycles": case.cycles,
                "load_ratio": case.load_ratio,
                "max_amplitude_MPa": float(got["amplitudes"][k].max()),
                "strength_at_life_MPa": got["strengths"][k],
                "safety_factor": _finite(factor[j]),
                "amplitude_at_weakest_MPa": float(got["amplitudes"][k][j]),
                "mean_at_weakest_MPa": float(got["means"][k][j]),
                "life_at_weakest_cycles": _finite(got["lives"][k][j]),
                "weakest_location_mm": [float(v) for v in centers[where[j]]],
            }
        )
    worst = min(rows, key=lambda r: math.inf if r["safety_factor"] is None else r["safety_factor"])
    damage = got["damage"]
    j = int(np.argmax(damage))
    return {
        "caution": CAUTION,
        "condition": cond.condition,
        "surface": cond.surface,
        "material": {
            "alloy": cond.alloy,
            "yield_parallel_MPa": cond.yield_parallel,
            "yield_perpendicular_MPa": cond.yield_perpendicular,
            "ultimate_parallel_MPa": cond.ultimate_parallel,
            "ultimate_perpendicular_MPa": cond.ultimate_perpendicular,
            "elongation_parallel_percent": cond.elongation_parallel,
            "elongation_perpendicular_percent": cond.elongation_perpendicular,
            "fatigue_strength_coefficient_MPa": cond.fatigue_strength_coefficient,
            "fatigue_strength_exponent": cond.fatigue_strength_exponent,
            "endurance_limit_MPa": cond.endurance_limit,
            "surface_factor": cond.surface_knockdown,
            "source": cond.source,
        },
        "stress_measure": STRESS_MEASURE,
        "mean_stress_correction": MEAN_STRESS,
        "orientation": "not resolved: the weaker of the two orientations is used",
        "load_cases": rows,
        "safety_factor": worst["safety_factor"],
        "governing_load_case": worst["name"],
        "weakest_location_mm": worst["weakest_location_mm"],
        "damage": float(damage[j]),
        "damage_location_mm": [float(v) for v in centers[where[j]]],
        "comparison": compare(problem, cases, stress),
    }


def compare(problem, cases, stress: np.ndarray) -> list[dict]:
    """The same design in every condition and surface of its alloy's data (the
    figures that tell whether HIP or machining is worth its cost); the problem's
    own overrides are kept."""
    rows = []
    for condition in CONDITIONS:
        for surface in SURFACES:
            material = replace(problem.material, condition=condition, surface=surface)
            try:
                cond = condition_of(material)
            except ValueError:  # no data for this condition of a custom material
                continue
            got = evaluate(cond, cases, stress)
            k = int(np.argmin([f.min() for f in got["factors"]]))  # the governing case
            j = int(np.argmin(got["factors"][k]))  # its weakest element
            rows.append(
                {
                    "condition": condition,
                    "surface": surface,
                    "safety_factor": _finite(got["factors"][k][j]),
                    "damage": float(got["damage"].max()),
                    "governing_load_case": cases[k][1].name,
                    "life_at_weakest_cycles": _finite(got["lives"][k][j]),
                }
            )
    return rows


def allowed_peak(cond: Condition, cycles: float, load_ratio: float, safety_factor: float) -> float:
    """The largest peak von Mises stress σmax of a cycle with load ratio R that keeps
    a Goodman safety factor n at `cycles`: with σa = σmax(1 − R)/2, σm = σmax(1 + R)/2
    on the line σa/Sa + σm/Su = 1/n (Sa the S-N strength at that life, Su the
    condition's ultimate; see MEAN_STRESS),

        σmax = 2 / (n · ((1 − R)/Sa + (1 + R)/Su)).

    Without an ultimate the mean is not corrected (σmax = 2 Sa / (n (1 − R)))."""
    strength = sn_strength(cond, cycles)
    ultimate = cond.ultimate
    per_peak = (1 - load_ratio) / strength + ((1 + load_ratio) / ultimate if ultimate else 0.0)
    return 2.0 / (safety_factor * per_peak)
