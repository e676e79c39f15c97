"""The model file (format "thermgui-model", version 1): schema, loading and checks.

Units at this edge are the user's: millimetres, watts, °C, W/(m²·K), seconds.
:func:`load_model` returns a validated :class:`Model` or raises :class:`ModelError`
naming the file, the field path (``parts[3].size_mm[2]``) and the problem.
"""
from __future__ import annotations

import json
import math
import re
from pathlib import Path
from typing import Annotated, Literal, Optional, Union

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from solver.errors import ModelError
from solver.model.fielderrors import format_pydantic
from solver.model.limits import check_limits
from solver.model.materials import BUILTIN_MATERIALS, Material

FORMAT_NAME = "thermgui-model"
FORMAT_VERSION = 1
ABSOLUTE_ZERO_C = -273.15
SIDES = ("x-", "x+", "y-", "y+", "z-", "z+", "exposed")
SCHEMES = ("backward-euler", "crank-nicolson", "forward-euler")
MASS_KINDS = ("consistent", "lumped")
MAX_STEPS = 5_000_000  # time steps one run may take
MAX_FILE_BYTES = 16 * 1024 * 1024  # a model file is a few kB; a 16 MB cap keeps /dev/zero and the like out
MAX_DEPTH = 32  # nesting of a model file is at most about 6 levels


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False)


Vec3 = Annotated[list[float], Field(min_length=3, max_length=3)]
Positive = Annotated[float, Field(gt=0)]
NonNegative = Annotated[float, Field(ge=0)]


# ---------------------------------------------------------------- profiles
class ConstantProfile(_Strict):
    type: Literal["constant"]
    value: float


class StepProfile(_Strict):
    type: Literal["step"]
    value: float
    start_s: NonNegative = 0.0


class PulseProfile(_Strict):
    type: Literal["pulse"]
    high: float
    low: float = 0.0
    period_s: Positive
    duty: Annotated[float, Field(gt=0, le=1)]
    start_s: NonNegative = 0.0


class TableProfile(_Strict):
    type: Literal["table"]
    points: Annotated[list[Annotated[list[float], Field(min_length=2, max_length=2)]], Field(min_length=1)]

    @field_validator("points")
    @classmethod
    def _increasing(cls, pts):
        for i, p in enumerate(pts):
            if p[0] < 0:
                raise ValueError(f"points[{i}][0]: time must not be negative (got {p[0]:g})")
            if i and p[0] <= pts[i - 1][0]:
                raise ValueError(f"points[{i}][0]: table times must increase strictly "
                                 f"({p[0]:g} s follows {pts[i - 1][0]:g} s)")
        return pts


Profile = Annotated[Union[ConstantProfile, StepProfile, PulseProfile, TableProfile], Field(discriminator="type")]


def profile_levels(p) -> list[float]:
    """All values a profile can take (for sign checks)."""
    if p.type in ("constant", "step"):
        return [p.value]
    if p.type == "pulse":
        return [p.high, p.low]
    return [v for _, v in p.points]


# ---------------------------------------------------------------- items
class MaterialSpec(_Strict):
    conductivity: Union[Positive, Annotated[list[Positive], Field(min_length=3, max_length=3)]]
    density: Positive
    specific_heat: Positive

    def to_material(self) -> Material:
        k = self.conductivity
        kk = tuple(float(v) for v in k) if isinstance(k, list) else (float(k),) * 3
        return Material(kk, float(self.density), float(self.specific_heat), "model material", "model file")


class Part(_Strict):
    name: Annotated[str, Field(min_length=1)]
    material: Annotated[str, Field(min_length=1)]
    origin_mm: Vec3
    size_mm: Annotated[list[Positive], Field(min_length=3, max_length=3)]
    rated_c: Optional[float] = None
    initial_c: Optional[float] = None


class HeatLoad(_Strict):
    part: str
    profile: Profile


def _ambient_before(v):
    # a plain number is shorthand for a constant profile
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return {"type": "constant", "value": v}
    return v


