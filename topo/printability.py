"""Build orientation and the printability check on the element grid.

A build direction (±x, ±y, ±z) is the direction the part grows. Fields are brought
into a "build frame" whose axis 0 runs along it, layer 0 being the first layer on
the build plate. By common practice the self-supporting overhang limit in
powder-bed fusion is 45° from the plate; on square/cubic elements that is exactly
"every element rests on an element of its support region in the layer below": the
element directly below and its face neighbours in that layer (3 cells in 2D, 5 in
3D; Langelaar 2016/2017).
"""
from __future__ import annotations

import numpy as np

SOLID = 0.5  # ρ at or above which an element counts as printed material


def directions(dim: int) -> tuple[str, ...]:
    return ("+x", "-x", "+y", "-y", "+z", "-z")[: 2 * dim]


def to_build_frame(field: np.ndarray, direction: str) -> np.ndarray:
    """View of `field` (grid shape) with axis 0 along the build direction, layer 0
    on the plate."""
    axis = "xyz".index(direction[1])
    out = np.moveaxis(field, axis, 0)
    return out[::-1] if direction[0] == "-" else out


def from_build_frame(field: np.ndarray, direction: str) -> np.ndarray:
    """Inverse of `to_build_frame`."""
    axis = "xyz".index(direction[1])
    if direction[0] == "-":
        field = field[::-1]
    return np.moveaxis(field, 0, axis)


def support_offsets(plane_dim: int) -> list[tuple[int, ...]]:
    """Offsets, within the layer below, of an element's support region."""
    if plane_dim == 1:
        return [(-1,), (0,), (1,)]
    return [(0, 0), (-1, 0), (1, 0), (0, -1), (0, 1)]


def shift(layer: np.ndarray, offset: tuple[int, ...], sign: int) -> np.ndarray:
    """out[m] = layer[m + sign·offset], zero where that falls outside the layer."""
    out = np.zeros_like(layer)
    src, dst = [], []
    for o in offset:
        o *= sign
        src.append(slice(o, None) if o > 0 else slice(0, o) if o < 0 else slice(None))
        dst.append(slice(0, -o) if o > 0 else slice(-o, None) if o < 0 else slice(None))
    out[tuple(dst)] = layer[tuple(src)]
    return out


def window_sum(layer: np.ndarray) -> np.ndarray:
    """Σ over the support region of each cell, zero outside the domain. The offsets
    are symmetric, so this linear map is its own transpose."""
    return sum(shift(layer, o, +1) for o in support_offsets(layer.ndim))


def unsupported_mask(solid: np.ndarray, direction: str) -> np.ndarray:
    """Boolean grid: solid elements off the plate with no solid element in their
    support region in the layer below."""
    s = to_build_frame(solid.astype(bool), direction)
    bad = np.zeros_like(s)
    for i in range(1, len(s)):
        bad[i] = s[i] & (window_sum(s[i - 1].astype(np.int32)) == 0)
    return from_build_frame(bad, direction)


def unsupported_fraction(density: np.ndarray, direction: str, threshold: float = SOLID) -> float:
    """Share of the solid elements (ρ ≥ threshold) that are unsupported."""
    solid = density >= threshold
    n = int(solid.sum())
    return float(unsupported_mask(solid, direction).sum() / n) if n else 0.0


def unsupported_by_direction(density: np.ndarray) -> dict[str, float]:
    return {d: unsupported_fraction(density, d) for d in directions(density.ndim)}


def printable_envelope(void: np.ndarray, direction: str) -> np.ndarray:
    """Elements that some self-supporting design could fill: everything reachable
    from the plate through non-void elements within the overhang limit."""
    free = to_build_frame(~void.astype(bool), direction)
    ok = np.zeros_like(free)
    ok[0] = free[0]
    for i in range(1, len(free)):
        ok[i] = free[i] & (window_sum(ok[i - 1].astype(np.int32)) > 0)
    return from_build_frame(ok, direction)
