"""Which on-disk layout for the temperature field: write time, size, and time to open.

    python3 benchmarks/field_formats.py --nodes 125000 --frames 61
    python3 benchmarks/field_formats.py --nodes 1000000 --frames 61

The benchmark enclosure (scaled_model.py) is meshed at about ``--nodes`` nodes; ``--frames``
fields (smooth, like temperatures: the distance to a hot spot plus a slow drift, float32) are written
in each candidate layout, on one thread, straight after one another (the page cache is warm
for every reader, as it is for a user who opens a run that just finished):

- ``pvd-zlib``: field.pvd + one .vtu per frame with the whole mesh, zlib level 1 (the layout
  written before; solver/io/vtkxml.py)
- ``pvd-raw``: the same, uncompressed (VTK XML cannot share one geometry between the files of
  a .pvd, so every frame still carries the mesh)
- ``vtkhdf``: one VTKHDF file, static mesh, temperatures per step (solver/io/fieldseries.py), no
  compression
- ``vtkhdf-gzip1``: the same with HDF5 gzip level 1 and byte shuffling
- ``raw+vtu``: one geometry .vtu and one flat float32 file of all frames (only our own reader
  knows how they belong together)

Open times: pyvista (``pv.get_reader``/``pv.read``: geometry and the first frame; then the last
frame), VTK's vtkHDFReader for the VTKHDF steps, and our own reader (solver.io.fieldseries:
what the app uses). Each open runs in a fresh process. Not a test: nothing asserts.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

CANDIDATES = ["pvd-zlib", "pvd-raw", "vtkhdf", "vtkhdf-gzip1", "raw+vtu"]


def _problem(nodes: int):
    from scaled_model import cell_for_nodes, model_dict
    from solver.model.modelfile import parse_model
    from solver.fem.problem import build_problem

    return build_problem(parse_model(model_dict(cell_for_nodes(nodes))))


def _frames(problem, n_frames: int):
    pts = problem.mesh.nodes
    hot = pts[np.argmax(pts[:, 2])]
    dist = np.linalg.norm(pts - hot, axis=1)
    base = (30.0 + 40.0 * np.exp(-dist / 0.03)).astype(np.float32)
    for k in range(n_frames):
        yield k * 60.0, base + np.float32(0.1 * k) * (1.0 + np.float32(0.01) * base)


def _write_vtu_raw(path, points, tets, temp, part_id, t):
    """Uncompressed appended-raw .vtu (UInt64 size before each array)."""
    from solver.io.vtkxml import VTK_TETRA

    n, e = len(points), len(tets)
    arrays = [("PointData", "temperature_c", "Float32", 1, temp), ("CellData", "part_id", "Int32", 1, part_id),
              ("Points", "Points", "Float64", 3, np.asarray(points, np.float64)),
              ("Cells", "connectivity", "Int64", 1, np.asarray(tets, np.int64).ravel()),
              ("Cells", "offsets", "Int64", 1, np.arange(4, 4 * e + 1, 4, dtype=np.int64)),
              ("Cells", "types", "UInt8", 1, np.full(e, VTK_TETRA, np.uint8))]
    xml, off = {"PointData": [], "CellData": [], "Points": [], "Cells": []}, 0
    for sec, name, typ, nc, a in arrays:
        xml[sec].append(f'<DataArray type="{typ}" Name="{name}" NumberOfComponents="{nc}" format="appended" '
                        f'offset="{off}"/>')
        off += 8 + a.nbytes
    head = ('<?xml version="1.0"?>\n<VTKFile type="UnstructuredGrid" version="1.0" byte_order="LittleEndian" '
            'header_type="UInt64">\n<UnstructuredGrid>'
            f'<FieldData><DataArray type="Float64" Name="TimeValue" NumberOfTuples="1" format="ascii">{t!r}'
            '</DataArray></FieldData>'
            f'<Piece NumberOfPoints="{n}" NumberOfCells="{e}"><PointData>{"".join(xml["PointData"])}</PointData>'
            f'<CellData>{"".join(xml["CellData"])}</CellData><Points>{"".join(xml["Points"])}</Points>'
            f'<Cells>{"".join(xml["Cells"])}</Cells></Piece></UnstructuredGrid>\n<AppendedData encoding="raw">\n_')
    with open(path, "wb") as fh:
        fh.write(head.encode())
        for *_, a in arrays:
            fh.write(struct.pack("<Q", a.nbytes))
            fh.write(np.ascontiguousarray(a).tobytes())
        fh.write(b"\n</AppendedData>\n</VTKFile>\n")


def write(kind: str, folder: Path, problem, n_frames: int) -> float:
    """Write ``n_frames`` in layout ``kind`` into ``folder``; wall seconds (including fsync-free close)."""
    from solver.io.fieldseries import FieldWriter
    from solver.mesh.mesher import MM
    from solver.io.vtkxml import write_pvd, write_vtu

    pts, tets, pid = problem.mesh.nodes / MM, problem.mesh.tets, problem.mesh.tet_part.astype(np.int32)
    folder.mkdir(parents=True, exist_ok=True)
    frames = list(_frames(problem, n_frames))
    t0 = time.perf_counter()
    if kind in ("pvd-zlib", "pvd-raw"):
        (folder / "field").mkdir()
        entries = []
        for i, (t, f) in enumerate(frames):
            name = f"field/t_{i:05d}.vtu"
            if kind == "pvd-zlib":
                write_vtu(folder / name, pts, tets, {"temperature_c": f}, {"part_id": pid}, t)
            else:
                _write_vtu_raw(folder / name, pts, tets, f, pid, t)
            entries.append((t, name))
        write_pvd(folder / "field.pvd", entries)
    elif kind in ("vtkhdf", "vtkhdf-gzip1"):
        w = FieldWriter(folder, problem, compression=1 if kind.endswith("gzip1") else None)
        for t, f in frames:
            w(t, f)
        w.close()
    elif kind == "raw+vtu":
        _write_vtu_raw(folder / "geometry.vtu", pts, tets, np.zeros(len(pts), np.float32), pid, 0.0)
        with open(folder / "frames.f32", "wb") as fh:
            for _, f in frames:
                fh.write(np.ascontiguousarray(f, np.float32).tobytes())
        (folder / "times.json").write_text(json.dumps([t for t, _ in frames]))
    return time.perf_counter() - t0


def open_timed(kind: str, folder: Path, how: str) -> dict:
    """In this process: seconds to geometry + first frame, and then to the last frame (imports
    done before the clock starts)."""
    import pyvista as pv

    from solver.io.fieldseries import open_field_series

    out = {}
    t0 = time.perf_counter()
    if how == "pyvista":
        if kind.startswith("pvd"):
            r = pv.get_reader(folder / "field.pvd")
            r.set_active_time_point(0)
            g = r.read()[0]
            out["first"] = time.perf_counter() - t0
            t1 = time.perf_counter()
            r.set_active_time_point(len(r.time_values) - 1)
            g = r.read()[0]
            out["last"] = time.perf_counter() - t1
        elif kind.startswith("vtkhdf"):
            r = pv.get_reader(folder / "field.vtkhdf")
            g = r.read()  # step 0
            out["first"] = time.perf_counter() - t0
            t1 = time.perf_counter()
            r.reader.SetStep(r.reader.GetNumberOfSteps() - 1)  # pyvista 0.49: no time API on HDFReader
            r.reader.Update()
            g = pv.wrap(r.reader.GetOutput())
            out["last"] = time.perf_counter() - t1
        else:
            g = pv.read(folder / "geometry.vtu")
            n = g.n_points
            g.point_data["temperature_c"] = np.fromfile(folder / "frames.f32", np.float32, count=n)
            out["first"] = time.perf_counter() - t0
            t1 = time.perf_counter()
            k = len(json.loads((folder / "times.json").read_text())) - 1
            g.point_data["temperature_c"] = np.fromfile(folder / "frames.f32", np.float32, count=n, offset=4 * n * k)
            out["last"] = time.perf_counter() - t1
        out["points"] = int(g.n_points)
    else:  # ours (the app's reader: the VTKHDF layout and the earlier zlib .pvd layout)
        if kind in ("raw+vtu", "pvd-raw"):
            return {}
        s = open_field_series(folder)
        geo = s.geometry()
        f = s.field(0)
        out["first"] = time.perf_counter() - t0
        t1 = time.perf_counter()
        f = s.field(len(s) - 1)
        out["last"] = time.perf_counter() - t1
        t1 = time.perf_counter()
        for i in range(len(s)):
            s.field(i)
        out["all_frames"] = time.perf_counter() - t1
        out["points"] = int(len(geo["points_mm"]))
    return out


def _size(folder: Path) -> int:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--nodes", type=int, default=125_000)
    ap.add_argument("--frames", type=int, default=61)
    ap.add_argument("--only", nargs="*", default=CANDIDATES, choices=CANDIDATES)
    ap.add_argument("--dir", default=None, help="scratch folder (default: a temporary one, removed after)")
    ap.add_argument("--open", nargs=3, metavar=("KIND", "FOLDER", "HOW"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.open:
        print("RESULT " + json.dumps(open_timed(args.open[0], Path(args.open[1]), args.open[2])))
        return 0
    scratch = Path(args.dir or tempfile.mkdtemp(prefix="fieldfmt-"))
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at start")
    problem = _problem(args.nodes)
    print(f"{problem.n_nodes:,} nodes, {problem.mesh.n_tets:,} tetrahedra, {args.frames} frames\n")
    print(f"{'layout':<14} {'write s':>8} {'MB':>8} {'pyvista first':>14} {'pyvista last':>13} "
          f"{'ours first':>11} {'ours last':>10} {'ours all':>9}")
    for kind in args.only:
        folder = scratch / kind
        shutil.rmtree(folder, ignore_errors=True)
        wt = write(kind, folder, problem, args.frames)
        mb = _size(folder) / 1e6
        res = {}
        for how in ("pyvista", "ours"):
            proc = subprocess.run([sys.executable, __file__, "--open", kind, str(folder), how],
                                  capture_output=True, text=True)
            line = [l for l in proc.stdout.splitlines() if l.startswith("RESULT ")]
            res[how] = json.loads(line[0][7:]) if line else {"error": proc.stderr[-400:]}
        pv_, ou = res["pyvista"], res["ours"]

        def f(d, k):
            return f"{d[k]:.3f}" if k in d else "-"
        print(f"{kind:<14} {wt:8.2f} {mb:8.1f} {f(pv_, 'first'):>14} {f(pv_, 'last'):>13} {f(ou, 'first'):>11} "
              f"{f(ou, 'last'):>10} {f(ou, 'all_frames'):>9}")
        if "error" in pv_ or "error" in ou:
            print("   error:", pv_.get("error") or ou.get("error"))
        shutil.rmtree(folder, ignore_errors=True)
    if not args.dir:
        shutil.rmtree(scratch, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
