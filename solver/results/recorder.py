"""Per-part results accumulated from the step stream: peaks, history, energy balance."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from solver.mesh.mesher import MM

PEAK_COLUMNS = ["part", "rated_c", "peak_c", "peak_error_k", "peak_time_s", "margin_k", "first_over_s",
                "hotspot_x_mm", "hotspot_y_mm", "hotspot_z_mm", "status"]
STATUSES = ("over", "at-risk", "ok", "unrated")


@dataclass
class PeakRow:
    part: str
    rated_c: float | None
    peak_c: float
    peak_time_s: float
    margin_k: float | None
    first_over_s: float | None
    hotspot_mm: tuple
    mean_over_time_c: float
    peak_error_k: float | None = None  # estimated bound on |peak - converged peak|, K (None: not estimated)

    @property
    def status(self) -> str:
        """``over`` when even peak - error exceeds the rating, ``at-risk`` when the rating lies
        within peak ± error, ``ok`` below the band, ``unrated`` without a rating."""
        if self.rated_c is None or self.peak_c is None or np.isnan(self.peak_c):
            return "unrated"
        err = self.peak_error_k if self.peak_error_k is not None and np.isfinite(self.peak_error_k) else 0.0
        if self.peak_c - err > self.rated_c:
            return "over"
        if err > 0 and self.peak_c + err >= self.rated_c:
            return "at-risk"
        return "ok"

    def as_csv_row(self) -> list:
        def num(v, fmt="{:.3f}"):
            return "" if v is None or (isinstance(v, float) and np.isnan(v)) else fmt.format(v)
        return [self.part, num(self.rated_c, "{:.12g}"), num(self.peak_c), num(self.peak_error_k, "{:.3f}"),
                num(self.peak_time_s, "{:.12g}"), num(self.margin_k), num(self.first_over_s, "{:.2f}"),
                *(num(c) for c in self.hotspot_mm), self.status]


@dataclass
class RunRecorder:
    """Feed it every :class:`~solver.transient.stepping.StepEvent`; read peaks and history after.

    Fields at output times are kept as float32 unless ``field_sink(time_s, field)`` is given,
    in which case they are handed over (for example to a file writer) and not kept.
    """

    problem: object
    field_sink: object = None
    keep_fields: bool = True
    peak_field_parts: tuple = ()  # part indices whose field at their peak is kept (for mesh refinement)
    times: list = field(default_factory=list)
    part_max_history: list = field(default_factory=list)
    part_mean_history: list = field(default_factory=list)
    probe_history: list = field(default_factory=list)
    air_history: list = field(default_factory=list)  # (n_air,) °C per output time
    fields: list = field(default_factory=list)
    energy: dict = field(default_factory=lambda: {"in_j": 0.0, "out_j": 0.0, "stored_j": 0.0,
                                                  "max_residual_w": 0.0, "max_flow_w": 0.0})

    def __post_init__(self):
        p = self.problem
        n = len(p.model.parts)
        self.rated = np.array([np.nan if q.rated_c is None else q.rated_c for q in p.model.parts])
        self.peak = np.full(n, -np.inf)
        self.peak_time = np.zeros(n)
        self.hotspot = np.zeros((n, 3))
        self.first_over = np.full(n, np.nan)
        self.mean_integral = np.zeros(n)
        self._prev = None  # (time, part_max, part_mean)
        self.steps_seen = 0
        self.peak_fields: dict = {}  # part index -> float32 field at that part's peak
        self._goal_mask = None
        air = getattr(p, "air", None)
        self.air_names = list(air.names) if air is not None else []
        self.air_rated = np.array([np.nan if r is None else r for r in air.rated_c]) if air is not None else np.zeros(0)
        na = len(self.air_names)
        self.air_peak = np.full(na, -np.inf)
        self.air_peak_time = np.zeros(na)
        self.air_first_over = np.full(na, np.nan)
        self.air_mean_integral = np.zeros(na)
        self._prev_air = None
        if len(self.peak_field_parts):
            self._goal_mask = np.zeros(n, dtype=bool)
            self._goal_mask[list(self.peak_field_parts)] = True

    def add(self, ev) -> None:
        p = self.problem
        pm = ev.part_max
        better = pm > self.peak
        if self._goal_mask is not None:
            wanted = better & self._goal_mask
            if wanted.any():
                snapshot = np.asarray(ev.field, dtype=np.float32).copy()  # one copy shared by the parts
                for i in np.nonzero(wanted)[0]:
                    self.peak_fields[int(i)] = snapshot
        if better.any():
            for i in np.nonzero(better)[0]:
                if p.part_nodes.counts[i] == 0:
                    continue
                self.peak[i] = pm[i]
                self.peak_time[i] = ev.time_s
                self.hotspot[i] = p.mesh.nodes[p.part_nodes.argmax(ev.field, i)] / MM
        over = (pm > self.rated) & np.isnan(self.first_over)
        if over.any():
            if self._prev is None:
                self.first_over[over] = ev.time_s
            else:
                t0, m0, _ = self._prev
                frac = (self.rated[over] - m0[over]) / np.where(pm[over] != m0[over], pm[over] - m0[over], 1.0)
                self.first_over[over] = t0 + np.clip(frac, 0.0, 1.0) * (ev.time_s - t0)
        if self.air_names:
            self._add_air(ev)
        if self._prev is not None:
            t0, _, mean0 = self._prev
            self.mean_integral += 0.5 * (mean0 + ev.part_mean) * (ev.time_s - t0)
            e = self.energy
            e["in_j"] += ev.heat_in_w * ev.dt
            e["out_j"] += ev.convected_out_w * ev.dt
            e["stored_j"] += ev.stored_w * ev.dt
            e["max_residual_w"] = max(e["max_residual_w"], abs(ev.energy_residual_w))
            e["max_flow_w"] = max(e["max_flow_w"], abs(ev.heat_in_w), abs(ev.convected_out_w), abs(ev.stored_w))
        self._prev = (ev.time_s, pm.copy(), ev.part_mean.copy())
        self.steps_seen += 1
        if ev.is_output:
            self.times.append(ev.time_s)
            self.part_max_history.append(pm.copy())
            self.part_mean_history.append(ev.part_mean.copy())
            self.probe_history.append(np.asarray(ev.probes).copy())
            if self.air_names:
                self.air_history.append(np.asarray(ev.air, dtype=float).copy())
            if self.field_sink is not None:
                self.field_sink(ev.time_s, ev.field)
            if self.keep_fields:
                self.fields.append(np.asarray(ev.field, dtype=np.float32).copy())

    def _add_air(self, ev) -> None:
        """Peaks, first crossing and time mean of the air volumes (one temperature each)."""
        a = np.asarray(ev.air, dtype=float)
        better = a > self.air_peak
        self.air_peak[better] = a[better]
        self.air_peak_time[better] = ev.time_s
        over = (a > self.air_rated) & np.isnan(self.air_first_over)
        if over.any():
            if self._prev_air is None:
                self.air_first_over[over] = ev.time_s
            else:
                t0, a0 = self._prev_air
                frac = (self.air_rated[over] - a0[over]) / np.where(a[over] != a0[over], a[over] - a0[over], 1.0)
                self.air_first_over[over] = t0 + np.clip(frac, 0.0, 1.0) * (ev.time_s - t0)
        if self._prev_air is not None:
            t0, a0 = self._prev_air
            self.air_mean_integral += 0.5 * (a0 + a) * (ev.time_s - t0)
        self._prev_air = (ev.time_s, a.copy())

    @property
    def relative_energy_residual(self) -> float:
        """Largest per-step energy residual relative to the largest heat flow of the run."""
        e = self.energy
        return e["max_residual_w"] / e["max_flow_w"] if e["max_flow_w"] > 0 else 0.0

    def peak_rows(self) -> list[PeakRow]:
        rows = []
        duration = self._prev[0] if self._prev else 0.0
        for i, part in enumerate(self.problem.model.parts):
            rated = None if np.isnan(self.rated[i]) else float(self.rated[i])
            empty = self.problem.part_nodes.counts[i] == 0
            peak = np.nan if empty else float(self.peak[i])
            rows.append(PeakRow(
                part=part.name, rated_c=rated, peak_c=peak,
                peak_time_s=np.nan if empty else float(self.peak_time[i]),
                margin_k=None if rated is None or empty else rated - peak,
                first_over_s=None if np.isnan(self.first_over[i]) else float(self.first_over[i]),
                hotspot_mm=(np.nan,) * 3 if empty else tuple(float(v) for v in self.hotspot[i]),
                mean_over_time_c=float(self.mean_integral[i] / duration) if duration > 0 else float("nan")))
        for j, name in enumerate(self.air_names):  # air volumes: their own rows, no hot spot
            rated = None if np.isnan(self.air_rated[j]) else float(self.air_rated[j])
            peak = float(self.air_peak[j])
            rows.append(PeakRow(
                part=name, rated_c=rated, peak_c=peak, peak_time_s=float(self.air_peak_time[j]),
                margin_k=None if rated is None else rated - peak,
                first_over_s=None if np.isnan(self.air_first_over[j]) else float(self.air_first_over[j]),
                hotspot_mm=(np.nan,) * 3,
                mean_over_time_c=float(self.air_mean_integral[j] / duration) if duration > 0 else float("nan")))
        return rows

    def air_history_array(self) -> np.ndarray:
        """(T, n_air) air temperatures at output times, °C."""
        return np.array(self.air_history).reshape(len(self.times), len(self.air_names))

    def history_arrays(self):
        """times (T,), part maxima (T, P), probe values (T, K)."""
        n_probes = self.problem.probes.shape[0]
        probes = np.array(self.probe_history) if self.probe_history else np.zeros((0, n_probes))
        return np.array(self.times), np.array(self.part_max_history), probes.reshape(len(self.times), n_probes)


def sort_for_review(rows: list[PeakRow]) -> list[PeakRow]:
    """Parts over their rating first (least margin first), then at risk, then rated by margin, then unrated by peak."""
    def key(r: PeakRow):
        group = {"over": 0, "at-risk": 1, "ok": 2, "unrated": 3}[r.status]
        sub = r.margin_k if r.margin_k is not None else -r.peak_c
        return (group, sub)
    return sorted(rows, key=key)