class Convection(_Strict):
    name: Annotated[str, Field(min_length=1)]
    part: str
    side: Literal["x-", "x+", "y-", "y+", "z-", "z+", "exposed"]
    h: Positive
    ambient_c: Optional[Profile] = None
    # radiation to the surroundings (exact Stefan–Boltzmann, grey, view factor 1; solver/fem/radiation.py)
    emissivity: Optional[Annotated[float, Field(gt=0, le=1)]] = None
    surroundings_c: Optional[Profile] = None  # °C; default: this entry's ambient

    @field_validator("ambient_c", "surroundings_c", mode="before")
    @classmethod
    def _number_is_constant(cls, v):
        return _ambient_before(v)


class SurfaceLoad(_Strict):
    """Absorbed surface heat flux (sun, a heater film): absorptivity × flux_w_m2 on a part's side."""

    name: Annotated[str, Field(min_length=1)]
    part: str
    side: Literal["x-", "x+", "y-", "y+", "z-", "z+", "exposed"]
    flux_w_m2: Profile  # W/m² arriving on the face (a number is a constant)
    absorptivity: Annotated[float, Field(ge=0, le=1)] = 1.0

    @field_validator("flux_w_m2", mode="before")
    @classmethod
    def _number_is_constant(cls, v):
        return _ambient_before(v)


class Contact(_Strict):
    """Thermal contact resistance on the faces where two parts touch (solver/mesh/contacts.py)."""

    parts: Annotated[list[Annotated[str, Field(min_length=1)]], Field(min_length=2, max_length=2)]
    resistance_k_m2_w: Optional[Annotated[float, Field(ge=0)]] = None  # K·m²/W
    conductance_w_m2k: Optional[Positive] = None  # W/(m²·K) = 1 / resistance
    side: Optional[Literal["x-", "x+", "y-", "y+", "z-", "z+"]] = None  # only the first part's face on this side
    name: Optional[str] = None

    @property
    def resistance(self) -> float:
        """K·m²/W."""
        if self.resistance_k_m2_w is not None:
            return float(self.resistance_k_m2_w)
        return 1.0 / float(self.conductance_w_m2k)


class AirFace(_Strict):
    part: str
    side: Literal["x-", "x+", "y-", "y+", "z-", "z+", "exposed"]
    h: Positive  # W/(m²·K) between the face and the air node


class AirVolume(_Strict):
    """Still air inside a sealed box as one lumped node (solver/fem/airnodes.py)."""

    name: Annotated[str, Field(min_length=1)]
    enclosed_by: list[Annotated[str, Field(min_length=1)]] = Field(default_factory=list)
    volume_mm3: Optional[Positive] = None  # absent: the empty space the enclosing parts close off
    faces: Annotated[list[AirFace], Field(min_length=1)]
    initial_c: Optional[float] = None
    rated_c: Optional[float] = None
    # dry air near 300 K (Incropera, Fundamentals of Heat and Mass Transfer, Table A.4)
    density: Positive = 1.1614  # kg/m³
    specific_heat: Positive = 1007.0  # J/(kg·K)


class Probe(_Strict):
    name: Annotated[str, Field(min_length=1)]
    at_mm: Vec3


class MeshSettings(_Strict):
    cell_mm: Positive = 2.0
    min_layers: Annotated[int, Field(ge=1, le=50)] = 2
    # accuracy control (solver.run.accuracy): refine until every rated part's estimated peak error is
    # below tolerance_k (K); null = keep this mesh as given and only estimate the error
    tolerance_k: Optional[Annotated[float, Field(gt=0, le=1000)]] = 1.0
    max_nodes: Annotated[int, Field(ge=1000, le=50_000_000)] = 2_000_000  # refinement budget: unknowns (free nodes)
    max_levels: Annotated[int, Field(ge=2, le=20)] = 8  # refinement budget: meshes solved
    time_limit_s: Optional[Positive] = 900.0  # refinement budget: wall time before the last level
    # memory budget of a run in GB (default: 70 % of the memory available when it starts); solver/mesh/budget.py
    memory_limit_gb: Optional[Annotated[float, Field(gt=0, le=1e6)]] = None


