"""A VTK unstructured-grid file (.vtu) written one array at a time.

Each array is made only when it is written (the fields are given as functions),
compressed in blocks of BLOCK_BYTES with zlib and appended raw after the XML
header, in the layout of the VTK XML file formats (appended data, UInt64 block
headers, vtkZLibDataCompressor). A general writer that builds the whole XML
document in memory, base64-encoded, holds several copies of every field; this one
holds one field and its compressed blocks, which is what lets a 5.76-million-element
grid be written. The header, which must give each array's byte offset, is written
once the arrays are: the compressed blocks go to a temporary file first.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import zlib
from collections.abc import Callable
from pathlib import Path

import numpy as np

BLOCK_BYTES = 1 << 20  # uncompressed bytes per zlib block
LEVEL = 1  # zlib's fastest level: 2–3 times quicker than its default, files a little larger

VTK_QUAD, VTK_HEXAHEDRON = 9, 12
_TYPES = {
    np.dtype(np.float64): "Float64",
    np.dtype(np.float32): "Float32",
    np.dtype(np.int64): "Int64",
    np.dtype(np.int32): "Int32",
    np.dtype(np.uint8): "UInt8",
}

Field = Callable[[], np.ndarray]


def _append(out, array: np.ndarray) -> None:
    """One array in the compressed appended layout: header [blocks, block size,
    size of the last partial block (0 when full), compressed sizes], then blocks."""
    data = memoryview(
        np.ascontiguousarray(array).astype(array.dtype.newbyteorder("<"), copy=False)
    ).cast("B")
    total = len(data)
    blocks = [
        zlib.compress(data[start : start + BLOCK_BYTES], LEVEL)
        for start in range(0, total, BLOCK_BYTES)
    ]
    last = total % BLOCK_BYTES
    header = [len(blocks), BLOCK_BYTES, last] + [len(b) for b in blocks]
    out.write(np.array(header, dtype="<u8").tobytes())
    for b in blocks:
        out.write(b)


def write_vtu(
    path: Path,
    points: Field,
    connectivity: Field,
    cell_type: int,
    point_data: dict[str, Field],
    cell_data: dict[str, Field],
) -> None:
    """Write `path` atomically. points() → (n, 3); connectivity() → (m, k) node
    numbers in VTK's corner order; each field function gives (n[, c]) or (m[, c])."""
    from .files import _UMASK

    path = Path(path)
    cells: list[tuple[str, Field]] = [("connectivity", connectivity)]
    entries: list[tuple[str, str, np.dtype, int, int]] = []  # section, name, dtype, comps, offset
    with tempfile.TemporaryFile(dir=path.parent) as blob:

        def put(section: str, name: str, make: Field) -> tuple[int, int]:
            a = np.asarray(make())
            offset = blob.tell()
            _append(blob, a)
            comps = 1 if a.ndim == 1 else a.shape[1]
            entries.append((section, name, a.dtype, comps, offset))
            return a.shape[0], (a.shape[1] if a.ndim > 1 else 1)

        n_points = put("Points", "Points", points)[0]
        n_cells, corners = put("Cells", *cells[0])
        put("Cells", "offsets", lambda: np.arange(1, n_cells + 1, dtype=np.int64) * corners)
        put("Cells", "types", lambda: np.full(n_cells, cell_type, dtype=np.uint8))
        for name, make in point_data.items():
            put("PointData", name, make)
        for name, make in cell_data.items():
            put("CellData", name, make)
        head = _header(entries, n_points, n_cells)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(head.encode())
                fh.write(b"_")
                blob.seek(0)
                shutil.copyfileobj(blob, fh, 16 * BLOCK_BYTES)
                fh.write(b"\n  </AppendedData>\n</VTKFile>\n")
            os.chmod(tmp, 0o666 & ~_UMASK)
            os.replace(tmp, path)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise


def _header(entries, n_points: int, n_cells: int) -> str:
    def arrays(section: str) -> str:
        return "".join(
            f'        <DataArray type="{_TYPES[dtype]}" Name="{name}" '
            + (f'NumberOfComponents="{comps}" ' if comps > 1 or section == "Points" else "")
            + f'format="appended" offset="{offset}"/>\n'
            for sec, name, dtype, comps, offset in entries
            if sec == section
        )

    return (
        '<?xml version="1.0"?>\n'
        '<VTKFile type="UnstructuredGrid" version="1.0" byte_order="LittleEndian" '
        'header_type="UInt64" compressor="vtkZLibDataCompressor">\n'
        "  <UnstructuredGrid>\n"
        f'    <Piece NumberOfPoints="{n_points}" NumberOfCells="{n_cells}">\n'
        f"      <Points>\n{arrays('Points')}      </Points>\n"
        f"      <Cells>\n{arrays('Cells')}      </Cells>\n"
        f"      <PointData>\n{arrays('PointData')}      </PointData>\n"
        f"      <CellData>\n{arrays('CellData')}      </CellData>\n"
        "    </Piece>\n"
        "  </UnstructuredGrid>\n"
        '  <AppendedData encoding="raw">\n'
    )
