"""Minimum wall and gap enforced in the design: the robust formulation.

Three Heaviside projections of the one filtered field (Wang, Lazarov & Sigmund 2011,
Struct. Multidisc. Optim. 43:767-784): the eroded design at η_e = 0.5 + Δη_e, the
intermediate (blueprint) design at 0.5 and the dilated design at η_d = 0.5 − Δη_d.
For compliance the eroded design is the worst case, so it alone is analysed and its
compliance is the objective; the material budget holds the dilated design, its
limit updated so that the intermediate design meets the budget (the same paper's
practice, there every 20 iterations; here at every accepted design). The printed
part is the intermediate design thresholded (printed.py). A solid member of the
intermediate design that would vanish from the eroded one costs the objective its
stiffness, and a hole that would close in the dilated one costs material, so what
the optimiser keeps has the widths below (Qian & Sigmund 2013, Comput. Methods
Appl. Mech. Engrg. 253:237-251, relate them to η and the filter radius; we derive
the relation ourselves for our filter, see `blueprint_width`).

The overhang layer, when on, comes after each projection, as in the single chain:
each of the three designs is then printable on its own, and the printed part, the
intermediate one thresholded, keeps the guarantee of transforms.OverhangFilter.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

import numpy as np
from scipy import integrate, ndimage, optimize

from .transforms import (
    Chain,
    DensityFilter,
    HeavisideProjection,
    Transform,
    threaded_correlate,
)

DEFAULT_SHIFT = 0.2  # Δη of the governing requirement: thresholds 0.3 / 0.5 / 0.7 (common practice)
MAX_SHIFT = 0.4  # thresholds beyond 0.1 / 0.9 leave too little of the field to project
MIN_ELEMENTS = 2.0  # a requirement narrower than two elements cannot be held on the grid
MAX_FILTER_ELEMENTS = 25  # as problem.MAX_FILTER_ELEMENTS: the cost of a wider filter


def cone_profile(d: float, dim: int) -> float:
    """The cone filter w = max(0, 1 − r) of radius 1 in `dim` dimensions, integrated
    over the plane of a flat wall at distance d from its centre (unnormalised):
    1D: 1 − d; 2D: a − d² ln((1 + a)/d), a = √(1 − d²); 3D: (π/3)(1 − d)²(1 + 2d)."""
    d = abs(d)
    if d >= 1.0:
        return 0.0
    if dim == 1:
        return 1.0 - d
    if dim == 2:
        a = math.sqrt(1.0 - d * d)
        return a - (d * d * math.log((1.0 + a) / d) if d > 0 else 0.0)
    return math.pi / 3.0 * (1.0 - d) ** 2 * (1.0 + 2.0 * d)


@cache
def _total(dim: int) -> float:
    return 2.0 * integrate.quad(cone_profile, 0.0, 1.0, args=(dim,))[0]


def _mass(a: float, b: float, dim: int) -> float:
    """Share of the profile between a and b (a ≤ b)."""
    a, b = max(a, -1.0), min(b, 1.0)
    if b <= a:
        return 0.0
    return integrate.quad(cone_profile, a, b, args=(dim,), points=[0.0] if a < 0 < b else None)[
        0
    ] / _total(dim)


@cache
def blueprint_width(shift: float, dim: int) -> float:
    """Width, in filter radii, of the narrowest solid feature of the intermediate
    design (threshold 0.5) whose eroded version (threshold 0.5 + shift) is not empty;
    by symmetry also the narrowest void of one that stays open when dilated
    (threshold 0.5 − shift). The projections are taken as sharp steps (β → ∞).

    Derivation (ours, across a flat wall): the filtered field at s of a design x is
    ∫ p(s − t) x(t) dt with p the profile of `cone_profile`. Among designs with
    x ∈ [0, 1] whose field reaches 0.5 + shift at 0, the one whose field falls to 0.5
    soonest on both sides puts x = 1 where p(t)/(p(t − s) + p(t + s)) is largest: a
    bar |t| ≤ c (a bang-bang linear programme). c follows from the field at 0 being
    0.5 + shift, and the width is 2s where the field of that bar is 0.5. In 1D this
    is closed form: 2√shift for shift ≤ 1/4 and 2(1 − √(1/2 − shift)) above, which
    the tests check, and which is the kind of relation Qian & Sigmund (2013) give for
    the linear filter (recalled from memory, not verified against the paper).

    >>> round(blueprint_width(0.25, 1), 6)
    1.0
    """
    if shift <= 0:
        return 0.0
    field = lambda s, c: _mass(s - c, s + c, dim)  # noqa: E731
    c = optimize.brentq(lambda c: field(0.0, c) - (0.5 + shift), 1e-12, 1.0, xtol=1e-12)
    s = optimize.brentq(lambda s: field(s, c) - 0.5, 0.0, 1.0 + c, xtol=1e-12)
    return 2.0 * s


def shift_for(width: float, dim: int) -> float:
    """The Δη whose blueprint width is `width` filter radii (inverse of blueprint_width)."""
    if width <= 0:
        return 0.0
    return optimize.brentq(lambda e: blueprint_width(e, dim) - width, 1e-9, 0.5 - 1e-9, xtol=1e-12)


@dataclass(frozen=True)
class LengthScale:
    """The enforced length scale: the filter radius and the threshold shifts that give
    the requested minimum wall and gap (mm; None: that side not enforced)."""

    filter_radius: float  # mm
    erode: float  # Δη_e: the eroded threshold is 0.5 + erode
    dilate: float  # Δη_d: the dilated threshold is 0.5 − dilate
    min_wall: float | None
    min_gap: float | None

    def summary(self) -> dict:
        return {
            "min_wall_mm": self.min_wall,
            "min_gap_mm": self.min_gap,
            "filter_radius_mm": self.filter_radius,
            "eroded_threshold": 0.5 + self.erode,
            "dilated_threshold": 0.5 - self.dilate,
            "source": "robust formulation (Wang, Lazarov & Sigmund 2011)",
        }


class LengthScaleError(ValueError):
    def __init__(self, key: str, message: str):
        self.key, self.message = key, message
        super().__init__(f"{key}: {message}")


def length_scale(
    min_wall: float | None,
    min_gap: float | None,
    h: float,
    dim: int,
    radius: float | None = None,
) -> LengthScale:
    """The filter radius (given, or chosen so that the wider requirement takes
    Δη = DEFAULT_SHIFT) and the two shifts for a minimum wall and gap in mm on a
    grid of element size h. Raises LengthScaleError naming the key at fault."""
    wanted = {"checks.min_wall": min_wall, "checks.min_gap": min_gap}
    if all(v is None for v in wanted.values()):
        raise LengthScaleError(
            "optimization.enforce_length_scale",
            "give the widths to enforce: checks.min_wall and/or checks.min_gap (mm)",
        )
    for key, value in wanted.items():
        if value is not None and value < MIN_ELEMENTS * h - 1e-9:
            raise LengthScaleError(
                key,
                f"{value:g} mm is {value / h:.3g} elements of {h:g} mm; enforcing it needs "
                f"at least {MIN_ELEMENTS:g} elements across: use element_size ≤ "
                f"{value / MIN_ELEMENTS:g} mm",
            )
    widest_key = max((k for k in wanted if wanted[k] is not None), key=lambda k: wanted[k])
    widest = wanted[widest_key]
    if radius is None:
        radius = widest / blueprint_width(DEFAULT_SHIFT, dim)
        if radius > MAX_FILTER_ELEMENTS * h:
            coarser = radius / MAX_FILTER_ELEMENTS
            raise LengthScaleError(
                widest_key,
                f"{widest:g} mm needs a filter radius of {radius:.3g} mm, "
                f"{radius / h:.3g} elements of {h:g} mm (at most {MAX_FILTER_ELEMENTS}): "
                f"use element_size ≥ {coarser:.2g} mm",
            )
    elif widest > blueprint_width(MAX_SHIFT, dim) * radius:
        least = widest / blueprint_width(DEFAULT_SHIFT, dim)
        raise LengthScaleError(
            "optimization.filter_radius",
            f"{radius:g} mm cannot enforce {widest_key} = {widest:g} mm: the widest "
            f"length scale a radius R holds is {blueprint_width(MAX_SHIFT, dim):.3g} R "
            f"(thresholds {0.5 - MAX_SHIFT:g}/{0.5 + MAX_SHIFT:g}); give filter_radius "
            f"≥ {least:.3g} mm, or leave it out to have it chosen",
        )
    shifts = [0.0 if v is None else shift_for(v / radius, dim) for v in (min_wall, min_gap)]
    return LengthScale(radius, shifts[0], shifts[1], min_wall, min_gap)


class PaddedFilter(Transform):
    """The density filter of transforms.DensityFilter with the outside of the domain
    taken as void, and as solid beside the elements that hold a support or a load.

    DensityFilter divides by the weights inside the domain, so a member along the
    domain boundary filters like one twice as thick: the robust formulation then
    lets boundary members come out at half the length scale. Padding the domain with
    void removes that, and padding it with solid at supports and loads keeps the
    eroded design attached there (Clausen & Andreassen 2017, Struct. Multidisc.
    Optim. 56:1147-1155, "On filter boundary conditions in topology optimization";
    recalled from memory). Affine in x: ρ̃ = (K x + K o) / Σw, o the padding."""

    linear = True

    def __init__(self, shape: tuple[int, ...], radius: float, anchored: np.ndarray):
        self.shape = tuple(shape)
        self.kernel = DensityFilter(shape, radius).kernel
        self.total = float(self.kernel.sum())
        reach = max(s // 2 for s in self.kernel.shape)
        # each outside cell takes the anchoring of its nearest element inside
        inside = np.pad(np.asarray(anchored, float).reshape(self.shape), reach, mode="edge")
        inside[(slice(reach, -reach or None),) * len(self.shape)] = 0.0
        outside = ndimage.correlate(inside, self.kernel, mode="constant", cval=0.0)
        self.padding = (
            outside[(slice(reach, -reach or None),) * len(self.shape)].ravel() / self.total
        )

    def _correlate(self, a: np.ndarray) -> np.ndarray:
        field = a.reshape(self.shape)
        return threaded_correlate(field, self.kernel).ravel() / self.total

    def forward(self, x):
        return self._correlate(x) + self.padding

    def backward(self, x, dfdy):
        return self._correlate(dfdy)  # the kernel is symmetric


def anchored_elements(model) -> np.ndarray:
    """Elements with a node in a support or a load region."""
    nodes = [n for n in model.support_nodes] + [n for _, n in model.load_nodes]
    held = np.concatenate(nodes) if nodes else np.zeros(0, dtype=int)
    return np.isin(model.grid.element_nodes, held).any(axis=1)


class Projections:
    """The three projections of the robust formulation, stepped together by the β
    continuation (continuation.Continuation reads and sets `beta`)."""

    def __init__(self, erode: float, dilate: float, beta: float = 1.0):
        self.eroded = HeavisideProjection(beta, 0.5 + erode)
        self.intermediate = HeavisideProjection(beta, 0.5)
        self.dilated = HeavisideProjection(beta, 0.5 - dilate)

    @property
    def beta(self) -> float:
        return self.intermediate.beta

    @beta.setter
    def beta(self, value: float) -> None:
        for p in (self.eroded, self.intermediate, self.dilated):
            p.beta = float(value)


class RobustChain(Chain):
    """x → the eroded design: the field the loop analyses. `intermediate` and
    `dilated` are the chains to the other two designs; all three share every step
    but the projection. `steps` is the single chain's list: its projection is
    replaced by the three, its density filter by the PaddedFilter of the same radius
    (`anchored`: the elements beside which the outside counts as solid)."""

    def __init__(
        self,
        steps: list[Transform],
        projection: Transform,
        scale: LengthScale,
        anchored: np.ndarray,
    ):
        at = steps.index(projection)
        steps = [
            PaddedFilter(t.shape, t.radius, anchored) if isinstance(t, DensityFilter) else t
            for t in steps
        ]
        self.scale = scale
        self.projections = Projections(scale.erode, scale.dilate, projection.beta)

        def branch(p: HeavisideProjection) -> list[Transform]:
            return [*steps[:at], p, *steps[at + 1 :]]

        super().__init__(branch(self.projections.eroded))
        self.intermediate = Chain(branch(self.projections.intermediate))
        self.dilated = Chain(branch(self.projections.dilated))


def blueprint(chain: Chain, x, analysed=None):
    """The design that is printed (thresholded) and reported: the intermediate design
    of the robust formulation, else the chain's one output (`analysed`, when the
    caller has it already)."""
    if isinstance(chain, RobustChain):
        return chain.intermediate.forward(x)
    return chain.forward(x) if analysed is None else analysed