class RunSettings(_Strict):
    duration_s: Positive = 600.0
    step_s: Positive = 1.0
    scheme: Literal["backward-euler", "crank-nicolson", "forward-euler"] = "crank-nicolson"
    mass: Literal["consistent", "lumped"] = "lumped"
    output_every_s: Optional[Positive] = None
    # adaptive steps: temperature tolerance in K (local error per step, TR-BDF2); step_s is then
    # the first step and the restart step after jumps. Absent = fixed steps of step_s.
    tolerance_k: Optional[Positive] = None
    # "auto" (default; absent = auto): the cheaper of the two by predicted cost (solver/transient/methodchoice.py);
    # "full": step the finite-element system; "reduced": project it onto a Krylov basis grown until
    # its estimated error is below tolerance_k (default 0.1 K) and integrate exactly; step_s is then
    # the sampling interval for peaks.
    method: Optional[Literal["auto", "full", "reduced"]] = None
    # true: report the settled cycle of loads and ambients that repeat with one period, computed
    # directly (solver/transient/periodic.py); the run then covers one period
    periodic: bool = False

    @property
    def output_interval_s(self) -> float:
        """Output spacing; defaults to about 100 rows, never below one step."""
        if self.output_every_s is not None:
            return float(self.output_every_s)
        return max(float(self.step_s), float(self.duration_s) / 100.0)


class Model(_Strict):
    format: Literal["thermgui-model"]
    version: Literal[1]
    title: str = ""
    ambient_c: float = 25.0
    initial_c: float = 25.0
    materials: dict[str, MaterialSpec] = Field(default_factory=dict)
    parts: Annotated[list[Part], Field(min_length=1)]
    heat_loads: list[HeatLoad] = Field(default_factory=list)
    convection: list[Convection] = Field(default_factory=list)
    surface_loads: list[SurfaceLoad] = Field(default_factory=list)
    contacts: list[Contact] = Field(default_factory=list)
    air_volumes: list[AirVolume] = Field(default_factory=list)
    probes: list[Probe] = Field(default_factory=list)
    mesh: MeshSettings = Field(default_factory=MeshSettings)
    run: RunSettings = Field(default_factory=RunSettings)

    # ------------------------------------------------------------ helpers
    def material_table(self) -> dict[str, Material]:
        """Built-in materials overridden / extended by the model's own."""
        table = dict(BUILTIN_MATERIALS)
        table.update({k: v.to_material() for k, v in self.materials.items()})
        return table

    def part_index(self, name: str) -> int:
        for i, p in enumerate(self.parts):
            if p.name == name:
                return i
        raise KeyError(name)

    def to_json_dict(self) -> dict:
        """Plain JSON-ready dict (for saving); omits unset optional values (an explicit
        ``mesh.tolerance_k: null``, meaning "keep the mesh as given", is kept)."""
        d = self.model_dump(mode="json", exclude_none=True)
        if self.mesh.tolerance_k is None:
            d.setdefault("mesh", {})["tolerance_k"] = None
        if self.mesh.time_limit_s is None:
            d.setdefault("mesh", {})["time_limit_s"] = None
        return d


