"""Fatigue figures of the printed part: stress amplitude and mean per load case, a
mean-stress correction (Goodman, Gerber or Smith-Watson-Topper), Basquin life, the
safety factor on amplitude at the design life and Miner's damage sum across the
load cases.

A cycle is either one load case scaled between R·F and F (load ratio R = σmin/σmax)
or two load cases at its ends (`cycles_with`). With stress tensors (the grid's
element centres or the body-fitted verification's nodes) the cycle is taken
component by component: amplitude tensor σa = (σ₁ − σ₂)/2 and mean tensor
σm = (σ₁ + σ₂)/2 (for a load ratio σ₁ = σ, σ₂ = R σ); the amplitude is the von Mises
stress of σa and the mean the signed von Mises stress of σm, its sign that of the
hydrostatic stress (tr σm), a common practice for multiaxial mean stress (e.g.
Bishop & Sherratt, Finite Element Based Fatigue Calculations, NAFEMS 2000; recalled
from memory). Without tensors (`assess(..., von_mises=...)` alone) the peak von
Mises stress is split by R and a mean counts as tensile, and a pair of cases is
bounded by (σvm,1 + σvm,2)/2 for both (von Mises is a seminorm, so this is an
upper bound of either).

The ultimate strength of Goodman and Gerber depends on the loading direction
relative to the layers (anisotropy.py); the S-N data have one curve per condition.

Printed-metal fatigue is dominated by pores and surfaces: the figures are
indicative and do not replace qualified test data for the process, machine and lot.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .anisotropy import CRITERION, NO_BUILD, angle_to_build, build_vector, strength_at
from .conditions import CONDITIONS, SURFACES, Condition, condition_of
from .elements import von_mises as von_mises_of

CAUTION = (
    "indicative: printed-metal fatigue is dominated by pores, surface roughness and "
    "residual stress; the S-N data are round figures recalled from published studies, "
    "not qualified data for this process, machine and powder lot"
)
# the corrections by name: how each turns (σa, σm) into a safety factor on amplitude
MEAN_STRESS_TEXT = {
    "goodman": (
        "Goodman with the ultimate strength (J. Goodman, Mechanics Applied to Engineering, "
        "1899): σa/Sa + σm/Su = 1/n, proportional loading (as in Shigley's Mechanical "
        "Engineering Design, ch. 6); a compressive mean is taken as zero"
    ),
    "gerber": (
        "Gerber parabola with the ultimate strength (W. Gerber, Z. Bayer. Archit. Ing.-Ver. 6, "
        "1874, recalled from memory): n σa/Sa + (n σm/Su)² "
        "= 1, proportional loading (as in Shigley's Mechanical Engineering Design, ch. 6); "
        "a compressive mean is taken as zero"
    ),
    "swt": (
        "Smith-Watson-Topper (K. N. Smith, P. Watson, T. H. Topper, 'A stress-strain function "
        "for the fatigue of metals', J. Materials 5, 1970, recalled from memory): "
        "equivalent fully reversed amplitude √(σmax σa), none when σmax ≤ 0; n = Sa/√(σmax σa)"
    ),
}
MEAN_STRESS = MEAN_STRESS_TEXT["goodman"] + "; the weaker orientation's ultimate"
STRESS_MEASURE = "von Mises stress of each load case at the centres of the printed elements"
TENSOR_MEASURE = (
    "amplitude: von Mises stress of the amplitude tensor (σ₁ − σ₂)/2; mean: von Mises "
    "stress of the mean tensor (σ₁ + σ₂)/2 signed by its hydrostatic part (signed von Mises, "
    "common practice)"
)
GRID_SOURCE = "grid: element centres of the printed part (not converged at stress raisers)"


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


def gerber_equivalent(amplitude, mean, ultimate):
    """The fully reversed amplitude as damaging as (σa, σm) on Gerber's parabola:
    σa / (1 − (σm/Su)²); unbounded when the mean reaches the ultimate."""
    amplitude, mean = np.asarray(amplitude, float), np.asarray(mean, float)
    room = 1 - (np.maximum(mean, 0.0) / ultimate) ** 2
    with np.errstate(divide="ignore"):
        return np.where(room > 0, amplitude / np.where(room > 0, room, 1.0), np.inf)


def gerber_safety_factor(amplitude, mean, strength: float, ultimate):
    """n with n σa/Sa + (n σm/Su)² = 1: the root 2/(A + √(A² + 4B)), A = σa/Sa,
    B = (σm/Su)², of Shigley's ½ (Su/σm)² (σa/Sa) [−1 + √(1 + (2σm Sa/(Su σa))²)]
    written so that it holds at σm = 0 (n = Sa/σa) and σa = 0 (n = Su/σm)."""
    amplitude, mean = np.asarray(amplitude, float), np.asarray(mean, float)
    a = amplitude / strength
    b = (np.maximum(mean, 0.0) / ultimate) ** 2
    used = a + np.sqrt(a * a + 4 * b)
    with np.errstate(divide="ignore"):
        return np.where(used > 0, 2 / np.where(used > 0, used, 1.0), np.inf)


def swt_equivalent(amplitude, mean):
    """Smith-Watson-Topper fully reversed amplitude √(σmax σa), σmax = σa + σm; zero
    (no damage) when the cycle's maximum is not tensile."""
    amplitude, mean = np.asarray(amplitude, float), np.asarray(mean, float)
    return np.sqrt(np.maximum(amplitude + mean, 0.0) * np.maximum(amplitude, 0.0))


