"""Files of a Zth run: zth.csv, foster.csv, cauer.csv, zth.json and one SPICE subcircuit per part.

SPICE convention (a plain RC netlist, an open convention): voltage stands for temperature rise
above ambient (1 V = 1 K), current for heat flow (1 A = 1 W), node 0 for ambient. Each part's
subcircuit ``ZTH_<part>`` has the pins ``RISE`` (the part's temperature rise) followed by a pair
``<heated>_IN <heated>_OUT`` per heated part: the heated part's power, as a current, enters at
``_IN`` and leaves at ``_OUT`` through a 0 V sensing source, so several subcircuits can share one
power source in series. Inside, each heated part drives its own Foster chain (parallel R ‖ C
stages in series to node 0) through a current-controlled current source, and the chains'
voltages are summed by voltage-controlled voltage sources into ``RISE`` (superposition).
A stage with R < 0 (a signed fit, see :mod:`solver.answers.foster`) has C < 0 too; its time constant
R·C is positive and the network is stable.
"""
from __future__ import annotations

import csv
import io
import json
import os
import re
from pathlib import Path

import numpy as np


def _atomic_write(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".part")
    with open(tmp, "w", newline="", encoding="utf-8") as f:
        f.write(text)
    os.replace(tmp, path)


def spice_name(name: str) -> str:
    """A SPICE-safe identifier from a part name (letters, digits, underscore; upper case)."""
    s = re.sub(r"[^A-Za-z0-9]+", "_", name).strip("_").upper()
    return s or "PART"


def _unique_names(names):
    out, seen = [], {}
    for n in names:
        s = spice_name(n)
        k = seen.get(s, 0)
        seen[s] = k + 1
        out.append(s if k == 0 else f"{s}_{k + 1}")
    return out


def subcircuit(part: str, heated: list, fits: list) -> str:
    """Netlist text of one part's subcircuit; ``fits[j]`` the Foster fit for heated part j."""
    hs = _unique_names(heated)
    name = f"ZTH_{spice_name(part)}"
    pins = " ".join(["RISE"] + [f"{h}_IN {h}_OUT" for h in hs])
    lines = [f"* Zth of part {part!r}: RISE = temperature rise above ambient (1 V = 1 K)",
             "* for heat flows (1 A = 1 W) through each <heated>_IN -> <heated>_OUT pin pair",
             "* thermgui Foster fit; results are engineering estimates, confirm by measurement",
             f".SUBCKT {name} {pins}"]
    for j, (h, fit) in enumerate(zip(hs, fits)):
        lines.append(f"* heated part {heated[j]!r}: {fit.stages} Foster stages, fit error {100 * fit.error:.2f} %")
        lines.append(f"VS{j + 1} {h}_IN {h}_OUT DC 0")
        lines.append(f"FS{j + 1} 0 N{j + 1}_0 VS{j + 1} 1")
        for k, (r, c) in enumerate(zip(fit.r, fit.c)):
            a = f"N{j + 1}_{k}"
            b = "0" if k == fit.stages - 1 else f"N{j + 1}_{k + 1}"
            lines.append(f"R{j + 1}_{k + 1} {a} {b} {r:.10g}")
            lines.append(f"C{j + 1}_{k + 1} {a} {b} {c:.10g}")
    m = len(hs)
    for j in range(m):
        plus = "RISE" if j == m - 1 else f"S{j + 1}"
        minus = "0" if j == 0 else f"S{j}"
        lines.append(f"E{j + 1} {plus} {minus} N{j + 1}_0 0 1")
    lines.append(f".ENDS {name}")
    return "\n".join(lines) + "\n"


def write_zth_outputs(out_dir, result, fits: dict, cauers: dict, model_title: str = "") -> list:
    """Write every file; ``fits[(a, j)]`` FosterFit, ``cauers[(a, j)]`` CauerLadder or None.
    Returns the paths written."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = []

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    pairs = list(result.pairs())
    w.writerow(["time_s"] + [f"zth:{A}:{J}" for _, _, A, J in pairs])
    for k, t in enumerate(result.times):
        w.writerow([f"{t:.6g}"] + [f"{result.zth[a, j, k]:.6g}" for a, j, _, _ in pairs])
    _atomic_write(out / "zth.csv", buf.getvalue())
    written.append(out / "zth.csv")

    for fname, table in (("foster.csv", fits), ("cauer.csv", cauers)):
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["part", "heated_part", "stage", "r_k_w", "c_j_k"])
        for a, j, A, J in pairs:
            net = table.get((a, j))
            if net is None:
                continue
            for k, (r, c) in enumerate(zip(net.r, net.c)):
                w.writerow([A, J, k + 1, f"{r:.8g}", f"{c:.8g}"])
        _atomic_write(out / fname, buf.getvalue())
        written.append(out / fname)

    spice_dir = out / "spice"
    spice_dir.mkdir(exist_ok=True)
    for a, (A, fname) in enumerate(zip(result.parts, _unique_names(result.parts))):
        text = subcircuit(A, result.heated, [fits[(a, j)] for j in range(len(result.heated))])
        path = spice_dir / f"{fname.lower()}.sub"
        _atomic_write(path, text)
        written.append(path)

    doc = {
        "format": "thermgui-zth", "version": 1, "title": model_title,
        "definition": ("zth[part][heated_part](t), K/W: maximum over the nodes of the part's cells of the "
                       "temperature rise above ambient, t seconds after 1 W steps on in the heated part "
                       "(model at ambient before, ambients constant)"),
        "fit_error_definition": "max over the times of |fit - zth| / max(zth, 1 % of its final value)",
        "times_s": [float(t) for t in result.times],
        "basis_size": result.basis_size,
        "basis_change": float(result.error_estimate) if np.isfinite(result.error_estimate) else None,
        "pairs": [],
    }
    for a, j, A, J in pairs:
        fit, cauer = fits[(a, j)], cauers.get((a, j))
        doc["pairs"].append({
            "part": A, "heated_part": J, "rth_k_w": float(result.rth[a, j]),
            "zth_k_w": [float(v) for v in result.zth[a, j]],
            "foster": {"stages": fit.stages, "signed": bool(fit.signed), "fit_error": fit.error,
                       "r_k_w": [float(v) for v in fit.r], "c_j_k": [float(v) for v in fit.c],
                       "tau_s": [float(v) for v in fit.tau]},
            "cauer": None if cauer is None else {"r_k_w": [float(v) for v in cauer.r],
                                                 "c_j_k": [float(v) for v in cauer.c]},
        })
    _atomic_write(out / "zth.json", json.dumps(doc, indent=1, allow_nan=False) + "\n")
    written.append(out / "zth.json")
    return written
