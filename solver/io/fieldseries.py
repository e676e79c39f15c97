"""The temperature field of a run on disk: one VTKHDF file, geometry once, temperatures per frame.

Layout (``field.vtkhdf``, VTKHDF 2.x ``UnstructuredGrid`` with a ``Steps`` group and a static
mesh, as specified in VTK's documentation "VTKHDF format specification", transient data):

    /VTKHDF  attrs Version = [2, 2], Type = "UnstructuredGrid"
      NumberOfPoints, NumberOfCells, NumberOfConnectivityIds   (one entry: the one mesh)
      Points (N, 3) float64 in mm, Connectivity, Offsets, Types (VTK_TETRA = 10)
      CellData/part_id (E,) int32                               (written once)
      PointData/temperature_c (T·N,) float32, °C                (frame k at [k·N, (k+1)·N))
      Steps  attr NSteps; Values (T,) s; PartOffsets, NumberOfParts, PointOffsets,
             CellOffsets, ConnectivityIdOffsets all 0/1 (the mesh is shared by every step);
             PointDataOffsets/temperature_c = k·N; CellDataOffsets/part_id = 0

VTK's vtkHDFReader (9.3 and later) opens it as one time series (``SetStep`` / the pipeline's
time steps); pyvista's ``pv.read`` gives step 0 and ``pv.get_reader(path).reader.SetStep(k)``
any other. The layout and the choice of no compression were measured against the alternatives
(benchmarks/field_formats.py, results in benchmarks/README.md).

:class:`FieldWriter` writes on a background thread fed by a bounded queue, so stepping does not
wait on the disk; an error on that thread comes back as a :class:`FieldWriteError` (an OSError) naming the folder
from the next :meth:`FieldWriter.__call__` or from :meth:`FieldWriter.close`.
:func:`open_field_series` reads this layout and the earlier one (``field.pvd`` + ``field/*.vtu``
with the whole mesh in every frame).
"""
from __future__ import annotations

import abc

import queue
import threading
from pathlib import Path

import numpy as np

from solver.mesh.mesher import MM
from solver.io.vtkxml import VTK_TETRA, read_pvd, read_vtu

FIELD_NAME = "temperature_c"
FIELD_FILE = "field.vtkhdf"
LEGACY_SERIES = "field.pvd"  # runs written before the VTKHDF layout
FIELDS_CHOICES = ("all", "none")
QUEUE_FRAMES = 8  # frames waiting for the disk at most (float32: 8 × 4 MB at 1M nodes)
CHUNK_VALUES = 1 << 20  # HDF5 chunk of the temperature array (4 MB)
_STOP = object()


class FieldWriteError(OSError):
    """The field file could not be written; the message names the folder and the cause."""


def _h5py():
    try:
        import h5py
    except ImportError as e:  # pragma: no cover - a dependency of the package
        raise OSError(f"the field file needs the h5py package ({e})") from None
    return h5py