# ---------------------------------------------------------------- cross checks
def _cross_check(m: Model) -> list[tuple[str, str]]:
    issues: list[tuple[str, str]] = []
    materials = m.material_table()
    names: dict[str, int] = {}
    for i, p in enumerate(m.parts):
        if p.name in names:
            issues.append((f"parts[{i}].name", f"duplicate part name {p.name!r} (also parts[{names[p.name]}])"))
        names.setdefault(p.name, i)
        if p.material not in materials:
            issues.append((f"parts[{i}].material", f"unknown material {p.material!r}; "
                           f"define it under \"materials\" or use one of: {', '.join(sorted(materials))}"))
        if p.initial_c is not None and p.initial_c <= ABSOLUTE_ZERO_C:
            issues.append((f"parts[{i}].initial_c", "must be above absolute zero (-273.15 °C)"))
    for key in ("ambient_c", "initial_c"):
        if getattr(m, key) <= ABSOLUTE_ZERO_C:
            issues.append((key, "must be above absolute zero (-273.15 °C)"))
    for i, hl in enumerate(m.heat_loads):
        if hl.part not in names:
            issues.append((f"heat_loads[{i}].part", f"unknown part {hl.part!r}"))
        if any(v < 0 for v in profile_levels(hl.profile)):
            issues.append((f"heat_loads[{i}].profile", "heat load must not be negative (watts)"))
    conv_names: dict[str, int] = {}
    for i, c in enumerate(m.convection):
        if c.part not in names:
            issues.append((f"convection[{i}].part", f"unknown part {c.part!r}"))
        if c.name in conv_names:
            issues.append((f"convection[{i}].name", f"duplicate convection name {c.name!r}"))
        conv_names.setdefault(c.name, i)
        if c.ambient_c is not None and any(v <= ABSOLUTE_ZERO_C for v in profile_levels(c.ambient_c)):
            issues.append((f"convection[{i}].ambient_c", "must be above absolute zero (-273.15 °C)"))
        if c.surroundings_c is not None:
            if c.emissivity is None:
                issues.append((f"convection[{i}].surroundings_c", "needs an emissivity (radiation) on this entry"))
            if any(v <= ABSOLUTE_ZERO_C for v in profile_levels(c.surroundings_c)):
                issues.append((f"convection[{i}].surroundings_c", "must be above absolute zero (-273.15 °C)"))
    surf_names: dict[str, int] = {}
    for i, sl in enumerate(m.surface_loads):
        if sl.part not in names:
            issues.append((f"surface_loads[{i}].part", f"unknown part {sl.part!r}"))
        if sl.name in surf_names:
            issues.append((f"surface_loads[{i}].name", f"duplicate surface load name {sl.name!r}"))
        surf_names.setdefault(sl.name, i)
        if any(v < 0 for v in profile_levels(sl.flux_w_m2)):
            issues.append((f"surface_loads[{i}].flux_w_m2", "flux must not be negative (W/m²); "
                                                            "cool a face with a convection entry"))
    for i, ct in enumerate(m.contacts):
        for j, pn in enumerate(ct.parts):
            if pn not in names:
                issues.append((f"contacts[{i}].parts[{j}]", f"unknown part {pn!r}"))
        if ct.parts[0] == ct.parts[1]:
            issues.append((f"contacts[{i}].parts", f"a contact needs two different parts (got {ct.parts[0]!r} twice)"))
        if (ct.resistance_k_m2_w is None) == (ct.conductance_w_m2k is None):
            issues.append((f"contacts[{i}]", "give exactly one of resistance_k_m2_w (K·m²/W) or "
                                             "conductance_w_m2k (W/(m²·K))"))
    air_names: dict[str, int] = {}
    for i, av in enumerate(m.air_volumes):
        if av.name in air_names:
            issues.append((f"air_volumes[{i}].name", f"duplicate air volume name {av.name!r}"))
        if av.name in names:
            issues.append((f"air_volumes[{i}].name", f"{av.name!r} is also a part name; the peak table needs "
                                                     "distinct names"))
        air_names.setdefault(av.name, i)
        for j, pn in enumerate(av.enclosed_by):
            if pn not in names:
                issues.append((f"air_volumes[{i}].enclosed_by[{j}]", f"unknown part {pn!r}"))
        if not av.enclosed_by and av.volume_mm3 is None:
            issues.append((f"air_volumes[{i}].volume_mm3", "give the air volume, or the parts that enclose it "
                                                           "(enclosed_by) so it can be computed"))
        for j, f in enumerate(av.faces):
            if f.part not in names:
                issues.append((f"air_volumes[{i}].faces[{j}].part", f"unknown part {f.part!r}"))
        if av.initial_c is not None and av.initial_c <= ABSOLUTE_ZERO_C:
            issues.append((f"air_volumes[{i}].initial_c", "must be above absolute zero (-273.15 °C)"))
    radiating = [i for i, c in enumerate(m.convection) if c.emissivity is not None]
    if radiating and m.run.scheme == "forward-euler":
        issues.append(("run.scheme", f"radiation (convection[{radiating[0]}].emissivity) needs an implicit scheme; "
                                     "choose backward-euler or crank-nicolson"))
    if radiating and m.run.periodic:
        issues.append(("run.periodic", f"radiation (convection[{radiating[0]}].emissivity) makes the model "
                                       "nonlinear, and the settled cycle is found by superposition; remove "
                                       "run.periodic (run several periods instead) or the emissivity"))
    probe_names: dict[str, int] = {}
    for i, pr in enumerate(m.probes):
        if pr.name in probe_names:
            issues.append((f"probes[{i}].name", f"duplicate probe name {pr.name!r}"))
        probe_names.setdefault(pr.name, i)
    r = m.run
    if r.step_s > r.duration_s:
        issues.append(("run.step_s", f"step ({r.step_s:g} s) is longer than the duration ({r.duration_s:g} s)"))
    if r.output_every_s is not None and r.output_every_s > r.duration_s:
        issues.append(("run.output_every_s",
                       f"output interval ({r.output_every_s:g} s) is longer than the duration ({r.duration_s:g} s)"))
    if r.scheme == "forward-euler" and r.mass != "lumped":
        issues.append(("run.mass", "forward Euler needs \"lumped\" capacity (a consistent capacity matrix "
                                   "would need a linear solve every step and loses the explicit scheme's point)"))
    if r.tolerance_k is not None and r.scheme == "forward-euler":
        issues.append(("run.tolerance_k", "adaptive steps (a tolerance) use an implicit scheme; remove "
                                          "tolerance_k or choose backward-euler / crank-nicolson"))
    if r.duration_s / r.step_s > MAX_STEPS:
        issues.append(("run.step_s", "more than 5 million steps; choose a longer step"))
    # every pulse edge is a landing time, so a fast pulse forces steps of its own
    profiles = [(f"heat_loads[{i}].profile", hl.profile) for i, hl in enumerate(m.heat_loads)]
    profiles += [(f"convection[{i}].ambient_c", c.ambient_c) for i, c in enumerate(m.convection)]
    profiles += [(f"convection[{i}].surroundings_c", c.surroundings_c) for i, c in enumerate(m.convection)]
    profiles += [(f"surface_loads[{i}].flux_w_m2", s.flux_w_m2) for i, s in enumerate(m.surface_loads)]
    for path, p in profiles:
        if p is None or p.type != "pulse" or p.high == p.low or p.duty >= 1.0:
            continue
        edges = 2.0 * max(0.0, r.duration_s - p.start_s) / p.period_s
        if edges > MAX_STEPS:
            issues.append((f"{path}.period_s",
                           f"a {p.period_s:g} s period has about {edges:,.0f} on/off edges in {r.duration_s:g} s, "
                           "each needing its own time step (more than 5 million); use a longer period, or its "
                           "average (duty·high + (1 − duty)·low) as a constant"))
    return issues


