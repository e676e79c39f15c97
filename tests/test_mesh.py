"""The structured box mesher against box geometry worked out by hand, and NOTES.md §3 semantics.

Outside reference: plain box arithmetic (face positions, areas, intersection volumes); the
semantics of convection sides, overlaps and empty space are the team contract in NOTES.md §3.
"""
from __future__ import annotations

import tracemalloc

import numpy as np
import pytest

import solver
from modelkit import model_dict, part, problem_of
from solver.mesh.mesher import HEATED_MIN_LAYERS, MM, build_mesh, convection_face_mask, estimate_nodes

TOL = 1e-9


def _model(parts, convection=(), heat_loads=(), cell_mm=2.0, min_layers=2):
    return solver.parse_model(model_dict(parts, convection=convection, heat_loads=heat_loads, cell_mm=cell_mm,
                                         min_layers=min_layers))


ODD_PARTS = [
    part("plate", "aluminium-6061", (0, 0, 0), (47.3, 21.1, 2.3)),
    part("board", "fr4-bare", (3.7, 2.2, 2.3), (33.0, 15.4, 1.6)),
    part("chip", "silicon", (11.05, 6.6, 3.9), (3.3, 2.7, 0.35)),
    part("post", "steel-mild", (40.0, 15.0, 2.3), (5.0, 5.0, 17.9)),
    part("far block", "copper", (60.0, 30.0, 10.0), (8.0, 4.0, 3.0)),  # leaves empty space between
]


@pytest.fixture(scope="module")
def odd():
    model = _model(ODD_PARTS, heat_loads=[{"part": "chip", "profile": {"type": "constant", "value": 1.0}}],
                   convection=[{"name": "under", "part": "plate", "side": "z-", "h": 10.0}], cell_mm=3.0)
    return model, build_mesh(model)


def test_planes_include_every_part_face(odd):
    model, mesh = odd
    for p in model.parts:
        for ax in range(3):
            lines_mm = mesh.lines[ax] / MM
            for x in (p.origin_mm[ax], p.origin_mm[ax] + p.size_mm[ax]):
                assert np.min(np.abs(lines_mm - x)) < TOL, f"{p.name} face at {x} mm missing on axis {ax}"


def test_cell_sizes_layers_and_grading(odd):
    model, mesh = odd
    heated = {hl.part for hl in model.heat_loads}
    for ax in range(3):
        lines_mm = mesh.lines[ax] / MM
        w = np.diff(lines_mm)
        assert w.max() <= model.mesh.cell_mm + TOL
        assert np.all(w[1:] <= 2.0 * w[:-1] + TOL) and np.all(w[:-1] <= 2.0 * w[1:] + TOL)
        for p in model.parts:
            lo, hi = p.origin_mm[ax], p.origin_mm[ax] + p.size_mm[ax]
            inside = np.sum((lines_mm > lo - TOL) & (lines_mm < hi + TOL)) - 1
            need = max(model.mesh.min_layers, HEATED_MIN_LAYERS if p.name in heated else 1)
            assert inside >= need, f"{p.name}: {inside} cells along axis {ax}, need {need}"


def test_empty_cells_are_dropped(odd):
    model, mesh = odd
    centres = [0.5 * (l[:-1] + l[1:]) / MM for l in mesh.lines]
    cx, cy, cz = np.meshgrid(*centres, indexing="ij")
    covered = np.zeros(mesh.cell_part.shape, dtype=bool)
    for p in model.parts:
        o, s = np.array(p.origin_mm), np.array(p.size_mm)
        covered |= ((cx > o[0]) & (cx < o[0] + s[0]) & (cy > o[1]) & (cy < o[1] + s[1])
                    & (cz > o[2]) & (cz < o[2] + s[2]))
    np.testing.assert_array_equal(mesh.cell_part >= 0, covered)
    assert (~covered).sum() > covered.sum()  # the far block leaves a lot of empty grid
    assert mesh.n_tets == 6 * covered.sum()
    # no orphan nodes: every node is a corner of some tet
    assert len(np.unique(mesh.tets)) == mesh.n_nodes
    # every tet centroid lies in its own part's box
    cen = mesh.nodes[mesh.tets].mean(axis=1) / MM
    for i, p in enumerate(model.parts):
        c = cen[mesh.tet_part == i]
        o, s = np.array(p.origin_mm), np.array(p.size_mm)
        assert len(c) and np.all((c > o) & (c < o + s))


