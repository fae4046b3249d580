"""Density transforms: backward against central finite differences, and the filter
against an independent dense construction of its weight matrix."""

import numpy as np
import pytest

from problems import fd_check
from topo.transforms import Chain, DensityFilter, HeavisideProjection, PassiveOverride


@pytest.mark.parametrize("shape,radius", [((9, 7), 2.4), ((6, 5, 4), 1.8), ((10, 3), 3.0)])
def test_filter_backward_matches_finite_differences(shape, radius, rng):
    fd_check(DensityFilter(shape, radius), rng.uniform(size=int(np.prod(shape))), rng)


@pytest.mark.parametrize("shape,radius", [((7, 5), 2.4), ((4, 5, 3), 2.2)])
def test_filter_equals_dense_cone_weights(shape, radius, rng):
    # Definition (Bruns & Tortorelli 2001): ρ̃_e = Σ_i w_ei x_i / Σ_i w_ei with
    # w_ei = max(0, R − |c_e − c_i|), built here as an explicit dense matrix.
    idx = np.indices(shape).reshape(len(shape), -1).T.astype(float)
    dist = np.linalg.norm(idx[:, None, :] - idx[None, :, :], axis=2)
    w = np.maximum(0.0, radius - dist)
    x = rng.uniform(size=len(idx))
    assert np.allclose(DensityFilter(shape, radius).forward(x), w @ x / w.sum(axis=1), atol=1e-13)


def test_filter_keeps_uniform_field():
    f = DensityFilter((8, 6, 5), 2.7)
    assert np.allclose(f.forward(np.full(240, 0.37)), 0.37)


@pytest.mark.parametrize("beta", [1.0, 8.0, 32.0])
def test_projection_backward_and_end_points(beta, rng):
    p = HeavisideProjection(beta, 0.5)
    fd_check(p, rng.uniform(0.3, 0.7, 50), rng, eps=1e-7)
    # ρ(0) = 0 and ρ(1) = 1 for every β (Wang, Lazarov & Sigmund 2011, eq. 10).
    assert np.allclose(p.forward(np.array([0.0, 1.0])), [0.0, 1.0])


def test_chain_backward_with_passive_regions(rng):
    shape = (8, 6)
    n = 48
    solid = np.zeros(n, bool)
    void = np.zeros(n, bool)
    solid[:5] = True
    void[-7:] = True
    chain = Chain(
        [DensityFilter(shape, 2.0), HeavisideProjection(4.0, 0.4), PassiveOverride(solid, void)]
    )
    x = rng.uniform(size=n)
    fd_check(chain, x, rng)
    y = chain.forward(x)
    assert np.all(y[solid] == 1.0) and np.all(y[void] == 0.0)
    g1, g2 = chain.backward_many(x, [np.ones(n), np.arange(n, dtype=float)])
    assert np.allclose(g1, chain.backward(x, np.ones(n)))
    assert np.allclose(g2, chain.backward(x, np.arange(n, dtype=float)))


@pytest.mark.parametrize(
    "shape,radius", [((67, 60, 55), 3.0), ((613, 401), 2.5), ((70, 50, 60), 1.0)]
)
def test_threaded_filter_equals_scipy_correlate_exactly(shape, radius):
    # Reference: scipy.ndimage.correlate on the whole array, one thread. The slabs
    # carry their neighbours' rows, so the threaded result must be bit-identical.
    from scipy import ndimage

    from topo.transforms import THREADED_FILTER_ELEMENTS, DensityFilter, threaded_correlate

    a = np.random.default_rng(3).random(shape)
    assert a.size >= THREADED_FILTER_ELEMENTS
    kernel = DensityFilter(shape, radius).kernel
    expected = ndimage.correlate(a, kernel, mode="constant", cval=0.0)
    assert np.array_equal(threaded_correlate(a, kernel), expected)
