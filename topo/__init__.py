"""topo: density-based topology optimisation of metal brackets for laser powder-bed fusion.

Results are concept designs, to be verified by qualified analysis and testing under
the applicable codes and licensed engineering practice.

>>> import topo
>>> p = topo.load_problem  # load_problem(path, overrides) → Problem
"""

from .bench import run_benchmarks
from .design import Result, analyze, check, estimate_resources, load_run, load_run_problem, optimize
from .export import MESH_FORMATS, Exported, export
from .problem import Problem, ProblemError, load_problem, parse_override, problem_from_dict
from .report import CAUTION, run_summary, summarize
from .review import write_report
from .sweep import sweep
from .verification import Verification, verify, write_verification

__all__ = [
    "CAUTION",
    "MESH_FORMATS",
    "Exported",
    "Problem",
    "ProblemError",
    "Result",
    "analyze",
    "check",
    "estimate_resources",
    "export",
    "load_problem",
    "load_run",
    "load_run_problem",
    "optimize",
    "parse_override",
    "problem_from_dict",
    "run_benchmarks",
    "run_summary",
    "summarize",
    "sweep",
    "write_report",
    "Verification",
    "verify",
    "write_verification",
]
__version__ = "0.1.0"
