"""New / open / save / save as, recent files, the unsaved-changes prompt and crash recovery.

Saving goes through :func:`solver.model.modelfile.save_model` (temporary file + rename). While the
model has unsaved changes, a timer writes it every ``autosave_s`` seconds to a recovery file
in the app's state folder; a normal save, "discard" or a clean exit deletes it. When a model
is opened and a recovery file for it (or for an untitled model) is found, the user is asked
whether to restore it.
"""
from __future__ import annotations

import hashlib
import json
import os
import itertools
import re
import time
from pathlib import Path

from PySide6.QtCore import QObject, QSettings, QStandardPaths, QTimer, Signal

from solver.errors import ModelError
from solver.model.modelfile import clean_stale_temps, load_model, parse_model, save_model
from solver.io.runfolder import is_run_folder, load_run

from .document import blank_model
from .samples import SAMPLES_DIR

RECENT_KEY = "files/recent"
MAX_RECENT = 8
RECOVERY_FORMAT = "thermgui-recovery"
DEFAULT_AUTOSAVE_S = 60


def state_dir() -> Path:
    """Folder for settings and recovery files: $THERMGUI_STATE_DIR, else the platform's app data folder."""
    env = os.environ.get("THERMGUI_STATE_DIR")
    if env:
        return Path(env)
    loc = QStandardPaths.writableLocation(QStandardPaths.AppDataLocation)
    return Path(loc) if loc else Path.home() / ".thermgui"


def display_path(path) -> str:
    """A path as people read it: the home folder as ``~`` (the full path goes in tooltips)."""
    p = Path(path)
    try:
        return "~/" + str(p.resolve().relative_to(Path.home().resolve()))
    except (ValueError, OSError, RuntimeError):
        return str(p)


def is_bundled_sample(path) -> bool:
    """True for a model file in the samples folder shipped with the program."""

    try:
        return Path(path).resolve().parent == SAMPLES_DIR.resolve()
    except OSError:
        return False


def open_settings() -> QSettings:
    d = state_dir()
    d.mkdir(parents=True, exist_ok=True)
    return QSettings(str(d / "settings.ini"), QSettings.IniFormat)


def recovery_file(model_path: Path | None, folder: Path | None = None, untitled_key: str = "untitled") -> Path:
    """Recovery file of a model path (one per file); an untitled model's is keyed by its window."""
    folder = folder or state_dir() / "recovery"
    if model_path is None:
        key = untitled_key
    else:
        full = str(Path(model_path).resolve())
        key = Path(model_path).stem[:40] + "-" + hashlib.sha1(full.encode()).hexdigest()[:12]
    return folder / f"{key}.recovery.json"


_WINDOWS = itertools.count(1)


