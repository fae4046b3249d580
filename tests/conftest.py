import numpy as np
import pytest

from topo.problem import problem_from_dict


def beam_problem(dim=2, size=None, h=1.0, E=1000.0, nu=0.3, **opt):
    """A cantilever clamped at x-min with a downward load on the x-max face."""
    size = size or ([20.0, 5.0] if dim == 2 else [12.0, 4.0, 4.0])
    d = {
        "name": "beam",
        "domain": {"size": list(size), "element_size": h},
        "material": {"youngs_modulus": E, "poissons_ratio": nu, "density": 1000.0},
        "optimization": {"volume_fraction": 0.5, **opt},
        "support": [{"region": {"face": "x-min"}}],
        "load_case": [
            {
                "name": "tip",
                "force": [
                    {
                        "region": {"face": "x-max"},
                        "total": [0.0, -1.0] + ([0.0] if dim == 3 else []),
                    }
                ],
            }
        ],
    }
    if dim == 2:
        d["domain"]["thickness"] = 1.0
    return d


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


def make(d, **overrides):
    return problem_from_dict(d, overrides)
