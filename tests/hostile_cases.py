"""Generated hostile and unlucky inputs for ``thermgui solve`` (used by tests/test_hostile_inputs.py).

Each case is a dict: ``name``; ``model`` (a dict written as JSON), ``text`` (raw file bytes) or
``path`` (an existing path such as /dev/zero); optional ``args`` (extra command-line arguments,
``{out}`` is replaced by the case's results folder); ``rc`` the expected exit status; ``field`` a
text the error message must contain (the field path), or None.
"""
from __future__ import annotations

import copy
import json

BASE = {
    "format": "thermgui-model", "version": 1, "title": "hostile base",
    "ambient_c": 25.0, "initial_c": 25.0,
    "materials": {"blockium": {"conductivity": 10.0, "density": 2000.0, "specific_heat": 900.0}},
    "parts": [{"name": "plate", "material": "blockium", "origin_mm": [0, 0, 0], "size_mm": [10, 10, 2],
               "rated_c": 90.0},
              {"name": "chip", "material": "silicon", "origin_mm": [3, 3, 2], "size_mm": [4, 4, 1], "rated_c": 110.0}],
    "heat_loads": [{"part": "chip", "profile": {"type": "constant", "value": 0.5}}],
    "convection": [{"name": "air", "part": "plate", "side": "exposed", "h": 10.0, "ambient_c": 25.0}],
    "probes": [{"name": "corner", "at_mm": [1, 1, 1]}],
    "mesh": {"cell_mm": 2.5, "min_layers": 1},
    "run": {"duration_s": 4.0, "step_s": 1.0, "scheme": "backward-euler", "mass": "lumped", "output_every_s": 2.0},
}


def _set(d, path, value):
    """Set ``d[path]`` for a path like ``parts[0].size_mm[2]``; value ``_DEL`` removes the key."""
    import re

    tokens = re.findall(r"[^.\[\]]+|\[\d+\]", path)
    node = d
    for t in tokens[:-1]:
        node = node[int(t[1:-1])] if t.startswith("[") else node[t]
    last = tokens[-1]
    key = int(last[1:-1]) if last.startswith("[") else last
    if value is _DEL:
        del node[key]
    else:
        node[key] = value


_DEL = object()


def with_value(path, value):
    d = copy.deepcopy(BASE)
    _set(d, path, value)
    return d


# (field path, values refused with that field named)
NUMERIC_REFUSED = {
    "parts[0].size_mm[0]": [-1.0, 0.0, 1e308, 1e-300, 1e-9, 2e6],
    "parts[1].size_mm[2]": [-0.5, 0.0, 1e-5],
    "parts[0].origin_mm[1]": [1e20, -1e20, 1e308, 2e6],
    "mesh.cell_mm": [0.0, -2.0, 1e-300, 1e308, 1e-6],
    "mesh.min_layers": [0, 51, -3],
    "convection[0].h": [0.0, -5.0, 1e308, 1e11],
    "convection[0].ambient_c": [-300.0, 1e308, 1e7],
    "run.duration_s": [0.0, -1.0, 1e-12, 1e308, 1e11],
    "run.step_s": [0.0, -1.0, 1e-12, 1e308],
    "run.output_every_s": [0.0, -2.0, 1e-300, 1e-7],
    "heat_loads[0].profile.value": [-1.0, 1e308, 1e10],
    "materials.blockium.conductivity": [0.0, -1.0, 1e308, 1e-300],
    "materials.blockium.density": [0.0, -1.0, 1e308, 1e-300],
    "materials.blockium.specific_heat": [0.0, 1e308, 1e-300],
    "ambient_c": [-274.0, 1e308, -1e308],
    "initial_c": [-274.0, 1e308],
    "parts[0].rated_c": [1e308, -1e308],
    "parts[1].initial_c": [-300.0, 1e308],
    "probes[0].at_mm[0]": [1e20, -1e308],
}
WRONG_TYPES = ["warm", None, True, [1.0], {"v": 1}]
TYPE_FIELDS = ["parts[0].size_mm[0]", "parts[0].origin_mm[2]", "mesh.cell_mm", "convection[0].h",
               "run.duration_s", "run.step_s", "heat_loads[0].profile.value", "materials.blockium.density",
               "ambient_c", "probes[0].at_mm[1]"]


