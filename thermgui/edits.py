"""Pure edits of a model dict (the JSON form of :class:`solver.model.modelfile.Model`), with no Qt.

Every function takes a model dict and returns a *new* dict; the caller validates the result
with :func:`solver.model.modelfile.parse_model` before it becomes the document's model. Items are
addressed by ``(kind, index)`` with kind one of :data:`KINDS`. Lengths in mm, powers in W,
temperatures in °C, film coefficients in W/(m²·K), times in s.
"""
from __future__ import annotations

import copy

from solver.model.materials import BUILTIN_MATERIALS

KINDS = ("parts", "heat_loads", "convection", "surface_loads", "contacts", "air_volumes", "probes", "materials")
LIST_KINDS = KINDS[:-1]  # "materials" is a name -> properties object in the file, a list here
PART_REFS = ("heat_loads", "convection", "surface_loads")  # kinds whose items name one part in "part"
FACES = ("x-", "x+", "y-", "y+", "z-", "z+")


def clone(d: dict) -> dict:
    return copy.deepcopy(d)


def set_value(d: dict, path: tuple, value) -> dict:
    """Set ``d[path[0]][path[1]]...`` to ``value`` (keys or list indices); ``None`` removes a key."""
    out = clone(d)
    node = out
    for key in path[:-1]:
        node = node[key]
    if value is None and isinstance(node, dict):
        node.pop(path[-1], None)
    else:
        node[path[-1]] = value
    return out


def unique_name(base: str, taken) -> str:
    """``base`` if free, else ``base 2``, ``base 3``, ..."""
    taken = set(taken)
    if base not in taken:
        return base
    stem = base.rstrip("0123456789").rstrip() or base
    n = 2
    while f"{stem} {n}" in taken:
        n += 1
    return f"{stem} {n}"


def names_of(d: dict, kind: str) -> list[str]:
    if kind == "materials":
        return list(d.get("materials", {}))
    return [it.get("name", "") for it in d.get(kind, [])]


def items_of(d: dict, kind: str) -> list[dict]:
    """The items of a kind as a list of dicts (materials as ``{"name": ..., **properties}``)."""
    if kind == "materials":
        return [{"name": k, **v} for k, v in d.get("materials", {}).items()]
    return d.get(kind, [])


def _set_materials(d: dict, items: list[dict]) -> None:
    d["materials"] = {it["name"]: {k: v for k, v in it.items() if k != "name"} for it in items}


def model_bounds(d: dict) -> tuple[list[float], list[float]]:
    """Lower and upper corner (mm) of all parts together."""
    parts = d.get("parts", [])
    if not parts:
        return [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]
    lo = [min(p["origin_mm"][a] for p in parts) for a in range(3)]
    hi = [max(p["origin_mm"][a] + p["size_mm"][a] for p in parts) for a in range(3)]
    return lo, hi


def new_item(d: dict, kind: str, near_part: str | None = None) -> dict:
    """A sensible new item of ``kind`` for model ``d`` (the new part sits on top of the model)."""
    parts = d.get("parts", [])
    first = near_part or (parts[0]["name"] if parts else "")
    if kind == "parts":
        lo, hi = model_bounds(d)
        return {"name": unique_name("new part", names_of(d, "parts")), "material": "aluminium-6061",
                "origin_mm": [lo[0], lo[1], hi[2]], "size_mm": [10.0, 10.0, 2.0]}
    if kind == "heat_loads":
        return {"part": first, "profile": {"type": "constant", "value": 1.0}}
    if kind == "convection":
        return {"name": unique_name("new face", names_of(d, "convection")), "part": first, "side": "exposed",
                "h": 8.0}
    if kind == "surface_loads":
        return {"name": unique_name("sun", names_of(d, "surface_loads")), "part": first, "side": "z+",
                "flux_w_m2": {"type": "constant", "value": 800.0}, "absorptivity": 0.5}
    if kind == "contacts":
        other = _touching_part(d, first)
        return {"name": unique_name("contact", names_of(d, "contacts")), "parts": [first, other],
                "resistance_k_m2_w": 2e-4}
    if kind == "air_volumes":
        names = names_of(d, "parts")
        return {"name": unique_name("inside air", names_of(d, "air_volumes") + names), "enclosed_by": names,
                "faces": [{"part": n, "side": "exposed", "h": 3.0} for n in names]}
    if kind == "materials":
        base = None
        if near_part and near_part in names_of(d, "parts"):
            base = parts[names_of(d, "parts").index(near_part)]["material"]
        spec = _material_spec(d, base) or {"conductivity": 1.0, "density": 1000.0, "specific_heat": 1000.0}
        name = unique_name(f"{base} (own data)" if base else "new material", names_of(d, "materials"))
        return {"name": name, **spec}
    if kind == "probes":
        if near_part and near_part in names_of(d, "parts"):
            p = parts[names_of(d, "parts").index(near_part)]
            at = [p["origin_mm"][a] + p["size_mm"][a] / 2 for a in range(3)]
        else:
            lo, hi = model_bounds(d)
            at = [(lo[a] + hi[a]) / 2 for a in range(3)]
        return {"name": unique_name("new probe", names_of(d, "probes")), "at_mm": at}
    raise KeyError(kind)


