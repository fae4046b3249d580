"""Density transforms: design variables x → physical densities ρ.

Each transform has ``forward(x) -> y`` and ``backward(x, dfdy) -> dfdx`` (the chain
rule through that one step, given the same input x). `Chain` runs them in order and
back-propagates through the same list, so adding a manufacturing constraint means
adding one transform. All arrays are flat element vectors in C order of the grid.
"""
from __future__ import annotations

import numpy as np
from scipy import ndimage


class Transform:
    def forward(self, x: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def backward(self, x: np.ndarray, dfdy: np.ndarray) -> np.ndarray:
        raise NotImplementedError


class DensityFilter(Transform):
    """Density filter with linear (cone) weights w = max(0, R − d) (Bruglieri/Bourdin
    2001; Bruns & Tortorelli 2001), normalised by the sum of weights inside the domain.

    Applied as a correlation over the grid with zero padding, so memory is O(n) and
    the cost O(n · kernel). The kernel is symmetric, so the transpose needed by
    `backward` is the same correlation.
    """

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
        return ndimage.correlate(a, self.kernel, mode="constant", cval=0.0)

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


class Chain(Transform):
    """Transforms applied in order; backward runs the chain rule in reverse."""

    def __init__(self, transforms: list[Transform]):
        self.transforms = list(transforms)

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