# ---------------------------------------------------------------- public API
def parse_model(data, source: str | None = None) -> Model:
    """Validate a JSON-like dict; raise :class:`ModelError` listing every problem found."""
    if not isinstance(data, dict):
        raise ModelError(("", "the model file must hold a JSON object"), source)
    head = []
    if data.get("format") != FORMAT_NAME:
        head.append(("format", f"must be \"{FORMAT_NAME}\" (got {json.dumps(data.get('format'))})"
                     if "format" in data else f"required field is missing (expected \"{FORMAT_NAME}\")"))
    if "format" in data and data.get("format") == FORMAT_NAME and data.get("version") != FORMAT_VERSION:
        head.append(("version", f"unsupported format version {json.dumps(data.get('version'))}; "
                                f"this program reads version {FORMAT_VERSION}"))
    if head:
        raise ModelError(head, source)
    try:
        model = Model.model_validate(data)
    except ValidationError as err:
        raise ModelError(format_pydantic(err), source) from None
    issues = _cross_check(model) + check_limits(model)
    if issues:
        raise ModelError(issues, source)
    return model


def _reject_constants(token):
    raise ValueError(f"{token} is not a number")


def load_model(path) -> Model:
    """Read and validate a model file; errors name the file, the field and the problem."""
    path = Path(path)
    src = str(path)
    try:
        text = _read_capped(path, src)
    except FileNotFoundError:
        raise ModelError(("", "file not found"), src) from None
    except IsADirectoryError:
        raise ModelError(("", "is a folder, not a model file"), src) from None
    except UnicodeDecodeError as e:
        raise ModelError(("", f"not a text file (UTF-8 decoding failed at byte {e.start})"), src) from None
    except OSError as e:
        raise ModelError(("", f"cannot be read ({e.strerror})"), src) from None
    try:
        checked = json.loads(text, parse_constant=_reject_constants, object_pairs_hook=_KeyedObject.from_pairs)
    except json.JSONDecodeError as e:
        raise ModelError(("", f"not valid JSON: {e.msg} at line {e.lineno}, column {e.colno}"), src) from None
    except RecursionError:
        raise ModelError(("", f"nested too deeply (a model file nests at most {MAX_DEPTH} levels)"), src) from None
    except ValueError as e:
        raise ModelError(("", f"not valid JSON: {e} (JSON numbers must be finite)"), src) from None
    depth = _depth(checked)
    if depth > MAX_DEPTH:
        raise ModelError(("", f"nested {depth} levels deep; a model file nests at most {MAX_DEPTH} levels"), src)
    repeated = _repeated_keys(checked)
    if repeated:
        raise ModelError([(path, "this key appears more than once in the same object; JSON readers keep only the "
                                 "last value, so remove the one you do not mean") for path in repeated], src)
    return parse_model(json.loads(text), src)


