"""Bounds on model values beyond sign and finiteness: what is not physics for an electronics enclosure.

Each bound is wide enough for the tricks users rely on (a very large h to emulate a fixed
temperature is accepted up to 1e10 W/(m²·K); a very conductive or heavy block to emulate a heat
sink or a thermal mass) and tight enough that the numbers stay representable through meshing,
assembly and the files a run writes, so a run that solves can also be reopened.
The bounds are engineering judgement (common practice, no source), stated in the messages.
"""
from __future__ import annotations

import unicodedata

MAX_NAME_CHARS = 200  # part, material, convection and probe names (they become CSV columns)
MAX_TITLE_CHARS = 10_000
MAX_COORD_MM = 1e6  # 1 km from the origin
MIN_SIZE_MM = 1e-3  # 1 µm: thinner layers are below what a box grid resolves (faces merge at 1e-7 mm)
MAX_SIZE_MM = 1e6
MIN_CELL_MM = 1e-3
MAX_H = 1e10  # W/(m²·K); 1e9 stays accepted (fixed-temperature emulation)
CONDUCTIVITY = (1e-6, 1e7)  # W/(m·K)
DENSITY = (1e-3, 1e8)  # kg/m³
SPECIFIC_HEAT = (1e-3, 1e8)  # J/(kg·K)
MAX_TEMPERATURE_C = 1e5
MAX_POWER_W = 1e9
MIN_TIME_S = 1e-6  # steps, durations, periods: well above the 1e-9 s landing tolerance
MAX_TIME_S = 1e10  # about 300 years
MAX_PARTS = 10_000
MAX_ITEMS = 100_000


def _name_issue(name: str) -> str | None:
    if len(name) > MAX_NAME_CHARS:
        return f"name is {len(name):,} characters long; at most {MAX_NAME_CHARS}"
    if name != name.strip():
        return None  # leading/trailing spaces are kept as typed
    bad = [c for c in name if unicodedata.category(c) in ("Cc", "Cs", "Zl", "Zp")]
    if bad:
        return f"name holds a control character ({bad[0]!r}); use printable characters"
    return None


def _range(issues, path, value, lo, hi, unit, why=""):
    if value is None:
        return
    if value < lo or value > hi:
        issues.append((path, f"{value:g} {unit} is outside {lo:g} … {hi:g} {unit}{why}"))


def check_limits(m) -> list[tuple[str, str]]:
    """(field path, message) for every value outside its bound."""
    issues: list[tuple[str, str]] = []
    if len(m.title) > MAX_TITLE_CHARS:
        issues.append(("title", f"title is {len(m.title):,} characters long; at most {MAX_TITLE_CHARS:,}"))
    for key in ("ambient_c", "initial_c"):
        _range(issues, key, getattr(m, key), -273.15, MAX_TEMPERATURE_C, "°C")
    if len(m.parts) > MAX_PARTS:
        issues.append(("parts", f"{len(m.parts):,} parts; at most {MAX_PARTS:,}"))
    for key in ("heat_loads", "convection", "probes"):
        if len(getattr(m, key, []) or []) > MAX_ITEMS:
            issues.append((key, f"more than {MAX_ITEMS:,} entries"))
    for name, mat in m.materials.items():
        base = f"materials.{name}"
        if _name_issue(name):
            issues.append((base, "material " + _name_issue(name)))
        k = mat.conductivity if isinstance(mat.conductivity, list) else [mat.conductivity]
        for j, v in enumerate(k):
            _range(issues, f"{base}.conductivity" + (f"[{j}]" if len(k) > 1 else ""), v, *CONDUCTIVITY, "W/(m·K)")
        _range(issues, f"{base}.density", mat.density, *DENSITY, "kg/m³")
        _range(issues, f"{base}.specific_heat", mat.specific_heat, *SPECIFIC_HEAT, "J/(kg·K)")
    for i, p in enumerate(m.parts):
        b = f"parts[{i}]"
        if _name_issue(p.name):
            issues.append((f"{b}.name", _name_issue(p.name)))
        if len(p.material) > MAX_NAME_CHARS:
            issues.append((f"{b}.material", f"material name is {len(p.material):,} characters long"))
        for ax in range(3):
            _range(issues, f"{b}.origin_mm[{ax}]", p.origin_mm[ax], -MAX_COORD_MM, MAX_COORD_MM, "mm",
                   " (1 km from the origin)")
            _range(issues, f"{b}.size_mm[{ax}]", p.size_mm[ax], MIN_SIZE_MM, MAX_SIZE_MM, "mm",
                   " (thinner than 1 µm is below what the grid resolves; larger than 1 km is not an enclosure)")
        for key in ("rated_c", "initial_c"):
            _range(issues, f"{b}.{key}", getattr(p, key), -273.15, MAX_TEMPERATURE_C, "°C")
    for i, hl in enumerate(m.heat_loads):
        _profile(issues, f"heat_loads[{i}].profile", hl.profile, MAX_POWER_W, "W")
    for i, c in enumerate(m.convection):
        b = f"convection[{i}]"
        if _name_issue(c.name):
            issues.append((f"{b}.name", _name_issue(c.name)))
        _range(issues, f"{b}.h", c.h, 0.0, MAX_H, "W/(m²·K)",
               " (1e9 already holds a surface at the ambient temperature)")
        if c.ambient_c is not None:
            _profile(issues, f"{b}.ambient_c", c.ambient_c, MAX_TEMPERATURE_C, "°C")
    for i, pr in enumerate(m.probes):
        b = f"probes[{i}]"
        if _name_issue(pr.name):
            issues.append((f"{b}.name", _name_issue(pr.name)))
        for ax in range(3):
            _range(issues, f"{b}.at_mm[{ax}]", pr.at_mm[ax], -MAX_COORD_MM, MAX_COORD_MM, "mm")
    _range(issues, "mesh.cell_mm", m.mesh.cell_mm, MIN_CELL_MM, MAX_SIZE_MM, "mm")
    r = m.run
    _range(issues, "run.duration_s", r.duration_s, MIN_TIME_S, MAX_TIME_S, "s")
    _range(issues, "run.step_s", r.step_s, MIN_TIME_S, MAX_TIME_S, "s")
    _range(issues, "run.output_every_s", r.output_every_s, MIN_TIME_S, MAX_TIME_S, "s")
    _range(issues, "run.tolerance_k", getattr(r, "tolerance_k", None), 1e-9, 1e4, "K")
    return issues


def _profile(issues, path, p, max_abs, unit) -> None:
    if p.type in ("constant", "step"):
        _range(issues, f"{path}.value", p.value, -max_abs, max_abs, unit)
        if p.type == "step":
            _range(issues, f"{path}.start_s", p.start_s, 0.0, MAX_TIME_S, "s")
    elif p.type == "pulse":
        _range(issues, f"{path}.high", p.high, -max_abs, max_abs, unit)
        _range(issues, f"{path}.low", p.low, -max_abs, max_abs, unit)
        _range(issues, f"{path}.period_s", p.period_s, MIN_TIME_S, MAX_TIME_S, "s")
        _range(issues, f"{path}.start_s", p.start_s, 0.0, MAX_TIME_S, "s")
    elif p.type == "table":
        for j, (t, v) in enumerate(p.points):
            if t > MAX_TIME_S:
                issues.append((f"{path}.points[{j}][0]", f"{t:g} s is beyond {MAX_TIME_S:g} s"))
                break
            if abs(v) > max_abs:
                issues.append((f"{path}.points[{j}][1]", f"{v:g} {unit} is outside ±{max_abs:g} {unit}"))
                break
