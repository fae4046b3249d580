"""The realised minimum wall and gap of a printed design, in mm.

A part has a minimum wall of d when every solid element lies in some digital ball
of diameter d that fits wholly inside the solid: the morphological opening of the
solid by that ball leaves it unchanged (the local-thickness idea of Hildebrand &
Rüegsegger 1997, J. Microscopy 185:67, read as a granulometry). A round ball never
fills a sharp convex corner, so the opening also trims corners; what it trims
there is a small cluster, while a member thinner than d goes along its length. A
cluster of trimmed elements counts as a thin member when it is longer than d
(our rule). The minimum wall is the largest such d, in whole elements, times the
element size; the minimum gap is the same measure of the void. Outside the domain
counts as void (a wall on the domain boundary is a wall; a gap between the part and
the boundary is open to the outside, not a gap). The grid cannot see below one
element, so both figures are multiples of the element size.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

MAX_DIAMETER = 16  # elements; wider walls and gaps are reported as "at least" this


def digital_ball(diameter: int, dim: int) -> np.ndarray:
    """Boolean ball of `diameter` elements: the cells whose centres lie within
    diameter/2 of the centre of the diameter^dim box."""
    c = (np.arange(diameter) + 0.5) - diameter / 2
    grids = np.meshgrid(*([c] * dim), indexing="ij")
    r2 = sum(g * g for g in grids)
    return r2 <= (diameter / 2) ** 2 + 1e-9


def _fits(field: np.ndarray, diameter: int) -> bool:
    """True when opening `field` by the ball leaves every True cell in place."""
    ball = digital_ball(diameter, field.ndim)
    pad = diameter
    padded = np.pad(field, pad, constant_values=False)
    opened = ndimage.binary_opening(padded, structure=ball)
    trimmed = field & ~opened[(slice(pad, -pad),) * field.ndim]
    labels, _ = ndimage.label(trimmed, structure=np.ones((3,) * field.ndim))
    for where in ndimage.find_objects(labels):
        if max(s.stop - s.start for s in where) > diameter:
            return False
    return True


def minimum_width(field: np.ndarray) -> int | None:
    """Largest diameter (elements, up to MAX_DIAMETER) of a ball that covers every
    True cell of `field` from inside it; None when the field is empty."""
    field = np.asarray(field, dtype=bool)
    if not field.any():
        return None
    width = 1
    while width < MAX_DIAMETER and _fits(field, width + 1):
        width += 1
    return width


def minimum_wall_and_gap(printed: np.ndarray, h: float) -> tuple[float | None, float | None]:
    """(minimum wall, minimum gap) of a 0/1 printed design in mm."""
    solid = np.asarray(printed) > 0.5
    wall = minimum_width(solid)
    # the void with a frame of outside around it: gaps at the boundary are open
    void = np.pad(~solid, MAX_DIAMETER, constant_values=True)
    gap = minimum_width(void) if (~solid).any() else None
    return (None if wall is None else wall * h), (None if gap is None else gap * h)
