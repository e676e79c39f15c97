"""A results folder as a unit: staging, manifest, lock, and never deleting a file that is not ours.

A run never writes into its results folder directly:

1. :meth:`RunFolder.begin` takes a lock beside the target (``.<name>.lock`` holding pid, host and
   start time; a lock whose process is gone is removed), refuses a target that holds files no run
   of ours wrote (unless ``force``), and creates a staging folder ``.<name>.staging-<pid>`` beside
   the target, on the same file system.
2. The run writes every file into the staging folder.
3. :meth:`RunFolder.commit` writes ``manifest.json`` (model hash, mesh size, frames, the size of
   every file the run wrote, finished time) and moves the staged files into place. An existing
   target (empty, holding an earlier run, or with ``force`` files of the user's) is first marked
   ``installing`` in its manifest, then the earlier run's own files (those its manifest lists)
   are removed, the new files moved in, and the final manifest written last. An absent target is
   created by one rename of the staging folder. A cut-short run never leaves a folder that reads
   as complete.

:func:`check_folder` is what every reader calls first: it refuses a folder that is incomplete,
mixed (files changed since the manifest was written), or in use, and returns a notice for a folder
written before manifests existed. Nothing here deletes a file that a manifest of ours does not list.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import socket
import time
from dataclasses import dataclass
from pathlib import Path

from solver.errors import ModelError

MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "thermgui-results"
MANIFEST_VERSION = 1
STAGING_MARK = ".thermgui-staging"  # inside a staging folder: proves the folder is ours
MAX_MANIFEST_BYTES = 64 * 1024 * 1024
HASHED_BYTES = 4 * 1024 * 1024  # files up to this size also carry a sha256 in the manifest
# names a run writes at the top of its folder (used to refuse a clash before solving)
RUN_TOP_NAMES = ("peaks.csv", "history.csv", "run.json", MANIFEST_NAME)


def _run_top_names() -> tuple:
    from solver.io.fieldseries import FIELD_FILE, LEGACY_SERIES

    return RUN_TOP_NAMES + (FIELD_FILE, LEGACY_SERIES, "field")


def lock_path(target: Path) -> Path:
    return target.parent / f".{target.name}.lock"


def staging_prefix(target: Path) -> str:
    return f".{target.name}.staging-"


def model_hash(model) -> str:
    """sha256 of the model's canonical JSON (sorted keys)."""
    text = json.dumps(model.to_json_dict(), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def _utc_now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())