def shared_faces(d: dict, a: str, b: str) -> list[tuple[int, float, list, list]]:
    """Rectangles where the boxes of parts ``a`` and ``b`` touch: (axis, plane mm, lo, hi) with lo, hi
    the rectangle's corners (mm, three values; the axis' own entry equals the plane). Geometry of the
    boxes only (what later parts cover is not taken off)."""
    parts = {p["name"]: p for p in d.get("parts", [])}
    if a not in parts or b not in parts:
        return []
    pa, pb = parts[a], parts[b]
    alo, ahi = pa["origin_mm"], [pa["origin_mm"][k] + pa["size_mm"][k] for k in range(3)]
    blo, bhi = pb["origin_mm"], [pb["origin_mm"][k] + pb["size_mm"][k] for k in range(3)]
    out = []
    for ax in range(3):
        for plane in {ahi[ax], alo[ax]}:
            if not (abs(plane - blo[ax]) < 1e-9 or abs(plane - bhi[ax]) < 1e-9):
                continue
            lo = [max(alo[k], blo[k]) for k in range(3)]
            hi = [min(ahi[k], bhi[k]) for k in range(3)]
            if all(hi[k] > lo[k] for k in range(3) if k != ax):
                lo[ax] = hi[ax] = plane
                out.append((ax, plane, lo, hi))
    return out


def _touching_part(d: dict, name: str) -> str:
    """A part whose box shares a face with part ``name`` (the first found), else another part."""
    parts = d.get("parts", [])
    me = next((p for p in parts if p["name"] == name), None)
    others = [p for p in parts if p["name"] != name]
    if me is None or not others:
        return name
    for p in others:
        if shared_faces(d, name, p["name"]):
            return p["name"]
    return others[0]["name"]


def _material_spec(d: dict, name: str | None) -> dict | None:
    """Properties of a material of the model or the built-in library, in the file's form."""
    if not name:
        return None
    if name in d.get("materials", {}):
        return clone(d["materials"][name])
    m = BUILTIN_MATERIALS.get(name)
    return m.to_json() if m is not None else None


def add_item(d: dict, kind: str, item: dict) -> tuple[dict, int]:
    """Append ``item``; returns the new dict and the item's index."""
    out = clone(d)
    if kind == "materials":
        items = items_of(out, kind) + [clone(item)]
        _set_materials(out, items)
        return out, len(items) - 1
    out.setdefault(kind, []).append(clone(item))
    return out, len(out[kind]) - 1


def duplicate_item(d: dict, kind: str, index: int) -> tuple[dict, int]:
    """Copy item ``index`` right after itself under a fresh name; parts keep their place."""
    out = clone(d)
    items = [clone(it) for it in items_of(out, kind)]
    item = clone(items[index])
    if "name" in item:
        item["name"] = unique_name(item["name"] + " copy", names_of(out, kind))
    items.insert(index + 1, item)
    if kind == "materials":
        _set_materials(out, items)
    else:
        out[kind] = items
    return out, index + 1


def rename_item(d: dict, kind: str, index: int, new_name: str) -> dict:
    """Rename; renaming a part also updates the heat loads and convection faces that name it,
    renaming a material updates the parts made of it."""
    out = clone(d)
    if kind == "materials":
        items = items_of(out, kind)
        old = items[index]["name"]
        items[index]["name"] = new_name
        _set_materials(out, items)
        for p in out.get("parts", []):
            if p.get("material") == old:
                p["material"] = new_name
        return out
    old = out[kind][index].get("name")
    out[kind][index]["name"] = new_name
    if kind == "parts":
        for ref_kind in PART_REFS:
            for it in out.get(ref_kind, []):
                if it.get("part") == old:
                    it["part"] = new_name
        for ct in out.get("contacts", []):
            ct["parts"] = [new_name if n == old else n for n in ct.get("parts", [])]
        for av in out.get("air_volumes", []):
            av["enclosed_by"] = [new_name if n == old else n for n in av.get("enclosed_by", [])]
            for f in av.get("faces", []):
                if f.get("part") == old:
                    f["part"] = new_name
    return out


def dependents(d: dict, part_name: str) -> dict[str, list[int]]:
    """Indices of heat loads, convection faces, surface loads and contacts that refer to a part
    (they go with it when it is deleted)."""
    out = {k: [i for i, it in enumerate(d.get(k, [])) if it.get("part") == part_name] for k in PART_REFS}
    out["contacts"] = [i for i, it in enumerate(d.get("contacts", [])) if part_name in it.get("parts", [])]
    return out


