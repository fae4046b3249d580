"""The streaming VTU writer, read back by meshio (an independent reader)."""

import meshio
import numpy as np
import pytest

from topo import vtu
from topo.grid import Grid


@pytest.mark.parametrize("block", [1 << 20, 1000, 96])  # one block; several with a partial last
def test_written_grid_and_fields_read_back_exactly(tmp_path, monkeypatch, rng, block):
    monkeypatch.setattr(vtu, "BLOCK_BYTES", block)
    g = Grid((4, 3, 2), 0.5)
    disp = rng.standard_normal((g.n_nodes, 3))
    dens = rng.uniform(0, 1, g.n_elements)
    path = tmp_path / "f.vtu"
    vtu.write_vtu(
        path,
        lambda: g.node_coords,
        lambda: g.element_nodes,
        vtu.VTK_HEXAHEDRON,
        {"u": lambda: disp},
        {"density": lambda: dens, "flag": lambda: (dens > 0.5).astype(float)},
    )
    m = meshio.read(path)
    assert np.array_equal(m.points, g.node_coords)
    assert m.cells[0].type == "hexahedron"
    assert np.array_equal(m.cells[0].data, g.element_nodes)
    assert np.array_equal(m.point_data["u"], disp)
    assert np.array_equal(m.cell_data["density"][0], dens)
    assert np.array_equal(m.cell_data["flag"][0], (dens > 0.5).astype(float))
    assert not list(tmp_path.glob(".*"))  # no temporary file left behind


def test_a_failing_field_leaves_no_file(tmp_path):
    g = Grid((2, 2), 1.0)

    def broken():
        raise RuntimeError("field fault")

    with pytest.raises(RuntimeError, match="field fault"):
        vtu.write_vtu(
            tmp_path / "f.vtu",
            lambda: np.zeros((g.n_nodes, 3)),
            lambda: g.element_nodes,
            vtu.VTK_QUAD,
            {},
            {"bad": broken},
        )
    assert list(tmp_path.iterdir()) == []
