"""Memory and time estimates of a problem before the model is built.

The coefficients are fitted to runs on the 2-core development machine (see
DEVELOPERS.md, "Benchmarks"); they are estimates to catch a problem that cannot
fit, not promises.
"""
from __future__ import annotations

import numpy as np

from .elements import element_stiffness
from .problem import Problem
from .solvers import choose

FACTOR_FLOPS_PER_S = 7e9  # CHOLMOD supernodal on two cores with OpenBLAS
CG_SECONDS_PER_ENTRY = 2.6e-8  # one multigrid-CG iteration per stored matrix entry
CG_ITERATIONS = 15  # typical with warm starts


def estimate(problem: Problem) -> dict:
    """Peak memory (bytes) and seconds per iteration, from the grid size alone."""
    dim = problem.dim
    shape = problem.domain.shape
    n_el = int(np.prod(shape))
    n_dofs = dim * int(np.prod([n + 1 for n in shape]))
    ke = element_stiffness(dim, 1.0, problem.material.poissons_ratio)
    pairs = int((np.abs(ke) > 1e-12 * np.abs(ke).max()).sum())
    kind = choose(problem.optimization.solver, dim, n_dofs)
    if kind == "direct":
        entries = n_el * (pairs + ke.shape[0]) // 2  # lower triangle
        nnz_l = 6.0 * n_dofs * np.log2(max(n_dofs, 2)) if dim == 2 else 18.0 * n_dofs ** (4 / 3)
        flops = nnz_l**2 / n_dofs
        seconds = flops / FACTOR_FLOPS_PER_S + 2e-8 * nnz_l
        solver_bytes = 12 * nnz_l * 1.3  # factor and workspace
    else:
        entries = n_el * pairs
        nnz_k = 81 * n_dofs  # 27 neighbouring nodes × 3 components
        seconds = CG_ITERATIONS * CG_SECONDS_PER_ENTRY * nnz_k
        solver_bytes = 12 * nnz_k * 1.4 + 10 * 8 * n_dofs * len(problem.load_cases)
    # Building the assembly pattern holds about 60 bytes per element entry at its
    # peak (keys, sort, inverse, the scatter matrix); element fields are small.
    setup_bytes = 60 * entries
    steady = 12 * entries + solver_bytes + 400 * n_el
    return {"solver": kind, "elements": n_el, "dofs": n_dofs,
            "memory_bytes": int(max(setup_bytes, steady)), "seconds_per_iteration": float(seconds)}


def available_memory() -> int | None:
    """MemAvailable from /proc/meminfo in bytes, or None where it cannot be read."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None


def coarser_element_size(problem: Problem, budget: int) -> float | None:
    """The smallest multiple of the element size that divides the domain and whose
    estimate fits in `budget` bytes."""
    from .problem import problem_from_dict

    h = problem.domain.element_size
    for factor in range(2, 9):
        size = h * factor
        if all(abs(s / size - round(s / size)) < 1e-6 for s in problem.domain.size):
            trial = problem_from_dict(problem.raw, {"domain.element_size": size})
            if estimate(trial)["memory_bytes"] <= budget:
                return size
    return None