def _read_capped(path: Path, src: str) -> str:
    """The file's text, refusing anything but a regular file of at most MAX_FILE_BYTES."""
    import stat as _stat

    st = path.stat()
    if _stat.S_ISDIR(st.st_mode):
        raise IsADirectoryError(src)
    if not _stat.S_ISREG(st.st_mode):
        raise ModelError(("", "not a regular file (a device, pipe or socket cannot be a model file)"), src)
    with open(path, "rb") as fh:
        raw = fh.read(MAX_FILE_BYTES + 1)
    if len(raw) > MAX_FILE_BYTES:
        raise ModelError(("", f"larger than {MAX_FILE_BYTES // (1024 * 1024)} MB; a model file is a few kB"), src)
    return raw.decode("utf-8")


def _depth(node) -> int:
    """Nesting depth of parsed JSON, without recursion."""
    best, stack = 0, [(node, 1)]
    while stack:
        n, d = stack.pop()
        if isinstance(n, (dict, list)):
            best = max(best, d)
            if d > MAX_DEPTH:
                return d
            stack.extend((v, d + 1) for v in (n.values() if isinstance(n, dict) else n))
    return best


class _KeyedObject(dict):
    """A JSON object that remembers keys it met twice (json.loads keeps the last silently)."""

    repeated: tuple = ()

    @classmethod
    def from_pairs(cls, pairs):
        obj = cls()
        seen = []
        for key, value in pairs:
            if key in obj:
                seen.append(key)
            obj[key] = value
        obj.repeated = tuple(seen)
        return obj


def _repeated_keys(node, path: str = "") -> list[str]:
    """Field paths (``parts[1].name``) of keys repeated within one object, anywhere in ``node``."""
    out = []
    if isinstance(node, _KeyedObject):
        out += [f"{path}.{k}" if path else k for k in dict.fromkeys(node.repeated)]
        for k, v in node.items():
            out += _repeated_keys(v, f"{path}.{k}" if path else k)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out += _repeated_keys(v, f"{path}[{i}]")
    return out


def save_model(model: Model, path) -> None:
    """Write the model as pretty JSON through a temporary file and an atomic rename.

    A symbolic link is written through (its target gets the new text, the link stays); an existing
    file keeps its permission bits; a new file gets the usual ones (0666 less the umask). The
    temporary file is named ``.~<name>.<pid>.tmp`` beside the target, so one left by a killed save
    is recognised and removed by :func:`clean_stale_temps` on the next start."""
    import os
    import stat as _stat

    target = Path(os.path.realpath(path))
    text = json.dumps(model.to_json_dict(), indent=2) + "\n"
    try:
        mode = _stat.S_IMODE(target.stat().st_mode)
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    tmp = target.parent / f"{TEMP_PREFIX}{target.name}.{os.getpid()}.tmp"
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fchmod(fh.fileno(), mode)
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


TEMP_PREFIX = ".~"


def clean_stale_temps(folder) -> list:
    """Remove ``.~<name>.<pid>.tmp`` files in ``folder`` whose writing process is gone."""
    import os

    removed = []
    try:
        entries = list(Path(folder).glob(f"{TEMP_PREFIX}*.tmp"))
    except OSError:
        return removed
    for p in entries:
        m = re.match(rf"^{re.escape(TEMP_PREFIX)}.+\.(\d+)\.tmp$", p.name)
        if not m or not p.is_file() or p.is_symlink():
            continue
        pid = int(m.group(1))
        try:
            os.kill(pid, 0)
            continue  # still running (or not ours to judge)
        except ProcessLookupError:
            pass
        except (PermissionError, OverflowError):
            continue
        try:
            p.unlink()
            removed.append(p)
        except OSError:
            pass
    return removed


def is_finite_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
