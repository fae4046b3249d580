"""fatigue.png: the S-N curves of every condition and surface of the design's alloy,
with each load case's governing point of the design, so that an engineer sees at a
glance whether HIP or machining buys the margin the part needs.

Curves are fully reversed stress amplitude against cycles (Basquin with the
endurance knee and the surface factor: fatigue.sn_strength), log-log. A load
case's point sits at its design life and at the fully reversed amplitude
equivalent to the cycle of its weakest printed element under the chosen mean-stress
correction (Goodman σa/(1 − σm/Su) by default; the block's
equivalent_amplitude_at_weakest_MPa); a point below the chosen curve has a safety
factor above 1. The caution of fatigue.py is the caption.
"""

from __future__ import annotations

import math
import textwrap
from dataclasses import replace

import numpy as np

from .checks import CORRECTION_NAMES
from .conditions import CONDITIONS, SURFACES, condition_of
from .fatigue import CAUTION, sn_strength
from .files import pyplot

COLOURS = {"as-built": "tab:red", "heat-treated": "tab:orange", "hip": "tab:blue"}
STYLES = {"machined": "-", "as-built": "--"}
POINTS_PER_DECADE = 10


def curve_label(condition: str, surface: str) -> str:
    return f"{condition}, {surface} surface"


def life_axis(lives) -> np.ndarray:
    """Cycles from 10³ to at least 10⁸ and a decade past the longest design life,
    10 points per decade with every decade exact (10 ** (k/10), k whole)."""
    top = max([8, *(math.ceil(math.log10(n)) + 1 for n in lives)])
    return 10.0 ** (np.arange(3 * POINTS_PER_DECADE, top * POINTS_PER_DECADE + 1) / 10)


def conditions_of(material) -> list:
    """Every condition × surface of the material's alloy that has data (a material
    given by its own S-N values has only its own)."""
    out = []
    for condition in CONDITIONS:
        for surface in SURFACES:
            try:
                out.append(condition_of(replace(material, condition=condition, surface=surface)))
            except ValueError:  # no data for this condition of a custom material
                continue
    return out


def fatigue_figure(problem, block: dict):
    """The figure for a problem and its summary's `fatigue` block."""
    plt = pyplot()
    from matplotlib.ticker import FuncFormatter

    fig, ax = plt.subplots(figsize=(8.0, 5.6))
    chosen = condition_of(problem.material)
    method = CORRECTION_NAMES[block.get("mean_stress_method", "goodman")]
    cycles = life_axis([c["cycles"] for c in block["load_cases"]])
    for cond in conditions_of(problem.material):
        mine = (cond.condition, cond.surface) == (chosen.condition, chosen.surface)
        ax.plot(
            cycles,
            [sn_strength(cond, n) for n in cycles],
            color=COLOURS.get(cond.condition, "grey"),
            ls=STYLES.get(cond.surface, "-"),
            lw=2.6 if mine else 1.2,
            label=curve_label(cond.condition, cond.surface) + (" (this design)" if mine else ""),
        )
    markers = "ovs^Dp*hX"
    for k, case in enumerate(block["load_cases"]):
        # the block's equivalent amplitude: the chosen correction with the ultimate
        # of the stress direction at that point (None: a mean at the ultimate)
        equivalent = case.get("equivalent_amplitude_at_weakest_MPa")
        if equivalent is None or not math.isfinite(equivalent):
            continue
        factor = case["safety_factor"]
        ax.plot(
            [case["cycles"]],
            [equivalent],
            ls="none",
            marker=markers[k % len(markers)],
            ms=9,
            mfc="black",
            mec="white",
            label=f"{case['name']}: R = {case['load_ratio']:g}, safety factor "
            + ("unbounded" if factor is None else f"{factor:.3g}"),
        )
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("cycles N")
    ax.set_ylabel("fully reversed stress amplitude (MPa)")
    plain = FuncFormatter(lambda v, _: f"{v:g}")  # 200, not 2×10²
    ax.yaxis.set_major_formatter(plain)
    ax.yaxis.set_minor_formatter(plain)
    ax.tick_params(axis="y", which="minor", labelsize=7)
    ax.grid(True, which="both", lw=0.4, alpha=0.5)
    ax.legend(fontsize=7, loc="upper right")
    ax.set_title(
        f"{problem.name}: S-N curves of {chosen.alloy} by condition and surface; each load "
        f"case at its design life and the\n{method}-equivalent amplitude of its weakest printed "
        f"element in the {chosen.condition} condition, {chosen.surface} surface",
        fontsize=8,
    )
    caption = f"{CAUTION[0].upper()}{CAUTION[1:]}. Data: {chosen.source}."
    fig.text(0.01, -0.02, textwrap.fill(caption, 150), fontsize=6.5, va="top", ha="left")
    return fig