def swt_safety_factor(amplitude, mean, strength: float):
    """n = Sa/√(σmax σa): scaling σa and σm by n scales the SWT amplitude by n."""
    eq = swt_equivalent(amplitude, mean)
    with np.errstate(divide="ignore"):
        return np.where(eq > 0, strength / np.where(eq > 0, eq, 1.0), np.inf)


def equivalent_amplitude(method: str, amplitude, mean, ultimate=None):
    """The fully reversed amplitude of the named correction."""
    if method == "swt":
        return swt_equivalent(amplitude, mean)
    if method == "gerber":
        return gerber_equivalent(amplitude, mean, ultimate)
    return goodman_equivalent(amplitude, mean, ultimate)


def safety_factor(method: str, amplitude, mean, strength: float, ultimate=None):
    """The named correction's safety factor on amplitude (proportional loading)."""
    if method == "swt":
        return swt_safety_factor(amplitude, mean, strength)
    if method == "gerber":
        return gerber_safety_factor(amplitude, mean, strength, ultimate)
    return goodman_safety_factor(amplitude, mean, strength, ultimate)


def miner_damage(cycles, lives):
    """Palmgren-Miner damage sum Σ nᵢ/Nᵢ (M. A. Miner, J. Appl. Mech. 12, 1945)."""
    cycles = np.asarray(cycles, float)
    lives = np.asarray(lives, float)
    with np.errstate(divide="ignore"):
        return np.sum(np.where(np.isinf(lives), 0.0, cycles / lives), axis=0)


def _finite(x):
    x = float(x)
    return x if math.isfinite(x) else None


def signed_von_mises(stress: np.ndarray) -> np.ndarray:
    """Von Mises stress of Voigt rows (…, 3 or 6) signed by the hydrostatic stress
    (the trace; zero trace counts as tensile)."""
    s = np.asarray(stress, dtype=float)
    trace = s[..., :2].sum(axis=-1) if s.shape[-1] == 3 else s[..., :3].sum(axis=-1)
    return np.where(trace < 0, -1.0, 1.0) * von_mises_of(s)


@dataclass
class Cycles:
    """The stress cycles of the fatigue cases at every point: one array (n,) per case
    in the order of `cases`."""

    amplitudes: list[np.ndarray]  # MPa, von Mises of the amplitude tensor
    means: list[np.ndarray]  # MPa, signed von Mises of the mean tensor
    angles: list[np.ndarray] | None  # degrees between principal stress and build direction
    measure: str  # how amplitude and mean were taken


def cycle_tensors(case, index: int, names: list[str], stress: np.ndarray):
    """(amplitude, mean) Voigt tensors (n, ns) of one case's cycle; `stress` is
    (n, n_cases, ns)."""
    top = stress[:, index]
    if case.cycles_with is not None:
        other = stress[:, names.index(case.cycles_with)]
        return (top - other) / 2, (top + other) / 2
    r = case.load_ratio
    return top * (1 - r) / 2, top * (1 + r) / 2


def stress_cycles(
    cases, names: list[str], *, von_mises=None, stress=None, build: str | None = None
) -> Cycles:
    """Amplitude and mean of every fatigue case (index, LoadCase) at every point,
    from stress tensors (n, n_cases, ns) when given, else from von Mises (n, n_cases);
    with tensors and a build direction, the angle of each amplitude tensor's
    largest principal stress to the build direction."""
    amps, means, angles = [], [], []
    if stress is not None:
        stress = np.asarray(stress, dtype=float)
        axis = build_vector(build, 2 if stress.shape[-1] == 3 else 3)
        for i, case in cases:
            amp_t, mean_t = cycle_tensors(case, i, names, stress)
            amps.append(von_mises_of(amp_t))
            means.append(signed_von_mises(mean_t))
            angles.append(angle_to_build(amp_t, axis) if axis is not None else None)
        return Cycles(amps, means, angles if axis is not None else None, TENSOR_MEASURE)
    von_mises = np.asarray(von_mises, dtype=float)
    for i, case in cases:
        if case.cycles_with is not None:  # an upper bound of both, without tensors
            bound = (von_mises[:, i] + von_mises[:, names.index(case.cycles_with)]) / 2
            amps.append(bound)
            means.append(bound)
        else:
            amp, mean = amplitude_and_mean(von_mises[:, i], case.load_ratio)
            amps.append(amp)
            means.append(mean)
    return Cycles(amps, means, None, STRESS_MEASURE)


