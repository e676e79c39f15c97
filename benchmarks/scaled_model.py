"""An invented benchmark enclosure, scaled to a requested node count by its cell size.

"Rooftop edge gateway" (invented scenario, data of our own): a die-cast aluminium housing with
a lid, a main board on standoffs, a processor under a copper spreader and a gap pad to the lid,
a radio that transmits in bursts, a power stage and memory packages. One hour of operation
with pulsed loads. Units as in the model file (mm, W, °C).
"""
from __future__ import annotations

import copy

from solver.mesh.mesher import build_mesh, estimate_nodes, plan_lines
from solver.model.modelfile import parse_model

BASE = {
    "format": "thermgui-model", "version": 1,
    "title": "Rooftop edge gateway (invented benchmark scenario)",
    "ambient_c": 30.0, "initial_c": 30.0,
    "materials": {
        "gap-pad-3w": {"conductivity": 3.0, "density": 3100.0, "specific_heat": 1000.0},
    },
    "parts": [
        {"name": "base", "material": "aluminium-cast-a380", "origin_mm": [0, 0, 0], "size_mm": [200, 150, 4]},
        {"name": "lid", "material": "aluminium-cast-a380", "origin_mm": [0, 0, 46], "size_mm": [200, 150, 4]},
        {"name": "wall west", "material": "aluminium-cast-a380", "origin_mm": [0, 0, 4], "size_mm": [4, 150, 42]},
        {"name": "wall east", "material": "aluminium-cast-a380", "origin_mm": [196, 0, 4], "size_mm": [4, 150, 42]},
        {"name": "wall south", "material": "aluminium-cast-a380", "origin_mm": [4, 0, 4], "size_mm": [192, 4, 42]},
        {"name": "wall north", "material": "aluminium-cast-a380", "origin_mm": [4, 146, 4], "size_mm": [192, 4, 42]},
        {"name": "post sw", "material": "aluminium-6061", "origin_mm": [14, 14, 4], "size_mm": [8, 8, 10]},
        {"name": "post se", "material": "aluminium-6061", "origin_mm": [178, 14, 4], "size_mm": [8, 8, 10]},
        {"name": "post nw", "material": "aluminium-6061", "origin_mm": [14, 128, 4], "size_mm": [8, 8, 10]},
        {"name": "post ne", "material": "aluminium-6061", "origin_mm": [178, 128, 4], "size_mm": [8, 8, 10]},
        {"name": "board", "material": "pcb-4layer-effective", "origin_mm": [10, 10, 14], "size_mm": [180, 130, 1.6],
         "rated_c": 105.0},
        {"name": "processor", "material": "silicon", "origin_mm": [80, 55, 15.6], "size_mm": [20, 20, 2],
         "rated_c": 100.0},
        {"name": "spreader", "material": "copper", "origin_mm": [74, 49, 17.6], "size_mm": [32, 32, 3]},
        {"name": "gap pad", "material": "gap-pad-3w", "origin_mm": [74, 49, 20.6], "size_mm": [32, 32, 25.4]},
        {"name": "radio", "material": "mould-compound", "origin_mm": [130, 90, 15.6], "size_mm": [18, 14, 2.4],
         "rated_c": 85.0},
        {"name": "power stage", "material": "mould-compound", "origin_mm": [30, 90, 15.6], "size_mm": [12, 10, 3],
         "rated_c": 125.0},
        {"name": "memory a", "material": "mould-compound", "origin_mm": [110, 55, 15.6], "size_mm": [14, 10, 1.2],
         "rated_c": 95.0},
        {"name": "memory b", "material": "mould-compound", "origin_mm": [110, 70, 15.6], "size_mm": [14, 10, 1.2],
         "rated_c": 95.0},
    ],
    "heat_loads": [
        {"part": "processor", "profile": {"type": "pulse", "high": 12.0, "low": 4.0, "period_s": 300,
                                          "duty": 0.4, "start_s": 60}},
        {"part": "radio", "profile": {"type": "pulse", "high": 4.0, "low": 0.5, "period_s": 120,
                                      "duty": 0.25, "start_s": 0}},
        {"part": "power stage", "profile": {"type": "table", "points": [[0, 1.0], [600, 2.5], [2400, 2.5],
                                                                        [2700, 1.5]]}},
        {"part": "memory a", "profile": {"type": "constant", "value": 0.8}},
        {"part": "memory b", "profile": {"type": "constant", "value": 0.8}},
    ],
    "convection": [
        {"name": "lid top", "part": "lid", "side": "z+", "h": 9.0},
        {"name": "west", "part": "wall west", "side": "x-", "h": 7.0},
        {"name": "east", "part": "wall east", "side": "x+", "h": 7.0},
        {"name": "south", "part": "wall south", "side": "y-", "h": 7.0},
        {"name": "north", "part": "wall north", "side": "y+", "h": 7.0},
        {"name": "mounting plate", "part": "base", "side": "z-", "h": 20.0},
    ],
    "probes": [{"name": "lid above processor", "at_mm": [90, 65, 48]},
               {"name": "board edge", "at_mm": [20, 75, 14.8]}],
    "mesh": {"cell_mm": 4.0, "min_layers": 2},
    "run": {"duration_s": 3600, "step_s": 1.0, "scheme": "backward-euler", "mass": "lumped",
            "output_every_s": 60},
}


def model_dict(cell_mm: float, **run) -> dict:
    d = copy.deepcopy(BASE)
    d["mesh"]["cell_mm"] = float(cell_mm)
    d["run"].update(run)
    return d


def node_count(cell_mm: float) -> int:
    """Exact node count of the mesh at this cell size (builds only the mesh)."""
    return build_mesh(parse_model(model_dict(cell_mm))).n_nodes


def cell_for_nodes(target: int) -> float:
    """Cell size (mm) whose mesh has about ``target`` nodes (bisection on the mesher's estimate)."""
    lo, hi = 0.2, 20.0
    for _ in range(40):
        mid = (lo * hi) ** 0.5
        est = estimate_nodes(parse_model(model_dict(mid)), None)
        if est > target:
            lo = mid
        else:
            hi = mid
    return round((lo * hi) ** 0.5, 4)


__all__ = ["BASE", "model_dict", "node_count", "cell_for_nodes", "plan_lines"]