def _proc_start(pid: int) -> str | None:
    """Start time of a process in clock ticks since boot (Linux), to tell a reused pid apart."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return None


def _pid_alive(pid: int, proc_start: str | None = None) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except (OverflowError, ValueError):
        return False
    if proc_start is not None:
        now = _proc_start(pid)
        if now is not None and now != proc_start:
            return False  # the pid was reused by another process
    return True


# ---------------------------------------------------------------- lock
@dataclass
class LockHolder:
    pid: int | None
    host: str
    started: str
    proc_start: str | None = None

    def describe(self) -> str:
        who = f"pid {self.pid}" if self.pid is not None else "an unknown process"
        return f"{who} on {self.host or 'an unknown host'}, started {self.started or 'at an unknown time'}"

    def alive(self) -> bool | None:
        """True/False on this host; None when the holder is on another host (cannot tell)."""
        if self.host and self.host != socket.gethostname():
            return None
        if self.pid is None:
            return False
        return _pid_alive(self.pid, self.proc_start)


def read_lock(path: Path) -> LockHolder | None:
    """The holder named in a lock file; None if there is no lock. A damaged lock reads as a dead holder."""
    try:
        raw = path.read_bytes()[:4096]
    except FileNotFoundError:
        return None
    except OSError:
        return LockHolder(None, socket.gethostname(), "")
    try:
        d = json.loads(raw)
        pid = d.get("pid")
        return LockHolder(int(pid) if isinstance(pid, int) and pid > 0 else None, str(d.get("host", "")),
                          str(d.get("started", "")), d.get("proc_start"))
    except (ValueError, AttributeError, TypeError):
        # written by a run killed between creating and filling it: stale once it is a few seconds old
        try:
            fresh = time.time() - path.stat().st_mtime < 5.0
        except OSError:
            fresh = False
        return LockHolder(os.getpid() if fresh else None, socket.gethostname(), "")


def acquire_lock(target: Path, field: str = "--out") -> Path:
    """Create the lock beside ``target``; ModelError if a live run holds it."""
    path = lock_path(target)
    me = {"pid": os.getpid(), "host": socket.gethostname(), "started": _utc_now(),
          "proc_start": _proc_start(os.getpid()), "target": str(target)}
    for _ in range(3):
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            holder = read_lock(path)
            if holder is None:
                continue
            alive = holder.alive()
            if alive is False:
                try:
                    os.unlink(path)  # ours: a lock left by a run that is gone
                except FileNotFoundError:
                    pass
                continue
            where = "on another computer, so it cannot be checked from here" if alive is None else "still running"
            raise ModelError((field, f"{target} is in use by another run ({holder.describe()}, {where}); "
                                     "wait for it to finish or choose another folder"
                                     + (f" (if that run is gone, remove {path.name})" if alive is None else "")))
        with os.fdopen(fd, "w") as fh:
            fh.write(json.dumps(me))
        return path
    raise ModelError((field, f"{target}: could not take the lock {path.name}"))


def release_lock(path: Path | None) -> None:
    if path is None:
        return
    holder = read_lock(path)
    if holder is not None and holder.pid == os.getpid():
        try:
            os.unlink(path)
        except FileNotFoundError:
            pass


# ---------------------------------------------------------------- manifest
def read_manifest(folder: Path) -> dict | None:
    """The manifest of a folder, None if it has none; ModelError if it is damaged."""
    path = Path(folder) / MANIFEST_NAME
    if not path.exists():
        return None
    try:
        if path.stat().st_size > MAX_MANIFEST_BYTES:
            raise ValueError("larger than 64 MB")
        m = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError, RecursionError) as e:
        raise ModelError(("", f"{MANIFEST_NAME} is damaged ({e}); the folder cannot be checked"), str(folder)) from None
    if not isinstance(m, dict) or m.get("format") != MANIFEST_FORMAT or not isinstance(m.get("files"), dict):
        raise ModelError(("", f"{MANIFEST_NAME} is not a results manifest of this program"), str(folder))
    return m


def legacy_listing(folder: Path) -> dict | None:
    """For a folder written before manifests: the files its run.json and field series name, as a
    manifest-like ``{"files": {...}}`` (sizes unknown); None if it is not such a folder."""
    from solver.io.fieldseries import FIELD_FILE
    from solver.io.fieldseries import LEGACY_SERIES as SERIES_NAME
    from solver.io.vtkxml import read_pvd

    folder = Path(folder)
    try:
        if (folder / "run.json").stat().st_size > MAX_MANIFEST_BYTES:
            return None
        info = json.loads((folder / "run.json").read_text(encoding="utf-8"))
        if not isinstance(info, dict) or info.get("format") != "thermgui-run":
            return None
        series = info.get("field_series", SERIES_NAME)
        series = series if isinstance(series, str) and _safe_relative(series) else SERIES_NAME
        files = ["peaks.csv", "history.csv", "run.json", series]
        if (folder / FIELD_FILE).is_file():
            files.append(FIELD_FILE)
        if (folder / series).is_file():
            for _, f in read_pvd(folder / series):
                try:
                    rel = str(Path(f).relative_to(folder))
                except ValueError:
                    continue
                if _safe_relative(rel):
                    files.append(rel)
    except Exception:  # noqa: BLE001 - unreadable: not recognised, so nothing in it is ours
        return None
    return {"state": "legacy", "files": {f: {} for f in files if (folder / f).is_file()}}


def _manifest_files(m: dict | None) -> list[str]:
    if not m:
        return []
    return [f for f in m.get("files", {}) if isinstance(f, str)]


def _file_meta(path: Path) -> dict:
    size = path.stat().st_size
    meta = {"bytes": size}
    if size <= HASHED_BYTES:
        meta["sha256"] = hashlib.sha256(path.read_bytes()).hexdigest()
    return meta


def _matches(path: Path, meta) -> str | None:
    """None if ``path`` is the file the manifest describes, else what differs."""
    try:
        size = path.stat().st_size
    except OSError:
        return "is missing"
    if not isinstance(meta, dict):
        return None
    want = meta.get("bytes")
    if isinstance(want, int) and size != want:
        how = "truncated" if size < want else "changed"
        return f"is {size:,} bytes but the run wrote {want:,}, so it was {how} after the run"
    digest = meta.get("sha256")
    if isinstance(digest, str) and size <= HASHED_BYTES:
        try:
            if hashlib.sha256(path.read_bytes()).hexdigest() != digest:
                return "was changed after the run wrote it"
        except OSError:
            return "cannot be read"
    return None


def _safe_relative(name: str) -> bool:
    p = Path(name)
    return bool(name) and not p.is_absolute() and ".." not in p.parts


def _list_files(folder: Path) -> list[str]:
    """Relative paths of every file (and symlink) below ``folder``."""
    out = []
    for root, dirs, files in os.walk(folder):
        rel = Path(root).relative_to(folder)
        for f in files:
            out.append(str(rel / f) if str(rel) != "." else f)
        for d in list(dirs):
            if os.path.islink(os.path.join(root, d)):
                out.append(str(rel / d) if str(rel) != "." else d)
                dirs.remove(d)
    return sorted(out)


def foreign_files(folder: Path) -> list[str]:
    """Files in ``folder`` that no manifest of ours lists (the user's, or an older run's)."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    try:
        m = read_manifest(folder)
    except ModelError:
        m = None
    manifest_present = m is not None
    if m is None:
        m = legacy_listing(folder)
    listed = (m or {}).get("files", {}) if isinstance(m, dict) else {}
    complete = isinstance(m, dict) and m.get("state") == "complete"
    out = []
    for f in _list_files(folder):
        if (f == MANIFEST_NAME and manifest_present) or f == STAGING_MARK:
            continue
        if f in listed and (not complete or _matches(folder / f, listed[f]) is None):
            continue  # ours, as the run wrote it (a file the user changed counts as the user's)
        out.append(f)
    return out


