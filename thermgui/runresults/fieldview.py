"""The temperature field drawn on the window's 3D plotter.

The tetrahedral mesh (mm) is turned into a surface once per geometry or cut change; each frame
then only copies the temperatures (°C) of the surface's points and asks for a repaint, which
keeps scrubbing cheap. A cut keeps whole tetrahedra on one side of an axis plane, so the inside
of the enclosure shows without re-filtering on every frame.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyvista as pv

SCALARS = "temperature_c"
BAR_TITLE = "Temperature (°C)"
COLOUR_MAP = "inferno"  # a perceptually uniform map; its darkest tenth is left out (see colour_map)
EDGE_COLOUR = "#3a4450"  # outlines of the drawn surface's corners and edges
LABEL_COLOUR = "#1d2733"
OVER_COLOUR = "#d0103a"
AXES = {"x": 0, "y": 1, "z": 2}
CORNERS = {"lower_left": 0, "lower_right": 1, "upper_left": 2, "upper_right": 3}


def colour_map():
    """The field's colour map: inferno without its near-black tenth, so parts still at the cool end
    (ambient at the start of a run) keep visible shading instead of a black block."""
    import matplotlib
    from matplotlib.colors import ListedColormap

    return ListedColormap(matplotlib.colormaps[COLOUR_MAP](np.linspace(0.12, 1.0, 256)), name="thermgui-field")


@dataclass
class Display:
    grid: pv.UnstructuredGrid  # the whole tetrahedral mesh, mm
    surface: pv.PolyData  # what is drawn
    point_ids: np.ndarray  # surface point -> mesh node


def build_display(points_mm: np.ndarray, tets: np.ndarray, cut=None) -> Display:
    """The drawable surface of a tetrahedral mesh. Pure data work, safe on a worker thread
    (VTK's filters release the GIL), so the window stays responsive for big meshes."""
    grid = tet_grid(points_mm, tets)
    surf, ids = surface_of(grid, cut)
    return Display(grid, surf, ids)


def tet_grid(points_mm: np.ndarray, tets: np.ndarray) -> pv.UnstructuredGrid:
    """A grid of tetrahedra sharing the arrays' memory (VTK keeps a reference to them): at 1M
    nodes 0.02 s, against about 1 s through pyvista's constructors, which copy."""
    from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkUnstructuredGrid

    conn = np.ascontiguousarray(tets, dtype=np.int64).ravel()
    offsets = np.arange(0, len(conn) + 1, 4, dtype=np.int64)
    cells = vtkCellArray()
    cells.SetData(numpy_to_vtkIdTypeArray(offsets, deep=False), numpy_to_vtkIdTypeArray(conn, deep=False))
    points = vtkPoints()
    points.SetData(numpy_to_vtk(np.ascontiguousarray(points_mm, dtype=float), deep=False))
    grid = vtkUnstructuredGrid()
    grid.SetPoints(points)
    grid.SetCells(int(pv.CellType.TETRA), cells)
    return pv.wrap(grid)


def surface_of(grid: pv.UnstructuredGrid, cut=None) -> tuple[pv.PolyData, np.ndarray]:
    """Outer surface of ``grid`` or of the whole cells below a cut ``(axis, fraction)``."""
    if cut is None:
        sub, sub_ids = grid, np.arange(grid.n_points)
    else:
        a = AXES[cut[0]]
        pts = grid.points
        tets = grid.cell_connectivity.reshape(-1, 4)  # all tetrahedra (no legacy-format copy)
        col = np.ascontiguousarray(pts[:, a])
        centre4 = np.take(col, tets).sum(axis=1)  # 4 × the cell centre's coordinate (a 1-D gather is fast)
        lo, hi = col.min(), col.max()
        keep = np.flatnonzero(centre4 <= 4.0 * (lo + cut[1] * (hi - lo)))
        if len(keep) == 0:
            keep = np.array([int(np.argmin(centre4))])
        sub = grid.extract_cells(keep)
        sub_ids = np.asarray(sub.point_data["vtkOriginalPointIds"])
    surf = sub.extract_surface(pass_pointid=True, pass_cellid=False, algorithm="dataset_surface")
    ids = sub_ids[np.asarray(surf.point_data["vtkOriginalPointIds"])]
    surf.clear_data()
    surf.point_data[SCALARS] = np.zeros(surf.n_points, dtype=np.float32)
    surf.set_active_scalars(SCALARS)
    return surf, ids


class FieldView:
    """Owns the field actor, the time caption and the over-rating caption on ``plotter``."""

    def __init__(self, plotter):
        self.plotter = plotter
        self.grid: pv.UnstructuredGrid | None = None
        self.surface: pv.PolyData | None = None
        self.point_ids: np.ndarray | None = None  # surface point → mesh node
        self.actor = None
        self.edges_actor = None
        self.cut: tuple[str, float] | None = None  # (axis, fraction 0..1 of the extent kept)
        self._field: np.ndarray | None = None
        self._clim = (0.0, 1.0)
        self._caption = None
        self.caption_text = ""
        self._over_caption = None
        self._over_text = None
        self.visible = False
        self._framed_bounds = None

    # ------------------------------------------------------------ geometry
    def set_geometry(self, points_mm: np.ndarray, tets: np.ndarray) -> None:
        """Build and show the drawable surface (slow for big meshes: see :func:`build_display`)."""
        self.attach(build_display(points_mm, tets, self.cut))

    def attach(self, display: "Display") -> None:
        """Show a display prepared by :func:`build_display` (possibly on another thread).
        The same mesh again (a re-run after a load or material change) keeps the drawn surface."""
        if self._same_mesh(display.grid):
            return
        self.grid = display.grid
        self._field = None
        self._install(display.surface, display.point_ids)
        bounds = tuple(np.round(self.grid.bounds, 6))
        if bounds != self._framed_bounds:  # new shape: frame it (keep the user's camera otherwise)
            if self._framed_bounds is None:
                self.plotter.view_isometric(render=False)
            # the renderer's own reset: pyvista's Plotter.reset_camera renders even with render=False
            self.plotter.renderer.reset_camera(render=False, bounds=self.grid.bounds)
            self.plotter.renderer.camera.is_set = True
            self._framed_bounds = bounds

    def _same_mesh(self, grid) -> bool:
        g = self.grid
        return (g is not None and self.actor is not None and g.n_points == grid.n_points
                and g.n_cells == grid.n_cells and np.array_equal(g.points, grid.points)
                and np.array_equal(g.cell_connectivity, grid.cell_connectivity))

    def set_cut(self, axis: str | None, fraction: float = 0.5) -> None:
        """Keep the cells whose centres lie below ``fraction`` of the extent along ``axis`` (None: all)."""
        self.cut = None if not axis else (axis, float(np.clip(fraction, 0.0, 1.0)))
        if self.grid is not None:
            surf, ids = surface_of(self.grid, self.cut)
            self._install(surf, ids)

    def _install(self, surf, point_ids) -> None:
        self.surface, self.point_ids = surf, point_ids
        if self.actor is not None:
            self.plotter.remove_actor(self.actor, render=False)
            if BAR_TITLE in self.plotter.scalar_bars:  # else a new bar would merge the old range
                self.plotter.remove_scalar_bar(BAR_TITLE, render=False)
        if self.edges_actor is not None:
            self.plotter.remove_actor(self.edges_actor, render=False)
        surf.point_data[SCALARS][:] = self._clim[0]
        # the corners of parts and housing as thin lines: the structure shows whatever the colours
        edges = surf.extract_feature_edges(feature_angle=30, boundary_edges=True, non_manifold_edges=False,
                                           manifold_edges=False)
        self.edges_actor = self.plotter.add_mesh(edges, color=EDGE_COLOUR, line_width=1, opacity=0.6,
                                                 name="results::edges", render=False, pickable=False,
                                                 reset_camera=False, lighting=False)
        self.edges_actor.SetVisibility(self.visible)
        self.actor = self.plotter.add_mesh(
            surf, scalars=SCALARS, cmap=colour_map(), clim=self._clim, show_edges=False, name="results::field",
            render=False, pickable=False, reset_camera=False, lighting=True,
            scalar_bar_args={"title": BAR_TITLE, "color": LABEL_COLOUR, "vertical": True,
                             "position_x": 0.87, "position_y": 0.14, "height": 0.62, "width": 0.06,
                             "title_font_size": 14, "label_font_size": 12, "fmt": "%.1f", "n_labels": 6,
                             "render": False})
        self.actor.SetVisibility(self.visible)
        self.actor.mapper.scalar_range = self._clim
        if self._field is not None:
            self.show_field(self._field, self._clim)

    # ------------------------------------------------------------ per frame
    def show_field(self, field_c: np.ndarray, clim: tuple[float, float], paint: bool = True) -> None:
        """Copy the temperatures of the shown surface and set the colour range (°C);
        ``paint=False`` leaves the redraw to the caller (see :meth:`paint_now`)."""
        self._field = field_c
        if self.surface is None:
            return
        self.surface.point_data[SCALARS][:] = np.asarray(field_c, dtype=np.float32)[self.point_ids]
        self.surface.Modified()
        if tuple(clim) != self._clim:
            self._clim = (float(clim[0]), float(clim[1]))
            self.actor.mapper.scalar_range = self._clim
        if paint:
            self.repaint()

    def shown_scalars(self) -> np.ndarray:
        """Temperatures currently held by the drawn surface (°C), surface point order."""
        return np.asarray(self.actor.mapper.dataset.point_data[SCALARS])

    @property
    def colour_range(self) -> tuple[float, float]:
        return tuple(self.actor.mapper.scalar_range) if self.actor is not None else self._clim

    def set_caption(self, text: str) -> None:
        """The shown time, in the lower right corner of the view."""
        self.caption_text = text
        self._caption = self._corner_text(self._caption, text, "lower_right", LABEL_COLOUR, "results::time")
        self._caption.SetVisibility(self.visible)

    def set_over_caption(self, text: str) -> None:
        """A warning line in the view naming the parts over their rating ('' hides it)."""
        if text == self._over_text:
            return
        self._over_text = text
        self._over_caption = self._corner_text(self._over_caption, text or " ", "upper_left", OVER_COLOUR,
                                               "results::over", bold=True)
        self._over_caption.SetVisibility(self.visible and bool(text))

    def _corner_text(self, actor, text, corner, colour, name, bold=False):
        if actor is None:
            actor = self.plotter.add_text(text, position=corner, font_size=11, color=colour, name=name,
                                          render=False)
            actor.GetTextProperty().SetBold(bold)
        else:
            actor.SetText(CORNERS[corner], text)
        return actor

    def set_visible(self, on: bool) -> None:
        self.visible = on
        for a in (self.actor, self.edges_actor, self._caption):
            if a is not None:
                a.SetVisibility(on)
        if self._over_caption is not None:
            self._over_caption.SetVisibility(on and bool(self._over_text))
        if self.actor is not None:
            sb = self.plotter.scalar_bars
            for key in list(sb.keys()):
                sb[key].SetVisibility(on)
        self.repaint()

    def paint_now(self) -> float:
        """Redraw synchronously; returns the wall time it took (s), to pace live redraws."""
        import time

        t = time.perf_counter()
        w = getattr(self.plotter, "interactor", None)
        if w is not None and hasattr(w, "repaint"):
            w.repaint()
        else:
            self.plotter.render()
        return time.perf_counter() - t

    def repaint(self) -> None:
        """Schedule a redraw of the Qt widget (cheaper than a synchronous render)."""
        self.plotter.interactor.update() if hasattr(self.plotter, "interactor") else self.plotter.render()

    def save_picture(self, path) -> None:
        """Write the current view to a PNG file."""
        self.plotter.render()
        self.plotter.screenshot(str(path))