def test_later_part_wins_and_overlap_volume_is_reported():
    parts = [part("a", "aluminium-6061", (0, 0, 0), (10, 10, 10)),
             part("b", "copper", (6, 6, 6), (10, 10, 10)),  # overlaps a by 4x4x4
             part("c", "steel-mild", (8, 0, 0), (4, 8, 8))]  # overlaps a by 2x8x8 and b by 4x2x2 (cells b held)
    model = _model(parts, cell_mm=2.0, min_layers=1)
    mesh = build_mesh(model)
    # cell owners at some centres
    def owner(x, y, z):
        idx = [int(np.searchsorted(mesh.lines[ax] / MM, v)) - 1 for ax, v in enumerate((x, y, z))]
        return mesh.cell_part[tuple(idx)]
    assert owner(1, 1, 1) == 0 and owner(7, 7, 7) == 1 and owner(9, 1, 1) == 2 and owner(9, 7, 7) == 2
    assert owner(11, 7, 7) == 2 and owner(13, 13, 13) == 1
    got = {(later, earlier): vol / MM**3 for later, earlier, vol in mesh.overlaps}
    # b over a: 4x4x4; c over a: x 8..10, y 0..8, z 0..8 = 2x8x8; c over b where b held it:
    # x 8..12, y 6..8, z 6..8 = 4x2x2, of which x 8..10 was a's before b took it (still b's when c came)
    assert got == {(1, 0): pytest.approx(64.0), (2, 0): pytest.approx(128.0 - 2 * 2 * 2),
                   (2, 1): pytest.approx(16.0)}
    assert any("'b' overlaps 'a'" in w and "64" in w for w in mesh.warnings)
    # volumes held after overlaps
    held = mesh.part_volume() / MM**3
    np.testing.assert_allclose(held, [1000 - 64 - 120, 1000 - 16, 4 * 8 * 8], rtol=1e-12)


def _conv_area_mm2(model, mesh, i) -> float:
    return float(mesh.boundary.area[convection_face_mask(mesh, model, i)].sum() / MM**2)


def test_side_convection_only_where_the_part_is_exposed_on_its_own_plane():
    parts = [part("base", "aluminium-6061", (0, 0, 0), (30, 20, 4)),
             part("board", "fr4-bare", (5, 4, 4), (15, 10, 2)),      # sits on the base top
             part("neighbour", "copper", (30, 0, 0), (10, 20, 4)),    # shares the base's x+ plane and y- plane
             part("cap", "steel-mild", (26, 0, 0), (8, 20, 2))]       # covers part of the base's x+ end (later wins)
    conv = [{"name": "base top", "part": "base", "side": "z+", "h": 5.0},
            {"name": "base south", "part": "base", "side": "y-", "h": 5.0},
            {"name": "base east", "part": "base", "side": "x+", "h": 5.0},
            {"name": "board top", "part": "board", "side": "z+", "h": 5.0},
            {"name": "neighbour south", "part": "neighbour", "side": "y-", "h": 5.0}]
    model = _model(parts, convection=conv, cell_mm=2.0, min_layers=1)
    mesh = build_mesh(model)
    # base top: 30x20 minus the board footprint 15x10; the cap took base cells x 26..30, z 0..2 only,
    # so the base still owns the top layer there
    assert _conv_area_mm2(model, mesh, 0) == pytest.approx(30 * 20 - 15 * 10)
    # base south (y = 0): base owns x 0..26 for z 0..2 and x 0..30 for z 2..4 (cap took x 26..30, z 0..2)
    assert _conv_area_mm2(model, mesh, 1) == pytest.approx(26 * 2 + 30 * 2)
    # base east (x = 30): touches the neighbour over the whole face -> not a boundary at all
    assert _conv_area_mm2(model, mesh, 2) == 0.0
    # board top: its full 15x10
    assert _conv_area_mm2(model, mesh, 3) == pytest.approx(150.0)
    # neighbour south: on the same plane y = 0 as the base, but only its own cells: 10x4 minus
    # the cap (x 30..34, z 0..2)
    assert _conv_area_mm2(model, mesh, 4) == pytest.approx(10 * 4 - 4 * 2)
    _, problem = problem_of(model_dict(parts, convection=conv, cell_mm=2.0, min_layers=1))
    assert any("'base east'" in w and "no exposed face" in w for w in problem.warnings)


