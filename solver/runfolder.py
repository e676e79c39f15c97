"""Reading a finished run back from its folder (peaks.csv, history.csv, run.json, field.pvd).

:func:`load_run` first checks the folder (:func:`solver.runstore.check_folder`: complete, not mixed,
not in use) and then reads each file with size caps; every problem is a :class:`ModelError` naming
the folder, the file and the cause, never a traceback.
"""
from __future__ import annotations

import csv
import io
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ModelError
from .runstore import check_folder
from .vtkxml import read_pvd, read_vtu
from .writers import FIELD_NAME, SERIES_NAME


@dataclass
class FinishedRun:
    folder: Path
    info: dict  # run.json
    times: np.ndarray  # output times, s
    frame_files: list  # .vtu path per output time
    peaks: list  # peaks.csv rows as dicts (strings, as written)
    history_header: list
    history: np.ndarray  # (T, columns) floats
    _geometry: dict | None = field(default=None, repr=False)
    notice: str | None = None  # e.g. written before results folders carried a manifest

    @property
    def model_dict(self) -> dict:
        return self.info.get("model", {})

    def geometry(self) -> dict:
        """points_mm (N, 3), tets (E, 4), part_id (E,) from the first frame."""
        if self._geometry is None:
            if not self.frame_files:
                raise ModelError(("", "the field series lists no frames"), str(self.folder))
            g = _read_frame(self.frame_files[0], self.folder)
            if "tets" not in g or "part_id" not in g["cell_data"]:
                raise ModelError(("", f"{self.frame_files[0].name} holds no tetrahedra or part ids"), str(self.folder))
            self._geometry = {"points_mm": g["points"], "tets": g["tets"], "part_id": g["cell_data"].get("part_id")}
        return self._geometry

    def field(self, i: int) -> np.ndarray:
        """Temperature (N,) in °C at output ``i``."""
        f = _read_frame(self.frame_files[i], self.folder)["point_data"].get(FIELD_NAME)
        n = len(self.geometry()["points_mm"])
        if f is None or f.ndim != 1 or len(f) != n:
            raise ModelError(("", f"{Path(self.frame_files[i]).name} does not hold a temperature at each of the "
                                  f"{n:,} nodes (results of two runs mixed, or a damaged file)"), str(self.folder))
        return f


MAX_TABLE_BYTES = 256 * 1024 * 1024  # csv/json/pvd of a run; frames are checked against the manifest


def _read_frame(path, folder) -> dict:
    try:
        return read_vtu(path)
    except Exception as e:  # truncated or garbage: zlib.error, struct.error, ParseError, KeyError, ...
        raise ModelError(("", f"{Path(path).name} is damaged or truncated ({type(e).__name__}: {e})"),
                         str(folder)) from None


def _text(path: Path, folder: Path) -> str:
    if not path.is_file():
        raise ModelError(("", f"{path.name} is missing"), str(folder))
    if path.stat().st_size > MAX_TABLE_BYTES:
        raise ModelError(("", f"{path.name} is larger than {MAX_TABLE_BYTES >> 20} MB"), str(folder))
    return path.read_text(encoding="utf-8")


def is_run_folder(path) -> bool:
    """True for a folder that holds (or held, if cut short) a run's results: worth :func:`load_run`."""
    from .runstore import MANIFEST_NAME, cut_short_runs

    p = Path(path)
    if p.is_dir() and ((p / MANIFEST_NAME).is_file() or ((p / "run.json").is_file() and (p / SERIES_NAME).is_file())):
        return True
    return bool(cut_short_runs(p))


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
        series_name = SERIES_NAME
        series = read_pvd(folder / series_name)
        peaks = list(csv.DictReader(io.StringIO(_text(folder / "peaks.csv", folder), newline="")))
        rows = list(csv.reader(io.StringIO(_text(folder / "history.csv", folder), newline="")))
    except ModelError:
        raise
    except RecursionError:
        raise ModelError(("", "run.json is nested too deeply"), src) from None
    except (OSError, ValueError, SyntaxError, csv.Error, UnicodeDecodeError, TypeError, AttributeError) as e:
        raise ModelError(("", f"results folder is incomplete or damaged ({type(e).__name__}: {e})"), src) from None
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
    try:
        times = np.array([float(t) for t, _ in series])
    except (TypeError, ValueError):
        raise ModelError(("", f"{SERIES_NAME} has a time step that is not a number"), src) from None
    frames = [Path(f) for _, f in series]
    for f in frames:
        try:
            inside = f.resolve().is_relative_to(folder.resolve())
        except OSError:
            inside = False
        if not inside:
            raise ModelError(("", f"{SERIES_NAME} points outside the folder ({f})"), src)
    nodes = (info.get("mesh") or {}).get("nodes") if isinstance(info.get("mesh"), dict) else None
    if notice is not None and isinstance(nodes, int):
        _check_legacy_frames(frames, nodes, folder)
    return FinishedRun(folder, info, times, frames, peaks, header, history, notice=notice)


def _numeric(row) -> bool:
    try:
        [float(v) for v in row]
        return True
    except ValueError:
        return False


def _check_legacy_frames(frames, nodes: int, folder: Path) -> None:
    """Without a manifest: every frame's header must name the node count run.json states."""
    for f in frames:
        try:
            with open(f, "rb") as fh:
                head = fh.read(4096)
        except OSError:
            raise ModelError(("", f"incomplete: {f.name} is missing"), str(folder)) from None
        m = re.search(rb'NumberOfPoints="(\d+)"', head)
        if m is None or int(m.group(1)) != nodes:
            raise ModelError(("", f"mixed: {f.name} holds {m.group(1).decode() if m else 'no'} nodes, run.json says "
                                  f"{nodes:,} (frames of two different runs)"), str(folder))
