"""The fused CG vector passes (topo/vectorkernels.py) against numpy's separate
operations, and their results independent of the number of threads."""

import numba
import numpy as np
import pytest

from topo import vectorkernels as vk


def _vectors(n=1003, m=3, seed=0):
    rng = np.random.default_rng(seed)
    return [rng.standard_normal((n, m)) for _ in range(4)]


@pytest.mark.parametrize("m", [1, 3])
def test_cg_update_matches_numpy(m):
    x, r, p, ap = _vectors(m=m)
    alpha = np.linspace(0.5, -0.3, m)
    x_ref, r_ref = x + p * alpha, r - ap * alpha
    rr = vk.cg_update(x, r, p, ap, alpha)
    assert np.allclose(x, x_ref, rtol=0, atol=1e-14)
    assert np.allclose(r, r_ref, rtol=0, atol=1e-14)
    assert np.allclose(rr, np.einsum("ij,ij->j", r_ref, r_ref), rtol=1e-13)


def test_dots_and_direction_match_numpy_with_a_single_precision_z():
    _, r, p, ap = _vectors()
    z = np.random.default_rng(1).standard_normal(r.shape).astype(np.float32)
    z64 = z.astype(float)
    rz, apz = vk.cg_dots(r, ap, z)
    assert np.allclose(rz, np.einsum("ij,ij->j", r, z64), rtol=1e-13)
    assert np.allclose(apz, np.einsum("ij,ij->j", ap, z64), rtol=1e-13)
    # single-precision inputs are summed in double precision
    a32 = r.astype(np.float32)
    exact = np.einsum("ij,ij->j", a32.astype(float), z64)
    assert np.allclose(vk.column_dots(a32, z), exact, rtol=1e-12)
    beta = np.array([0.25, 0.0, -1.5])
    p_ref = z64 + beta * p
    vk.cg_direction(p, z, beta)
    assert np.allclose(p, p_ref, rtol=0, atol=1e-14)


def test_reductions_do_not_depend_on_the_thread_count():
    x, r, p, ap = _vectors(n=100_003, m=2)
    before = numba.get_num_threads()
    try:
        results = []
        for threads in sorted({1, before}):
            numba.set_num_threads(threads)
            results.append((vk.column_dots(r, p), vk.cg_dots(r, ap, p)))
    finally:
        numba.set_num_threads(before)
    first = results[0]
    for other in results[1:]:
        assert np.array_equal(first[0], other[0])
        assert all(np.array_equal(a, b) for a, b in zip(first[1], other[1]))


def test_k_cycle_passes_match_numpy():
    x, r, p, ap = _vectors(m=3)
    s = np.array([0.5, -2.0, 0.0])
    out = np.empty_like(r)
    rr = vk.scaled_difference(r, p, s, out)
    assert np.allclose(out, r - s * p, rtol=0, atol=1e-14)
    assert np.allclose(rr, np.einsum("ij,ij->j", out, out), rtol=1e-13)
    dots = vk.column_dots3(x, r, p, ap)
    for row, other in zip(dots, (r, p, ap)):
        assert np.allclose(row, np.einsum("ij,ij->j", x, other), rtol=1e-13)
    a, b = np.array([1.0, 0.25, -1.0]), np.array([2.0, 0.0, 3.0])
    expected = a * x + b * r
    vk.combine(x, a, r, b)
    assert np.allclose(x, expected, rtol=0, atol=1e-14)
