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


def support_needed(
    solid: np.ndarray,
    direction: str,
    h: float,
    depth: float | None = None,
    within: np.ndarray | None = None,
) -> tuple[float, float, int]:
    """Support structure a printed design needs when grown in `direction`.

    Every unsupported element (see `unsupported_mask`) needs support under its
    down-facing face: area h² (2D: h × depth, the extrusion thickness), and a
    column of support from that face down to the first printed element below it
    in the same column, or to the plate. Returns (down-facing area mm², support
    volume mm³, unsupported elements), counted over the elements of `within`
    (a boolean grid; default all)."""
    solid = np.asarray(solid, dtype=bool)
    bad = unsupported_mask(solid, direction)
    if within is not None:
        bad &= np.asarray(within, dtype=bool).reshape(bad.shape)
    s, b = to_build_frame(solid, direction), to_build_frame(bad, direction)
    face = h * h if solid.ndim == 3 else h * float(depth if depth is not None else 1.0)
    # height of the empty gap under each element: layers since the last solid one
    gap = np.zeros(s.shape[1:], dtype=np.int64)
    columns = 0
    for i in range(len(s)):
        if i > 0:
            columns += int(gap[b[i]].sum())
        gap = np.where(s[i], 0, gap + 1)
    n = int(b.sum())
    return face * n, face * h * columns, n


def unreachable(void: np.ndarray, direction: str, regions: dict[str, np.ndarray]) -> list[str]:
    """Names of the regions (boolean element masks, grid shape or flat) of which no
    element can be printed self-supporting from the plate in `direction`: void
    (keep-out) regions block every 45° path to them. A load or support there can
    never be joined to the part."""
    ok = printable_envelope(void, direction).ravel()
    return [name for name, mask in regions.items() if not ok[np.asarray(mask).ravel()].any()]
