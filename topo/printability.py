"""Build orientation and the printability check on the element grid.

A build direction (±x, ±y, ±z) is the direction the part grows. Fields are brought
into a "build frame" whose axis 0 runs along it, layer 0 being the first layer on
the build plate. The self-supporting overhang limit in powder-bed fusion depends
on machine, alloy and parameters (common practice quotes 35–50° from the plate).
At 45° on square/cubic elements the rule is exactly "every element rests on an
element of its support region in the layer below": the element directly below and
its face neighbours in that layer (3 cells in 2D, 5 in 3D; Langelaar 2016/2017).
Angles from 30° to 60° use a support region over several layers (`support_rule`).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import ndimage

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
    """Offsets, within the layer below, of an element's support region at 45°."""
    if plane_dim == 1:
        return [(-1,), (0,), (1,)]
    return [(0, 0), (-1, 0), (1, 0), (0, -1), (0, 1)]


def disc(plane_dim: int, radius: float) -> list[tuple[int, ...]]:
    """Offsets within a layer whose centres lie at most `radius` element widths
    from the origin (Euclidean). In the order of `support_offsets` at radius 1, so
    that the 45° rule sums exactly as before."""
    r = int(np.floor(radius + 1e-9))
    if plane_dim == 1:
        return [(o,) for o in range(-r, r + 1)]
    cells = [(a, b) for a in range(-r, r + 1) for b in range(-r, r + 1)]
    cells = [c for c in cells if c[0] ** 2 + c[1] ** 2 <= radius**2 + 1e-9]
    return sorted(cells, key=lambda c: (c[0] ** 2 + c[1] ** 2, -abs(c[0]), c))


# The overhang rule for any angle α from the plate, 30° ≤ α ≤ 60°.
#
# The support region of Langelaar's layer filter (Addit. Manuf. 12 (2016) 60-70;
# Struct. Multidisc. Optim. 55 (2017) 871-883) is the 45° cone cut by one layer:
# on cubic elements its reach, one element, is exactly h/tan 45°. At other angles
# the reach in one layer, h/tan α, is not a whole number of elements (0.58 at 60°,
# 1.43 at 35°), so a one-layer region rounds the angle to 45° or to 90°. We follow
# the support region of Gaynor & Guest (Struct. Multidisc. Optim. 54 (2016)
# 1157-1172; recalled from memory): the region under an element is the cone of the
# self-supporting angle and spans several layers, so that the average slope is
# resolved. On its own that cone lets a run of shallow steps stand on a tall steep
# wall (it asks for material somewhere in the cone, not under each step), so we
# add, our own rule, that each of those layers holds material no farther aside
# than a plane at α drawn on the grid can step in as many layers. An element of
# layer k is supported when
#   (cone)  a solid element of layers k−1 … k−m has its centre inside the cone:
#           in layer k−j at most j/tan α element widths aside;
#   (steps) for every j = 1 … m, layer k−j holds a solid element at most
#           ⌈j/tan α⌉ element widths aside (the most a grid drawing of a plane at α
#           steps in j layers: element centres inside the plane).
# Cells below the plate count as solid. m (`cone_layers`) is the fewest layers for
# which the cone's steepest whole-element slope, max_j ⌊j/tan α⌋/j, lies within
# ANGLE_TOLERANCE of α, at most MAX_LAYERS; the rule is never more lenient than α
# on average, and at worst a little stricter (`effective_angle`). At 45° m = 1 and
# both parts are the one-layer stencil of `support_offsets`.

MIN_ANGLE, MAX_ANGLE = 30.0, 60.0  # degrees from the plate
MAX_LAYERS = 8
ANGLE_TOLERANCE = 1.0  # degrees


def _reach(angle: float) -> float:
    """Lateral reach of the cone per layer, in element widths."""
    return 1.0 / np.tan(np.radians(angle))


def _steepest_slope(angle: float, m: int) -> float:
    s = _reach(angle)
    return max(np.floor(j * s + 1e-9) / j for j in range(1, m + 1))


def _slope_angle(slope: float) -> float:
    return 90.0 if slope <= 0 else float(np.degrees(np.arctan(1.0 / slope)))


def check_angle(angle: float) -> None:
    if not MIN_ANGLE <= angle <= MAX_ANGLE:
        raise ValueError(
            f"overhang angle {angle:g}° is outside [{MIN_ANGLE:g}, {MAX_ANGLE:g}] degrees"
        )


def cone_layers(angle: float) -> int:
    """m: the layers the support region of `angle` spans (1 at 45°)."""
    check_angle(angle)
    errors = [_slope_angle(_steepest_slope(angle, m)) - angle for m in range(1, MAX_LAYERS + 1)]
    for m, err in enumerate(errors, start=1):
        if err <= ANGLE_TOLERANCE + 1e-9:
            return m
    return int(np.argmin(errors)) + 1


def effective_angle(angle: float) -> float:
    """Steepest sustained slope, from the plate, that the discrete cone carries:
    α or a little more."""
    return _slope_angle(_steepest_slope(angle, cone_layers(angle)))


