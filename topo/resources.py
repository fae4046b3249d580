"""Memory and time estimates of a problem before the model is built.

The coefficients are fitted to runs on the development machine (the runs and
figures: DEVELOPERS.md, "Estimates of memory and time"); they are estimates to
catch a problem that cannot fit, not promises.
"""

from __future__ import annotations

import numpy as np

from .elements import element_stiffness
from .problem import Problem
from .solvers import choose, iterative_kind

FACTOR_FLOPS_PER_S = 7e9  # CHOLMOD supernodal on two cores with OpenBLAS
CG_SECONDS_PER_ENTRY = 1.5e-9  # one multigrid-CG iteration per stored matrix entry
CG_ITERATIONS = 16  # mean over a run, with warm starts
REBUILD_SECONDS_PER_ENTRY = 1.7e-8  # assembly, coarse operators, coarse Cholesky, per iteration
ITERATIVE_BYTES_PER_NODE = 8_500  # fine matrix, hierarchy, work vectors of one load case
# The matrix-free 3D path (matrixfree.py), fitted to `topo bench` runs of the 1M
# cantilever (one load case) and the 5.76M print bracket (three) (DEVELOPERS.md,
# "Estimates of memory and time"): memory per element
# of the whole run (design fields, filter, coarse stencils, the process itself)
# and per dof and load case (the solver's vectors), seconds per element and load
# case for one CG iteration (every product runs over all load cases' columns),
# seconds per element for the rest of a design iteration (the hierarchy's rebuild,
# filters, update).
MF_BYTES_PER_ELEMENT = 650
MF_BYTES_PER_DOF_CASE = 130
MF_BYTES_FIXED = 250 * 2**20  # interpreter, numpy, scipy, numba and its compiled code
MF_CG_ITERATIONS = 10
MF_CG_SECONDS_PER_ELEMENT_CASE = 0.47e-6
MF_REBUILD_SECONDS_PER_ELEMENT = 0.99e-6


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
        # The peak of building a general sparse assembly pattern (keys, sort,
        # inverse, scatter matrix), kept as a ceiling; element fields are small.
        # Measured: DEVELOPERS.md, "Estimates of memory and time".
        memory = max(60 * entries, 12 * entries + solver_bytes + 400 * n_el)
    elif iterative_kind(dim, n_dofs) == "matrix-free":
        cases = len(problem.load_cases)
        memory = (
            MF_BYTES_FIXED + MF_BYTES_PER_ELEMENT * n_el + MF_BYTES_PER_DOF_CASE * n_dofs * cases
        )
        seconds = (
            MF_CG_ITERATIONS * MF_CG_SECONDS_PER_ELEMENT_CASE * cases
            + MF_REBUILD_SECONDS_PER_ELEMENT
        ) * n_el
    else:
        nnz_k = (
            9 * dim * n_dofs if dim == 2 else 27 * dim * n_dofs
        )  # neighbouring nodes × components
        seconds = (CG_ITERATIONS * CG_SECONDS_PER_ENTRY + REBUILD_SECONDS_PER_ENTRY) * nnz_k
        # CG keeps about ten work vectors per load case on top of the per-node storage
        memory = ITERATIVE_BYTES_PER_NODE * (n_dofs // dim) + 80 * n_dofs * len(problem.load_cases)
    return {
        "solver": kind,
        "elements": n_el,
        "dofs": n_dofs,
        "memory_bytes": int(memory),
        "seconds_per_iteration": float(seconds),
    }


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
