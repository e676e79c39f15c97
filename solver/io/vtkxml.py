"""Minimal VTK XML UnstructuredGrid (.vtu) writer/reader and a .pvd time-series index.

Data is zlib-compressed in an appended raw section (UInt64 headers), a layout that
ParaView, VTK and pyvista read. The reader here understands what the writer writes.
"""
from __future__ import annotations

import re
import struct
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path

import numpy as np

VTK_TETRA = 10
_BLOCK = 1 << 16
_TYPES = {np.dtype(np.float32): "Float32", np.dtype(np.float64): "Float64", np.dtype(np.int64): "Int64",
          np.dtype(np.int32): "Int32", np.dtype(np.uint8): "UInt8"}
_DTYPES = {v: k for k, v in _TYPES.items()}


def _compress(arr: np.ndarray) -> bytes:
    raw = np.ascontiguousarray(arr).tobytes()
    blocks = [raw[i:i + _BLOCK] for i in range(0, len(raw), _BLOCK)] or [b""]
    comp = [zlib.compress(b, 1) for b in blocks]
    last = len(raw) % _BLOCK  # 0 means the last block is full
    header = struct.pack(f"<{3 + len(comp)}Q", len(blocks), _BLOCK, last, *(len(c) for c in comp))
    return header + b"".join(comp)


def write_vtu(path, points: np.ndarray, tets: np.ndarray, point_data: dict, cell_data: dict | None = None,
              field_data_time: float | None = None) -> None:
    """Write a tetrahedral grid with point (and cell) arrays to ``path``."""
    cell_data = cell_data or {}
    n_pts, n_cells = len(points), len(tets)
    arrays = []  # (section, name, ncomp, data)
    arrays.append(("Points", "Points", 3, np.asarray(points, dtype=np.float64)))
    arrays.append(("Cells", "connectivity", 1, np.asarray(tets, dtype=np.int64).ravel()))
    arrays.append(("Cells", "offsets", 1, np.arange(4, 4 * n_cells + 1, 4, dtype=np.int64)))
    arrays.append(("Cells", "types", 1, np.full(n_cells, VTK_TETRA, dtype=np.uint8)))
    for name, data in point_data.items():
        a = np.asarray(data)
        arrays.append(("PointData", name, 1 if a.ndim == 1 else a.shape[1], a))
    for name, data in cell_data.items():
        a = np.asarray(data)
        arrays.append(("CellData", name, 1 if a.ndim == 1 else a.shape[1], a))
    blobs, offset, xml_arrays = [], 0, {"Points": [], "Cells": [], "PointData": [], "CellData": []}
    for section, name, ncomp, data in arrays:
        blob = _compress(data)
        xml_arrays[section].append(f'<DataArray type="{_TYPES[data.dtype]}" Name="{name}" '
                                   f'NumberOfComponents="{ncomp}" format="appended" offset="{offset}"/>')
        blobs.append(blob)
        offset += len(blob)
    field_xml = ""
    if field_data_time is not None:
        field_xml = (f'<FieldData><DataArray type="Float64" Name="TimeValue" NumberOfTuples="1" '
                     f'format="ascii">{float(field_data_time):.17g}</DataArray></FieldData>')
    head = ('<?xml version="1.0"?>\n<VTKFile type="UnstructuredGrid" version="1.0" byte_order="LittleEndian" '
            'header_type="UInt64" compressor="vtkZLibDataCompressor">\n<UnstructuredGrid>'
            f'{field_xml}<Piece NumberOfPoints="{n_pts}" NumberOfCells="{n_cells}">'
            f'<PointData>{"".join(xml_arrays["PointData"])}</PointData>'
            f'<CellData>{"".join(xml_arrays["CellData"])}</CellData>'
            f'<Points>{"".join(xml_arrays["Points"])}</Points>'
            f'<Cells>{"".join(xml_arrays["Cells"])}</Cells>'
            '</Piece></UnstructuredGrid>\n<AppendedData encoding="raw">\n_')
    with open(path, "wb") as fh:
        fh.write(head.encode())
        for b in blobs:
            fh.write(b)
        fh.write(b"\n</AppendedData>\n</VTKFile>\n")


def _decompress(buf: bytes, start: int, dtype) -> np.ndarray:
    nblocks, _, _ = struct.unpack_from("<3Q", buf, start)
    sizes = struct.unpack_from(f"<{nblocks}Q", buf, start + 24)
    pos = start + 24 + 8 * nblocks
    parts = []
    for s in sizes:
        parts.append(zlib.decompress(buf[pos:pos + s]))
        pos += s
    return np.frombuffer(b"".join(parts), dtype=dtype)


def read_vtu(path) -> dict:
    """Read a .vtu written by :func:`write_vtu`: points, tets, point_data, cell_data."""
    buf = Path(path).read_bytes()
    marker = buf.index(b"<AppendedData")
    data_start = buf.index(b"_", marker) + 1
    root = ET.fromstring(buf[:marker].decode() + "</VTKFile>")
    piece = root.find("UnstructuredGrid/Piece")

    def arr(el):
        a = _decompress(buf, data_start + int(el.get("offset")), _DTYPES[el.get("type")])
        nc = int(el.get("NumberOfComponents", "1"))
        return a.reshape(-1, nc) if nc > 1 else a

    out = {"points": arr(piece.find("Points/DataArray")), "point_data": {}, "cell_data": {}}
    for el in piece.find("Cells"):
        if el.get("Name") == "connectivity":
            out["tets"] = arr(el).reshape(-1, 4)
    for el in piece.find("PointData"):
        out["point_data"][el.get("Name")] = arr(el)
    for el in piece.find("CellData"):
        out["cell_data"][el.get("Name")] = arr(el)
    return out


def write_pvd(path, entries) -> None:
    """Write a ParaView collection: ``entries`` is a list of (time_s, relative file name)."""
    lines = ['<?xml version="1.0"?>', '<VTKFile type="Collection" version="1.0" byte_order="LittleEndian">',
             "<Collection>"]
    lines += [f'  <DataSet timestep="{float(t):.17g}" part="0" file="{f}"/>' for t, f in entries]
    lines += ["</Collection>", "</VTKFile>", ""]
    Path(path).write_text("\n".join(lines))


def read_pvd(path) -> list[tuple[float, Path]]:
    """(time, absolute file path) pairs of a .pvd collection."""
    path = Path(path)
    root = ET.parse(path).getroot()
    return [(float(ds.get("timestep")), path.parent / ds.get("file")) for ds in root.iter("DataSet")]


def safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text)
