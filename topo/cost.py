"""Estimates for comparing build directions, and printing against machining.

These are estimates for comparing options, not quotes. Every default of the
`[cost]` table is illustrative (common-practice orders of magnitude, recalled from
memory, not a supplier's figure): give your own machine, shop and material rates.
Money is in the currency of the rates given (the defaults read as USD).

Printing (laser powder-bed fusion): a build holds `parts_per_build` parts (from
the part's footprint on the plate, or given); its time is the layer count times
the recoat time plus the melted volume (parts and supports) over the build rate.
A build costs its set-up, its heat treatment and its machine time; each part adds
its powder (part and supports, with the reuse loss), support removal by supported
area, and machining of its interfaces.

Machining from stock: the stock is the part's bounding box plus an allowance on
every side; the buy-to-fly ratio is stock mass over part mass (common practice in
aerospace); the machining time is the removed volume over the removal rate; a batch
pays set-up, the first batch also programming.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MAX_QUANTITY = 100_000  # break-even searched up to here


@dataclass(frozen=True)
class CostRates:
    layer_thickness: float = 0.03  # mm
    recoat_time: float = 8.0  # s per layer
    build_rate: float = 15.0  # cm³ of melted material per hour
    machine_rate: float = 90.0  # per hour of printer time
    powder_price: float = 250.0  # per kg
    powder_loss: float = 0.05  # share of the melted mass lost to reuse
    plate_size: tuple[float, float] = (250.0, 250.0)  # mm
    plate_spacing: float = 5.0  # mm between parts on the plate
    parts_per_build: int | None = None  # None: from the footprint
    build_setup: float = 250.0  # per build
    heat_treatment: float = 150.0  # per build (stress relief or HIP)
    support_removal: float = 0.3  # per cm² of supported area
    interface_machining: float = 15.0  # per interface (passive solid region)
    support_density: float = 0.3  # support structures' share of solid mass
    stock_allowance: float = 5.0  # mm on every side
    stock_price: float = 30.0  # per kg of stock
    removal_rate: float = 20.0  # cm³ per minute
    machining_rate: float = 100.0  # per hour
    machining_setup: float = 300.0  # per batch
    programming: float = 800.0  # once
    batch: int = 10  # parts in the batch the per-part figures are for


def layers(height_mm: float, rates: CostRates) -> int:
    return math.ceil(height_mm / rates.layer_thickness - 1e-9)


def parts_per_build(footprint_mm: tuple[float, float], rates: CostRates) -> int:
    """Parts of this footprint on the plate in a grid with the spacing, in either
    orientation; 0 when the part does not fit."""
    if rates.parts_per_build is not None:
        return rates.parts_per_build
    a, b = (f + rates.plate_spacing for f in footprint_mm)
    w, d = (p + rates.plate_spacing for p in rates.plate_size)
    return max(int(w // a) * int(d // b), int(w // b) * int(d // a))


def build_hours(
    n_parts: int, part_mm3: float, support_mm3: float, height_mm: float, rates: CostRates
) -> float:
    melted_cm3 = n_parts * (part_mm3 + support_mm3) / 1000.0
    return layers(height_mm, rates) * rates.recoat_time / 3600.0 + melted_cm3 / rates.build_rate


def printing_total(
    quantity,
    part_mm3: float,
    support_mm3: float,
    supported_mm2: float,
    height_mm: float,
    per_build: int,
    density: float,
    interfaces: int,
    rates: CostRates,
):
    """Cost of printing `quantity` parts (a number or an array): ceil(q / per_build)
    builds, each paying set-up, heat treatment and its recoating time, plus each
    part's melting time, powder, support removal and interface machining."""
    q = np.asarray(quantity)
    builds = -(-q // per_build)
    per_build_fixed = (
        rates.build_setup
        + rates.heat_treatment
        + layers(height_mm, rates) * rates.recoat_time / 3600.0 * rates.machine_rate
    )
    melt_hours = (part_mm3 + support_mm3) / 1000.0 / rates.build_rate
    melted_kg = (part_mm3 + rates.support_density * support_mm3) * 1e-9 * density
    per_part = (
        melt_hours * rates.machine_rate
        + melted_kg * (1 + rates.powder_loss) * rates.powder_price
        + supported_mm2 / 100.0 * rates.support_removal
        + interfaces * rates.interface_machining
    )
    return builds * per_build_fixed + q * per_part


@dataclass(frozen=True)
class Stock:
    size_mm: tuple[float, ...]
    mass_kg: float
    buy_to_fly: float
    removed_cm3: float


def stock(box_mm: tuple[float, ...], part_mm3: float, density: float, rates: CostRates) -> Stock:
    """Stock for machining a part whose bounding box is `box_mm` (3 sizes)."""
    size = tuple(s + 2 * rates.stock_allowance for s in box_mm)
    volume = float(np.prod(size))
    return Stock(size, volume * 1e-9 * density, volume / part_mm3, (volume - part_mm3) / 1000.0)


def machining_total(quantity, blank: Stock, rates: CostRates):
    """Cost of machining `quantity` parts (a number or an array) from stock."""
    hours = blank.removed_cm3 / rates.removal_rate / 60.0
    per_part = blank.mass_kg * rates.stock_price + hours * rates.machining_rate
    return rates.programming + rates.machining_setup + np.asarray(quantity) * per_part


def break_even(printing, machining) -> int | None:
    """Smallest quantity from which machining costs no more than printing (both
    callables of an array of quantities), or None up to MAX_QUANTITY."""
    q = np.arange(1, MAX_QUANTITY + 1)
    cheaper = np.flatnonzero(machining(q) <= printing(q))
    return int(q[cheaper[0]]) if len(cheaper) else None
