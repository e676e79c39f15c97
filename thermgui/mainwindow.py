"""The main window: item list and property form on the left, the 3D view in the middle.

Public surface used by other parts of the app (see the results module): ``document``,
``viewport``, ``item_tree``, ``menus`` ("file", "edit", "view", "run", "help"), ``toolbar``,
``prompts``, ``fileops`` and :meth:`MainWindow.add_dock`.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QSize, Qt
from PySide6.QtGui import QAction, QGuiApplication, QKeySequence
from PySide6.QtWidgets import (QDoubleSpinBox, QLabel, QMainWindow, QSplitter, QStyle, QToolBar, QWidget,
                               QDockWidget)

from . import edits
from .document import ModelDocument
from .fileops import FileOps, display_path
from .forms import PropertyPanel
from .itemtree import ItemTree
from .prompts import DialogPrompts
from .viewport import Viewport

APP_NAME = "thermgui"
CAUTION = ("Results are engineering estimates from a conduction model with assumed convection "
           "coefficients. Confirm them by measurement on real hardware, and defer to the applicable "
           "safety standards, codes and licensed practice before relying on them.")
KIND_WORDS = {"parts": "part", "heat_loads": "heat load", "convection": "convection face", "probes": "probe",
              "materials": "material", "surface_loads": "surface flux", "contacts": "contact",
              "air_volumes": "inside air volume"}


class _FixedTextAction(QAction):
    """A toolbar action with a fixed word ("Undo"); the command it would undo goes in the tooltip."""

    def __init__(self, icon, word, parent):
        super().__init__(icon, word, parent)
        self.word = word
        self.setToolTip(word)

    def show_command(self, text: str) -> None:
        self.setToolTip(f"{self.word} {text}" if text else self.word)


class MainWindow(QMainWindow):
    def __init__(self, model=None, path: Path | None = None, prompts=None, auto_update: bool | float = False,
                 settings=None, recovery_dir: Path | None = None, autosave_s: float | None = None,
                 size: tuple[int, int] | None = None):
        super().__init__()
        self.setWindowTitle(APP_NAME)
        self._fixed_size = size  # tests ask for a fixed size; None: the screen's available area
        self.first_start = True  # no window layout remembered yet (set by _restore_layout)
        avail = self._available_area()
        self.resize(*(size or (min(1360, avail.width()), min(840, avail.height()))))
        self.setAcceptDrops(True)  # drop a model file to open it
        self.prompts = prompts if prompts is not None else DialogPrompts(self)
        self.document = ModelDocument(model, path, self)
        kwargs = {} if autosave_s is None else {"autosave_s": autosave_s}
        self.fileops = FileOps(self, settings=settings, recovery_dir=recovery_dir, **kwargs)
        self._placing = False
        self._closing_done = False

        # ---- widgets
        self.item_tree = ItemTree()
        self.properties = PropertyPanel(self.document, self.report)
        self.viewport = Viewport(auto_update=auto_update)
        left = QSplitter(Qt.Vertical)
        left.addWidget(self.item_tree)
        left.addWidget(self.properties)
        left.setStretchFactor(0, 2)
        left.setStretchFactor(1, 3)
        left.setSizes([320, 520])
        self.left_panel = left
        left.setMinimumWidth(330)
        self.setCentralWidget(self.viewport)
        # the model panel owns the left edge from top to bottom; docks added later (results)
        # sit under the 3D view, not under the forms
        self.setCorner(Qt.TopLeftCorner, Qt.LeftDockWidgetArea)
        self.setCorner(Qt.BottomLeftCorner, Qt.LeftDockWidgetArea)
        self.model_dock = QDockWidget("Model", self)
        self.model_dock.setObjectName("dock_model")
        self.model_dock.setFeatures(QDockWidget.DockWidgetMovable | QDockWidget.DockWidgetFloatable)
        self.model_dock.setWidget(left)
        self.addDockWidget(Qt.LeftDockWidgetArea, self.model_dock)
        self.resizeDocks([self.model_dock], [380], Qt.Horizontal)
        self.status_text = QLabel()
        self.statusBar().addPermanentWidget(self.status_text)

        # ---- actions, menus, toolbar
        self.actions_: dict[str, QAction] = {}
        self.menus = {}
        self._build_actions()
        self._build_menus()
        self._build_toolbar()
        self.item_tree.setContextMenuPolicy(Qt.ActionsContextMenu)
        a = self.actions_
        for key in ("add_part", "add_load", "add_face", "add_flux", "add_contact", "add_air", "add_probe",
                    "add_material", None, "duplicate", "rename", "delete", None, "place"):
            if key is None:
                sep = QAction(self)
                sep.setSeparator(True)
                self.item_tree.addAction(sep)
            else:
                self.item_tree.addAction(a[key])

        # ---- wiring
        d = self.document
        d.changed.connect(self._model_changed)
        d.replaced.connect(self.viewport.frame_new_model)
        d.selectRequested.connect(self._select_requested)
        d.pathChanged.connect(self._update_title)
        d.dirtyChanged.connect(lambda _dirty: self._update_title())
        self.item_tree.itemChosen.connect(self._tree_chose)
        self.item_tree.visibilityChanged.connect(self.viewport.set_hidden_parts)
        self.viewport.partClicked.connect(self._view_clicked)
        self.viewport.faceClicked.connect(self._view_face_clicked)
        self.viewport.boxEdited.connect(self._box_edited)
        self.properties.placeRequested.connect(self.start_place)
        self.fileops.recentChanged.connect(self._fill_recent)
        self._fill_recent()
        self._model_changed()
        self._update_title()
        self._update_actions()

        try:
            from .runresults import install
            install(self)
        except ImportError:
            pass
        self._restore_layout()

    # ------------------------------------------------------------ building
    def _act(self, key, text, slot, shortcut=None, icon=None, tip=None, checkable=False):
        a = QAction(text, self)
        if shortcut is not None:
            if isinstance(shortcut, (list, tuple)):
                a.setShortcuts([QKeySequence(s) for s in shortcut])
            else:
                a.setShortcut(QKeySequence(shortcut))
        if icon is not None:
            a.setIcon(self.style().standardIcon(icon))
        if tip:
            a.setStatusTip(tip)
            a.setToolTip(tip)
        a.setCheckable(checkable)
        if checkable:
            a.toggled.connect(slot)
        else:
            a.triggered.connect(lambda _checked=False: slot())
        self.actions_[key] = a
        return a

    def _build_actions(self):
        S = QStyle
        fo = self.fileops
        self._act("new", "&New", fo.new_file, QKeySequence.New, S.SP_FileIcon, "Start a new model")
        self._act("open", "&Open…", fo.open_dialog, QKeySequence.Open, S.SP_DialogOpenButton, "Open a model file")
        self._act("save", "&Save", fo.save, QKeySequence.Save, S.SP_DialogSaveButton, "Save the model")
        self._act("save_as", "Save &As…", fo.save_as, QKeySequence.SaveAs, None, "Save the model under a new name")
        self._act("picture", "Save View &Picture…", self.save_picture, None, None, "Save the 3D view as a PNG image")
        self._act("quit", "&Quit", self.close, QKeySequence.Quit)
        undo = self.document.undo_stack.createUndoAction(self, "&Undo")
        undo.setShortcut(QKeySequence.Undo)
        undo.setIcon(self.style().standardIcon(S.SP_ArrowBack))
        redo = self.document.undo_stack.createRedoAction(self, "&Redo")
        redo.setShortcuts([QKeySequence("Ctrl+Shift+Z"), QKeySequence("Ctrl+Y")])
        redo.setIcon(self.style().standardIcon(S.SP_ArrowForward))
        self.actions_["undo"], self.actions_["redo"] = undo, redo
        # the toolbar's buttons keep a short fixed text (the menu items name the action, and so does
        # the buttons' tooltip): a text that grows with the action's name pushed the toolbar aside
        stack = self.document.undo_stack
        for key, word, icon, go, can, can_changed, text_changed in (
                ("undo_button", "Undo", S.SP_ArrowBack, stack.undo, stack.canUndo, stack.canUndoChanged,
                 stack.undoTextChanged),
                ("redo_button", "Redo", S.SP_ArrowForward, stack.redo, stack.canRedo, stack.canRedoChanged,
                 stack.redoTextChanged)):
            short = _FixedTextAction(self.style().standardIcon(icon), word, self)
            short.triggered.connect(go)
            short.setEnabled(can())
            can_changed.connect(short.setEnabled)
            text_changed.connect(short.show_command)
            self.actions_[key] = short
        self._act("add_part", "Add &Part", lambda: self.add_item("parts"), "Ctrl+Shift+B", None,
                  "Add a box-shaped part on top of the model")
        self._act("add_load", "Add &Heat Load", lambda: self.add_item("heat_loads"), "Ctrl+Shift+H", None,
                  "Add a heat load to the selected part")
        self._act("add_face", "Add &Convection Face", lambda: self.add_item("convection"), "Ctrl+Shift+C", None,
                  "Add a convection face to the selected part")
        self._act("add_flux", "Add &Surface Flux", lambda: self.add_item("surface_loads"), None, None,
                  "Add a surface heat flux (for example sun) on the selected part")
        self._act("add_contact", "Add Con&tact", lambda: self.add_item("contacts"), None, None,
                  "Add a contact resistance between the selected part and a part it touches")
        self._act("add_air", "Add Inside &Air", lambda: self.add_item("air_volumes"), None, None,
                  "Add the air enclosed by the model's parts as one temperature")
        self._act("add_probe", "Add Pro&be", lambda: self.add_item("probes"), "Ctrl+Shift+R", None,
                  "Add a temperature probe at the selected part's centre")
        self._act("add_material", "Add &Material", lambda: self.add_item("materials"), "Ctrl+Shift+M", None,
                  "Add a material of this model (starts from the selected part's material)")
        self._act("duplicate", "D&uplicate", self.duplicate_selected, "Ctrl+D", None, "Copy the selected item")
        self._act("rename", "Rena&me", self.rename_selected, "F2", None, "Rename the selected item")
        self._act("delete", "&Delete", self.delete_selected, QKeySequence.Delete, S.SP_TrashIcon,
                  "Delete the selected item")
        self._act("place", "Place &Onto Face…", self.start_place, "Ctrl+Shift+F", None,
                  "Click a face of another part to set the selected part against it")
        self._act("cancel", "Cancel Placing", self.cancel_place, "Esc")
        self._act("view_iso", "&Overview", lambda: self.viewport.reset_camera("iso"), "Home")
        self._act("view_top", "From &Top", lambda: self.viewport.reset_camera("top"), "Ctrl+7")
        self._act("view_front", "From &Front", lambda: self.viewport.reset_camera("front"), "Ctrl+1")
        self._act("view_side", "From &Side", lambda: self.viewport.reset_camera("side"), "Ctrl+3")
        self._act("see_through", "Fade &Other Parts", self.viewport.set_see_through, "Ctrl+T", None,
                  "Draw every part except the selected one translucent", checkable=True)
        self._act("handles", "Resize &Handles", self.viewport.set_handles_enabled, "Ctrl+H", None,
                  "Show move/resize handles on the selected part", checkable=True)
        self.actions_["handles"].setChecked(True)
        self.actions_["see_through"].setChecked(True)
        self._act("show_all", "Show &All Parts", self.show_all_parts, None, None, "Tick every part in the list")
        self._act("about", "&About thermgui", self.show_about)
        self._act("caution", "&Caution on Results", lambda: self.prompts.info("About the results", CAUTION))
        self.addAction(self.actions_["cancel"])

    def _build_menus(self):
        mb = self.menuBar()
        a = self.actions_
        m = self.menus["file"] = mb.addMenu("&File")
        m.addActions([a["new"], a["open"]])
        self.recent_menu = m.addMenu("Open &Recent")
        m.addSeparator()
        m.addActions([a["save"], a["save_as"]])
        m.addSeparator()
        m.addAction(a["picture"])
        m.addSeparator()
        m.addAction(a["quit"])
        m = self.menus["edit"] = mb.addMenu("&Edit")
        m.addActions([a["undo"], a["redo"]])
        m.addSeparator()
        m.addActions([a["add_part"], a["add_load"], a["add_face"], a["add_flux"], a["add_contact"], a["add_air"],
                      a["add_probe"], a["add_material"]])
        m.addSeparator()
        m.addActions([a["duplicate"], a["rename"], a["delete"]])
        m.addSeparator()
        m.addAction(a["place"])
        m = self.menus["view"] = mb.addMenu("&View")
        m.addActions([a["view_iso"], a["view_top"], a["view_front"], a["view_side"]])
        m.addSeparator()
        m.addActions([a["see_through"], a["handles"], a["show_all"]])
        m.addSeparator()
        self.menus["run"] = mb.addMenu("&Run")
        m = self.menus["help"] = mb.addMenu("&Help")
        m.addActions([a["caution"], a["about"]])

    def _build_toolbar(self):
        tb = self.toolbar = QToolBar("Main tools")
        tb.setObjectName("main_tools")
        tb.setIconSize(QSize(18, 18))
        tb.setToolButtonStyle(Qt.ToolButtonTextBesideIcon)
        self.addToolBar(Qt.TopToolBarArea, tb)
        a = self.actions_
        for k in ("open", "save"):
            tb.addAction(a[k])
        tb.addSeparator()
        tb.addActions([a["undo_button"], a["redo_button"]])
        tb.addSeparator()
        tb.addAction(a["add_part"])
        tb.addAction(a["delete"])
        tb.addAction(a["place"])
        tb.addSeparator()
        tb.addWidget(QLabel(" Snap "))
        self.snap_box = QDoubleSpinBox()
        self.snap_box.setDecimals(2)
        self.snap_box.setRange(0.0, 100.0)
        self.snap_box.setSingleStep(0.5)
        self.snap_box.setSuffix(" mm")
        self.snap_box.setSpecialValueText("off")
        self.snap_box.setToolTip("Handle drags snap the part's corners to multiples of this length (0 = off)")
        snap = float(self.fileops.settings.value("view/snap_mm", 1.0))
        self.snap_box.setValue(snap)
        self.viewport.set_snap(snap)
        self.snap_box.valueChanged.connect(self.set_snap)
        tb.addWidget(self.snap_box)
        tb.addAction(a["handles"])
        tb.addSeparator()

    def add_dock(self, widget: QWidget, area=Qt.RightDockWidgetArea, title: str = "") -> QDockWidget:
        """Put ``widget`` in a dock (used by the results module)."""
        dock = QDockWidget(title, self)
        dock.setObjectName("dock_" + (title or widget.objectName() or str(id(widget))).replace(" ", "_"))
        dock.setWidget(widget)
        self.addDockWidget(area, dock)
        self.menus["view"].addAction(dock.toggleViewAction())
        return dock

    # ------------------------------------------------------------ messages
    def report(self, message: str) -> None:
        """Tell the user why something was refused (a dialog; tests pass their own prompts)."""
        self.prompts.error("Not changed", message)

    # ------------------------------------------------------------ state updates
    def _update_title(self):
        d = self.document
        self.setWindowTitle(f"{d.display_name}[*] — {APP_NAME}")
        self.setWindowModified(d.dirty)
        where = display_path(d.path) if d.path else "not saved yet"
        self.status_text.setText(where + ("  (unsaved changes)" if d.dirty else ""))
        self.status_text.setToolTip(str(d.path) if d.path else "")

    def _model_changed(self):
        d = self.document.model_dict()
        self.item_tree.show_model(d)
        self.viewport.show_model(self.document.model)
        self._sync_view_selection()
        self._update_actions()

    def _fill_recent(self):
        self.recent_menu.clear()
        files = self.fileops.recent_files()
        for f in files:
            act = self.recent_menu.addAction(Path(f).name)
            act.setToolTip(f)
            act.setStatusTip(f)
            act.triggered.connect(lambda _c=False, f=f: self.fileops.open_path(f))
        self.recent_menu.addSeparator()
        clear = self.recent_menu.addAction("Clear List")
        clear.triggered.connect(self.fileops.clear_recent)
        self.recent_menu.setEnabled(bool(files))

    def _update_actions(self):
        sel = self.selection()
        item = sel is not None and sel[0] in edits.KINDS and sel[1] >= 0
        for k in ("duplicate", "delete"):
            self.actions_[k].setEnabled(item)
        self.actions_["rename"].setEnabled(item and sel[0] not in ("heat_loads", "contacts"))
        self.actions_["place"].setEnabled(item and sel[0] == "parts" and len(self.document.model.parts) > 1)

    # ------------------------------------------------------------ selection
    def selection(self):
        """(kind, index) of the selected row, or None."""
        return self.item_tree.current()

    def selected_part_name(self) -> str | None:
        sel = self.selection()
        if not sel or sel[1] < 0:
            return None
        d = self.document.model_dict()
        if sel[0] == "parts":
            return d["parts"][sel[1]]["name"]
        if sel[0] in ("heat_loads", "convection", "surface_loads"):
            return d[sel[0]][sel[1]]["part"]
        return None

    def select(self, kind: str, index: int) -> None:
        self.item_tree.select(kind, index)

    def _tree_chose(self, kind, index):
        self.properties.show_item(kind, index)
        self._sync_view_selection()
        self._update_actions()
        if self._placing:
            self.cancel_place()

    def _sync_view_selection(self):
        self.viewport.select_part(self.selected_part_name())
        sel = self.selection()
        if sel and sel[0] in ("convection", "surface_loads") and sel[1] >= 0:
            c = getattr(self.document.model, sel[0])[sel[1]]
            self.viewport.show_face(c.part, c.side)
        elif sel and sel[0] == "contacts" and sel[1] >= 0:
            ct = self.document.model.contacts[sel[1]]
            rects = edits.shared_faces(self.document.model_dict(), *ct.parts)
            if ct.side is not None:  # only the first part's face on that side
                a = "xyz".index(ct.side[0])
                p = self.document.model.parts[self.document.model.part_index(ct.parts[0])]
                plane = p.origin_mm[a] + (p.size_mm[a] if ct.side[1] == "+" else 0.0)
                rects = [r for r in rects if r[0] == a and abs(r[1] - plane) < 1e-9]
            self.viewport.show_contact(rects)
        else:
            self.viewport.show_face(None)

    def _select_requested(self, kind, index):
        self.item_tree.select(kind, index)

    def _view_clicked(self, name: str):
        if self._placing:
            return
        if name:
            self.item_tree.select_part(name)
        else:
            self.item_tree.select("none", -1)

    # ------------------------------------------------------------ item commands
    def add_item(self, kind: str) -> bool:
        d = self.document.model_dict()
        near = self.selected_part_name()
        item = edits.new_item(d, kind, near)
        new, i = edits.add_item(d, kind, item)
        ok = self.document.try_edit(new, f"Add {KIND_WORDS[kind]} '{edits.item_label(new, kind, i)}'",
                                    self.report, (kind, i), self.selection())
        return ok

    def duplicate_selected(self) -> bool:
        sel = self.selection()
        if not sel or sel[0] not in edits.KINDS or sel[1] < 0:
            return False
        d = self.document.model_dict()
        new, i = edits.duplicate_item(d, sel[0], sel[1])
        return self.document.try_edit(new, f"Duplicate {KIND_WORDS[sel[0]]} '{edits.item_label(d, *sel)}'",
                                      self.report, (sel[0], i), sel)

    def delete_selected(self) -> bool:
        sel = self.selection()
        if not sel or sel[0] not in edits.KINDS or sel[1] < 0:
            return False
        kind, i = sel
        d = self.document.model_dict()
        label = edits.item_label(d, kind, i)
        text = f"Delete {KIND_WORDS[kind]} '{label}'"
        if kind == "parts":
            dep = edits.dependents(d, label)
            extra = [f"{len(v)} {KIND_WORDS[k]}{'s' if len(v) != 1 else ''}" for k, v in dep.items() if v]
            if extra:
                text += " with its " + " and ".join(extra)
        new = edits.delete_item(d, kind, i)
        remaining = len(new.get(kind, []))
        after = (kind, min(i, remaining - 1)) if remaining else None
        return self.document.try_edit(new, text, self.report, after, sel)

    def rename_selected(self) -> None:
        """Put the cursor in the name field of the selected item's form."""
        form = self.properties.current_form()
        name = getattr(form, "name", None)
        if name is not None and hasattr(name, "selectAll"):
            name.setFocus()
            name.selectAll()

    def rename(self, kind: str, index: int, new_name: str) -> bool:
        d = self.document.model_dict()
        old = edits.item_label(d, kind, index)
        return self.document.try_edit(edits.rename_item(d, kind, index, new_name),
                                      f"Rename {KIND_WORDS[kind]} '{old}' to '{new_name}'", self.report,
                                      (kind, index), (kind, index))

    def show_all_parts(self):
        for p in self.document.model.parts:
            self.item_tree.set_part_visible(p.name, True)

    # ------------------------------------------------------------ 3D editing
    def set_snap(self, mm: float) -> None:
        self.viewport.set_snap(mm)
        self.fileops.settings.setValue("view/snap_mm", float(mm))

    def _box_edited(self, name, lower, upper):
        d = self.document.model_dict()
        try:
            i = [p["name"] for p in d["parts"]].index(name)
        except ValueError:
            return
        new = edits.drag_box(d, i, lower, upper, self.viewport.snap_mm)
        old = d["parts"][i]
        moved = new["parts"][i]["size_mm"] == old["size_mm"]
        self.document.try_edit(new, f"{'Move' if moved else 'Resize'} part '{name}'", self.report,
                               ("parts", i), ("parts", i))
        self.viewport.select_part(self.selected_part_name())  # puts the handles back on the model's box

    def start_place(self) -> None:
        sel = self.selection()
        if not sel or sel[0] != "parts" or sel[1] < 0:
            self.prompts.info("Place onto face", "Select the part to move first, then choose this command.")
            return
        self._placing = True
        self.viewport.pick_mode = "face"
        self.viewport.setCursor(Qt.CrossCursor)
        self.statusBar().showMessage(f"Click a face of another part to set '{self.selected_part_name()}' "
                                     "against it (Esc cancels).")

    def cancel_place(self) -> None:
        if not self._placing:
            return
        self._placing = False
        self.viewport.pick_mode = "select"
        self.viewport.unsetCursor()
        self.statusBar().clearMessage()

    def _view_face_clicked(self, target: str, face: str):
        if not self._placing:
            return
        moving = self.selected_part_name()
        self.cancel_place()
        if target and moving and target != moving:
            self.place_onto(moving, target, face)

    def place_onto(self, part: str, target: str, face: str) -> bool:
        d = self.document.model_dict()
        names = [p["name"] for p in d["parts"]]
        i, j = names.index(part), names.index(target)
        new = edits.place_onto(d, i, j, face)
        return self.document.try_edit(new, f"Place part '{part}' onto the {face} face of '{target}'",
                                      self.report, ("parts", i), ("parts", i))

    # ------------------------------------------------------------ misc
    def save_picture(self, path: str | None = None) -> bool:
        path = path or self.prompts.image_path("Save view picture", "view.png")
        if not path:
            return False
        ok = self.viewport.plotter.interactor.grabFramebuffer().save(str(path))
        if not ok:
            self.prompts.error("Cannot save picture", f"{path} could not be written.")
        return ok

    def show_about(self):
        from . import __version__
        self.prompts.info("About thermgui", f"thermgui {__version__}\n\nTransient heat conduction in "
                                            f"electronics enclosures: peak temperatures, when, and margin to "
                                            f"rating.\n\n{CAUTION}")

    def _available_area(self):
        screen = self.screen() or QGuiApplication.primaryScreen()
        return screen.availableGeometry()

    def _restore_layout(self) -> None:
        s = self.fileops.settings
        geometry, state = s.value("window/geometry"), s.value("window/state")
        self.first_start = geometry is None
        if geometry is not None:
            self.restoreGeometry(geometry)
        elif self._fixed_size is None:
            self.setGeometry(self._available_area())
        if state is not None:
            self.restoreState(state)

    def show_first_time(self) -> None:
        """Show the window: maximised over the screen's available area on the first start (then
        the docks get sizes that leave the 3D view most of the window), as it was left afterwards."""
        if self.first_start and self._fixed_size is None:
            self.setGeometry(self._available_area())
            self.showMaximized()
        else:
            self.show()
        if self.first_start:
            self.fit_docks()

    def fit_docks(self) -> None:
        """Dock sizes for the window's present size: the model panel about a quarter of the width
        (300-420 px), the results under the 3D view about a third of the height."""
        w, h = self.width(), self.height()
        self.resizeDocks([self.model_dock], [int(min(420, max(300, 0.24 * w)))], Qt.Horizontal)
        hook = getattr(self, "fit_result_docks", None)
        if callable(hook):
            hook(w, h)

    def _save_layout(self) -> None:
        s = self.fileops.settings
        s.setValue("window/geometry", self.saveGeometry())
        s.setValue("window/state", self.saveState())
        s.sync()

    def dragEnterEvent(self, event):
        urls = event.mimeData().urls() if event.mimeData().hasUrls() else []
        if len(urls) == 1 and urls[0].isLocalFile():
            event.acceptProposedAction()

    def dropEvent(self, event):
        urls = event.mimeData().urls()
        if urls and urls[0].isLocalFile():
            event.acceptProposedAction()
            self.fileops.open_path(urls[0].toLocalFile())

    def closeEvent(self, event):
        if self._closing_done:
            event.accept()
            return
        if not self.fileops.maybe_discard("closing"):
            event.ignore()
            return
        self.fileops.timer.stop()
        self.fileops.remove_recovery()
        self._save_layout()
        self.shutdown()
        event.accept()

    def shutdown(self) -> None:
        """Release the 3D view (call once before the window goes away; closeEvent does)."""
        if self._closing_done:
            return
        self._closing_done = True
        hook = getattr(self, "before_shutdown", None)
        if callable(hook):
            hook()
        self.viewport.close_plotter()