def delete_item(d: dict, kind: str, index: int) -> dict:
    """Remove an item; deleting a part also removes its heat loads and convection faces."""
    out = clone(d)
    if kind == "materials":
        items = items_of(out, kind)
        items.pop(index)
        _set_materials(out, items)
        return out
    item = out[kind].pop(index)
    if kind == "parts":
        name = item.get("name")
        for ref_kind in PART_REFS:
            if ref_kind in out:
                out[ref_kind] = [it for it in out[ref_kind] if it.get("part") != name]
        if "contacts" in out:
            out["contacts"] = [it for it in out["contacts"] if name not in it.get("parts", [])]
        if "air_volumes" in out:  # the air keeps its other walls and faces; with no face left it goes
            kept = []
            for av in out["air_volumes"]:
                av["enclosed_by"] = [n for n in av.get("enclosed_by", []) if n != name]
                av["faces"] = [f for f in av.get("faces", []) if f.get("part") != name]
                if av["faces"]:
                    kept.append(av)
            out["air_volumes"] = kept
    return out


def snap(value: float, step: float) -> float:
    """Round to the nearest multiple of ``step`` (no rounding when step <= 0)."""
    if step <= 0:
        return float(value)
    return float(round(round(value / step) * step, 9))


def drag_box(d: dict, index: int, lower, upper, step: float = 0.0, tol: float = 1e-6) -> dict:
    """Apply a handle drag that left part ``index`` in the box [lower, upper] (mm).

    Only what the drag moved is snapped to ``step``: a pure move (same size) snaps the
    moved corner coordinates and keeps the size exactly; a resize snaps only the faces
    that moved. A side that would vanish after snapping keeps one increment."""
    out = clone(d)
    part = out["parts"][index]
    old_lo = [float(v) for v in part["origin_mm"]]
    size = [float(v) for v in part["size_mm"]]
    old_hi = [old_lo[a] + size[a] for a in range(3)]
    lower, upper = [float(v) for v in lower], [float(v) for v in upper]
    same_size = all(abs((upper[a] - lower[a]) - size[a]) <= tol for a in range(3))
    lo, hi = list(old_lo), list(old_hi)
    for a in range(3):
        if same_size:
            if abs(lower[a] - old_lo[a]) > tol:
                lo[a] = snap(lower[a], step)
            hi[a] = lo[a] + size[a]
            continue
        if abs(lower[a] - old_lo[a]) > tol:
            lo[a] = snap(lower[a], step)
        if abs(upper[a] - old_hi[a]) > tol:
            hi[a] = snap(upper[a], step)
        if hi[a] - lo[a] <= tol:
            hi[a] = lo[a] + (step if step > 0 else size[a])
    part["origin_mm"] = [float(round(v, 9)) for v in lo]
    part["size_mm"] = [float(round(hi[a] - lo[a], 9)) for a in range(3)]
    return out


def place_onto(d: dict, index: int, target: int, face: str) -> dict:
    """Put part ``index`` against ``face`` of part ``target``, on its outside.

    Along the face normal the part touches the face; across it the part keeps its position
    if its footprint overlaps the face, otherwise it is centred on the face.
    """
    if face not in FACES:
        raise ValueError(f"face must be one of {', '.join(FACES)}")
    if index == target:
        raise ValueError("a part cannot be placed onto itself")
    out = clone(d)
    p, t = out["parts"][index], out["parts"][target]
    axis = "xyz".index(face[0])
    o, s = list(p["origin_mm"]), p["size_mm"]
    to, ts = t["origin_mm"], t["size_mm"]
    o[axis] = to[axis] + ts[axis] if face[1] == "+" else to[axis] - s[axis]
    for a in range(3):
        if a == axis:
            continue
        overlaps = o[a] < to[a] + ts[a] and o[a] + s[a] > to[a]
        if not overlaps:
            o[a] = to[a] + (ts[a] - s[a]) / 2
    p["origin_mm"] = [float(round(v, 9)) for v in o]
    return out


def item_label(d: dict, kind: str, index: int) -> str:
    """Short text for lists: the name, or for heat loads the part and the profile in watts."""
    it = items_of(d, kind)[index]
    if kind == "contacts" and not it.get("name"):
        return " – ".join(it.get("parts", ["?", "?"]))
    if kind != "heat_loads":
        return it.get("name", "?")
    return f"{it.get('part', '?')}: {profile_summary(it.get('profile', {}), 'W')}"


def profile_summary(p: dict, unit: str) -> str:
    t = p.get("type")
    if t == "constant":
        return f"{p['value']:g} {unit}"
    if t == "step":
        return f"{p['value']:g} {unit} from {p.get('start_s', 0):g} s"
    if t == "pulse":
        return (f"{p['high']:g}/{p.get('low', 0):g} {unit} every {p['period_s']:g} s "
                f"({p['duty'] * 100:g} % on)")
    if t == "table":
        return f"table of {len(p.get('points', []))} points"
    return "?"
