"""Density transforms: design variables x → physical densities ρ.

Each transform has ``forward(x) -> y`` and ``backward(x, dfdy) -> dfdx`` (the chain
rule through that one step, given the same input x). `Chain` runs them in order and
back-propagates through the same list, so adding a manufacturing constraint means
adding one transform. All arrays are flat element vectors in C order of the grid.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np
from scipy import ndimage

from .printability import (
    SHIFT_LIMIT,
    from_build_frame,
    shift,
    support_rule,
    to_build_frame,
    window_sum,
)


class Transform:
    # True when forward is affine in x: a volume constraint through it stays linear.
    linear = False

    def forward(self, x: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def backward(self, x: np.ndarray, dfdy: np.ndarray) -> np.ndarray:
        raise NotImplementedError


# Below this many elements one thread filters faster than the hand-over costs.
THREADED_FILTER_ELEMENTS = 200_000


def threaded_correlate(a: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """ndimage.correlate with zero padding, in slabs along the first axis on the
    compiled kernels' threads (ndimage releases the GIL). Each slab carries the
    kernel's reach of its neighbours' rows, so every output element is computed
    from the same inputs in the same order: the result equals the one-thread
    correlation exactly. Measured on 300×160×120 with the 5×5×5 cone of radius 3:
    0.34 s on one thread, 0.19 s on two. The threads are made per call, so a
    process forked later (sweeps, benchmarks) holds no pool that cannot run."""
    threads = min(numba.get_num_threads(), a.shape[0])
    if threads < 2 or a.size < THREADED_FILTER_ELEMENTS:
        return ndimage.correlate(a, kernel, mode="constant", cval=0.0)
    reach = kernel.shape[0] // 2
    cuts = np.linspace(0, a.shape[0], threads + 1).astype(int)

    def slab(k: int) -> np.ndarray:
        lo, hi = cuts[k], cuts[k + 1]
        a0, a1 = max(lo - reach, 0), min(hi + reach, a.shape[0])
        out = ndimage.correlate(a[a0:a1], kernel, mode="constant", cval=0.0)
        return out[lo - a0 : hi - a0]

    with ThreadPoolExecutor(threads) as pool:
        return np.concatenate(list(pool.map(slab, range(threads))))


class DensityFilter(Transform):
    """Density filter with linear (cone) weights w = max(0, R − d) (Bruglieri/Bourdin
    2001; Bruns & Tortorelli 2001), normalised by the sum of weights inside the domain.

    Applied as a correlation over the grid with zero padding, so memory is O(n) and
    the cost O(n · kernel). The kernel is symmetric, so the transpose needed by
    `backward` is the same correlation.
    """

    linear = True

    def __init__(self, shape: tuple[int, ...], radius: float):
        """`radius` in element widths (radius in mm / element size)."""
        self.shape = tuple(shape)
        self.radius = float(radius)
        reach = max(int(np.ceil(self.radius)) - 1, 0)
        offsets = np.indices((2 * reach + 1,) * len(shape)) - reach
        dist = np.sqrt((offsets**2).sum(axis=0))
        self.kernel = np.maximum(0.0, self.radius - dist)
        if self.kernel.sum() == 0:  # radius ≤ 1 element: no smoothing
            self.kernel = np.ones((1,) * len(shape))
        self.weight_sums = self._correlate(np.ones(self.shape))

    def _correlate(self, a: np.ndarray) -> np.ndarray:
        return threaded_correlate(a, self.kernel)

    def forward(self, x):
        return (self._correlate(x.reshape(self.shape)) / self.weight_sums).ravel()

    def backward(self, x, dfdy):
        return self._correlate(dfdy.reshape(self.shape) / self.weight_sums).ravel()


class HeavisideProjection(Transform):
    """Smoothed Heaviside projection (Wang, Lazarov & Sigmund 2011, Struct. Multidisc.
    Optim. 43:767): ρ = (tanh(βη) + tanh(β(x − η))) / (tanh(βη) + tanh(β(1 − η))).
    β is raised by the design loop (continuation)."""

    def __init__(self, beta: float = 1.0, eta: float = 0.5):
        self.beta, self.eta = float(beta), float(eta)

    def _den(self):
        b, e = self.beta, self.eta
        return np.tanh(b * e) + np.tanh(b * (1 - e))

    def forward(self, x):
        b, e = self.beta, self.eta
        return (np.tanh(b * e) + np.tanh(b * (x - e))) / self._den()

    def backward(self, x, dfdy):
        b, e = self.beta, self.eta
        return dfdy * b * (1 - np.tanh(b * (x - e)) ** 2) / self._den()


class PassiveOverride(Transform):
    """Holds passive solid regions at 1 and void regions at 0 in the physical field."""

    linear = True

    def __init__(self, solid: np.ndarray, void: np.ndarray):
        self.solid, self.void = solid, void

    def forward(self, x):
        y = x.copy()
        y[self.solid] = 1.0
        y[self.void] = 0.0
        return y

    def backward(self, x, dfdy):
        g = dfdy.copy()
        g[self.solid | self.void] = 0.0
        return g


class MirrorSymmetry(Transform):
    """Mirror symmetry about planes normal to the given axes (0 = x, 1 = y, 2 = z),
    enforced on the design variables whatever the loads: y = the average of x over
    its mirror images. A plane lies at `planes[k]` elements along its axis (a whole
    or half number: an element boundary or centre; None or absent: the domain
    centre); an element whose mirror falls outside the domain is left as it is.
    For planes normal to different axes the averages commute, so the map is a
    projection onto the symmetric fields and its own transpose: backward applies
    the same average. The filter, the projection and the overhang layer of a build
    direction across centred planes keep the symmetry; the loop applies the map
    again after the filter, whose domain edges are not mirror images about a plane
    off the centre. ρ then comes out mirror-symmetric to round-off when the passive
    regions are symmetric too."""

    linear = True

    def __init__(
        self,
        shape: tuple[int, ...],
        axes: tuple[int, ...],
        planes: tuple[float | None, ...] | None = None,
    ):
        self.shape, self.axes = tuple(shape), tuple(axes)
        planes = planes or (None,) * len(self.axes)
        self.mirrors = []  # per axis: the mirror index of each layer, and where it is inside
        for axis, at in zip(self.axes, planes):
            n = self.shape[axis]
            twice = n if at is None else int(round(2 * at))
            mirror = twice - 1 - np.arange(n)
            inside = (mirror >= 0) & (mirror < n)
            self.mirrors.append((np.clip(mirror, 0, n - 1), inside))

    def _average(self, v: np.ndarray) -> np.ndarray:
        field = v.reshape(self.shape)
        for axis, (mirror, inside) in zip(self.axes, self.mirrors):
            reflected = np.take(field, mirror, axis=axis)
            where = inside.reshape([-1 if a == axis else 1 for a in range(field.ndim)])
            field = np.where(where, 0.5 * (field + reflected), field)
        return np.ascontiguousarray(field).ravel()

    def forward(self, x):
        return self._average(x)

    def backward(self, x, dfdy):
        return self._average(dfdy)


class Chain(Transform):
    """Transforms applied in order; backward runs the chain rule in reverse."""

    def __init__(self, transforms: list[Transform]):
        self.transforms = list(transforms)
        self.linear = all(t.linear for t in self.transforms)

    def forward(self, x):
        for t in self.transforms:
            x = t.forward(x)
        return x

    def backward(self, x, dfdy):
        inputs = []
        for t in self.transforms:
            inputs.append(x)
            x = t.forward(x)
        for t, xin in zip(reversed(self.transforms), reversed(inputs)):
            dfdy = t.backward(xin, dfdy)
        return dfdy

    def backward_many(self, x, grads: list[np.ndarray]) -> list[np.ndarray]:
        """Backward for several functions at once, sharing one forward pass."""
        inputs = []
        for t in self.transforms:
            inputs.append(x)
            x = t.forward(x)
        out = []
        for g in grads:
            for t, xin in zip(reversed(self.transforms), reversed(inputs)):
                g = t.backward(xin, g)
            out.append(g)
        return out


TINY = 1e-280  # floor of a window sum Σ ξ^P in the correlated sensitivities


class OverhangFilter(Transform):
    """Layer-by-layer additive-manufacturing filter (Langelaar, Additive
    Manufacturing 12 (2016) 60-70 for 3D; Struct. Multidisc. Optim. 55 (2017)
    871-883 for 2D), for an overhang angle α from the plate.

    In the build frame (layer 0 on the plate, see printability.py) the printed
    density of layer i is
        ξ_i = k · smin(x_i, smax(ξ over condition 1), …, smax(ξ over condition C)),
    with ξ_0 = x_0, where each condition of the angle's support rule
    (`printability.support_rule`: at 45° the one support region of the layer
    below, at other angles the cone over m layers and one region per layer) is a
    set of cells in the layers below, and
        smax(ξ_1..ξ_N) = (Σ ξ_j^P)^(1/Q),  Q = P + ln N / ln ξ0   (exact when all ξ_j = ξ0)
        smin(a, b)     = ½ (a + b − √((a − b)² + ε) + √ε),
    the several-argument smin taken pairwise from the left. P = 40, ε = 1e-4,
    ξ0 = 0.5 are the values of the papers (as recalled). Conditions whose cells
    reach below the plate hold there and are left out.

    Effect of the smoothing: smax exceeds the true maximum for inputs above ξ0 (by
    N^(1/Q) − 1 ≈ 2.9 % in 2D, 4.3 % in 3D when all are 1) and falls below it under
    ξ0; each pairwise smin exceeds the true minimum by at most √ε'/2, with
    ε' = ε / C² so that the C of them together exceed it by at most √ε/2 = 0.005.
    The factor k = 1/(1 + √ε) (our addition) removes that excess at the solid
    threshold 0.5, so that an element at ρ ≥ 0.5 always has, in every condition, a
    cell at ρ ≥ 0.5: a thresholded output always passes the printability check of
    the same angle. A fully solid, self-supporting field comes out at about 0.994
    (2D, 45°) instead of 1; on a face at other angles, where a condition holds few
    solid cells, down to about 0.98.

    Sensitivities run the layer recursion backwards (adjoint), linear in the
    number of elements times the cells of the rule.
    """

    def __init__(
        self,
        shape: tuple[int, ...],
        direction: str,
        angle: float = 45.0,
        p: float = 40.0,
        eps: float = 1e-4,
        xi0: float = 0.5,
    ):
        self.shape, self.direction = tuple(shape), direction
        self.rule = support_rule(angle, len(shape) - 1)
        self.p = p
        self.eps = eps / len(self.rule.conditions) ** 2
        self.q = [
            p + np.log(sum(len(offs) for _, offs in parts)) / np.log(xi0)
            for parts in self.rule.conditions
        ]
        self.k = 1.0 / (1.0 + np.sqrt(eps))

    def _smin(self, a, b):
        d = a - b
        root = np.sqrt(d * d + self.eps)
        value = 0.5 * (a + b - root + np.sqrt(self.eps))
        return value, 0.5 * (1 - d / root), 0.5 * (1 + d / root)

    def _layers(self, x):
        """Forward pass in the build frame, keeping what backward needs: per layer,
        for each active condition, its window sum, its smax and the running smin
        before it."""
        blue = np.ascontiguousarray(to_build_frame(x.reshape(self.shape), self.direction))
        printed = np.empty_like(blue)
        powered = np.empty_like(blue)
        printed[0] = blue[0]
        powered[0] = blue[0] ** self.p
        steps = [[]]
        for i in range(1, len(blue)):
            value, kept = blue[i], []
            for c in self.rule.active(i):
                total = sum(window_sum(powered[i - j], offs) for j, offs in self.rule.conditions[c])
                support = total ** (1.0 / self.q[c])
                kept.append((c, total, support, value))
                value = self._smin(value, support)[0]
            printed[i] = self.k * value
            powered[i] = printed[i] ** self.p
            steps.append(kept)
        return blue, printed, powered, steps

    def forward(self, x):
        printed = self._layers(x)[1]
        return np.ascontiguousarray(from_build_frame(printed, self.direction)).ravel()

    def backward(self, x, dfdy):
        blue, printed, powered, steps = self._layers(x)
        g = to_build_frame(dfdy.reshape(self.shape), self.direction).copy()
        dx = np.empty_like(blue)
        a = (self.p - 1) / self.p
        for i in range(len(blue) - 1, 0, -1):
            gv = self.k * g[i]  # adjoint of the running smin
            for c, total, support, before in reversed(steps[i]):
                _, d_before, d_support = self._smin(before, support)
                gs = gv * d_support
                gv = gv * d_before
                # d smax_m / d ξ_j = (P/Q) · (ξ_j^P / Σ_m)^((P−1)/P) · Σ_m^(1/Q − 1/P):
                # written so that no factor overflows when the window sum Σ_m underflows.
                q = self.q[c]
                b = 1 / q - 1 / self.p  # > 0 because Q < P
                safe = np.where(total > 0, total, 1.0)
                weight = np.where(total > 0, gs * (self.p / q) * safe**b, 0.0)
                for j, offs in self.rule.conditions[c]:
                    if len(offs) > SHIFT_LIMIT:
                        # the same sum as below, as one correlation: ξ_j^(P−1) times
                        # the window sum of weight · Σ_m^(−(P−1)/P); Σ_m held above
                        # TINY so that no factor overflows (windows whose every cell
                        # is below TINY^(1/P) ≈ 1e-7 pass a smaller sensitivity)
                        coef = weight * np.maximum(safe, TINY) ** -a
                        g[i - j] += printed[i - j] ** (self.p - 1) * window_sum(coef, offs)
                        continue
                    for o in offs:
                        ratio = np.minimum(shift(powered[i - j], o, +1) / safe, 1.0)
                        g[i - j] += shift(weight * ratio**a, o, -1)  # onto element m + o
            dx[i] = gv
        dx[0] = g[0]
        return np.ascontiguousarray(from_build_frame(dx, self.direction)).ravel()