@dataclass(frozen=True)
class SupportRule:
    """The support conditions of an overhang angle on one grid dimension. Each
    condition is a tuple of (depth j, in-layer offsets) parts; it holds when any of
    its cells is solid (or lies below the plate). An element is supported when every
    condition holds."""

    angle: float
    plane_dim: int
    layers: int
    conditions: tuple[tuple[tuple[int, tuple[tuple[int, ...], ...]], ...], ...]

    def active(self, layer: int) -> list[int]:
        """Conditions that layer `layer` must meet: the others reach the plate."""
        return [c for c, parts in enumerate(self.conditions) if max(j for j, _ in parts) <= layer]

    def supported(self, stack: np.ndarray, layer: int) -> np.ndarray:
        """Boolean layer: elements of `layer` whose conditions all hold, given the
        boolean build-frame `stack` of the layers below."""
        ok = np.ones(stack.shape[1:], dtype=bool)
        for c in self.active(layer):
            total = sum(
                window_sum(stack[layer - j].astype(np.int32), offs)
                for j, offs in self.conditions[c]
            )
            ok &= total > 0
        return ok


@lru_cache(maxsize=64)
def support_rule(angle: float, plane_dim: int) -> SupportRule:
    m = cone_layers(angle)
    s = _reach(angle)
    cone = tuple((j, tuple(disc(plane_dim, j * s))) for j in range(1, m + 1))
    steps = [((j, tuple(disc(plane_dim, np.ceil(j * s - 1e-9)))),) for j in range(1, m + 1)]
    candidates = [cone, *steps]
    cells = [{(j, o) for j, offs in parts for o in offs} for parts in candidates]
    # A condition whose cells include all of another's holds whenever that one does.
    keep = [
        parts
        for a, parts in enumerate(candidates)
        if not any(
            b != a and cells[b] <= cells[a] and (cells[b] != cells[a] or b < a)
            for b in range(len(candidates))
        )
    ]
    return SupportRule(float(angle), plane_dim, m, tuple(keep))


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


SHIFT_LIMIT = 9  # larger windows are summed by correlation (same result, C speed)


def window_sum(layer: np.ndarray, offsets=None) -> np.ndarray:
    """Σ over `offsets` (default: the 45° support region) of each cell's
    neighbours in the layer, zero outside the domain. The offsets are symmetric, so
    this linear map is its own transpose."""
    offsets = support_offsets(layer.ndim) if offsets is None else offsets
    if len(offsets) <= SHIFT_LIMIT:
        return sum(shift(layer, o, +1) for o in offsets)
    return ndimage.correlate(layer, _footprint(tuple(offsets), layer.dtype), mode="constant")


@lru_cache(maxsize=256)
def _footprint(offsets: tuple[tuple[int, ...], ...], dtype) -> np.ndarray:
    r = max(max(abs(v) for v in o) for o in offsets)
    kernel = np.zeros((2 * r + 1,) * len(offsets[0]), dtype=dtype)
    for o in offsets:
        kernel[tuple(v + r for v in o)] = 1
    return kernel


def unsupported_mask(solid: np.ndarray, direction: str, angle: float = 45.0) -> np.ndarray:
    """Boolean grid: solid elements off the plate that the overhang rule of `angle`
    leaves unsupported (see the rule above)."""
    rule = support_rule(angle, solid.ndim - 1)
    s = to_build_frame(solid.astype(bool), direction)
    bad = np.zeros_like(s)
    for i in range(1, len(s)):
        bad[i] = s[i] & ~rule.supported(s, i)
    return from_build_frame(bad, direction)


def unsupported_fraction(
    density: np.ndarray, direction: str, threshold: float = SOLID, angle: float = 45.0
) -> float:
    """Share of the solid elements (ρ ≥ threshold) that are unsupported."""
    solid = density >= threshold
    n = int(solid.sum())
    return float(unsupported_mask(solid, direction, angle).sum() / n) if n else 0.0


def unsupported_by_direction(density: np.ndarray, angle: float = 45.0) -> dict[str, float]:
    return {d: unsupported_fraction(density, d, angle=angle) for d in directions(density.ndim)}


def printable_envelope(void: np.ndarray, direction: str, angle: float = 45.0) -> np.ndarray:
    """Elements that some self-supporting design could fill: everything reachable
    from the plate through non-void elements within the overhang rule."""
    rule = support_rule(angle, void.ndim - 1)
    free = to_build_frame(~void.astype(bool), direction)
    ok = np.zeros_like(free)
    ok[0] = free[0]
    for i in range(1, len(free)):
        ok[i] = free[i] & rule.supported(ok, i)
    return from_build_frame(ok, direction)


def support_needed(
    solid: np.ndarray,
    direction: str,
    h: float,
    depth: float | None = None,
    within: np.ndarray | None = None,
    angle: float = 45.0,
) -> tuple[float, float, int]:
    """Support structure a printed design needs when grown in `direction`.

    Every unsupported element (see `unsupported_mask`) needs support under its
    down-facing face: area h² (2D: h × depth, the extrusion thickness), and a
    column of support from that face down to the first printed element below it
    in the same column, or to the plate. Returns (down-facing area mm², support
    volume mm³, unsupported elements), counted over the elements of `within`
    (a boolean grid; default all)."""
    solid = np.asarray(solid, dtype=bool)
    bad = unsupported_mask(solid, direction, angle)
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


def unreachable(
    void: np.ndarray, direction: str, regions: dict[str, np.ndarray], angle: float = 45.0
) -> list[str]:
    """Names of the regions (boolean element masks, grid shape or flat) of which no
    element can be printed self-supporting from the plate in `direction`: void
    (keep-out) regions block every path to them within the overhang rule. A load
    or support there can never be joined to the part."""
    ok = printable_envelope(void, direction, angle).ravel()
    return [name for name, mask in regions.items() if not ok[np.asarray(mask).ravel()].any()]
