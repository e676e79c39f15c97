"""Everything the results views show, held in plain numpy (Qt-free).

A :class:`ResultsStore` keeps the tetrahedral geometry (mm), the output times (s), one float32
temperature frame (°C) per output time, the part maxima at those times (°C), the ratings and,
once the run has finished, the peak table as the exact text rows of ``peaks.csv``. It is filled
either live from a :class:`solver.run.session.RunSession` (one frame per output event) or at once
from a finished results folder (:func:`solver.io.runfolder.load_run`).
"""
from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from solver.mesh.mesher import MM
from solver.results.recorder import PEAK_COLUMNS


def results_folder_for(model_path) -> Path:
    """Where the app keeps the results of a model file: ``<stem>.results`` beside it."""
    p = Path(model_path)
    return p.with_name(p.stem + ".results")


@dataclass
class ResultsStore:
    points_mm: np.ndarray  # (N, 3)
    tets: np.ndarray  # (E, 4)
    part_id: np.ndarray  # (E,)
    part_names: list
    rated_c: np.ndarray  # (P,) NaN where unrated
    part_bounds_mm: dict  # name -> (x0, x1, y0, y1, z0, z1)
    duration_s: float = 0.0
    folder: Path | None = None
    times: list = field(default_factory=list)
    frames: list = field(default_factory=list)  # float32 (N,) per output time
    part_max: list = field(default_factory=list)  # (P,) per output time
    peak_rows: list | None = None  # rows of peaks.csv as strings (after the run)
    complete: bool = False
    air_names: list = field(default_factory=list)  # air volumes (one temperature each)
    air_rated_c: np.ndarray = field(default_factory=lambda: np.zeros(0))
    air: list = field(default_factory=list)  # (A,) °C per output time

    def __post_init__(self):
        self._lo = np.inf
        self._hi = -np.inf

    # ------------------------------------------------------------ building
    @classmethod
    def for_problem(cls, problem, folder=None) -> "ResultsStore":
        """Empty store for a run about to start (geometry from the solver's mesh, m → mm)."""
        model = problem.model
        return cls(points_mm=problem.mesh.nodes / MM, tets=problem.mesh.tets,
                   part_id=problem.mesh.tet_part.astype(np.int32),
                   part_names=[p.name for p in model.parts],
                   rated_c=np.array([np.nan if p.rated_c is None else p.rated_c for p in model.parts]),
                   part_bounds_mm={p.name: _bounds(p.origin_mm, p.size_mm) for p in model.parts},
                   duration_s=float(model.run.duration_s), folder=Path(folder) if folder else None,
                   air_names=[a.name for a in model.air_volumes],
                   air_rated_c=np.array([np.nan if a.rated_c is None else a.rated_c for a in model.air_volumes]))

    @classmethod
    def from_finished(cls, run) -> "ResultsStore":
        """All frames of a :class:`solver.io.runfolder.FinishedRun` (no solving)."""
        geo = run.geometry()
        parts = run.model_dict.get("parts", [])
        names = list(run.info.get("part_names") or [p["name"] for p in parts])
        by_name = {p["name"]: p for p in parts}
        rated = np.array([float(by_name.get(n, {}).get("rated_c", np.nan)) for n in names])
        bounds = {n: _bounds(by_name[n]["origin_mm"], by_name[n]["size_mm"]) for n in names if n in by_name}
        duration = float(run.model_dict.get("run", {}).get("duration_s", run.times[-1] if len(run.times) else 0))
        store = cls(points_mm=np.asarray(geo["points_mm"], float), tets=np.asarray(geo["tets"]),
                    part_id=np.asarray(geo["part_id"]), part_names=names, rated_c=rated,
                    part_bounds_mm=bounds, duration_s=duration, folder=Path(run.folder))
        airs = run.model_dict.get("air_volumes", [])
        store.air_names = [a["name"] for a in airs if f"air:{a['name']}" in run.history_header]
        by_air = {a["name"]: a for a in airs}
        store.air_rated_c = np.array([float(by_air[n].get("rated_c", np.nan)) for n in store.air_names])
        cols = [run.history_header.index(f"max:{n}") for n in names]
        cols += [run.history_header.index(f"air:{n}") for n in store.air_names]
        for i, t in enumerate(run.times):
            store.add_frame(float(t), run.field(i), run.history[i, cols] if i < len(run.history) else None)
        if run.series is not None:
            run.series.close()  # every frame is in memory now; do not keep the file open
        store.peak_rows = [[r.get(c, "") for c in PEAK_COLUMNS] for r in run.peaks]
        store.complete = True
        return store

    def add_frame(self, time_s: float, field_c, part_max=None) -> int:
        """Append the field at an output time; returns its index."""
        f = np.asarray(field_c, dtype=np.float32)
        if part_max is None:
            part_max = self._part_max_of(f)
        n = len(self.part_names)
        values = np.asarray(part_max, dtype=float)
        part_max, air = values[:n], values[n:]
        self.air.append(air.copy() if len(air) == len(self.air_names) else np.full(len(self.air_names), np.nan))
        self.times.append(float(time_s))
        self.frames.append(f)
        self.part_max.append(np.asarray(part_max, dtype=float).copy())
        self._lo = min(self._lo, float(f.min()))
        self._hi = max(self._hi, float(f.max()))
        return len(self.times) - 1

    def _part_max_of(self, f: np.ndarray) -> np.ndarray:
        out = np.full(len(self.part_names), np.nan)
        node_part = np.full((len(self.part_names), len(f)), False)
        node_part[self.part_id[:, None], self.tets] = True
        for_part = np.where(node_part, f[None, :], -np.inf).max(axis=1)
        ok = node_part.any(axis=1)
        out[ok] = for_part[ok]
        return out

    def set_peak_rows(self, rows) -> None:
        """Peak rows from :meth:`solver.run.session.RunSession.finish` (PeakRow objects)."""
        self.peak_rows = [r.as_csv_row() for r in rows]
        self.complete = True

    # ------------------------------------------------------------ lookup
    @property
    def n_frames(self) -> int:
        return len(self.times)

    def frame(self, i: int) -> np.ndarray:
        return self.frames[i]

    def index_at(self, time_s: float) -> int:
        """Index of the output time nearest to ``time_s`` (0 when empty)."""
        if not self.times:
            return 0
        t = np.asarray(self.times)
        return int(np.argmin(np.abs(t - time_s)))

    def colour_range(self, i: int | None = None, per_frame: bool = False,
                     pad: bool = True) -> tuple[float, float]:
        """°C range for the colour scale: over every frame so far, or of frame ``i`` only.

        ``pad``: widen a range narrower than 1 µK to ±0.5 K (and give 0–1 when empty); without it
        the raw extremes come back (±inf when empty), for a caller that widens in its own way."""
        if per_frame and i is not None and self.frames:
            f = self.frames[i]
            lo, hi = float(f.min()), float(f.max())
        else:
            lo, hi = self._lo, self._hi
        if not pad:
            return lo, hi
        if not np.isfinite(lo) or not np.isfinite(hi):
            return 0.0, 1.0
        if hi - lo < 1e-6:
            lo, hi = lo - 0.5, hi + 0.5
        return lo, hi

    def over_at(self, i: int) -> set:
        """Parts whose maximum exceeds their rating at output ``i``."""
        if not self.part_max:
            return set()
        pm = self.part_max[i]
        with np.errstate(invalid="ignore"):
            over = pm > self.rated_c
        return {n for n, o in zip(self.part_names, over) if o}

    def error_k(self, name: str) -> float:
        """The estimated error of a part's peak from the peak table (K; 0 when not estimated)."""
        k = PEAK_COLUMNS.index("peak_error_k")
        for r in self.peak_rows or []:
            if r[0] == name:
                try:
                    v = float(r[k])
                except (ValueError, IndexError):
                    return 0.0
                return v if np.isfinite(v) and v > 0 else 0.0
        return 0.0

    def verdicts_at(self, i: int) -> tuple[set, set]:
        """(over, at risk) at output ``i`` with the peak table's error band: over when the part's
        maximum minus its error exceeds the rating, at risk when the rating lies within ± error."""
        if not self.part_max:
            return set(), set()
        pm = self.part_max[i]
        err = np.array([self.error_k(n) for n in self.part_names]) if self.peak_rows else np.zeros(len(pm))
        with np.errstate(invalid="ignore"):
            over = pm - err > self.rated_c
            risk = ~over & (err > 0) & (pm + err >= self.rated_c)
        return ({n for n, o in zip(self.part_names, over) if o}, {n for n, o in zip(self.part_names, risk) if o})

    def ever_over(self) -> set:
        """Parts that exceeded their rating at some time (peak table once finished, else outputs)."""
        if self.peak_rows is not None:
            k = PEAK_COLUMNS.index("status")
            return {r[0] for r in self.peak_rows if r[k] == "over"}
        if not self.part_max:
            return set()
        with np.errstate(invalid="ignore"):
            over = (np.array(self.part_max) > self.rated_c[None, :]).any(axis=0)
        return {n for n, o in zip(self.part_names, over) if o}

    def history(self) -> tuple[np.ndarray, np.ndarray]:
        """Output times (T,) s and part maxima (T, P) °C."""
        if not self.times:
            return np.zeros(0), np.zeros((0, len(self.part_names)))
        return np.array(self.times), np.array(self.part_max)

    def rated_parts(self) -> list:
        return [n for n, r in zip(self.part_names, self.rated_c) if np.isfinite(r)]

    def series(self) -> tuple[list, np.ndarray, np.ndarray]:
        """Names, output times (T,) s and values (T, P + A) °C of what the chart can show: every
        part's maximum, then every air volume's temperature."""
        times, pmax = self.history()
        names = list(self.part_names) + list(self.air_names)
        if not self.air_names:
            return names, times, pmax
        air = np.array(self.air).reshape(len(times), len(self.air_names))
        return names, times, np.hstack([pmax.reshape(len(times), len(self.part_names)), air])

    def rating(self, name: str) -> float | None:
        """A part's or an air volume's rated temperature (°C), None when unrated."""
        if name in self.air_names:
            r = self.air_rated_c[self.air_names.index(name)]
        else:
            r = self.rated_c[self.part_names.index(name)]
        return None if not np.isfinite(r) else float(r)

    # ------------------------------------------------------------ export
    def peaks_csv_text(self) -> str:
        """The peak table exactly as ``thermgui solve`` writes ``peaks.csv``."""
        buf = io.StringIO()
        w = csv.writer(buf)
        w.writerow(PEAK_COLUMNS)
        for r in self.peak_rows or []:
            w.writerow(r)
        return buf.getvalue()

    def write_peaks_csv(self, path) -> None:
        with open(path, "w", newline="") as fh:
            fh.write(self.peaks_csv_text())


def peaks_tsv(rows: list) -> str:
    """Header and rows as tab-separated lines (for pasting into a spreadsheet)."""
    return "\n".join("\t".join(str(c) for c in r) for r in [PEAK_COLUMNS, *rows]) + "\n"


def _bounds(origin, size) -> tuple:
    o, s = [float(v) for v in origin], [float(v) for v in size]
    return (o[0], o[0] + s[0], o[1], o[1] + s[1], o[2], o[2] + s[2])