class FieldWriter:
    """Streams the output fields of one run into ``out_dir/field.vtkhdf`` (``fields="all"``), or
    writes nothing (``"none"``). Call it as the recorder's field sink: ``writer(time_s, field_c)``.

    ``compression``: None (default, measured fastest for the whole run) or an HDF5 gzip level
    (1–9, with byte shuffling). Geometry goes in mm, temperatures as float32 °C.
    """

    def __init__(self, out_dir, problem, fields: str = "all", compression: int | None = None,
                 queue_frames: int = QUEUE_FRAMES):
        if fields not in FIELDS_CHOICES:
            raise ValueError(f"fields must be one of {FIELDS_CHOICES} (got {fields!r})")
        self.out_dir = Path(out_dir)
        self.fields = fields
        self.compression = compression
        self.n_frames = 0
        self.write_s = 0.0  # wall time spent on the writer thread
        self._files: list[str] = []
        self._error: BaseException | None = None
        self._closed = False
        self._thread = None
        if fields == "none":
            return
        _h5py()  # a missing package is reported now, before any solving, not from the thread
        self.n_points = int(problem.mesh.n_nodes)
        self._queue: queue.Queue = queue.Queue(maxsize=max(1, queue_frames))
        self._files.append(FIELD_FILE)
        geometry = (problem.mesh.nodes / MM, problem.mesh.tets, problem.mesh.tet_part.astype(np.int32))
        self._thread = threading.Thread(target=self._work, args=(geometry,), name="field-writer", daemon=True)
        self._thread.start()

    # ------------------------------------------------------------ caller side
    def written_files(self) -> list[str]:
        """Relative paths (to the output folder) of every file this writer wrote or is writing."""
        return list(self._files)

    def __call__(self, time_s: float, field) -> None:
        if self._thread is None:
            return
        self._raise_if_failed()
        frame = np.array(field, dtype=np.float32)  # a copy: the caller's array may change after this
        while True:  # wait for room, but notice a writer that died meanwhile
            try:
                self._queue.put((float(time_s), frame), timeout=0.5)
                break
            except queue.Full:
                self._raise_if_failed()
                self._raise_if_gone()
        self.n_frames += 1

    def close(self) -> None:
        """Wait for the queued frames to be on disk and close the file (OSError on failure)."""
        if self._closed:
            return
        self._closed = True
        if self._thread is not None:
            while self._thread.is_alive():
                try:
                    self._queue.put(_STOP, timeout=0.5)
                    break
                except queue.Full:
                    continue
            self._thread.join()
        self._raise_if_failed()

    def abort(self) -> None:
        """Stop the writer without raising (a run that failed for another reason)."""
        try:
            self.close()
        except OSError:
            pass

    def _raise_if_gone(self) -> None:
        """The writer thread ended without recording why (it must never leave the caller waiting)."""
        if self._thread is not None and not self._thread.is_alive() and self._error is None:
            self._error = RuntimeError("the writer stopped unexpectedly")
        self._raise_if_failed()

    def _raise_if_failed(self) -> None:
        e = self._error
        if e is None:
            return
        if isinstance(e, OSError) and e.strerror:
            detail = e.strerror
        else:
            detail = str(e) or type(e).__name__
        raise FieldWriteError(f"{self.out_dir}: cannot write the temperature field ({detail})")

    # ------------------------------------------------------------ writer thread
    def _work(self, geometry) -> None:
        import time

        fh = None
        try:
            h5py = _h5py()
            t0 = time.perf_counter()
            fh = h5py.File(self.out_dir / FIELD_FILE, "w")
            temp, steps = self._create(fh, *geometry)
            del geometry
            self.write_s += time.perf_counter() - t0
            times: list[float] = []
            while True:
                item = self._queue.get()
                if item is _STOP:
                    break
                t0 = time.perf_counter()
                t, frame = item
                k, n = len(times), self.n_points
                temp.resize(((k + 1) * n,))
                temp[k * n:(k + 1) * n] = frame
                times.append(t)
                self._set_steps(steps, times)
                fh.flush()  # what is on disk is a consistent series of the frames so far
                self.write_s += time.perf_counter() - t0
        except BaseException as e:  # noqa: BLE001 - handed to the stepping thread
            self._error = e
            self._drain()
        finally:
            if fh is not None:
                try:
                    fh.close()
                except Exception as e:  # noqa: BLE001
                    self._error = self._error or e

    def _drain(self) -> None:
        """After a failure: take queued frames off so the caller never blocks on a full queue."""
        while True:
            try:
                if self._queue.get(timeout=0.5) is _STOP:
                    return
            except queue.Empty:
                if self._closed:
                    return

    def _create(self, fh, points_mm, tets, part_id):
        h5py = _h5py()
        n, e = len(points_mm), len(tets)
        g = fh.create_group("VTKHDF")
        g.attrs["Version"] = np.array([2, 2], dtype=np.int64)
        kind = b"UnstructuredGrid"
        g.attrs.create("Type", kind, dtype=h5py.string_dtype("ascii", len(kind)))
        g["NumberOfPoints"] = np.array([n], dtype=np.int64)
        g["NumberOfCells"] = np.array([e], dtype=np.int64)
        g["NumberOfConnectivityIds"] = np.array([4 * e], dtype=np.int64)
        g["Points"] = np.asarray(points_mm, dtype=np.float64)
        g["Connectivity"] = np.asarray(tets, dtype=np.int64).ravel()
        g["Offsets"] = np.arange(0, 4 * e + 1, 4, dtype=np.int64)
        g["Types"] = np.full(e, VTK_TETRA, dtype=np.uint8)
        g.create_group("CellData")["part_id"] = part_id
        opts = {}
        if self.compression:
            opts = {"compression": "gzip", "compression_opts": int(self.compression), "shuffle": True}
        temp = g.create_group("PointData").create_dataset(
            FIELD_NAME, shape=(0,), maxshape=(None,), dtype=np.float32, chunks=(max(1, min(n, CHUNK_VALUES)),),
            **opts)
        steps = g.create_group("Steps")
        for name in ("Values", "PartOffsets", "NumberOfParts", "PointOffsets"):
            steps.create_dataset(name, shape=(0,), maxshape=(None,), dtype=np.float64 if name == "Values" else np.int64)
        for name in ("CellOffsets", "ConnectivityIdOffsets"):
            steps.create_dataset(name, shape=(0, 1), maxshape=(None, 1), dtype=np.int64)
        steps.create_group("PointDataOffsets").create_dataset(FIELD_NAME, shape=(0,), maxshape=(None,),
                                                              dtype=np.int64)
        steps.create_group("CellDataOffsets").create_dataset("part_id", shape=(0,), maxshape=(None,),
                                                             dtype=np.int64)
        steps.attrs["NSteps"] = np.int64(0)
        return temp, steps

    def _set_steps(self, steps, times) -> None:
        k = len(times)
        for name, ds in (("Values", steps["Values"]), ("PartOffsets", steps["PartOffsets"]),
                         ("NumberOfParts", steps["NumberOfParts"]), ("PointOffsets", steps["PointOffsets"]),
                         ("CellOffsets", steps["CellOffsets"]),
                         ("ConnectivityIdOffsets", steps["ConnectivityIdOffsets"]),
                         ("pd", steps["PointDataOffsets"][FIELD_NAME]), ("cd", steps["CellDataOffsets"]["part_id"])):
            ds.resize((k,) + ds.shape[1:])
            value = {"Values": times[-1], "NumberOfParts": 1, "pd": (k - 1) * self.n_points}.get(name, 0)
            ds[k - 1] = value
        steps.attrs["NSteps"] = np.int64(k)


