"""Helpers for tests of results folders: frames a running solve has staged, a folder rewritten in the
earlier .pvd layout, and damage done to a field.vtkhdf file on purpose."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from solver.io.fieldseries import FIELD_FILE, FIELD_NAME, LEGACY_SERIES, open_field_series
from solver.io.runstore import MANIFEST_NAME
from solver.io.vtkxml import write_pvd, write_vtu


def staged_frames(out: Path) -> int:
    """Frames written so far into the field file of a run's staging folder beside ``out`` (0 while
    there is none). Reads a file another process is writing: a read that fails counts as 0."""
    import h5py

    out = Path(out)
    best = 0
    for f in out.parent.glob(f".{out.name}.staging-*/{FIELD_FILE}"):
        try:
            with h5py.File(f, "r", locking=False) as fh:
                best = max(best, int(fh["VTKHDF"]["Steps"].attrs["NSteps"]))
        except Exception:  # noqa: BLE001 - being written: try again on the next poll
            continue
    return best


def field_frames(folder: Path) -> int:
    """Frames of a finished folder's field, counted through the reader."""
    series = open_field_series(folder)
    try:
        return len(series) if series is not None else 0
    finally:
        if series is not None:
            series.close()


def to_legacy_layout(folder: Path) -> Path:
    """Rewrite a finished results folder as runs before manifests and VTKHDF wrote it:
    ``field.pvd`` + ``field/t_00000.vtu`` … (the whole mesh in every frame), run.json naming
    field.pvd, no field.vtkhdf and no manifest."""
    folder = Path(folder)
    series = open_field_series(folder)
    assert series is not None and series.layout == "vtkhdf", "start from a run with a field.vtkhdf"
    g = series.geometry()
    (folder / "field").mkdir()
    entries = []
    for i, t in enumerate(series.times):
        name = f"field/t_{i:05d}.vtu"
        write_vtu(folder / name, g["points_mm"], g["tets"], {FIELD_NAME: series.field(i)},
                  {"part_id": g["part_id"]}, float(t))
        entries.append((float(t), name))
    series.close()
    write_pvd(folder / LEGACY_SERIES, entries)
    (folder / FIELD_FILE).unlink()
    (folder / MANIFEST_NAME).unlink(missing_ok=True)
    info = json.loads((folder / "run.json").read_text())
    info["field_series"] = LEGACY_SERIES
    for key in ("field_files", "field_write_s"):
        info.pop(key, None)
    (folder / "run.json").write_text(json.dumps(info, indent=1))
    return folder


# ---------------------------------------------------------------- damage to field.vtkhdf
def truncate(path: Path, fraction: float) -> None:
    data = Path(path).read_bytes()
    Path(path).write_bytes(data[: int(len(data) * fraction)])


def _edit_h5(path: Path, edit) -> None:
    import h5py

    with h5py.File(path, "r+") as fh:
        edit(fh["VTKHDF"])


def _drop_steps(g) -> None:
    del g["Steps"]


def _short_temperatures(g) -> None:
    temp = g["PointData"][FIELD_NAME]
    temp.resize((temp.shape[0] - 7,))  # the last frame misses 7 nodes


def _more_points(g) -> None:
    g["NumberOfPoints"][0] = int(g["NumberOfPoints"][0]) + 1


def _bad_connectivity(g) -> None:
    conn = g["Connectivity"]
    conn[0] = 10**9  # a tetrahedron naming a node that does not exist


def _nan_time(g) -> None:
    g["Steps"]["Values"][-1] = np.nan


def _text_temperatures(g) -> None:
    del g["PointData"][FIELD_NAME]
    g["PointData"][FIELD_NAME] = np.array([b"hot"] * 8)


HDF_DAMAGE = {
    "field.vtkhdf truncated to half": lambda d: truncate(d / FIELD_FILE, 0.5),
    "field.vtkhdf empty": lambda d: truncate(d / FIELD_FILE, 0.0),
    "field.vtkhdf garbage": lambda d: (d / FIELD_FILE).write_bytes(b"\x89HDF\r\n\x1a\n" + b"\x00garbage" * 64),
    "field.vtkhdf without Steps": lambda d: _edit_h5(d / FIELD_FILE, _drop_steps),
    "field.vtkhdf last frame short": lambda d: _edit_h5(d / FIELD_FILE, _short_temperatures),
    "field.vtkhdf point count off": lambda d: _edit_h5(d / FIELD_FILE, _more_points),
    "field.vtkhdf node index out of range": lambda d: _edit_h5(d / FIELD_FILE, _bad_connectivity),
    "field.vtkhdf time not a number": lambda d: _edit_h5(d / FIELD_FILE, _nan_time),
    "field.vtkhdf temperatures are text": lambda d: _edit_h5(d / FIELD_FILE, _text_temperatures),
}
