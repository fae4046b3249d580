"""Sparse matrix products split over threads.

scipy's CSR kernels release the GIL, so row blocks of one matrix can be multiplied
on separate threads. The product is memory-bound, yet two threads still make it
faster, which matters because these products are most of a multigrid-CG iteration
(measured: DEVELOPERS.md, "Threaded sparse products").
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.sparse as sp

# below this many stored entries a product is too short to gain from a thread
MIN_SPLIT_ENTRIES = 1_000_000


def default_threads() -> int:
    """The cores this process may run on."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


_threads = default_threads()
_pool: ThreadPoolExecutor | None = None


def set_threads(n: int) -> None:
    """Threads for sparse products in this process (sweeps give each job its share)."""
    global _threads, _pool
    _threads = max(1, int(n))
    if _pool is not None:
        _pool.shutdown()
        _pool = None


def _get_pool() -> ThreadPoolExecutor:
    global _pool
    if _pool is None:
        _pool = ThreadPoolExecutor(_threads, thread_name_prefix="topo-spmv")
    return _pool


class RowBlocks:
    """`a @ x` for a CSR matrix a, one row block per thread. The blocks are views
    of a's arrays (no copy of the entries)."""

    def __init__(self, a: sp.csr_matrix):
        self.matrix = a
        self.shape = a.shape
        parts = _threads if a.nnz >= MIN_SPLIT_ENTRIES else 1
        bounds = np.linspace(0, a.shape[0], parts + 1).astype(int)
        self.bounds = bounds
        self.blocks = []
        for lo, hi in zip(bounds[:-1], bounds[1:]):
            start, end = a.indptr[lo], a.indptr[hi]
            # set the arrays on an empty matrix: the constructor would copy views
            # smaller than half their base ("pruning"), a full copy per refresh
            block = sp.csr_matrix((hi - lo, a.shape[1]), dtype=a.dtype)
            block.data, block.indices = a.data[start:end], a.indices[start:end]
            block.indptr = a.indptr[lo : hi + 1] - start
            self.blocks.append(block)

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        if len(self.blocks) == 1:
            return self.matrix @ x
        out = np.empty(
            (self.shape[0],) + x.shape[1:], dtype=np.result_type(self.matrix.dtype, x.dtype)
        )

        def product(i: int) -> None:
            out[self.bounds[i] : self.bounds[i + 1]] = self.blocks[i] @ x

        for future in [_get_pool().submit(product, i) for i in range(len(self.blocks))]:
            future.result()
        return out
