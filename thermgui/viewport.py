"""The 3D view of the model's boxes: click to pick a part, drag handles to move or resize it.

:class:`Viewport` wraps a pyvistaqt ``QtInteractor`` (``viewport.plotter``). In "edit" mode it
draws one box per part (mm), outlines the selected part, and puts a handle frame on it; a
finished drag is reported as ``boxEdited(name, lower_mm, upper_mm)``; the window snaps what
moved to ``snap_mm``. In "results" mode the boxes are hidden so the field can be drawn on the
same plotter; outlines from :meth:`highlight_parts` show in both modes.

Picking is a ray test against the visible parts' boxes (geometry only, no numerics): the ray
through the clicked pixel meets boxes in depth order; clicking again on the same spot steps to
the next box behind, so parts inside a housing can be reached.
"""
from __future__ import annotations

import numpy as np
import pyvista as pv
from PySide6.QtCore import QEvent, Qt, QTimer, Signal
from PySide6.QtWidgets import QVBoxLayout, QWidget
from pyvistaqt import QtInteractor
from vtkmodules.vtkInteractionWidgets import vtkBoxWidget
from vtkmodules.vtkCommonDataModel import vtkPolyData


# Visual language: muted fills by material family, an amber frame for the selection,
# a thick crimson frame for parts marked by highlight_parts (for example "over rating").
FAMILY_COLOURS = [
    (("aluminium", "copper", "steel", "stainless"), "#9aa7b4"),
    (("pcb", "fr4"), "#5f8f5a"),
    (("mould", "potting", "epoxy"), "#3d3f45"),
    (("silicon", "alumina"), "#6f7d99"),
    (("pad",), "#d9916b"),
    (("abs", "polycarbonate", "pa66"), "#d8c8a8"),
    (("air",), "#bfe3ea"),
]
OTHER_COLOUR = "#b08fc7"
PROBE_COLOUR = "#1f4fd1"
FACE_COLOUR = "#2aa5c9"
SELECT_COLOUR = "#ffb000"
MARK_COLOUR = "#d0103a"  # frame of a part over its rating
RISK_COLOUR = "#e89600"  # frame of a part at risk (rating within its error band)
BACKGROUND_BOTTOM = "#e9edf2"
BACKGROUND_TOP = "#ffffff"
CLICK_SLOP_PX = 4


def material_colour(material: str) -> str:
    name = material.lower()
    for keys, colour in FAMILY_COLOURS:
        if any(k in name for k in keys):
            return colour
    return OTHER_COLOUR