# ---------------------------------------------------------------- stale staging
def clean_stale_staging(target: Path) -> list[Path]:
    """Remove staging folders beside ``target`` left by runs that are gone (only folders we marked)."""
    removed = []
    parent = target.parent
    if not parent.is_dir():
        return removed
    for p in parent.glob(staging_prefix(target) + "*"):
        mark = p / STAGING_MARK
        if not p.is_dir() or p.is_symlink() or not mark.is_file():
            continue
        holder = read_lock(mark)
        if holder is not None and holder.alive() is False:
            shutil.rmtree(p, ignore_errors=True)
            removed.append(p)
    return removed


def cut_short_runs(target: Path) -> list[LockHolder]:
    """Holders of staging folders beside ``target`` (runs that are writing or were cut short)."""
    out = []
    for p in Path(target).parent.glob(staging_prefix(Path(target)) + "*"):
        holder = read_lock(p / STAGING_MARK)
        if holder is not None:
            out.append(holder)
    return out


# ---------------------------------------------------------------- the run's side
class RunFolder:
    """Staging, lock and installation of one run's results folder (see the module docstring)."""

    def __init__(self, target, force: bool = False, field: str = "--out"):
        self.target = Path(os.path.abspath(target))  # "." and "a/.." get a real name and parent
        self.force = force
        self.field = field
        self.lock: Path | None = None
        self.staging: Path | None = None
        self.kept_foreign: list[str] = []

    def begin(self) -> "RunFolder":
        """Lock, check the target and create the staging folder; ModelError (exit 2) if refused."""
        t = self.target
        if t == t.parent:
            raise ModelError((self.field, f"{t}: the root folder cannot be a results folder"))
        if t.exists() and not t.is_dir():
            raise ModelError((self.field, f"{t} exists and is not a folder"))
        if t.is_symlink():
            raise ModelError((self.field, f"{t} is a symbolic link; give the folder it points to"))
        try:
            t.parent.mkdir(parents=True, exist_ok=True)
        except OSError as e:
            raise ModelError((self.field, f"{t.parent}: cannot create the folder ({e.strerror or e})")) from None
        try:
            self.lock = acquire_lock(t, self.field)
        except OSError as e:
            raise ModelError((self.field, f"{t.parent}: cannot write here ({e.strerror or e})")) from None
        try:
            self._check_target()
            clean_stale_staging(t)
            self.staging = t.parent / f"{staging_prefix(t)}{os.getpid()}"
            if self.staging.exists():
                shutil.rmtree(self.staging)  # our own pid's: left by this very process earlier
            self.staging.mkdir()
            (self.staging / STAGING_MARK).write_text(json.dumps(
                {"pid": os.getpid(), "host": socket.gethostname(), "started": _utc_now(),
                 "proc_start": _proc_start(os.getpid()), "target": str(t)}))
        except ModelError:
            self.abort()
            raise
        except OSError as e:
            self.abort()
            raise ModelError((self.field, f"{t}: cannot prepare the results folder ({e.strerror or e})")) from None
        return self

    def _check_target(self) -> None:
        t = self.target
        if not t.is_dir():
            return
        try:
            read_manifest(t)
        except ModelError as e:
            if not self.force:
                raise ModelError((self.field, f"{t}: {e.issues[0][1]}; add --force to write beside its files "
                                              "(nothing is deleted)")) from None
        foreign = foreign_files(t)
        if not foreign:
            return
        shown = ", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if len(foreign) > 5 else "")
        if not self.force:
            raise ModelError((self.field, f"{t} holds files that no run of this program wrote ({shown}); "
                                          "choose an empty or new folder, or add --force to write beside them "
                                          "(they are never deleted)"))
        tops = set(_run_top_names())
        clash = [f for f in foreign if f in tops or f.split("/", 1)[0] in tops]
        if clash:
            raise ModelError((self.field, f"{t}: {', '.join(clash[:5])} would be overwritten by this run but "
                                          "no run of this program wrote it; move it away first "
                                          "(--force never replaces such a file)"))
        self.kept_foreign = foreign

    @property
    def write_dir(self) -> Path:
        return self.staging

    def commit(self, written: list[str], info: dict) -> Path:
        """Write the manifest and move into place. ``written``: paths relative to the staging folder
        as the writers report them; any other file found in the staging folder is listed too."""
        st = self.staging
        files = {}
        # everything in the staging folder is this run's; the writers' own lists come first
        staged = [f for f in _list_files(st) if f != STAGING_MARK]
        for rel in dict.fromkeys([*written, *staged]):
            if not _safe_relative(rel):
                raise ValueError(f"not a relative path inside the run folder: {rel!r}")
            files[rel] = _file_meta(st / rel)
        manifest = dict({"format": MANIFEST_FORMAT, "version": MANIFEST_VERSION, "state": "complete",
                         "finished_utc": _utc_now(), "writer": {"pid": os.getpid(), "host": socket.gethostname()}},
                        **info, files=files)
        text = json.dumps(manifest, indent=1, default=float) + "\n"
        _write_synced(st / MANIFEST_NAME, text)
        t = self.target
        if not t.exists():  # an existing folder, even empty, is kept (it may be someone's working folder)
            os.rename(st, t)
            try:
                (t / STAGING_MARK).unlink()  # (a kill before this leaves the marker, which readers ignore)
            except FileNotFoundError:
                pass
        else:
            self._merge_into(t, manifest, text)
            shutil.rmtree(st, ignore_errors=True)
        self.staging = None
        _fsync_dir(t.parent)
        release_lock(self.lock)
        self.lock = None
        return t

    def _merge_into(self, t: Path, manifest: dict, text: str) -> None:
        try:
            old = read_manifest(t)
        except ModelError:
            old = None
        if old is None:
            old = legacy_listing(t)
        old_files = [f for f in _manifest_files(old) if _safe_relative(f)]
        new_files = list(manifest["files"])
        # 1. mark the folder: from here until the final manifest it reads as incomplete
        marker = {"format": MANIFEST_FORMAT, "version": MANIFEST_VERSION, "state": "installing",
                  "files": {f: {} for f in dict.fromkeys(old_files + new_files)}}
        _write_synced(t / MANIFEST_NAME, json.dumps(marker) + "\n", tmp_dir=t)
        # 2. the earlier run's own files go (only those its manifest listed)
        for f in old_files:
            p = t / f
            if f not in manifest["files"] and (p.is_file() or p.is_symlink()):
                p.unlink()
        _remove_empty_dirs(t, {str(Path(f).parent) for f in old_files})
        # 3. the new files move in, 4. the final manifest last
        for f in new_files:
            dest = t / f
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.replace(self.staging / f, dest)
        _write_synced(t / MANIFEST_NAME, text, tmp_dir=t)

    def abort(self) -> None:
        """Remove the staging folder (all ours) and the lock; the target is left as it was."""
        if self.staging is not None and (self.staging / STAGING_MARK).is_file():
            shutil.rmtree(self.staging, ignore_errors=True)
        self.staging = None
        release_lock(self.lock)
        self.lock = None


