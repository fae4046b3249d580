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
    """True when opening `field` by the ball leaves every True cell in place, or
    leaves only trimmed clusters no longer than the diameter."""
    pad = diameter
    padded = np.pad(field, pad, constant_values=False)
    opened = ball_opening(padded, diameter)
    trimmed = field & ~opened[(slice(pad, -pad),) * field.ndim]
    labels, _ = ndimage.label(trimmed, structure=np.ones((3,) * field.ndim))
    for where in ndimage.find_objects(labels):
        if max(s.stop - s.start for s in where) > diameter:
            return False
    return True


# Squared distances in half-element units stay below 3·16² + this: int16 holds them.
_FAR = np.int16(8192)


def ball_opening(field: np.ndarray, diameter: int) -> np.ndarray:
    """Morphological opening of a boolean field by digital_ball(diameter), with
    everything outside the array counted as False: the union of the translates of
    the ball that lie wholly in the field (the field should be padded by the
    diameter, as _fits does, so that no ball reaches past its edge).

    The same set as ndimage.binary_opening with the ball as structure, at a cost
    independent of the ball's size: a ball of diameter d holds the cells whose
    centres lie within d/2 of its centre, which is a cell centre for odd d and a
    cell corner for even d. In half-element units every offset between a centre
    and a cell centre is an integer vector δ (even components for odd d, odd for
    even d) and a cell is in the ball when |δ|² ≤ d². The erosion is the set of
    centres whose squared distance to the nearest False cell exceeds d², the
    opening the cells within d² of an eroded centre; both squared distances are
    computed axis by axis (the separable form of the Euclidean distance transform,
    as in Saito & Toriwaki 1994, Pattern Recognition 27:1551), each axis a minimum
    over the at most d offsets a ball spans, in exact integers."""
    field = np.asarray(field, dtype=bool)
    cap = diameter * diameter
    corner = diameter % 2 == 0  # ball centres on cell corners
    to_centres = np.where(field, _FAR, np.int16(0))
    for axis in range(field.ndim):
        to_centres = _axis_min_plus(to_centres, axis, diameter, corner, True, cap)
    eroded = to_centres > cap
    to_cells = np.where(eroded, np.int16(0), _FAR)
    for axis in range(field.ndim):
        to_cells = _axis_min_plus(to_cells, axis, diameter, corner, False, cap)
    return to_cells <= cap


def _axis_min_plus(
    a: np.ndarray, axis: int, diameter: int, corner: bool, to_centres: bool, cap: int
) -> np.ndarray:
    """out[t] = min over offsets of a[t + j] + δ(j)² along one axis (out of range
    counts as far), values above `cap` clipped to far. With `corner`, ball centres
    sit on the n + 1 cell corners of the axis: cells → corners (`to_centres`) gives
    an axis one longer, corners → cells one shorter."""
    n = a.shape[axis]
    if not corner:
        r = (diameter - 1) // 2
        length = n
        pairs = [(j, (2 * j) ** 2) for j in range(-r, r + 1)]
    elif to_centres:  # corner k to cell k + j, δ = 2j + 1
        length = n + 1
        pairs = [(j, (2 * j + 1) ** 2) for j in range(-diameter // 2, diameter // 2)]
    else:  # cell i from corner i + m, δ = 2m − 1
        length = n - 1
        pairs = [(m, (2 * m - 1) ** 2) for m in range(-diameter // 2 + 1, diameter // 2 + 1)]
    shape = list(a.shape)
    shape[axis] = length
    out = np.full(shape, _FAR, dtype=np.int16)
    index = [slice(None)] * a.ndim
    for j, w in pairs:
        if w > cap:
            continue
        lo, hi = max(0, -j), min(length, n - j)  # out[t] with 0 ≤ t + j < n
        if hi <= lo:
            continue
        index[axis] = slice(lo, hi)
        target = tuple(index)
        index[axis] = slice(lo + j, hi + j)
        np.minimum(out[target], a[tuple(index)] + np.int16(w), out=out[target])
    np.minimum(out, _FAR, out=out)
    return out


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