def ray_box_hits(origin, direction, lower, upper):
    """Entry distance and entry face of a ray through each box (inf where it misses).

    ``lower``/``upper``: (n, 3) corners. Returns (t_enter (n,), face (n,) as 'x-'...'z+')."""
    origin = np.asarray(origin, float)
    direction = np.asarray(direction, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / direction
        t1 = (lower - origin) * inv
        t2 = (upper - origin) * inv
    t_near = np.where(np.isnan(t1), -np.inf, np.minimum(t1, t2))
    t_far = np.where(np.isnan(t1), np.inf, np.maximum(t1, t2))
    enter = t_near.max(axis=1)
    leave = t_far.min(axis=1)
    hit = (enter <= leave) & (leave >= 0)
    axis = t_near.argmax(axis=1)
    sign = np.where(direction[axis] > 0, "-", "+")
    faces = np.array([f"{'xyz'[a]}{s}" for a, s in zip(axis, sign)]) if len(axis) else np.array([], str)
    return np.where(hit, np.maximum(enter, 0.0), np.inf), faces


class Viewport(QWidget):
    """3D view of the model's parts. Signals: ``partClicked(name)`` ('' for empty space),
    ``faceClicked(name, face)`` (every pick, with the face the ray entered),
    ``boxEdited(name, lower_mm, upper_mm)`` after a handle drag (the box as dragged; the
    window snaps what moved to ``snap_mm``, see :func:`thermgui.edits.drag_box`)."""

    partClicked = Signal(str)
    faceClicked = Signal(str, str)
    boxEdited = Signal(str, object, object)

    def __init__(self, parent=None, auto_update: bool | float = False):
        super().__init__(parent)
        self.plotter = QtInteractor(self, auto_update=auto_update)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.plotter.interactor)
        self.plotter.set_background(BACKGROUND_BOTTOM, top=BACKGROUND_TOP)
        self.plotter.add_axes(interactive=False, line_width=2, labels_off=False)
        self.mode = "edit"
        self.pick_mode = "select"  # "face": the next click reports a face of another part only
        self.snap_mm = 1.0
        self.handles_enabled = True
        self.hidden_parts: set[str] = set()
        self.see_through = False
        self._parts: list[dict] = []  # name, material, origin_mm, size_mm
        self._actors: dict[str, object] = {}
        self._signatures: dict[str, tuple] = {}  # name -> (bounds, colour) the actor was drawn with
        self._frame_key = None
        self._probes: list[tuple[str, tuple]] = []
        self._probe_actor = None
        self._probe_key = None
        self._face = None  # (part, side) shown as a convection face
        self._face_actor = None
        self._select_actor = None
        self._mark_actors: list = []
        self._marked: set[str] = set()
        self._at_risk: set[str] = set()
        self._selected: str | None = None
        self._caption = None
        self._press = None
        self._camera_set = False
        self._camera_touched = False
        self._box = vtkBoxWidget()
        self._box.SetInteractor(self.plotter.iren.interactor)
        self._box.SetCurrentRenderer(self.plotter.renderer)
        self._box.SetPlaceFactor(1.0)
        self._box.SetRotationEnabled(False)
        self._box.SetHandleSize(0.008)
        self._box.GetOutlineProperty().SetColor(pv.Color(SELECT_COLOUR).float_rgb)
        self._box.GetOutlineProperty().SetLineWidth(2)
        self._box.GetHandleProperty().SetColor(pv.Color(SELECT_COLOUR).float_rgb)
        self._box.GetSelectedHandleProperty().SetColor(pv.Color(MARK_COLOUR).float_rgb)
        self._box.GetFaceProperty().SetOpacity(0.0)
        self._box.GetSelectedFaceProperty().SetOpacity(0.15)
        self._box.AddObserver("EndInteractionEvent", self._on_box_released)
        # clicks are read from Qt's events, before VTK (the handle frame consumes clicks inside it)
        self.plotter.interactor.installEventFilter(self)
        self.plotter.setAcceptDrops(False)  # pyvista would try to load a dropped file as a mesh
        self.plotter.iren.clear_key_event_callbacks()  # no plotter key bindings ('q' closes it)

    # ------------------------------------------------------------ drawing
    def refresh(self) -> None:
        """Schedule a redraw (cheaper than a synchronous render)."""
        QWidget.update(self.plotter)

    def show_model(self, model) -> None:
        """Redraw all parts of ``model`` (a solver.model.modelfile.Model), keeping camera and selection."""
        self._parts = [{"name": p.name, "material": p.material, "origin_mm": list(p.origin_mm),
                        "size_mm": list(p.size_mm)} for p in model.parts]
        self._probes = [(pr.name, tuple(pr.at_mm)) for pr in model.probes]
        names = {p["name"] for p in self._parts}
        wanted = {p["name"]: (self._bounds(p), material_colour(p["material"])) for p in self._parts}
        for name in list(self._actors):
            if name not in wanted or self._signatures.get(name) != wanted[name]:
                self.plotter.remove_actor(self._actors.pop(name), render=False)
                self._signatures.pop(name, None)
        for name, (bounds, colour) in wanted.items():
            if name in self._actors:
                continue  # unchanged box: keep its actor
            actor = self.plotter.add_mesh(pv.Box(bounds=bounds), color=colour, show_edges=True,
                                          edge_color="#2b2f36", line_width=1, smooth_shading=False,
                                          name=f"part::{name}", render=False, pickable=False)
            self._actors[name] = actor
            self._signatures[name] = (bounds, colour)
        if self._selected not in names:
            self._selected = None
        self.hidden_parts &= names
        self._marked &= names
        self._at_risk &= names
        self._apply_visibility()
        self._update_selection_graphics()
        self._update_marks()
        self._update_probes()
        self._update_face()
        if not self._camera_set and self._parts and self.isVisible():
            self.reset_camera()
            self._camera_set = True
        self.refresh()

    @staticmethod
    def _bounds(p) -> tuple:
        o, s = p["origin_mm"], p["size_mm"]
        return (o[0], o[0] + s[0], o[1], o[1] + s[1], o[2], o[2] + s[2])

    def _part(self, name):
        for p in self._parts:
            if p["name"] == name:
                return p
        return None

    def _apply_visibility(self) -> None:
        editing = self.mode == "edit"
        for name, actor in self._actors.items():
            actor.SetVisibility(editing and name not in self.hidden_parts)
            see_through = self.see_through and self._selected is not None and name != self._selected
            actor.GetProperty().SetOpacity(0.25 if see_through else 1.0)

    def _update_selection_graphics(self) -> None:
        p = self._part(self._selected) if self._selected else None
        shown = p is not None and self.mode == "edit" and self._selected not in self.hidden_parts
        key = (self._bounds(p), self.handles_enabled) if shown else None
        if key != self._frame_key:
            self._frame_key = key
            if self._select_actor is not None:
                self.plotter.remove_actor(self._select_actor, render=False)
                self._select_actor = None
            if shown:
                outline = pv.Box(bounds=self._bounds(p)).extract_feature_edges()
                self._select_actor = self.plotter.add_mesh(outline, color=SELECT_COLOUR, line_width=4,
                                                           name="selection::frame", render=False,
                                                           pickable=False)
            if shown and self.handles_enabled:
                self._box.PlaceWidget(self._bounds(p))
                if not self._box.GetEnabled():
                    self._box.On()
            elif self._box.GetEnabled():
                self._box.Off()
        self._set_caption()

    def _set_caption(self) -> None:
        p = self._part(self._selected) if self._selected else None
        if p is None or self.mode != "edit":
            text = ""
        else:
            s = p["size_mm"]
            text = f"{p['name']}   {s[0]:g} × {s[1]:g} × {s[2]:g} mm"
            if self.handles_enabled:
                text += f"   (handles snap to {self.snap_mm:g} mm)" if self.snap_mm > 0 else "   (no snapping)"
        self._caption = self.plotter.add_text(text, position="upper_left", font_size=10, color="#1d2733",
                                              name="selection::caption", render=False)

    def _update_marks(self) -> None:
        for a in self._mark_actors:
            self.plotter.remove_actor(a, render=False)
        self._mark_actors = []
        marks = [(n, MARK_COLOUR, 6) for n in sorted(self._marked)]
        marks += [(n, RISK_COLOUR, 4) for n in sorted(self._at_risk)]
        for i, (name, colour, width) in enumerate(marks):
            p = self._part(name)
            if p is None:
                continue
            outline = pv.Box(bounds=self._bounds(p)).extract_feature_edges()
            self._mark_actors.append(self.plotter.add_mesh(outline, color=colour, line_width=width,
                                                           name=f"mark::{i}", render=False, pickable=False))

    def showEvent(self, event):
        super().showEvent(event)
        if not self._camera_set and self._parts:
            self.reset_camera()  # first fit once the widget has its real size
            self._camera_set = True

    def resizeEvent(self, event):
        super().resizeEvent(event)
        # keep the model framed while the window settles, until the user moves the camera
        if self._camera_set and not self._camera_touched:
            self.reset_camera()

    def _model_size(self) -> float:
        if not self._parts:
            return 1.0
        lo = np.min([p["origin_mm"] for p in self._parts], axis=0)
        hi = np.max([np.add(p["origin_mm"], p["size_mm"]) for p in self._parts], axis=0)
        return float(np.linalg.norm(hi - lo)) or 1.0

    def _update_probes(self) -> None:
        key = (tuple(self._probes), self.mode, round(self._model_size(), 6))
        if key == self._probe_key:
            return
        self._probe_key = key
        if self._probe_actor is not None:
            self.plotter.remove_actor(self._probe_actor, render=False)
            self._probe_actor = None
        if self._probes and self.mode == "edit":
            r = 0.008 * self._model_size()
            balls = pv.merge([pv.Sphere(radius=r, center=at, theta_resolution=12, phi_resolution=12)
                              for _, at in self._probes])
            self._probe_actor = self.plotter.add_mesh(balls, color=PROBE_COLOUR, name="probes::balls",
                                                      render=False, pickable=False)

    def _update_face(self) -> None:
        if self._face_actor is not None:
            self.plotter.remove_actor(self._face_actor, render=False)
            self._face_actor = None
        if self._face and self._face[0] == "::contact" and self.mode == "edit":
            self._show_rects(self._face[1])
            return
        p = self._part(self._face[0]) if self._face else None
        if p is None or self.mode != "edit":
            return
        side = self._face[1]
        lo = np.array(p["origin_mm"], float)
        hi = lo + np.array(p["size_mm"], float)
        pad = 0.004 * self._model_size()
        if side == "exposed":
            b = pv.Box(bounds=(lo[0] - pad, hi[0] + pad, lo[1] - pad, hi[1] + pad, lo[2] - pad, hi[2] + pad))
            self._face_actor = self.plotter.add_mesh(b, color=FACE_COLOUR, opacity=0.35, name="face::overlay",
                                                     render=False, pickable=False)
            return
        a = "xyz".index(side[0])
        b, c = [k for k in range(3) if k != a]
        plane = hi[a] + pad if side[1] == "+" else lo[a] - pad
        pts = np.zeros((4, 3))
        pts[:, a] = plane
        pts[:, b] = [lo[b], hi[b], hi[b], lo[b]]
        pts[:, c] = [lo[c], lo[c], hi[c], hi[c]]
        quad = pv.PolyData(pts, faces=[4, 0, 1, 2, 3])
        self._face_actor = self.plotter.add_mesh(quad, color=FACE_COLOUR, opacity=0.75, name="face::overlay",
                                                 render=False, pickable=False)

    def _show_rects(self, rects) -> None:
        """Tint flat rectangles (axis, plane, lo, hi) in mm: the faces of a contact."""
        if not rects:
            return
        quads = []
        for ax, plane, lo, hi in rects:
            b, c = [k for k in range(3) if k != ax]
            pts = np.zeros((4, 3))
            pts[:, ax] = plane
            pts[:, b] = [lo[b], hi[b], hi[b], lo[b]]
            pts[:, c] = [lo[c], lo[c], hi[c], hi[c]]
            quads.append(pv.PolyData(pts, faces=[4, 0, 1, 2, 3]))
        mesh = quads[0] if len(quads) == 1 else quads[0].merge(quads[1:])
        self._face_actor = self.plotter.add_mesh(mesh, color=FACE_COLOUR, opacity=0.85, name="face::overlay",
                                                 render=False, pickable=False)

    # ------------------------------------------------------------ public API
    def show_contact(self, rects) -> None:
        """Tint the touching faces of a contact (rectangles from :func:`thermgui.edits.shared_faces`)."""
        self._face = ("::contact", list(rects)) if rects else None
        self._update_face()
        self.refresh()

    def show_face(self, part: str | None, side: str | None = None) -> None:
        """Tint a convection face (``side`` of ``part``; "exposed" tints the whole part); None clears."""
        self._face = (part, side) if part else None
        self._update_face()
        self.refresh()

    def select_part(self, name: str | None) -> None:
        """Show ``name`` as selected (None clears); does not emit ``partClicked``."""
        self._selected = name if name and self._part(name) else None
        self._apply_visibility()
        self._update_selection_graphics()
        self.refresh()

    @property
    def selected_part(self) -> str | None:
        return self._selected

    def set_mode(self, mode: str) -> None:
        """"edit": boxes and handles shown; "results": boxes hidden (the field is drawn elsewhere)."""
        if mode not in ("edit", "results"):
            raise ValueError(f"unknown view mode {mode!r}")
        self.mode = mode
        self._apply_visibility()
        self._update_selection_graphics()
        self._update_probes()
        self._update_face()
        self.refresh()

    def highlight_parts(self, names, at_risk=()) -> None:
        """Frame ``names`` in crimson (parts over their rating) and ``at_risk`` in amber (dashed
        look: thinner line)."""
        self._marked = {n for n in names if self._part(n)}
        self._at_risk = {n for n in at_risk if self._part(n)} - self._marked
        self._update_marks()
        self.refresh()

    def set_hidden_parts(self, names) -> None:
        self.hidden_parts = set(names)
        self._apply_visibility()
        self._update_selection_graphics()
        self.refresh()

    def set_see_through(self, on: bool) -> None:
        self.see_through = bool(on)
        self._apply_visibility()
        self.refresh()

    def set_snap(self, mm: float) -> None:
        self.snap_mm = max(0.0, float(mm))
        self._set_caption()
        self.refresh()

    def set_handles_enabled(self, on: bool) -> None:
        self.handles_enabled = bool(on)
        self._update_selection_graphics()
        self.refresh()

    def frame_new_model(self) -> None:
        """Fit the camera to a model that replaced the previous one (new/open)."""
        self._camera_touched = False
        if self.isVisible():
            self.reset_camera()
            self._camera_set = True
        else:
            self._camera_set = False

    def reset_camera(self, direction: str = "iso") -> None:
        """Look at all parts from ``direction``: "iso", "top", "front" or "side"."""
        {"iso": self.plotter.view_isometric, "top": self.plotter.view_xy, "front": self.plotter.view_xz,
         "side": self.plotter.view_yz}[direction](render=False)
        self.plotter.renderer.reset_camera(render=False)  # Plotter.reset_camera would render anyway
        self.plotter.renderer.camera.is_set = True
        self._fill_view(0.85)
        self.refresh()

    def _fill_view(self, fraction: float) -> None:
        """Zoom so the parts' bounding box spans ``fraction`` of the view's width or height
        (the reset alone frames the bounding sphere and leaves wide margins)."""
        if not self._parts or self.plotter.width() < 10 or self.plotter.height() < 10:
            return
        if getattr(self.plotter, "ren_win", None) is None:  # the plotter was closed (window going away)
            return
        lo = np.min([p["origin_mm"] for p in self._parts], axis=0)
        hi = np.max([np.add(p["origin_mm"], p["size_mm"]) for p in self._parts], axis=0)
        ratio = self.plotter.devicePixelRatioF()
        w, h = int(self.plotter.width() * ratio), int(self.plotter.height() * ratio)
        if tuple(self.plotter.ren_win.GetSize()) != (w, h):
            self.plotter.ren_win.SetSize(w, h)  # the widget may not have told VTK its new size yet
        ren = self.plotter.renderer
        xs, ys = [], []
        for corner in np.array(np.meshgrid(*zip(lo, hi))).reshape(3, -1).T:
            ren.SetWorldPoint(*corner, 1.0)
            ren.WorldToDisplay()
            x, y, _ = ren.GetDisplayPoint()
            xs.append(x)
            ys.append(y)
        span = max((max(xs) - min(xs)) / max(w, 1), (max(ys) - min(ys)) / max(h, 1))
        if span > 0:
            self.plotter.renderer.camera.zoom(fraction / span)

    def screen_position(self, point_mm) -> tuple[int, int]:
        """Widget pixel (x from the left, y from the top) where a 3D point (mm) is drawn."""
        ren = self.plotter.renderer
        ren.SetWorldPoint(*point_mm, 1.0)
        ren.WorldToDisplay()
        x, y, _ = ren.GetDisplayPoint()
        ratio = self.plotter.devicePixelRatioF()
        return int(round(x / ratio)), int(round(self.plotter.height() - y / ratio))

    # ------------------------------------------------------------ picking
    def parts_under(self, x: float, y: float) -> list[tuple[str, str]]:
        """Visible parts on the ray through display pixel (x, y) (VTK display coordinates,
        origin bottom-left), nearest first, each with the face the ray enters."""
        visible = [p for p in self._parts if p["name"] not in self.hidden_parts]
        if not visible:
            return []  # (in "results" mode the boxes are hidden but still pickable)
        ren = self.plotter.renderer
        ends = []
        for z in (0.0, 1.0):
            ren.SetDisplayPoint(x, y, z)
            ren.DisplayToWorld()
            w = ren.GetWorldPoint()
            ends.append(np.array(w[:3]) / w[3])
        lower = np.array([p["origin_mm"] for p in visible], float)
        upper = lower + np.array([p["size_mm"] for p in visible], float)
        t, faces = ray_box_hits(ends[0], ends[1] - ends[0], lower, upper)
        order = [i for i in np.argsort(t, kind="stable") if np.isfinite(t[i])]
        return [(visible[i]["name"], str(faces[i])) for i in order]

    def pick_at(self, x: float, y: float) -> str:
        """Handle a click at display pixel (x, y) (VTK coordinates, origin bottom-left).

        In "select" mode: pick the nearest part on the ray, or the one behind the current
        selection when the same spot is clicked again; emits ``faceClicked`` and ``partClicked``.
        In "face" mode: emit only ``faceClicked`` for the nearest part other than the selected one."""
        hits = self.parts_under(x, y)
        if self.pick_mode == "face":
            hits = [h for h in hits if h[0] != self._selected]
            if hits:
                self.faceClicked.emit(*hits[0])
                return hits[0][0]
            return ""
        names = [n for n, _ in hits]
        if not names:
            self.partClicked.emit("")
            return ""
        i = 0
        if self._selected in names:
            i = (names.index(self._selected) + 1) % len(names)
        name, face = hits[i]
        self.faceClicked.emit(name, face)
        self.partClicked.emit(name)
        return name

    def eventFilter(self, obj, event):
        t = event.type()
        if t in (QEvent.KeyPress, QEvent.KeyRelease) and not event.modifiers() & (Qt.ControlModifier | Qt.AltModifier):
            # VTK's own one-letter keys (wireframe, stereo, exit ...) would surprise a user here;
            # the window's menus and shortcuts cover what is needed
            return True
        if t in (QEvent.MouseButtonPress, QEvent.Wheel):
            self._camera_touched = True
        if t in (QEvent.MouseButtonPress, QEvent.MouseButtonDblClick) and event.button() == Qt.LeftButton:
            self._press = event.position()
        elif t == QEvent.MouseButtonRelease and event.button() == Qt.LeftButton and self._press is not None:
            pos, press = event.position(), self._press
            self._press = None
            if abs(pos.x() - press.x()) <= CLICK_SLOP_PX and abs(pos.y() - press.y()) <= CLICK_SLOP_PX:
                ratio = self.plotter.devicePixelRatioF()
                x, y = pos.x() * ratio, (self.plotter.height() - pos.y()) * ratio
                # pick once VTK has finished with this click (picking may move the handle frame)
                QTimer.singleShot(0, lambda: self.pick_at(x, y))
        return False

    def _on_box_released(self, widget, _event):
        if self._selected is None:
            return
        poly = vtkPolyData()
        widget.GetPolyData(poly)
        b = poly.GetBounds()
        p = self._part(self._selected)
        if p is not None and np.allclose(b, self._bounds(p), atol=1e-9):
            return  # a click inside the frame, not a drag
        lower, upper = [b[0], b[2], b[4]], [b[1], b[3], b[5]]
        self.boxEdited.emit(self._selected, lower, upper)

    def close_plotter(self) -> None:
        """Release the render window (call before the window closes)."""
        self._box.Off()
        self._box.SetInteractor(None)
        self.plotter.close()
