"""Reading a finished run back from its folder (peaks.csv, history.csv, run.json and the field:
field.vtkhdf, or field.pvd + field/*.vtu from runs written before it; none after ``--fields none``).

:func:`load_run` first checks the folder (:func:`solver.io.runstore.check_folder`: complete, not mixed,
not in use) and then reads each file with size caps; every problem is a :class:`ModelError` naming
the folder, the file and the cause, never a traceback.
"""
from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from solver.errors import ModelError
from solver.io.fieldseries import FieldSeries, has_fields, open_field_series
from solver.io.runstore import check_folder

MAX_TABLE_BYTES = 256 * 1024 * 1024  # csv/json of a run; field files are checked against the manifest


@dataclass
class FinishedRun:
    folder: Path
    info: dict  # run.json
    times: np.ndarray  # output times of the field frames, s
    series: FieldSeries | None  # the field frames (None: the run wrote no fields)
    peaks: list  # peaks.csv rows as dicts (strings, as written)
    history_header: list
    history: np.ndarray  # (T, columns) floats
    _geometry: dict | None = field(default=None, repr=False)
    notice: str | None = None  # e.g. written before results folders carried a manifest

    @property
    def model_dict(self) -> dict:
        return self.info.get("model", {})

    @property
    def has_fields(self) -> bool:
        return self.series is not None and len(self.series) > 0

    def geometry(self) -> dict:
        """points_mm (N, 3), tets (E, 4), part_id (E,) of the field's mesh."""
        if self._geometry is None:
            name = self.series.file_name
            try:
                g = self.series.geometry()
            except ModelError:
                raise
            except Exception as e:  # truncated or garbage field file
                raise ModelError(("", f"{name} is damaged or truncated ({type(e).__name__}: {e})"),
                                 str(self.folder)) from None
            why = _bad_geometry(g)
            if why:
                raise ModelError(("", f"{name} is damaged: {why}"), str(self.folder))
            self._geometry = g
        return self._geometry

    def field(self, i: int) -> np.ndarray:
        """Temperature (N,) in °C at output ``i``."""
        try:
            f = np.asarray(self.series.field(i), dtype=float)
        except ModelError:
            raise
        except Exception as e:
            raise ModelError(("", f"frame {i} of {self.series.file_name} is damaged or truncated "
                                  f"({type(e).__name__}: {e})"), str(self.folder)) from None
        n = len(self.geometry()["points_mm"])
        if f.ndim != 1 or len(f) != n:
            raise ModelError(("", f"frame {i} does not hold a temperature at each of the {n:,} nodes "
                                  "(results of two runs mixed, or a damaged file)"), str(self.folder))
        return f


def _bad_geometry(g: dict) -> str | None:
    """What is wrong with a field file's mesh, or None (so a reader never indexes out of range)."""
    pts, tets, part = g.get("points_mm"), g.get("tets"), g.get("part_id")
    if pts is None or tets is None or part is None:
        return "it holds no points, tetrahedra or part ids"
    pts, tets, part = np.asarray(pts), np.asarray(tets), np.asarray(part)
    if pts.ndim != 2 or pts.shape[1] != 3 or not np.issubdtype(pts.dtype, np.number) or not np.isfinite(pts).all():
        return "the points are not finite (x, y, z) triples"
    if tets.ndim != 2 or tets.shape[1] != 4 or not np.issubdtype(tets.dtype, np.integer):
        return "the tetrahedra are not groups of four node numbers"
    if len(tets) == 0 or tets.min() < 0 or tets.max() >= len(pts):
        return f"a tetrahedron names a node outside 0…{len(pts) - 1:,}"
    if part.shape != (len(tets),) or not np.issubdtype(part.dtype, np.integer):
        return "the part ids do not match the tetrahedra"
    return None


def _text(path: Path, folder: Path) -> str:
    if not path.is_file():
        raise ModelError(("", f"{path.name} is missing"), str(folder))
    if path.stat().st_size > MAX_TABLE_BYTES:
        raise ModelError(("", f"{path.name} is larger than {MAX_TABLE_BYTES >> 20} MB"), str(folder))
    return path.read_text(encoding="utf-8")