class FieldSeries(abc.ABC):
    """Frames of a finished run's field: ``times`` (s), :meth:`geometry`, :meth:`field` (°C).
    One subclass per file layout (VTKHDF, and the older .pvd series)."""

    layout = ""
    file_name = ""  # the file that indexes the series, relative to the results folder

    def __init__(self, times, listed: int | None = None):
        self.times = np.asarray(times, dtype=float)
        # frames the file lists; more than len(times) means some are not all there (a truncated file)
        self.listed = len(self.times) if listed is None else int(listed)

    def __len__(self) -> int:
        return len(self.times)

    @abc.abstractmethod
    def geometry(self) -> dict:
        """points_mm (N, 3), tets (E, 4), part_id (E,) of the field's mesh."""

    @abc.abstractmethod
    def field(self, i: int) -> np.ndarray:
        """Temperature (N,) in °C at output ``i``."""

    def close(self) -> None:
        pass


class HDFFieldSeries(FieldSeries):
    """``field.vtkhdf`` (this module's layout); frames read on demand."""

    layout = "vtkhdf"
    file_name = FIELD_FILE

    def __init__(self, path):
        self.path = Path(path)
        self._fh = None
        try:
            g = self._group()
            steps = g["Steps"]
            self.n_points = int(g["NumberOfPoints"][0])
            values = np.asarray(steps["Values"][...], dtype=float)
            offsets = np.asarray(steps["PointDataOffsets"][FIELD_NAME][...], dtype=np.int64)
            temp = g["PointData"][FIELD_NAME]
            usable = int(min(len(values), len(offsets), temp.shape[0] // max(1, self.n_points)))
        except BaseException:
            self.close()  # a damaged file: do not keep it open
            raise
        self._offsets = offsets[:usable]
        super().__init__(values[:usable], listed=len(values))

    def _group(self):
        """The /VTKHDF group, opening the file (again, after :meth:`close`) when needed."""
        if self._fh is None:
            self._fh = _h5py().File(self.path, "r")
        return self._fh["VTKHDF"]

    def geometry(self) -> dict:
        g = self._group()
        conn = np.asarray(g["Connectivity"][...], dtype=np.int64)
        return {"points_mm": np.asarray(g["Points"][...], dtype=float), "tets": conn.reshape(-1, 4),
                "part_id": np.asarray(g["CellData"]["part_id"][...])}

    def field(self, i: int) -> np.ndarray:
        o = int(self._offsets[i])
        return np.asarray(self._group()["PointData"][FIELD_NAME][o:o + self.n_points], dtype=np.float32)

    def close(self) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None


class LegacyFieldSeries(FieldSeries):
    """``field.pvd`` + ``field/t_*.vtu`` (every frame a whole mesh), from runs before the VTKHDF layout."""

    layout = "pvd"
    file_name = LEGACY_SERIES

    def __init__(self, path):
        series = read_pvd(path)
        self.frame_files = [f for _, f in series]
        super().__init__([t for t, _ in series])

    def geometry(self) -> dict:
        g = read_vtu(self.frame_files[0])
        return {"points_mm": g["points"], "tets": g["tets"], "part_id": g["cell_data"].get("part_id")}

    def field(self, i: int) -> np.ndarray:
        return read_vtu(self.frame_files[i])["point_data"][FIELD_NAME]


def has_fields(folder) -> bool:
    folder = Path(folder)
    return (folder / FIELD_FILE).is_file() or (folder / LEGACY_SERIES).is_file()


def open_field_series(folder) -> FieldSeries | None:
    """The field series of a results folder (either layout), or None when the run wrote no fields."""
    folder = Path(folder)
    if (folder / FIELD_FILE).is_file():
        return HDFFieldSeries(folder / FIELD_FILE)
    if (folder / LEGACY_SERIES).is_file():
        return LegacyFieldSeries(folder / LEGACY_SERIES)
    return None