def evaluate(
    cond: Condition,
    cases,
    von_mises: np.ndarray | None,
    *,
    cycles: Cycles | None = None,
    correction: str = "goodman",
    names: list[str] | None = None,
) -> dict:
    """Per-point fatigue of the cases with cycles; von_mises is (n, n_cases) over
    the printed elements, or `cycles` gives amplitudes and means (stress_cycles).
    Returns arrays: safety factor per case and damage sum."""
    if cycles is None:
        cycles = stress_cycles(cases, names or [], von_mises=von_mises)
    factors, lives, strengths, ultimates, equivalents = [], [], [], [], []
    for k, (_, case) in enumerate(cases):
        amp, mean = cycles.amplitudes[k], cycles.means[k]
        angles = cycles.angles[k] if cycles.angles is not None else None
        ultimate = strength_at(cond.ultimate_parallel, cond.ultimate_perpendicular, angles)
        if ultimate is None:
            ultimate = cond.ultimate
        strength = sn_strength(cond, case.cycles)
        eq = equivalent_amplitude(correction, amp, mean, ultimate)
        lives.append(sn_life(cond, eq))
        factors.append(safety_factor(correction, amp, mean, strength, ultimate))
        strengths.append(strength)
        ultimates.append(np.broadcast_to(np.asarray(ultimate, float), np.shape(amp)))
        equivalents.append(eq)
    damage = miner_damage([[c.cycles] for _, c in cases], lives)
    return {
        "factors": factors,
        "lives": lives,
        "amplitudes": cycles.amplitudes,
        "means": cycles.means,
        "strengths": strengths,
        "ultimates": ultimates,
        "equivalents": equivalents,
        "damage": damage,
    }


def _cycle_text(case) -> str:
    if case.cycles_with is not None:
        return f"between load cases {case.name!r} and {case.cycles_with!r}"
    return f"load ratio R = {case.load_ratio:g}"


def _effective_ratio(amp: float, mean: float) -> float:
    """σmin/σmax of a pair's cycle as the correction sees it (a compressive mean as
    zero): 1 for a constant stress."""
    top = max(mean, 0.0) + amp
    return 1.0 if amp <= 0 or top <= 0 else (max(mean, 0.0) - amp) / top