def _untitled_key_alive(name: str) -> bool:
    """True if an ``untitled-<pid>-<n>`` recovery file belongs to a process that is still running."""
    m = re.match(r"^untitled-(\d+)-\d+\.recovery\.json$", name)
    if not m:
        return False
    try:
        os.kill(int(m.group(1)), 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return True
    return True


def _write_atomic(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".~{path.name}.{os.getpid()}.tmp"  # removed by clean_stale_temps after a kill
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


class FileOps(QObject):
    """File handling for one window (needs ``window.document`` and ``window.prompts``)."""

    recentChanged = Signal()

    def __init__(self, window, settings: QSettings | None = None, recovery_dir: Path | None = None,
                 autosave_s: float = DEFAULT_AUTOSAVE_S):
        super().__init__(window)
        self.window = window
        self.settings = settings if settings is not None else open_settings()
        self.recovery_dir = Path(recovery_dir) if recovery_dir else state_dir() / "recovery"
        self.untitled_key = f"untitled-{os.getpid()}-{next(_WINDOWS)}"  # one recovery file per window
        clean_stale_temps(self.recovery_dir)
        self._autosaved_index = None
        self.timer = QTimer(self)
        self.timer.timeout.connect(self.autosave)
        self.set_autosave_interval(autosave_s)

    @property
    def doc(self):
        return self.window.document

    @property
    def prompts(self):
        return self.window.prompts

    # ------------------------------------------------------------ recent files
    def recent_files(self) -> list[str]:
        v = self.settings.value(RECENT_KEY, [])
        if isinstance(v, str):
            v = [v]
        return [str(x) for x in (v or [])]

    def _remember(self, path: Path) -> None:
        full = str(Path(path).resolve())
        items = [full] + [p for p in self.recent_files() if p != full]
        self.settings.setValue(RECENT_KEY, items[:MAX_RECENT])
        self.settings.sync()
        self.recentChanged.emit()

    def _forget(self, path: Path) -> None:
        full = str(Path(path).resolve())
        items = self.recent_files()
        if full in items:
            self.settings.setValue(RECENT_KEY, [p for p in items if p != full])
            self.recentChanged.emit()

    def clear_recent(self) -> None:
        self.settings.setValue(RECENT_KEY, [])
        self.recentChanged.emit()

    # ------------------------------------------------------------ unsaved changes
    def maybe_discard(self, doing: str = "continuing") -> bool:
        """True when it is fine to drop the current model (saved, or the user chose so)."""
        if not self.doc.dirty:
            return True
        answer = self.prompts.ask("Unsaved changes",
                                  f"{self.doc.display_name} has changes that are not saved.\n"
                                  f"Save them before {doing}?", ("save", "discard", "cancel"))
        if answer == "save":
            return self.save()
        if answer == "discard":
            self.remove_recovery()
            return True
        return False

    # ------------------------------------------------------------ commands
    def new_file(self) -> bool:
        if not self.maybe_discard("starting a new model"):
            return False
        self.doc.reset(blank_model(), None)
        return True

    def open_dialog(self) -> bool:
        if not self.maybe_discard("opening another model"):
            return False
        start = str(self.doc.path.parent) if self.doc.path else ""
        path = self.prompts.open_path("Open model", start)
        return self.open_path(path, ask_first=False) if path else False

    def open_path(self, path, ask_first: bool = True, offer_recovery: bool = True) -> bool:
        """Open a model file or a results folder. A bad file is reported and nothing changes."""
        path = Path(path)
        if ask_first and not self.maybe_discard("opening another model"):
            return False
        template = None
        results = None
        try:
            if path.is_dir() or is_run_folder(path):
                from .runresults.store import ResultsStore

                run = load_run(path)
                model = parse_model(run.model_dict, str(path / "run.json"))
                results = (run, ResultsStore.from_finished(run))  # every frame read before anything changes
                model_path = None
            else:
                model = load_model(path)
                model_path = path
                if is_bundled_sample(path):
                    # open a copy: saving asks where, and runs are not written into the program's folder
                    model_path, template = None, path.name
        except ModelError as e:
            self.prompts.error("Cannot open model",
                               f"{path} could not be opened; nothing was changed.\n\n{e.describe()}")
            if not path.exists():
                self._forget(path)
            return False
        except (Exception, RecursionError) as e:  # damaged in a way no check foresaw: a message, never a traceback
            self.prompts.error("Cannot open model", f"{path} could not be opened; nothing was changed.\n\n"
                                                    f"{path}: damaged or unreadable ({type(e).__name__}: {e})")
            return False
        if model_path is not None:
            clean_stale_temps(Path(model_path).resolve().parent)
        self.doc.reset(model, model_path, template_name=template)
        if model_path is not None:
            self._remember(model_path)
        if offer_recovery:
            self.offer_recovery()
        if results is not None and hasattr(self.window, "open_results"):
            self.window.open_results(path, loaded=results)
        return True

    def save(self) -> bool:
        if self.doc.path is None:
            return self.save_as()
        return self.save_to(self.doc.path)

    def save_as(self) -> bool:
        start = str(self.doc.path) if self.doc.path else (self.doc.template_name or "untitled.json")
        path = self.prompts.save_path("Save model as", start)
        return self.save_to(Path(path)) if path else False

    def save_to(self, path: Path) -> bool:
        path = Path(path)
        old_recovery = recovery_file(self.doc.path, self.recovery_dir)
        try:
            save_model(self.doc.model, path)
        except OSError as e:
            self.prompts.error("Cannot save", f"{path} could not be written ({e.strerror or e}); "
                                              "your changes are still open here.")
            return False
        if old_recovery.exists():
            old_recovery.unlink()
        self.doc.mark_saved(path)
        self._remember(path)
        self._autosaved_index = None
        return True

    # ------------------------------------------------------------ autosave and recovery
    def set_autosave_interval(self, seconds: float) -> None:
        self.timer.stop()
        if seconds and seconds > 0:
            self.timer.start(int(seconds * 1000))

    def recovery_path(self) -> Path:
        return recovery_file(self.doc.path, self.recovery_dir, self.untitled_key)

    def autosave(self) -> Path | None:
        """Write the unsaved model to its recovery file (only when it changed since the last one)."""
        if not self.doc.dirty:
            return None
        index = (id(self.doc.model), self.doc.undo_stack.index())
        target = self.recovery_path()
        if index == self._autosaved_index and target.exists():
            return None
        payload = {"format": RECOVERY_FORMAT, "version": 1,
                   "model_path": str(self.doc.path.resolve()) if self.doc.path else None,
                   "saved_at": time.strftime("%Y-%m-%d %H:%M:%S"), "model": self.doc.model_dict()}
        try:
            _write_atomic(target, json.dumps(payload, indent=1))
        except OSError:
            return None  # autosave is a safety net; a failed one must not interrupt work
        self._autosaved_index = index
        return target

    def remove_recovery(self) -> None:
        p = self.recovery_path()
        if p.exists():
            p.unlink()

    def offer_recovery(self, untitled: bool = False) -> bool:
        """If a recovery file for the open model (or, with ``untitled``, for an untitled model)
        exists, ask to restore it. True if restored."""
        p = self._untitled_recovery() if untitled else self.recovery_path()
        if p is None or not p.exists():
            return False
        try:
            if p.stat().st_size > 64 * 1024 * 1024:
                raise ValueError("larger than 64 MB")
            payload = json.loads(p.read_text(encoding="utf-8"))
            model = parse_model(payload["model"], str(p))
            when = payload.get("saved_at", "an earlier session")
        except (OSError, ValueError, KeyError, TypeError, AttributeError, RecursionError, ModelError) as e:
            self.prompts.error("Recovery file unusable", f"Unsaved changes were kept in {p}, but that file "
                                                         f"cannot be read:\n\n{e}\n\nIt is left in place.")
            return False
        name = "an untitled model" if untitled else self.doc.display_name
        answer = self.prompts.ask("Restore unsaved changes?",
                                  f"thermgui kept unsaved changes to {name} from {when}, "
                                  f"probably from a session that ended unexpectedly.\n\nRestore them? "
                                  f"(Choosing No deletes the kept copy.)", ("yes", "no"))
        if answer != "yes":
            p.unlink()
            return False
        self.doc.reset(model, None if untitled else self.doc.path, recovered=True)
        if untitled and p != self.recovery_path():
            try:
                os.replace(p, self.recovery_path())  # this window now keeps it (another window may take another)
            except OSError:
                pass
        return True

    def _untitled_recovery(self) -> Path | None:
        """The newest untitled recovery file that no running window owns (None if there is none)."""
        try:
            found = [p for p in self.recovery_dir.glob("untitled*.recovery.json")
                     if p.name != self.recovery_path().name and not _untitled_key_alive(p.name)]
            return max(found, key=lambda p: p.stat().st_mtime) if found else None
        except OSError:
            return None
