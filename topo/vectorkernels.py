"""Compiled vector work of the conjugate-gradient iterations (numba), threaded.

At millions of dofs and several load cases each vector is hundreds of megabytes
(422 MB in double precision at 5.76 million elements and three cases), so a CG
step is bound by memory traffic: numpy's one-operation-per-pass updates, its
norms (which square into a temporary) and its casts to double made a third of
the time of a design iteration on the print-resolution bracket (DEVELOPERS.md,
"Matrix-free multigrid"). These kernels fuse each step's updates and reductions
into single passes over the arrays.

Vectors are (n, m) arrays, one column per load case, each column with its own
step lengths. Reductions are summed in double precision over a fixed number of
row blocks and then over the blocks in order, so a result does not depend on how
many threads ran it.
"""

from __future__ import annotations

import numba as nb
import numpy as np

from .kernels import _JIT, _LOCK

BLOCKS = 64


@nb.njit(**_JIT)
def _column_dots(a, b, blocks):
    n, m = a.shape
    size = (n + blocks - 1) // blocks
    partial = np.zeros((blocks, m))
    for blk in nb.prange(blocks):
        acc = np.zeros(m)
        for i in range(blk * size, min(n, (blk + 1) * size)):
            for col in range(m):
                acc[col] += np.float64(a[i, col]) * np.float64(b[i, col])
        partial[blk] = acc
    return partial.sum(axis=0)


@nb.njit(**_JIT)
def _cg_update(x, r, p, ap, alpha, blocks):
    n, m = r.shape
    size = (n + blocks - 1) // blocks
    partial = np.zeros((blocks, m))
    for blk in nb.prange(blocks):
        acc = np.zeros(m)
        for i in range(blk * size, min(n, (blk + 1) * size)):
            for col in range(m):
                x[i, col] += alpha[col] * p[i, col]
                v = r[i, col] - alpha[col] * ap[i, col]
                r[i, col] = v
                acc[col] += v * v
        partial[blk] = acc
    return partial.sum(axis=0)


@nb.njit(**_JIT)
def _cg_dots(r, ap, z, blocks):
    n, m = r.shape
    size = (n + blocks - 1) // blocks
    partial = np.zeros((blocks, 2, m))
    for blk in nb.prange(blocks):
        acc = np.zeros((2, m))
        for i in range(blk * size, min(n, (blk + 1) * size)):
            for col in range(m):
                zi = np.float64(z[i, col])
                acc[0, col] += r[i, col] * zi
                acc[1, col] += ap[i, col] * zi
        partial[blk] = acc
    return partial.sum(axis=0)


@nb.njit(**_JIT)
def _cg_direction(p, z, beta):
    n, m = p.shape
    for i in nb.prange(n):
        for col in range(m):
            p[i, col] = z[i, col] + beta[col] * p[i, col]


@nb.njit(**_JIT)
def _column_dots3(c, a1, a2, a3, blocks):
    n, m = c.shape
    size = (n + blocks - 1) // blocks
    partial = np.zeros((blocks, 3, m))
    for blk in nb.prange(blocks):
        acc = np.zeros((3, m))
        for i in range(blk * size, min(n, (blk + 1) * size)):
            for col in range(m):
                ci = np.float64(c[i, col])
                acc[0, col] += ci * a1[i, col]
                acc[1, col] += ci * a2[i, col]
                acc[2, col] += ci * a3[i, col]
        partial[blk] = acc
    return partial.sum(axis=0)


@nb.njit(**_JIT)
def _scaled_difference(b, v, s, out, blocks):
    n, m = b.shape
    size = (n + blocks - 1) // blocks
    partial = np.zeros((blocks, m))
    for blk in nb.prange(blocks):
        acc = np.zeros(m)
        for i in range(blk * size, min(n, (blk + 1) * size)):
            for col in range(m):
                w = b[i, col] - s[col] * v[i, col]
                out[i, col] = w
                acc[col] += np.float64(w) * w
        partial[blk] = acc
    return partial.sum(axis=0)


@nb.njit(**_JIT)
def _combine(x, a, y, b):
    n, m = x.shape
    for i in nb.prange(n):
        for col in range(m):
            x[i, col] = a[col] * x[i, col] + b[col] * y[i, col]


def column_dots(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Σ_i a_ij b_ij per column j, in double precision."""
    with _LOCK:
        return _column_dots(a, b, BLOCKS)


def cg_update(x, r, p, ap, alpha: np.ndarray) -> np.ndarray:
    """x += α p, r −= α Ap (α per column), in place; returns ‖r‖² per column."""
    with _LOCK:
        return _cg_update(x, r, p, ap, np.asarray(alpha, dtype=x.dtype), BLOCKS)


def cg_dots(r, ap, z) -> tuple[np.ndarray, np.ndarray]:
    """rᵀz and (Ap)ᵀz per column in one pass; z may be single precision."""
    with _LOCK:
        out = _cg_dots(r, ap, z, BLOCKS)
    return out[0], out[1]


def cg_direction(p, z, beta: np.ndarray) -> None:
    """p := z + β p (β per column), in place."""
    with _LOCK:
        _cg_direction(p, z, np.asarray(beta, dtype=p.dtype))


def column_dots3(c, a1, a2, a3) -> np.ndarray:
    """(3, m): cᵀa1, cᵀa2, cᵀa3 per column in one pass, in double precision."""
    with _LOCK:
        return _column_dots3(c, a1, a2, a3, BLOCKS)


def scaled_difference(b, v, s: np.ndarray, out) -> np.ndarray:
    """out := b − s v (s per column); returns ‖out‖² per column."""
    with _LOCK:
        return _scaled_difference(b, v, np.asarray(s, dtype=out.dtype), out, BLOCKS)


def combine(x, a: np.ndarray, y, b: np.ndarray) -> None:
    """x := a x + b y (a, b per column), in place."""
    with _LOCK:
        _combine(x, np.asarray(a, dtype=x.dtype), y, np.asarray(b, dtype=x.dtype))