def assess(
    problem,
    centers: np.ndarray,
    von_mises: np.ndarray | None,
    solid: np.ndarray,
    *,
    stress: np.ndarray | None = None,
    source: str = GRID_SOURCE,
) -> dict | None:
    """summary.json's `fatigue` block: None when no load case gives cycles.
    `centers` (n, dim) mm of the points, `von_mises` (n, n_cases) MPa, `stress`
    (n, n_cases, ns) the stress tensors (preferred: pairs of cases and the
    orientation need them), `solid` the points of the printed part; `source` says
    where the stresses come from."""
    cases = [(i, c) for i, c in enumerate(problem.load_cases) if c.cycles is not None]
    if not cases or not solid.any():
        return None
    cond = condition_of(problem.material)
    method = problem.material.mean_stress_correction
    names = [c.name for c in problem.load_cases]
    where = np.flatnonzero(solid)
    build = problem.build.direction if problem.build else None
    cycles = stress_cycles(
        cases,
        names,
        von_mises=None if stress is not None else np.asarray(von_mises)[where],
        stress=np.asarray(stress)[where] if stress is not None else None,
        build=build,
    )
    got = evaluate(cond, cases, None, cycles=cycles, correction=method)
    rows = []
    for k, (_, case) in enumerate(cases):
        factor = got["factors"][k]
        j = int(np.argmin(factor))
        amp, mean = float(got["amplitudes"][k][j]), float(got["means"][k][j])
        angle = cycles.angles[k][j] if cycles.angles is not None else None
        rows.append(
            {
                "name": case.name,
                "cycles": case.cycles,
                "cycle": _cycle_text(case),
                "cycles_with": case.cycles_with,
                # a pair's ratio is the effective one at its weakest point
                "load_ratio": case.load_ratio
                if case.cycles_with is None
                else _effective_ratio(amp, mean),
                "max_amplitude_MPa": float(got["amplitudes"][k].max()),
                "strength_at_life_MPa": got["strengths"][k],
                "safety_factor": _finite(factor[j]),
                "amplitude_at_weakest_MPa": amp,
                "mean_at_weakest_MPa": mean,
                "equivalent_amplitude_at_weakest_MPa": _finite(got["equivalents"][k][j]),
                "ultimate_at_weakest_MPa": float(got["ultimates"][k][j]),
                "angle_to_build_at_weakest_deg": None if angle is None else float(angle),
                "life_at_weakest_cycles": _finite(got["lives"][k][j]),
                "weakest_location_mm": [float(v) for v in centers[where[j]]],
            }
        )
    worst = min(rows, key=lambda r: math.inf if r["safety_factor"] is None else r["safety_factor"])
    damage = got["damage"]
    j = int(np.argmax(damage))
    if stress is None:
        orientation = "not resolved without stress tensors: the weaker orientation's ultimate"
    else:
        orientation = CRITERION if build else NO_BUILD
    if method == "swt":
        orientation += " (Smith-Watson-Topper uses no ultimate strength)"
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
        "stress_source": source,
        "stress_measure": cycles.measure,
        "mean_stress_method": method,
        "mean_stress_correction": MEAN_STRESS_TEXT[method],
        "orientation": orientation,
        "build_direction": build,
        "load_cases": rows,
        "safety_factor": worst["safety_factor"],
        "governing_load_case": worst["name"],
        "weakest_location_mm": worst["weakest_location_mm"],
        "weakest_angle_to_build_deg": worst["angle_to_build_at_weakest_deg"],
        "weakest_ultimate_MPa": worst["ultimate_at_weakest_MPa"],
        "damage": float(damage[j]),
        "damage_location_mm": [float(v) for v in centers[where[j]]],
        "comparison": compare(problem, cases, None, cycles=cycles),
    }


def compare(
    problem, cases, stress: np.ndarray | None, *, cycles: Cycles | None = None
) -> list[dict]:
    """The same design in every condition and surface of its alloy's data (the
    figures that tell whether HIP or machining is worth its cost); the problem's
    own overrides are kept. `stress` is von Mises (n, n_cases) of the printed
    points, or `cycles` their stress cycles."""
    names = [c.name for c in problem.load_cases]
    if cycles is None:
        cycles = stress_cycles(cases, names, von_mises=stress)
    method = problem.material.mean_stress_correction
    rows = []
    for condition in CONDITIONS:
        for surface in SURFACES:
            material = replace(problem.material, condition=condition, surface=surface)
            try:
                cond = condition_of(material)
            except ValueError:  # no data for this condition of a custom material
                continue
            got = evaluate(cond, cases, None, cycles=cycles, correction=method)
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


def allowed_peak(
    cond: Condition,
    cycles: float,
    load_ratio: float,
    safety_factor_required: float,
    correction: str = "goodman",
) -> float:
    """The largest peak von Mises stress σmax of a cycle with load ratio R whose
    safety factor under the named mean-stress correction is n at `cycles`, with
    σa = σmax(1 − R)/2, σm = σmax(1 + R)/2, Sa the S-N strength at that life and Su
    the condition's ultimate (the weaker orientation: the loop does not know the
    stress directions of the printed part). Goodman, σa/Sa + σm/Su = 1/n:

        σmax = 2 / (n · ((1 − R)/Sa + (1 + R)/Su));

    Gerber, n σa/Sa + (n σm/Su)² = 1, the positive root of that quadratic in σmax;
    SWT, √(σmax σa) = Sa/n, σmax = (Sa/n) √(2/(1 − R)). A compressive mean gets no
    credit (Goodman and Gerber take σm ≥ 0 as in `safety_factor`). Without an
    ultimate the mean is not corrected (σmax = 2 Sa / (n (1 − R)))."""
    strength = sn_strength(cond, cycles)
    ultimate = cond.ultimate
    n = safety_factor_required
    a = (1 - load_ratio) / 2  # σa per unit σmax
    m = max((1 + load_ratio) / 2, 0.0)  # σm per unit σmax, tension only
    if correction == "swt":
        return strength / n / np.sqrt(a)
    if not ultimate or m == 0.0:
        return strength / (n * a)
    if correction == "gerber":
        # (n m/Su)² σ² + (n a/Sa) σ − 1 = 0
        qa, qb = (n * m / ultimate) ** 2, n * a / strength
        return float(2.0 / (qb + np.sqrt(qb * qb + 4.0 * qa)))
    return 1.0 / (n * (a / strength + m / ultimate))