def test_exposed_includes_faces_toward_internal_empty_space():
    """A closed box: base, lid and a frame of four walls around a 20x10x6 mm cavity."""
    t = 2.0
    parts = [part("base", "aluminium-6061", (0, 0, 0), (24, 14, t)),
             part("lid", "aluminium-6061", (0, 0, 8), (24, 14, t)),
             part("west", "aluminium-6061", (0, 0, 2), (t, 14, 6)),
             part("east", "aluminium-6061", (22, 0, 2), (t, 14, 6)),
             part("south", "aluminium-6061", (2, 0, 2), (20, t, 6)),
             part("north", "aluminium-6061", (2, 12, 2), (20, t, 6))]
    conv = [{"name": "base all", "part": "base", "side": "exposed", "h": 5.0},
            {"name": "west all", "part": "west", "side": "exposed", "h": 5.0},
            {"name": "base down", "part": "base", "side": "z-", "h": 5.0}]
    model = _model(parts, convection=conv, cell_mm=2.0, min_layers=1)
    mesh = build_mesh(model)
    cavity_floor = 20 * 10
    base_outside = 24 * 14 + 2 * (24 * t) + 2 * (14 * t)
    assert _conv_area_mm2(model, mesh, 0) == pytest.approx(base_outside + cavity_floor)
    west_outside = 14 * 6 + 2 * (t * 6)  # x- face and its two y ends
    west_inside = 10 * 6  # the x+ face toward the cavity, between the south and north walls
    assert _conv_area_mm2(model, mesh, 1) == pytest.approx(west_outside + west_inside)
    # a named side is only the part's own plane, never the cavity
    assert _conv_area_mm2(model, mesh, 2) == pytest.approx(24 * 14)


def test_warning_for_part_without_path_to_convection():
    parts = [part("cooled", "aluminium-6061", (0, 0, 0), (10, 10, 2)),
             part("touching", "copper", (0, 0, 2), (4, 4, 2)),
             part("floating", "copper", (20, 0, 0), (4, 4, 2))]
    d = model_dict(parts, convection=[{"name": "c", "part": "cooled", "side": "z-", "h": 10.0}],
                   heat_loads=[{"part": "floating", "profile": {"type": "constant", "value": 1.0}}], cell_mm=2.0)
    _, problem = problem_of(d)
    msgs = [w for w in problem.warnings if "no path" in w]
    assert len(msgs) == 1 and "'floating'" in msgs[0] and "touching" not in msgs[0] and "cooled" not in msgs[0]


def test_memory_refusal_happens_before_allocation():
    """A 1 m box at 0.05 mm cells (~8e12 nodes) is refused from the plane count alone."""
    model = _model([part("huge", "aluminium-6061", (0, 0, 0), (1000, 1000, 1000))], cell_mm=0.05, min_layers=1)
    tracemalloc.start()
    try:
        with pytest.raises(solver.ModelError) as err:
            build_mesh(model)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert err.value.first_path == "mesh.cell_mm"
    n = estimate_nodes(model)
    assert n == 20001**3
    assert f"{n:,}" in str(err.value) and "GB" in str(err.value)
    assert peak < 50e6  # bytes: nothing grid-sized was allocated


def test_memory_limit_is_applied_to_the_estimate():
    model = _model(ODD_PARTS, cell_mm=3.0)
    n = estimate_nodes(model)
    mesh = build_mesh(model)
    assert mesh.n_nodes <= n  # the estimate is an upper bound
    with pytest.raises(solver.ModelError) as err:
        build_mesh(model, memory_limit_bytes=1000)
    assert err.value.first_path == "mesh.cell_mm" and f"{n:,} nodes" in str(err.value)