def is_run_folder(path) -> bool:
    """True for a folder that holds (or held, if cut short) a run's results: worth :func:`load_run`."""
    from solver.io.runstore import MANIFEST_NAME, cut_short_runs

    p = Path(path)
    if p.is_dir() and ((p / MANIFEST_NAME).is_file()
                       or ((p / "run.json").is_file() and (has_fields(p) or (p / "peaks.csv").is_file()))):
        return True
    return bool(cut_short_runs(p))


def _numeric(row) -> bool:
    try:
        [float(v) for v in row]
        return True
    except ValueError:
        return False


def _open_series(folder: Path) -> FieldSeries | None:
    """The folder's field series (either layout); ModelError naming the field file if it is damaged."""
    from solver.io.fieldseries import FIELD_FILE, LEGACY_SERIES

    name = FIELD_FILE if (folder / FIELD_FILE).is_file() else LEGACY_SERIES
    try:
        series = open_field_series(folder)
    except RecursionError:
        raise ModelError(("", f"{name} is nested too deeply"), str(folder)) from None
    except Exception as e:  # noqa: BLE001 - any damage to a file of another library's format
        raise ModelError(("", f"{name} is damaged or truncated ({type(e).__name__}: {e})"), str(folder)) from None
    if series is None:
        return None
    if len(series) == 0 or series.listed > len(series):
        held = len(series)
        series.close()
        if held == 0:
            raise ModelError(("", f"{name} is damaged or truncated: it holds no complete frame"), str(folder))
        raise ModelError(("", f"{name} is damaged or truncated: it lists {series.listed} frames but holds "
                              f"temperatures for {held}"), str(folder))
    return series


def load_run(folder) -> FinishedRun:
    """Open a results folder written by ``thermgui solve`` or the app; ModelError if it is not one,
    is incomplete (a run was cut short: "incomplete" in the message), mixed, damaged or in use."""
    folder = Path(folder)
    src = str(folder)
    notice = check_folder(folder)
    try:
        info = json.loads(_text(folder / "run.json", folder))
        if not isinstance(info, dict):
            raise ModelError(("", "run.json does not hold an object"), src)
        if not isinstance(info.get("model", {}), dict) or not isinstance(info.get("part_names", []), list):
            raise ModelError(("", "run.json: \"model\" or \"part_names\" has the wrong type"), src)
        peaks = list(csv.DictReader(io.StringIO(_text(folder / "peaks.csv", folder), newline="")))
        rows = list(csv.reader(io.StringIO(_text(folder / "history.csv", folder), newline="")))
    except ModelError:
        raise
    except RecursionError:
        raise ModelError(("", "run.json is nested too deeply"), src) from None
    except (OSError, ValueError, KeyError, SyntaxError, csv.Error, UnicodeDecodeError, TypeError,
            AttributeError) as e:
        raise ModelError(("", f"results folder is incomplete or damaged ({type(e).__name__}: {e})"), src) from None
    except Exception as e:  # noqa: BLE001 - damage that no check above foresaw
        raise ModelError(("", f"results folder is damaged ({type(e).__name__}: {e})"), src) from None
    if not rows:
        raise ModelError(("", "history.csv is empty"), src)
    header, body = rows[0], rows[1:]
    try:
        history = np.array([[float(v) for v in r] for r in body]) if body else np.zeros((0, len(header)))
    except ValueError:
        bad = next(i for i, r in enumerate(body) if not _numeric(r))
        raise ModelError(("", f"history.csv row {bad + 2} is not numbers ({', '.join(body[bad])[:80]!r})"), src) from None
    if history.ndim != 2 or history.shape[1] != len(header) or (body and any(len(r) != len(header) for r in body)):
        raise ModelError(("", "history.csv rows do not match its header"), src)
    series = _open_series(folder)
    try:
        times = np.asarray(series.times, dtype=float) if series is not None else np.zeros(0)
        if not np.all(np.isfinite(times)):
            raise ModelError(("", f"{series.file_name} has a time step that is not a number"), src)
        run = FinishedRun(folder, info, times, series, peaks, header, history, notice=notice)
        nodes = (info.get("mesh") or {}).get("nodes") if isinstance(info.get("mesh"), dict) else None
        if run.has_fields and isinstance(nodes, int):
            n = len(run.geometry()["points_mm"])
            if n != nodes:
                raise ModelError(("", f"mixed: {series.file_name} holds {n:,} nodes, run.json says {nodes:,} "
                                      "(results of two different runs)"), src)
    except BaseException:
        if series is not None:
            series.close()
        raise
    return run