def _write_synced(path: Path, text: str, tmp_dir: Path | None = None) -> None:
    tmp = (tmp_dir or path.parent) / f".{path.name}.tmp-{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _fsync_dir(d: Path) -> None:
    try:
        fd = os.open(d, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _remove_empty_dirs(root: Path, rels) -> None:
    for rel in sorted(rels, key=len, reverse=True):
        if rel in ("", "."):
            continue
        p = root / rel
        while p != root and p.is_dir() and not p.is_symlink():
            try:
                p.rmdir()  # only if empty
            except OSError:
                break
            p = p.parent


def record_edits(folder, names) -> None:
    """Accept hand-edited files of a complete results folder as the run's own: their size and
    sha256 in ``manifest.json`` are written again, so the folder opens without "mixed or damaged"
    and a later run into it may replace them (they are no longer the user's).

    Without this an edited run file counts as the user's (docs/reliability.md, "A file the run
    wrote and the user changed"). For tools and tests that derive a folder from a real run; the app
    and ``thermgui solve`` never call it. ModelError if the folder has no complete manifest or a
    name is not a file inside it."""
    folder = Path(folder)
    m = read_manifest(folder)
    if m is None or m.get("state") != "complete":
        raise ModelError(("", f"no complete {MANIFEST_NAME}: edits cannot be recorded"), str(folder))
    for rel in names:
        rel = str(rel)
        if not _safe_relative(rel) or not (folder / rel).is_file():
            raise ModelError(("", f"{rel!r} is not a file inside the folder"), str(folder))
        m["files"][rel] = _file_meta(folder / rel)
    _write_synced(folder / MANIFEST_NAME, json.dumps(m, indent=1) + "\n", tmp_dir=folder)


# ---------------------------------------------------------------- the reader's side
def check_folder(folder) -> str | None:
    """Check a results folder before reading it. Returns a notice (or None); ModelError if refused.

    Refused: a folder being written or cut short ("incomplete"), a manifest whose files are missing
    or changed in size ("mixed or damaged"). Folders written before manifests: a notice.
    """
    src = str(folder)
    folder = Path(os.path.abspath(folder))
    staged = cut_short_runs(folder) if folder != folder.parent else []
    if not folder.is_dir():
        if folder.exists():
            raise ModelError(("", "is a file, not a results folder"), src)
        if staged:
            running = [h for h in staged if h.alive() is not False]
            if running:
                raise ModelError(("", f"incomplete: a run is still writing these results ({running[0].describe()})"), src)
            raise ModelError(("", f"incomplete: the run that was writing these results was cut short "
                                  f"({staged[0].describe()}); run the model again"), src)
        raise ModelError(("", "not found"), src)
    m = read_manifest(folder)
    if m is None:
        holder = read_lock(lock_path(folder))
        live = [h for h in staged if h.alive() is not False]
        if (folder / "run.json").is_file() and not live:
            from solver.io.fieldseries import FIELD_FILE, LEGACY_SERIES

            older = (folder / LEGACY_SERIES).is_file() and not (folder / FIELD_FILE).is_file()
            return (f"{folder.name} was written before results folders carried a manifest"
                    + (" (its field is in the earlier field.pvd layout)" if older else "")
                    + "; it cannot be checked for files of another run")
        if live or (holder is not None and holder.alive() is not False):
            who = (live[0] if live else holder).describe()
            raise ModelError(("", f"incomplete: a run is still writing these results ({who})"), src)
        what = ", ".join(_list_files(folder)[:5]) or "nothing"
        if staged:
            raise ModelError(("", f"incomplete: the run writing these results was cut short ({staged[0].describe()}); "
                                  f"the folder holds {what}"), src)
        raise ModelError(("", f"not a results folder: no {MANIFEST_NAME} and no run.json (it holds {what})"), src)
    if m.get("state") != "complete":
        raise ModelError(("", "incomplete: a run was cut short while moving its results into this folder; "
                              "run the model again"), src)
    problems = []
    for rel, meta in m["files"].items():
        p = folder / rel
        if not _safe_relative(rel):
            problems.append(f"{rel!r} is not inside the folder")
            continue
        why = _matches(p, meta)
        if why:
            problems.append(f"{rel} {why}")
    if problems:
        more = f" and {len(problems) - 3} more" if len(problems) > 3 else ""
        changed = any(not p.endswith(("is missing", "is not inside the folder")) for p in problems)
        hint = ("; a run file changed afterwards counts as yours and is never replaced: move it out of the "
                "folder and run the model again" if changed else "; run the model again")
        raise ModelError(("", "mixed or damaged: the files no longer match the run that wrote them ("
                              + "; ".join(problems[:3]) + more + ")" + hint), src)
    return None