def cases() -> list[dict]:
    out = []
    for path, values in NUMERIC_REFUSED.items():
        for v in values:
            out.append({"name": f"{path}={v!r}", "model": with_value(path, v), "rc": 2,
                        "field": path.replace(".value", "") if "profile" in path else path})
    for path in TYPE_FIELDS:
        for v in WRONG_TYPES:
            out.append({"name": f"{path}={json.dumps(v)}", "model": with_value(path, v), "rc": 2,
                        "field": path.replace(".value", "") if "profile" in path else path})
    # accepted extremes (they must solve, and their folder must reopen)
    out.append({"name": "h=1e9 accepted", "model": with_value("convection[0].h", 1e9), "rc": 0, "field": None,
                "reopen": True})
    out.append({"name": "h=1e10 accepted", "model": with_value("convection[0].h", 1e10), "rc": 0, "field": None})
    long_ok = with_value("parts[1].name", "c" * 200)
    long_ok["heat_loads"][0]["part"] = "c" * 200
    out.append({"name": "200-character part name accepted", "model": long_ok, "rc": 0, "field": None, "reopen": True})
    odd = with_value("parts[1].name", 'chip, "quoted"; ñ 温度')
    odd["heat_loads"][0]["part"] = 'chip, "quoted"; ñ 温度'
    out.append({"name": "commas, quotes and non-ASCII in a name", "model": odd, "rc": 0, "field": None, "reopen": True})
    # names
    for n, label in ((201, "201"), (131_072, "131k"), (200_000, "200k")):
        d = with_value("parts[1].name", "n" * n)
        d["heat_loads"][0]["part"] = "n" * n
        out.append({"name": f"part name of {label} characters", "model": d, "rc": 2, "field": "parts[1].name"})
    for ch in ("\x00", "\n", "\x1b", "\u2028", "\ud800"):
        d = with_value("parts[1].name", f"chip{ch}x")
        d["heat_loads"][0]["part"] = f"chip{ch}x"
        out.append({"name": f"control character {ch!r} in a name", "model": d, "rc": 2, "field": "parts[1].name"})
    out.append({"name": "probe name of 300 characters", "model": with_value("probes[0].name", "p" * 300), "rc": 2,
                "field": "probes[0].name"})
    out.append({"name": "convection name of 300 characters", "model": with_value("convection[0].name", "a" * 300),
                "rc": 2, "field": "convection[0].name"})
    out.append({"name": "title of 20k characters", "model": with_value("title", "t" * 20_000), "rc": 2,
                "field": "title"})
    # structure
    for path in ("parts[0].colour", "mesh.speed", "run.turbo", "extra", "convection[0].wind"):
        d = copy.deepcopy(BASE)
        node_path, key = path.rsplit(".", 1) if "." in path else ("", path)
        node = d
        if node_path:
            import re

            for t in re.findall(r"[^.\[\]]+|\[\d+\]", node_path):
                node = node[int(t[1:-1])] if t.startswith("[") else node[t]
        node[key] = 1
        out.append({"name": f"unknown key {path}", "model": d, "rc": 2, "field": path})
    for path in ("parts[0].material", "parts[0].size_mm", "convection[0].side", "heat_loads[0].profile", "parts"):
        out.append({"name": f"missing {path}", "model": with_value(path, _DEL), "rc": 2, "field": path})
    out.append({"name": "format wrong", "model": with_value("format", "other"), "rc": 2, "field": "format"})
    out.append({"name": "version 2", "model": with_value("version", 2), "rc": 2, "field": "version"})
    out.append({"name": "unknown material", "model": with_value("parts[0].material", "unobtainium"), "rc": 2,
                "field": "parts[0].material"})
    out.append({"name": "unknown heated part", "model": with_value("heat_loads[0].part", "ghost"), "rc": 2,
                "field": "heat_loads[0].part"})
    out.append({"name": "side x", "model": with_value("convection[0].side", "x"), "rc": 2, "field": "convection[0].side"})
    out.append({"name": "pulse period 1e-9 s", "rc": 2, "field": "heat_loads[0].profile.period_s",
                "model": with_value("heat_loads[0].profile", {"type": "pulse", "high": 1, "low": 0, "period_s": 1e-9,
                                                              "duty": 0.5})})
    out.append({"name": "table time 1e300", "rc": 2, "field": "heat_loads[0].profile.points[1][0]",
                "model": with_value("heat_loads[0].profile", {"type": "table", "points": [[0, 1], [1e300, 2]]})})
    out.append({"name": "table value 1e300 W", "rc": 2, "field": "heat_loads[0].profile.points[0][1]",
                "model": with_value("heat_loads[0].profile", {"type": "table", "points": [[0, 1e300]]})})
    hidden = copy.deepcopy(BASE)
    hidden["parts"].append({"name": "lid", "material": "blockium", "origin_mm": [0, 0, 0], "size_mm": [10, 10, 2]})
    out.append({"name": "rated part covered entirely by a later part", "model": hidden, "rc": 2,
                "field": "parts[0].rated_c"})
    out.append({"name": "top level is a list", "text": b"[1, 2, 3]", "rc": 2, "field": "JSON object"})
    out.append({"name": "top level is a number", "text": b"42", "rc": 2, "field": "JSON object"})
    out.append({"name": "empty file", "text": b"", "rc": 2, "field": "not valid JSON"})
    out.append({"name": "binary garbage", "text": bytes(range(256)) * 8, "rc": 2, "field": "UTF-8"})
    out.append({"name": "truncated JSON", "text": json.dumps(BASE).encode()[:300], "rc": 2, "field": "not valid JSON"})
    out.append({"name": "NaN token", "text": json.dumps(BASE).replace("10.0", "NaN", 1).encode(), "rc": 2,
                "field": "finite"})
    out.append({"name": "Infinity token", "text": json.dumps(BASE).replace("2000.0", "Infinity", 1).encode(),
                "rc": 2, "field": "finite"})
    out.append({"name": "duplicate key", "text": json.dumps(BASE).replace('"title"', '"ambient_c": 1, "title"', 1).encode(),
                "rc": 2, "field": "ambient_c"})
    for depth in (40, 5_000, 100_000):
        out.append({"name": f"nested {depth} levels", "text": b'{"format": "thermgui-model", "x": ' + b"[" * depth
                    + b"]" * depth + b"}", "rc": 2, "field": "nest"})
    out.append({"name": "17 MB of spaces", "text": b" " * (17 * 1024 * 1024), "rc": 2, "field": "larger than"})
    out.append({"name": "/dev/zero as the model", "path": "/dev/zero", "rc": 2, "field": "regular file"})
    out.append({"name": "a folder as the model", "path": "{tmp}", "rc": 2, "field": "folder"})
    out.append({"name": "a missing model", "path": "{tmp}/nope.json", "rc": 2, "field": "not found"})
    # size: refused quickly by the estimate, naming what drives it
    box = with_value("parts", [{"name": "box", "material": "blockium", "origin_mm": [0, 0, 0],
                                "size_mm": [1000, 1000, 1000]}])
    box["heat_loads"], box["convection"], box["probes"] = [], [], []
    for cell in (1e-3, 0.01, 0.05):
        d = copy.deepcopy(box)
        d["mesh"]["cell_mm"] = cell
        out.append({"name": f"cell_mm {cell} over a 1 m box", "model": d, "rc": 2, "field": "mesh.cell_mm"})
    for gap_mm, label in ((5000.0, "5 m"), (1e6 - 20, "1 km")):
        d = copy.deepcopy(BASE)
        d["parts"].append({"name": "far", "material": "blockium", "origin_mm": [gap_mm] * 3, "size_mm": [10, 10, 10]})
        out.append({"name": f"two parts {label} apart on a diagonal", "model": d, "rc": 2, "field": "origin_mm"})
    d = copy.deepcopy(BASE)
    d["parts"] = [{"name": f"p{i}", "material": "blockium", "origin_mm": [i * 7.0] * 3, "size_mm": [1, 1, 1]}
                  for i in range(400)]
    d["heat_loads"], d["convection"], d["probes"] = [], [], []
    out.append({"name": "400 one-millimetre parts on a diagonal", "model": d, "rc": 2, "field": "origin_mm"})
    d = copy.deepcopy(BASE)
    d["parts"] = [{"name": f"q{i}", "material": "blockium", "origin_mm": [i * 10.0, 0, 0], "size_mm": [10, 10, 10]}
                  for i in range(10_001)]
    d["heat_loads"], d["convection"], d["probes"] = [], [], []
    out.append({"name": "10,001 parts", "model": d, "rc": 2, "field": "parts"})
    for every, dur in ((1e-6, 600.0), (1e-3, 600.0), (1e-5, 10.0)):
        d = copy.deepcopy(BASE)
        d["run"].update(duration_s=dur, step_s=min(1.0, dur), output_every_s=every)
        out.append({"name": f"output_every_s {every} over {dur} s", "model": d, "rc": 2, "field": "run.output_every_s"})
    d = copy.deepcopy(BASE)
    d["run"].update(duration_s=1e9, step_s=1e-6)
    out.append({"name": "1e15 steps", "model": d, "rc": 2, "field": "run.step_s"})
    d = copy.deepcopy(BASE)
    d["mesh"]["memory_limit_gb"] = 1e-6
    out.append({"name": "memory_limit_gb 1 kB", "model": d, "rc": 2, "field": "mesh.cell_mm"})
    out.append({"name": "--memory-limit-gb 0.000001", "model": copy.deepcopy(BASE), "args": ["--memory-limit-gb", "1e-6"],
                "rc": 2, "field": "memory"})
    out.append({"name": "--memory-limit-gb -1", "model": copy.deepcopy(BASE), "args": ["--memory-limit-gb", "-1"],
                "rc": 2, "field": "--memory-limit-gb"})
    # results folders
    out.append({"name": "--out is a file", "model": copy.deepcopy(BASE), "out_setup": "file", "rc": 2, "field": "--out"})
    out.append({"name": "--out named peaks.csv inside a file path", "model": copy.deepcopy(BASE), "out_setup": "under-file",
                "rc": 2, "field": "--out"})
    big = copy.deepcopy(BASE)
    big["mesh"]["cell_mm"] = 1e-3
    out.append({"name": "--out in new nested folders, mesh refused", "model": big, "out_setup": "nested", "rc": 2,
                "field": "mesh.cell_mm", "nothing_written": True})
    out.append({"name": "--out holds a user's notes", "model": copy.deepcopy(BASE), "out_setup": "foreign", "rc": 2,
                "field": "--out"})
    out.append({"name": "--out holds a user's peaks.csv, --force", "model": copy.deepcopy(BASE), "args": ["--force"],
                "out_setup": "foreign-peaks", "rc": 2, "field": "--out"})
    out.append({"name": "--out locked by a live run", "model": copy.deepcopy(BASE), "out_setup": "locked-live", "rc": 2,
                "field": "in use"})
    out.append({"name": "--out locked by a dead run", "model": copy.deepcopy(BASE), "out_setup": "locked-dead", "rc": 0,
                "field": None})
    out.append({"name": "--out holds a user's notes, --force", "model": copy.deepcopy(BASE), "args": ["--force"],
                "out_setup": "foreign", "rc": 0, "field": None, "keeps": "notes.txt"})
    return out
