"""Files a GIS, a CAD package or a spreadsheet opens: GeoJSON, GeoPackage, CSV, JSON.

Every writer here goes through :func:`atomic_path`: the file is written under a
temporary name in the destination folder and renamed over the final name only when it
is complete, so a crash never leaves half a file behind.  :class:`OutputSet` does the
same for a whole folder of results: a run leaves either the complete set or nothing.

The reach raster: :func:`write_reach_geotiff`.

Conventions
-----------
- Floats are written with fixed rules (rounded, shortest round-trip repr in JSON; fixed
  decimals in CSV) and no timestamps, so the same inputs give byte-identical files:
  GeoJSON, CSV, JSON, and also the GeoPackage (its ``last_change`` stamps come from
  :func:`gpkg_timestamp`, not the clock) and the SVG figures written inside
  :func:`reproducible_figures` (fixed clip-path ids).
- Non-finite numbers (``inf`` for "no limit", ``NaN`` after a stall) become JSON
  ``null`` and empty CSV cells, so every file stays valid for strict readers.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import json
import math
import os
import shutil
import tempfile
import threading
import uuid
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from .caution import CAUTION
from .errors import FallwayIOError, OutputExistsError, ParameterError

__all__ = [
    "RESULT_FILES",
    "OutputSet",
    "atomic_path",
    "atomic_write",
    "abort_active_outputs",
    "crs_label",
    "geojson_properties",
    "profile_flags",
    "summary_document",
    "to_jsonable",
    "write_profile_csv",
    "write_stations_csv",
    "write_route_geojson",
    "write_route_gpkg",
    "write_summary_json",
    "gpkg_timestamp",
    "reproducible_figures",
]

#: File names a route run writes into its output folder.  :class:`OutputSet` refuses to
#: write over any of them unless asked to overwrite.
RESULT_FILES = (
    "route.geojson",
    "route.gpkg",
    "route.dxf",
    "profile.csv",
    "stations.csv",
    "summary.json",
    "map.png",
    "map.svg",
    "profile.png",
    "profile.svg",
    "report.html",
    "scenario.toml",
    "reach.tif",
    "comparison.csv",
    "comparison.png",
    "comparison.svg",
    "run.json",
)

#: Decimal places of longitude/latitude in GeoJSON (1e-7 degree is about 1 cm, the
#: precision RFC 7946 §11.2 suggests as plenty: 6 decimals are about 10 cm).
GEOJSON_LONLAT_DECIMALS = 7
#: Summary fields holding map coordinates, and their names in the WGS 84 GeoJSON.
_LONLAT_FIELDS = {"start_xyz": "start_lon_lat_z", "end_xyz": "end_lon_lat_z", "via_xy": "via_lon_lat",
                  "start_given_xy": "start_given_lon_lat", "end_given_xy": "end_given_lon_lat"}
#: Decimal places of heights in GeoJSON (millimetres).
GEOJSON_Z_DECIMALS = 3

_PROFILE_COLUMNS = ("station_m", "x", "y", "z_ground", "z_line", "grade", "speed_m_s",
                    "time_s", "normal_ratio", "flags")


# --------------------------------------------------------------------------- atomic files

# below this much free space a failed write is put down to the full disk (a route's
# GeoPackage alone takes about 120 kB)
_LOW_SPACE_BYTES = 1 << 20


def _space_problem(folder) -> str | None:
    """Why the folder's filesystem takes no more data (full, quota, file size limit), or None.

    GDAL's drivers often report a full disk as a follow-on error (SQLite's "no such
    table: gpkg_contents"), so after such a failure the folder is checked here: its free
    space, then a small probe write, whose errno names the cause.
    """
    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return None
    if free < _LOW_SPACE_BYTES:
        return f"no space left on device ({free // 1024} kB free)"
    probe = Path(folder) / f".space-probe.{uuid.uuid4().hex[:12]}.tmp"
    try:
        with open(probe, "wb") as fh:
            fh.write(b"\0" * (256 << 10))
            fh.flush()
            os.fsync(fh.fileno())
    except OSError as err:
        if err.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
            return (err.strerror or "no space left on device").lower()
        return None
    finally:
        with contextlib.suppress(OSError):
            probe.unlink()
    return None


def _gdal_failure(folder, err: BaseException) -> str:
    """GDAL's first message line, or the disk problem behind it when there is one."""
    space = _space_problem(folder)
    if space is not None:
        return f"{space}; free some space or choose another output folder"
    text = str(err).strip()
    return text.splitlines()[0] if text else type(err).__name__


def _io_error(action: str, path, err: OSError) -> FallwayIOError:
    reason = err.strerror or type(err).__name__
    return FallwayIOError(f"cannot {action} {os.fspath(path)}: {reason}; "
                          "choose another output folder or fix its permissions")


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it over ``path`` on success.

    The temporary name keeps the suffix of ``path`` (some writers pick their format from
    it).  On any exception, KeyboardInterrupt included, the temporary file is removed
    and ``path`` is left as it was.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_path(d / "a.txt") as tmp:
    ...     _ = tmp.write_text("done")
    >>> (d / "a.txt").read_text(), sorted(p.name for p in d.iterdir())
    ('done', ['a.txt'])
    """
    path = Path(path)
    folder = path.parent
    if not folder.is_dir():
        raise FallwayIOError(f"cannot write {path}: folder {folder} does not exist; create it first")
    tmp = folder / f".{path.stem}.{uuid.uuid4().hex[:12]}.tmp{path.suffix}"
    try:
        yield tmp
        if not tmp.exists():
            raise FallwayIOError(f"nothing was written to {path}")
        os.replace(tmp, path)
    except OSError as err:
        _remove_quietly(tmp)
        if isinstance(err, FallwayIOError):
            raise
        raise _io_error("write", path, err) from err
    except BaseException:
        _remove_quietly(tmp)
        raise


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike, mode: str = "w", *, encoding: str = "utf-8",
                 newline: str | None = "") -> Iterator[Any]:
    """Open a file for writing that appears under ``path`` only once it is complete.

    Parameters
    ----------
    path : path-like
        Final file name.
    mode : {"w", "wb"}
        Text or binary.
    encoding, newline
        For text mode; ``newline=""`` writes line ends exactly as given.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "b.txt"
    >>> with atomic_write(p) as f:
    ...     _ = f.write("x\\n")
    >>> p.read_bytes()
    b'x\\n'
    """
    if mode not in ("w", "wb"):
        raise ParameterError(f"mode must be 'w' or 'wb', got {mode!r}")
    with atomic_path(path) as tmp:
        if mode == "wb":
            f = open(tmp, "wb")
        else:
            f = open(tmp, "w", encoding=encoding, newline=newline)
        with f:
            yield f
            f.flush()
            os.fsync(f.fileno())


#: Output sets inside their ``with`` block, so an interrupt handler running in another
#: thread can remove their working folders (:func:`abort_active_outputs`).  The lock is
#: held while a set creates its folders and while it moves its files into place, so an
#: abort never splits either.
_ACTIVE_LOCK = threading.RLock()
_ACTIVE: dict[int, "OutputSet"] = {}


def abort_active_outputs() -> None:
    """Remove the working folders of every output set still being written.

    For an interrupt handler that ends the process at once (the search may be deep in
    compiled code): it waits for a commit in progress to finish, so each output folder
    is left either with the complete new set or exactly as it was.
    """
    with _ACTIVE_LOCK:
        for outs in list(_ACTIVE.values()):
            outs._abort()


def _remove_quietly(path: Path) -> None:
    """Remove a file or a folder tree of our own making; a missing one is fine."""
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink()
    except FileNotFoundError:
        pass
    except OSError:
        pass


def _lexists(path: Path) -> bool:
    return os.path.lexists(path)


class OutputSet:
    """A command's set of results in a folder that changes all at once, or not at all.

    The set is the command's own result names: files (``result_names``) and, for a
    batch, folders (``result_dirs``).  Nothing else in ``out_dir`` -- the user's files,
    another command's results -- is ever moved, replaced or removed.

    How it works:

    1. **Write.**  Entering the block creates ``out_dir`` if needed (and remembers every
       folder it created, ``a``, ``a/b`` and ``a/b/c``) and a hidden working folder
       ``.fallway-XXXX`` inside it (the same filesystem, so every move below is a
       rename).  Writers write to :meth:`path`, inside the working folder.
    2. **Commit** (leaving the block normally), holding a lock that interrupt handlers
       wait for: (a) every result of this command already in ``out_dir`` -- all of its
       result names, also those this run does not write, so no stale file of an
       earlier run stays beside the new ones -- is renamed into a backup folder
       ``.fallway-old-XXXX``; (b) each new file is renamed into place; (c) the backup
       folder is removed.  If any rename fails, the renames already done are undone in
       reverse order (new files back into the working folder, old files back from the
       backup) and the error names the file; only if an undo fails too is the backup
       kept, and the error says where.  Without ``overwrite`` step (a) is empty: an
       earlier result is refused on entry (before any work) and again at commit.
    3. **Abort** (an exception, KeyboardInterrupt, or :func:`abort_active_outputs`
       from a signal handler): the working folder is removed, and so is every folder
       the set created, if it is empty.

    So whatever ends the run -- success, an error, Ctrl-C, SIGTERM, SIGHUP -- the
    folder holds either the complete new set or exactly the old one.  A result name
    that is a folder (``report.html/``) is refused on entry: it is not a result file.

    Why not write the new set into a sibling folder and swap the two?  A swap replaces
    the folder itself, so every file the command does not write (the user's notes,
    another command's results, files another process is writing) would have to be
    moved across first and back on failure; the folder would also lose its identity
    -- a shell standing in it, a symbolic link or a mount point named ``--out``, its
    owner and permissions -- and the parent folder would have to be writable.  The
    per-name renames above touch only the command's own names.  The price is a window
    of a few renames during which another program listing the folder can see a mix;
    a process killed outright (SIGKILL, power loss) inside that window leaves the old
    files in ``.fallway-old-XXXX``.

    Parameters
    ----------
    out_dir : path-like
        Destination folder (created if missing, with its parents).
    overwrite : bool
        Replace earlier results; otherwise refuse with :class:`OutputExistsError`.
    result_names : sequence of str
        File names that count as this command's results (default :data:`RESULT_FILES`).
    result_dirs : sequence of str
        Folder names that count as results (a batch's run folders).
    make_parents : bool
        Create missing parent folders of ``out_dir`` (False: only ``out_dir`` itself,
        so a set inside another set's working folder fails once that is gone).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp()) / "run"
    >>> with OutputSet(d, result_names=("summary.json", "route.geojson")) as out:
    ...     _ = out.path("summary.json").write_text("{}")
    >>> sorted(p.name for p in d.iterdir())
    ['summary.json']
    >>> OutputSet(d).__enter__()  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    fallway.errors.OutputExistsError: ... already holds summary.json; pass --overwrite to replace it or choose another folder
    """

    def __init__(self, out_dir: str | os.PathLike, overwrite: bool = False,
                 result_names: tuple[str, ...] | list[str] = RESULT_FILES, *,
                 result_dirs: tuple[str, ...] | list[str] = (), make_parents: bool = True) -> None:
        self.out_dir = Path(out_dir)
        self.overwrite = bool(overwrite)
        self.result_names = tuple(result_names)
        self.result_dirs = tuple(result_dirs)
        for n in self.result_names + self.result_dirs:
            _check_plain_name(n)
        self.make_parents = bool(make_parents)
        self.tmp_dir: Path | None = None
        self._created: list[Path] = []
        self._names: list[str] = []
        self._optional: set[str] = set()

    # -- helpers
    def existing(self) -> list[str]:
        """This command's result names already present in ``out_dir``."""
        if not self.out_dir.is_dir():
            return []
        return [n for n in self.result_names + self.result_dirs if _lexists(self.out_dir / n)]

    def _refuse(self, names) -> OutputExistsError:
        names = list(names)
        what = ", ".join(names)
        it = "it" if len(names) == 1 else "them"
        return OutputExistsError(f"{self.out_dir} already holds {what}; pass --overwrite to replace "
                                 f"{it} or choose another folder")

    def _check_kinds(self) -> None:
        """Refuse a result file name that is a folder, or a result folder name that is a file."""
        for n in self.result_names:
            p = self.out_dir / n
            if p.is_dir():
                raise FallwayIOError(f"{p} is a folder, not a result file; move or rename it (nothing was "
                                     "changed)")
        for n in self.result_dirs:
            p = self.out_dir / n
            if _lexists(p) and not p.is_dir():
                raise FallwayIOError(f"{p} is a file where a result folder goes; move or rename it (nothing was "
                                     "changed)")

    def path(self, name: str, *, optional: bool = False) -> Path:
        """Where to write the result ``name`` during the run (inside the working folder).

        ``optional``: the result may end up not written (a batch run that failed); it is
        then left out of the commit instead of being an error.
        """
        if self.tmp_dir is None:
            raise FallwayIOError("OutputSet.path() is only available inside the 'with' block")
        _check_plain_name(name)
        if name not in self.result_names and name not in self.result_dirs:
            raise ParameterError(f"{name!r} is not one of this output set's result names")
        if name not in self._names:
            self._names.append(name)
        if optional:
            self._optional.add(name)
        else:
            self._optional.discard(name)
        return self.tmp_dir / name

    # -- context manager
    def __enter__(self) -> "OutputSet":
        if _lexists(self.out_dir) and not self.out_dir.is_dir():
            raise FallwayIOError(f"cannot write results to {self.out_dir}: it is a file, not a folder; "
                                 "choose another output folder")
        self._check_kinds()
        if not self.overwrite:
            present = self.existing()
            if present:
                raise self._refuse(present)
        with _ACTIVE_LOCK:  # registered first: an abort from now on removes what was created
            _ACTIVE[id(self)] = self
            try:
                missing = []
                p = self.out_dir
                while not _lexists(p):
                    missing.append(p)
                    if p.parent == p:
                        break
                    p = p.parent
                if len(missing) > 1 and not self.make_parents:
                    raise FileNotFoundError(errno.ENOENT, "its parent folder does not exist", str(self.out_dir))
                for d in reversed(missing):
                    d.mkdir()
                    self._created.insert(0, d)
                self.tmp_dir = Path(tempfile.mkdtemp(prefix=".fallway-", dir=self.out_dir))
            except OSError as err:
                self._abort()
                raise _io_error("write results to", self.out_dir, err) from err
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        with _ACTIVE_LOCK:
            if self.tmp_dir is None:  # aborted from outside (interrupt handler)
                _ACTIVE.pop(id(self), None)
                return False
            if exc_type is not None:
                self._name_final_paths(exc)
                self._abort()
                return False
            try:
                self._commit()
            except BaseException:
                self._abort()
                raise
            _remove_quietly(self.tmp_dir)
            self.tmp_dir = None
            _ACTIVE.pop(id(self), None)
        return False

    def _name_final_paths(self, exc) -> None:
        """A writer's error names its file in the working folder: name it where it was to go."""
        from .errors import FallwayError

        if isinstance(exc, FallwayError) and self.tmp_dir is not None and exc.args and isinstance(exc.args[0], str):
            exc.args = (exc.args[0].replace(str(self.tmp_dir) + os.sep, str(self.out_dir) + os.sep),
                        *exc.args[1:])

    def _abort(self) -> None:
        _ACTIVE.pop(id(self), None)
        if self.tmp_dir is not None:
            # renamed first: a writer still running in another thread (the abort may come
            # from a signal handler) can then add nothing more to it, so it goes completely
            doomed = self.tmp_dir.with_name(self.tmp_dir.name + "-aborted")
            try:
                os.rename(self.tmp_dir, doomed)
            except OSError:
                doomed = self.tmp_dir
            _remove_quietly(doomed)
            self.tmp_dir = None
        for d in self._created:  # deepest first; a folder someone else filled meanwhile stays
            with contextlib.suppress(OSError):
                d.rmdir()
        self._created = []

    def _commit(self) -> None:
        assert self.tmp_dir is not None
        tmp, out = self.tmp_dir, self.out_dir
        written = [n for n in self._names if _lexists(tmp / n)]
        missing = [n for n in self._names if n not in written and n not in self._optional]
        if missing:
            raise FallwayIOError(f"results were not written: {', '.join(missing)}; nothing was changed in {out}")
        self._check_kinds()
        present = self.existing()
        if not self.overwrite:
            clash = [n for n in written if n in present]
            if clash:
                raise self._refuse(clash)
        old = present if self.overwrite else []
        backup: Path | None = None
        moved: list[str] = []
        placed: list[str] = []
        current = None
        try:
            if old:
                backup = Path(tempfile.mkdtemp(prefix=".fallway-old-", dir=out))
                for n in old:
                    current = n
                    os.replace(out / n, backup / n)
                    moved.append(n)
            for n in written:
                current = n
                os.replace(tmp / n, out / n)
                placed.append(n)
        except BaseException as err:
            self._undo(placed, moved, backup, err)
            if isinstance(err, OSError):
                reason = err.strerror or type(err).__name__
                raise FallwayIOError(f"cannot put {current} into {out}: {reason}; the earlier results were "
                                     "left as they were") from err
            raise
        if backup is not None:
            _remove_quietly(backup)
        self._created = []  # the folders now hold results: they stay

    def _undo(self, placed, moved, backup, cause) -> None:
        """Reverse a commit's renames: new files back to the working folder, old ones back."""
        assert self.tmp_dir is not None
        failed = []
        for n in reversed(placed):
            try:
                os.replace(self.out_dir / n, self.tmp_dir / n)
            except OSError:
                failed.append(n)
        for n in reversed(moved):
            try:
                os.replace(backup / n, self.out_dir / n)
            except OSError:
                failed.append(n)
        if failed:
            raise FallwayIOError(f"replacing results in {self.out_dir} failed and could not be undone for "
                                 f"{', '.join(failed)}; the earlier results are in {backup}") from cause
        if backup is not None:
            _remove_quietly(backup)


def _check_plain_name(name: str) -> None:
    if not isinstance(name, str) or not name or Path(name).name != name or name.startswith(".") \
            or "/" in name or "\\" in name or "\0" in name:
        raise ParameterError(f"result name must be a plain file name, got {name!r}")


# --------------------------------------------------------------------------- small helpers

def to_jsonable(obj: Any) -> Any:
    """Plain JSON types for summaries: numpy scalars and arrays, tuples, dataclasses.

    Non-finite floats become ``None`` (JSON ``null``).

    Examples
    --------
    >>> import numpy as np
    >>> to_jsonable({"a": np.float64(1.5), "b": (1, float("inf")), "c": np.arange(2)})
    {'a': 1.5, 'b': [1, None], 'c': [0, 1]}
    """
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: to_jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return str(obj)


def _pyproj_crs(crs):
    import pyproj

    if crs is None:
        raise ParameterError("the terrain has no CRS; assign one to the DEM (e.g. gdal_edit.py -a_srs EPSG:...)")
    try:
        return pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as err:
        raise ParameterError(f"cannot interpret the CRS {crs!r}: {err}") from err


def crs_label(crs) -> str:
    """``"EPSG:n"`` when the CRS has an EPSG code, otherwise its WKT.

    Examples
    --------
    >>> crs_label("EPSG:32633")
    'EPSG:32633'
    """
    c = _pyproj_crs(crs)
    code = c.to_epsg()
    if code is not None:
        return f"EPSG:{code}"
    return c.to_wkt()


def _route_points(route) -> np.ndarray:
    pts = np.asarray(route.profile.points if route.profile is not None else route.line, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 3 or len(pts) < 2:
        raise ParameterError(f"a route line must be an (N, 3) array with N >= 2, got shape {pts.shape}")
    return pts


def _nearest_vertices(station_m: np.ndarray, stations) -> np.ndarray:
    stations = np.atleast_1d(np.asarray(stations, dtype=float))
    stations = stations[np.isfinite(stations)]
    if stations.size == 0 or station_m.size == 0:
        return np.zeros(0, dtype=int)
    idx = np.searchsorted(station_m, stations)
    idx = np.clip(idx, 1, len(station_m) - 1)
    left = station_m[idx - 1]
    right = station_m[idx]
    return np.where(np.abs(stations - left) <= np.abs(right - stations), idx - 1, idx)


def _example_route():
    """A tiny route for the docstring examples: 50 m down a 30 degree plane, mu = 0.2.

    Returns (route, terrain); the time is the closed-form incline law (5.5860139 s).
    """
    from affine import Affine

    from ._segment import segment_law
    from .params import Limits, LineSpec, Mover, SearchOptions
    from .physics import Profile
    from .results import LatticeLine, Route, RouteSummary
    from .terrain import Terrain

    cell = 5.0
    tan30 = math.tan(math.radians(30.0))
    cols = np.arange(10)
    z = np.tile(100.0 - tan30 * cell * cols, (3, 1))
    terrain = Terrain.from_array(z, Affine(cell, 0, 500000.0, 0, -cell, 4500000.0), "EPSG:32633")
    plan = 50.0 * math.cos(math.radians(30.0))
    x0, y0 = terrain.cell_center(1, 0)
    line = np.array([[x0, y0, z[1, 0]], [x0 + plan, y0, z[1, 0] - 25.0]])
    mover = Mover(mu=0.2, normal="gravity")
    v2, t, _ = segment_law(0.0, 25.0, plan, 50.0, mover.g, mover.mu, 0.0, 0.0)
    prof = Profile(line, np.array([0.0, 50.0]), np.array([0.0, math.sqrt(v2)]), np.array([0.0, t]),
                   np.array([tan30, tan30]), np.full(2, math.cos(math.radians(30.0))), None,
                   np.array([]), np.array([]), np.array([0.0, math.sqrt(v2)]))
    lattice = LatticeLine(np.array([[1, 0], [1, 7]]), line, prof, t)
    v = math.sqrt(v2)
    summary = RouteSummary(
        line_kind="ground", feasible=True, travel_time_s=t, exit_speed_m_s=v, max_speed_m_s=v, length_m=50.0,
        plan_length_m=plan, drop_m=25.0, min_radius_plan_m=math.inf, min_radius_3d_m=math.inf, max_grade=tan30,
        violated_limits=[], start_xyz=line[0].tolist(), end_xyz=line[-1].tolist(), via_xy=[], lattice_time_s=t,
        lattice_model_time_s=t, neighbours=16, search_plan="full", search_exact=True, label_cap=None,
        labels_created=0, labels_settled=0, corridor=None, refined=False, refine_choice=None,
        refine_converged=None, refine_iterations=None, refine_residual_s_per_m=None, refine_message=None,
        refine_limits=None, refine_candidates=None, robust_method=None, robust_mu_range=None, robust_note=None,
        robust_candidates=None, caution=CAUTION, start_given_xy=line[0, :2].tolist(),
        end_given_xy=line[-1, :2].tolist(), start_moved_m=0.0, end_moved_m=0.0, start_moved_why=None,
        end_moved_why=None)
    route = Route(line=line, profile=prof, lattice=lattice, summary=summary, mover=mover, limits=Limits(),
                  line_spec=LineSpec(), search=SearchOptions(), refinement=None, terrain=terrain)
    return route, terrain


def profile_flags(profile, mover=None) -> list[str]:
    """One flag string per vertex: ``"stall"``, ``"overspeed"``, ``"liftoff"`` joined by ``;``.

    - ``stall``: the vertex that starts the segment where the mover stalls and every
      vertex after it;
    - ``overspeed``: the speed exceeds ``mover.max_speed``, or the vertex nearest to a
      station listed in ``profile.overspeed``;
    - ``liftoff``: the vertex nearest to a station listed in ``profile.liftoff``.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.physics import Profile
    >>> s = np.array([0.0, 1.0, 2.0, 3.0])
    >>> v = np.array([0, 1, 2, np.nan])
    >>> p = Profile(np.zeros((4, 3)), s, v, s, s, s, 2.5, np.array([1.1]), np.array([]), v)
    >>> profile_flags(p)
    ['', 'liftoff', 'stall', 'stall']
    """
    station = np.asarray(profile.station_m, dtype=float)
    n = station.size
    flags: list[list[str]] = [[] for _ in range(n)]
    stall = np.zeros(n, dtype=bool)
    if profile.stalled_at_m is not None:
        first = max(int(np.searchsorted(station, float(profile.stalled_at_m), side="right")) - 1, 0)
        stall[first:] = True
    over = np.zeros(n, dtype=bool)
    over[_nearest_vertices(station, profile.overspeed)] = True
    vmax = getattr(mover, "max_speed", None)
    if vmax is not None:
        with np.errstate(invalid="ignore"):
            over |= np.asarray(profile.speed_m_s, dtype=float) > vmax
    lift = np.zeros(n, dtype=bool)
    lift[_nearest_vertices(station, profile.liftoff)] = True
    for i in range(n):
        if stall[i]:
            flags[i].append("stall")
        if over[i]:
            flags[i].append("overspeed")
        if lift[i]:
            flags[i].append("liftoff")
    return [";".join(f) for f in flags]


# --------------------------------------------------------------------------- GeoJSON

def _split_antimeridian(lonlatz: np.ndarray) -> list[np.ndarray]:
    """Split a lon/lat line where it crosses ±180° (RFC 7946 §3.1.9)."""
    parts = []
    current = [lonlatz[0]]
    for a, b in zip(lonlatz[:-1], lonlatz[1:]):
        d = b[0] - a[0]
        if abs(d) > 180.0:
            # unwrap b next to a, interpolate the crossing of ±180
            bu = b.copy()
            bu[0] += -360.0 if d > 0 else 360.0
            edge = 180.0 if bu[0] > a[0] else -180.0
            f = (edge - a[0]) / (bu[0] - a[0])
            cross = a + f * (bu - a)
            cross[0] = edge
            current.append(cross)
            parts.append(np.array(current))
            other = cross.copy()
            other[0] = -edge
            current = [other]
        current.append(b)
    parts.append(np.array(current))
    return parts


def _geojson_coords(part: np.ndarray) -> list[list[float]]:
    out = []
    for lon, lat, z in part:
        out.append([round(float(lon), GEOJSON_LONLAT_DECIMALS) + 0.0,
                    round(float(lat), GEOJSON_LONLAT_DECIMALS) + 0.0,
                    round(float(z), GEOJSON_Z_DECIMALS) + 0.0])
    return out


def geojson_properties(route, to_wgs84) -> dict:
    """The properties of the route's GeoJSON feature: the summary and the inputs, points in lon/lat.

    The summary's fields in order, except that the points it holds in map coordinates
    (``start_xyz``, ``end_xyz``, ``via_xy``, ``start_given_xy``, ``end_given_xy``) are
    given in WGS 84 as ``start_lon_lat_z``, ``end_lon_lat_z``, ``via_lon_lat``,
    ``start_given_lon_lat`` and ``end_given_lon_lat`` (7 decimals); then the inputs,
    one property each, named by their group: ``mover_mu``, ``mover_drag``,
    ``mover_max_speed``, ``limits_min_grade``, ``limits_max_grade``,
    ``line_spec_kind``, ``search_neighbours``, ... (``null`` for "no limit"); and
    ``height_reference``.

    Parameters
    ----------
    route : Route
    to_wgs84 : pyproj.Transformer
        From the route's CRS to EPSG:4326, ``always_xy``.

    Examples
    --------
    >>> import pyproj
    >>> route, terrain = _example_route()
    >>> tr = pyproj.Transformer.from_crs(terrain.crs, "EPSG:4326", always_xy=True)
    >>> p = geojson_properties(route, tr)
    >>> p["start_lon_lat_z"], p["mover_mu"], p["limits_max_grade"], "start_xyz" in p
    ([15.0000296, 40.6507889, 100.0], 0.2, None, False)
    """
    props: dict[str, Any] = {}
    for key, value in to_jsonable(route.summary.to_dict()).items():
        if key not in _LONLAT_FIELDS:
            props[key] = value
            continue
        pts = [] if value is None else ([value] if value and not isinstance(value[0], list) else value)
        out = []
        for p in pts:
            if any(c is None for c in p):  # a point that does not exist (NaN in the summary)
                out.append(None)
                continue
            lon, lat = to_wgs84.transform(float(p[0]), float(p[1]), errcheck=True)
            q = [round(float(lon), GEOJSON_LONLAT_DECIMALS) + 0.0, round(float(lat), GEOJSON_LONLAT_DECIMALS) + 0.0]
            if len(p) > 2:
                q.append(round(float(p[2]), GEOJSON_Z_DECIMALS) + 0.0)
            out.append(q)
        single = key != "via_xy"
        props[_LONLAT_FIELDS[key]] = (out[0] if out else None) if single else out
    for name in ("mover", "limits", "line_spec", "search"):
        group = getattr(route, name, None)
        if group is not None:
            props.update(flatten(to_jsonable(dataclasses.asdict(group)), "_", f"{name}_"))
    props["height_reference"] = "heights as in the DEM (not converted to WGS 84 ellipsoidal heights)"
    return props


def write_route_geojson(route, path: str | os.PathLike, crs) -> Path:
    """Write the route as RFC 7946 GeoJSON: WGS 84 lon/lat, a LineString with z.

    A FeatureCollection with one Feature whose properties are the route summary, its
    points in lon/lat, and the inputs (:func:`geojson_properties`), plus ``source_crs``
    (for a cable line also one Point feature per support, ``feature = "support"``); no
    ``crs`` member.  Coordinates to 7 decimals (about 1 cm), heights to millimetres.  The
    reprojection is pyproj's (``always_xy``); heights are the
    DEM's, unchanged (RFC 7946 asks for ellipsoidal heights: a DEM's orthometric
    heights differ by the geoid undulation; the ``height_reference`` property says
    so).  A line crossing the antimeridian becomes a MultiLineString (RFC 7946 §3.1.9).

    Parameters
    ----------
    route : Route
        The route; its ``profile.points`` (= ``line``) are written.
    path : path-like
        Destination file.
    crs
        CRS of the route coordinates (rasterio or pyproj CRS, ``"EPSG:n"``, WKT).

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> import json, tempfile, pathlib
    >>> route, terrain = _example_route()
    >>> p = write_route_geojson(route, pathlib.Path(tempfile.mkdtemp()) / "route.geojson", terrain.crs)
    >>> f = json.loads(p.read_text())["features"][0]
    >>> f["geometry"]["type"], len(f["geometry"]["coordinates"][0]), round(f["properties"]["travel_time_s"], 7)
    ('LineString', 3, 5.5860139)
    """
    import pyproj

    pts = _route_points(route)
    if not np.all(np.isfinite(pts)):
        raise ParameterError("the route line has non-finite coordinates; it cannot be exported")
    src = _pyproj_crs(crs)
    tr = pyproj.Transformer.from_crs(src, pyproj.CRS.from_epsg(4326), always_xy=True)
    lon, lat = tr.transform(pts[:, 0], pts[:, 1], errcheck=True)
    lonlatz = np.column_stack([lon, lat, pts[:, 2]])
    if not np.all(np.isfinite(lonlatz)):
        raise ParameterError("the route could not be reprojected to WGS 84; check the terrain CRS")
    parts = _split_antimeridian(lonlatz)
    if len(parts) == 1:
        geometry = {"type": "LineString", "coordinates": _geojson_coords(parts[0])}
    else:
        geometry = {"type": "MultiLineString", "coordinates": [_geojson_coords(p) for p in parts]}
    props = geojson_properties(route, tr)
    props["source_crs"] = crs_label(src)
    all_coords = np.concatenate(parts)
    bbox = [round(float(all_coords[:, 0].min()), GEOJSON_LONLAT_DECIMALS),
            round(float(all_coords[:, 1].min()), GEOJSON_LONLAT_DECIMALS),
            round(float(all_coords[:, 2].min()), GEOJSON_Z_DECIMALS),
            round(float(all_coords[:, 0].max()), GEOJSON_LONLAT_DECIMALS),
            round(float(all_coords[:, 1].max()), GEOJSON_LONLAT_DECIMALS),
            round(float(all_coords[:, 2].max()), GEOJSON_Z_DECIMALS)]
    if len(parts) > 1:
        bbox = None  # a bbox across the antimeridian needs west > east; leave it out
    doc = {"type": "FeatureCollection",
           "features": [{"type": "Feature", "properties": props, "geometry": geometry}]}
    cable = getattr(route, "cable", None)
    if cable is not None:  # a cable line: one Point feature per support (end stations included)
        sx, sy = tr.transform([s.x for s in cable.supports], [s.y for s in cable.supports], errcheck=True)
        for k, (s, lon_s, lat_s) in enumerate(zip(cable.supports, sx, sy)):
            doc["features"].append({"type": "Feature", "geometry": {"type": "Point", "coordinates": _geojson_coords(
                np.array([[lon_s, lat_s, s.top_z_m]]))[0]}, "properties": {
                "feature": "support", "index": k, **to_jsonable(dataclasses.asdict(s))}})
    if bbox is not None:
        doc["bbox"] = bbox
    text = json.dumps(doc, sort_keys=True, indent=1, allow_nan=False, ensure_ascii=False)
    path = Path(path)
    with atomic_write(path) as f:
        f.write(text + "\n")
    return path


# --------------------------------------------------------------------------- GeoPackage

def gpkg_timestamp() -> str:
    """The ``last_change`` time written into GeoPackages: not the clock, so reruns repeat.

    ``SOURCE_DATE_EPOCH`` (seconds since 1970, the reproducible-builds.org convention)
    when set, else the epoch itself.  GDAL's GPKG driver takes it from its
    ``OGR_CURRENT_DATE`` configuration option instead of the current time.

    Examples
    --------
    >>> gpkg_timestamp() if "SOURCE_DATE_EPOCH" not in os.environ else "1970-01-01T00:00:00.000Z"
    '1970-01-01T00:00:00.000Z'
    """
    import datetime

    try:
        epoch = int(os.environ.get("SOURCE_DATE_EPOCH", "0"))
    except ValueError:
        raise ParameterError(f"SOURCE_DATE_EPOCH must be whole seconds since 1970, got "
                             f"{os.environ['SOURCE_DATE_EPOCH']!r}") from None
    t = datetime.datetime.fromtimestamp(epoch, tz=datetime.timezone.utc)
    return t.strftime("%Y-%m-%dT%H:%M:%S.000Z")


@contextlib.contextmanager
def _gdal_config(**options):
    """GDAL configuration options set for the block and restored after it."""
    import pyogrio

    old = {k: pyogrio.get_gdal_config_option(k) for k in options}
    pyogrio.set_gdal_config_options(options)
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options(old)


@contextlib.contextmanager
def reproducible_figures():
    """Matplotlib settings for figures that repeat byte for byte: fixed SVG ids.

    Matplotlib names clip paths and other SVG elements from a random salt unless
    ``svg.hashsalt`` is set; inside this block it is.

    Examples
    --------
    >>> import io
    >>> from matplotlib.figure import Figure
    >>> def svg():
    ...     fig = Figure()
    ...     fig.add_subplot().plot([0, 1], [0, 1])
    ...     buf = io.StringIO()
    ...     fig.savefig(buf, format="svg", metadata={"Date": None})
    ...     return buf.getvalue()
    >>> with reproducible_figures():
    ...     svg() == svg()
    True
    """
    import matplotlib

    with matplotlib.rc_context({"svg.hashsalt": "fallway"}):
        yield


def flatten(d: dict, sep: str = "_", prefix: str = "") -> dict:
    """Nested mappings as one level, keys joined with ``sep``.

    Examples
    --------
    >>> flatten({"a": 1, "b": {"c": 2}}, ".")
    {'a': 1, 'b.c': 2}
    """
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(flatten(v, sep, key + sep))
        else:
            out[key] = v
    return out


def _field_arrays(values: dict) -> tuple[list[str], list[np.ndarray]]:
    names, arrays = [], []
    for k, v in values.items():
        v = to_jsonable(v)
        if isinstance(v, bool):
            arr = np.array([v], dtype=bool)
        elif isinstance(v, int):
            arr = np.array([v], dtype=np.int64)
        elif isinstance(v, float) or v is None:
            arr = np.array([np.nan if v is None else v], dtype=np.float64)
        elif isinstance(v, str):
            arr = np.array([v], dtype=object)
        else:
            arr = np.array([json.dumps(v, sort_keys=True)], dtype=object)
        names.append(k)
        arrays.append(arr)
    return names, arrays


def _line_numbers(points: np.ndarray, profile=None) -> dict:
    d = np.diff(points, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    out = {"length_m": float(np.sum(np.sqrt(plan ** 2 + d[:, 2] ** 2))),
           "plan_length_m": float(np.sum(plan)),
           "drop_m": float(points[0, 2] - points[-1, 2]),
           "n_vertices": int(len(points))}
    if profile is not None:
        out["travel_time_s"] = float(profile.travel_time_s)
        out["exit_speed_m_s"] = float(profile.exit_speed_m_s)
    return out


def write_route_gpkg(route, path: str | os.PathLike, crs) -> Path:
    """Write the route as a GeoPackage in the terrain CRS, with two LineString Z layers.

    Layers: ``line`` (the reported line; fields = the route summary, nested entries
    flattened with ``_``, lists as JSON text) and ``lattice`` (the lattice line;
    fields time_s, length_m, plan_length_m, drop_m, n_vertices, travel_time_s,
    exit_speed_m_s); for a cable line a third, ``supports`` (Point Z at each support's
    top, end stations included; the columns of ``supports.csv``).

    Parameters
    ----------
    route : Route
    path : path-like
    crs
        CRS of the route coordinates (written to the layers as WKT).

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> import tempfile, pathlib, pyogrio
    >>> route, terrain = _example_route()
    >>> p = write_route_gpkg(route, pathlib.Path(tempfile.mkdtemp()) / "route.gpkg", terrain.crs)
    >>> [name for name, _ in pyogrio.list_layers(p)]
    ['line', 'lattice']
    """
    import pyogrio.raw
    import shapely

    pts = _route_points(route)
    wkt = _pyproj_crs(crs).to_wkt()
    line_wkb = np.array([shapely.to_wkb(shapely.linestrings(pts), output_dimension=3)], dtype=object)
    fields_line = flatten(to_jsonable(route.summary.to_dict()))
    fields_line.update({f"line_{k}": v for k, v in _line_numbers(pts, route.profile).items()})
    names1, arrays1 = _field_arrays(fields_line)
    lat_pts = np.asarray(route.lattice.points, dtype=float)
    lat_wkb = np.array([shapely.to_wkb(shapely.linestrings(lat_pts), output_dimension=3)], dtype=object)
    fields_lat = {"time_s": float(route.lattice.time_s)}
    fields_lat.update(_line_numbers(lat_pts, route.lattice.profile))
    names2, arrays2 = _field_arrays(fields_lat)
    path = Path(path)
    with atomic_path(path) as tmp:
        try:
            with _gdal_config(OGR_CURRENT_DATE=gpkg_timestamp()):
                pyogrio.raw.write(tmp, line_wkb, arrays1, names1, layer="line", driver="GPKG",
                                  geometry_type="LineString Z", crs=wkt)
                pyogrio.raw.write(tmp, lat_wkb, arrays2, names2, layer="lattice", driver="GPKG",
                                  geometry_type="LineString Z", crs=wkt, append=True)
                cable = getattr(route, "cable", None)
                if cable is not None:  # a cable line's supports, end stations included
                    sup = cable.supports
                    wkb = np.array([shapely.to_wkb(shapely.points(s.x, s.y, s.top_z_m), output_dimension=3)
                                    for s in sup], dtype=object)
                    cols = [f.name for f in dataclasses.fields(sup[0])]
                    pyogrio.raw.write(tmp, wkb, [np.array([getattr(s, c) for s in sup], dtype=float) for c in cols],
                                      cols, layer="supports", driver="GPKG", geometry_type="Point Z", crs=wkt,
                                      append=True)
        except OSError:
            raise
        except Exception as err:  # pyogrio's DataSourceError / FieldError
            raise FallwayIOError(f"cannot write {path}: {_gdal_failure(path.parent, err)}") from err
    return path


# --------------------------------------------------------------------------- CSV

def _fmt(v: float, decimals: int) -> str:
    v = float(v)
    if not math.isfinite(v):
        return ""
    s = f"{v:.{decimals}f}"
    if s.startswith("-") and float(s) == 0.0:
        s = s[1:]
    return s


def write_profile_csv(route, terrain, path: str | os.PathLike) -> Path:
    """Write the long-section table: one row per vertex of the reported line.

    Columns: ``station_m, x, y, z_ground, z_line, grade, speed_m_s, time_s,
    normal_ratio, flags``.  Fixed decimals (6 for lengths, speeds, times and ratios);
    empty cells for values that do not exist (speed and time after a stall, ground
    outside the DEM); ``flags`` from :func:`profile_flags`.

    Parameters
    ----------
    route : Route
    terrain : Terrain
        Gives ``z_ground``: the smooth (bicubic) surface, :meth:`Terrain.sample`, the
        surface the refined line and every draped line lie on (empty where it is
        undefined: within a cell of nodata or of the grid's edge).
    path : path-like

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> route, terrain = _example_route()
    >>> p = write_profile_csv(route, terrain, pathlib.Path(tempfile.mkdtemp()) / "profile.csv")
    >>> print(p.read_text().splitlines()[2])
    50.000000,500045.801270,4499992.500000,75.000000,75.000000,0.577350,17.901853,5.586014,0.866025,
    """
    p = route.profile
    pts = _route_points(route)
    z_ground = np.atleast_1d(terrain.sample(pts[:, 0], pts[:, 1]))
    flags = profile_flags(p, route.mover)
    cols = [np.asarray(p.station_m, float), pts[:, 0], pts[:, 1], z_ground, pts[:, 2],
            np.asarray(p.grade, float), np.asarray(p.speed_m_s, float), np.asarray(p.time_s, float),
            np.asarray(p.normal_ratio, float)]
    n = len(pts)
    if any(len(c) != n for c in cols) or len(flags) != n:
        raise ParameterError("the route profile and its line have different vertex counts")
    lines = [",".join(_PROFILE_COLUMNS)]
    for i in range(n):
        row = [_fmt(c[i], 6) for c in cols]
        row.append(flags[i])
        lines.append(",".join(row))
    path = Path(path)
    with atomic_write(path) as f:
        f.write("\n".join(lines) + "\n")
    return path


#: Decimal places per column of ``stations.csv`` (lon/lat: 1e-7 degree, about 1 cm).
_STATION_DECIMALS = {"station_m": 3, "x_m": 3, "y_m": 3, "lon_deg": 7, "lat_deg": 7, "ground_z_m": 3,
                     "line_z_m": 3, "clearance_m": 3, "grade": 6, "grade_deg": 4, "speed_m_s": 4, "time_s": 4,
                     "normal_load_ratio": 4}


def write_stations_csv(table, path: str | os.PathLike) -> Path:
    """Write the chainage table (:class:`fallway.stations.StationTable`) as CSV.

    Columns, units in their names: ``station_m, x_m, y_m, lon_deg, lat_deg, ground_z_m,
    line_z_m, clearance_m, grade, grade_deg, speed_m_s, time_s, normal_load_ratio,
    flags`` (``grade`` a fraction, 0.3 = 30 %).  Fixed decimals: millimetres for lengths
    and heights, 7 for degrees of lon/lat (about 1 cm), 6 for the grade, 4 for
    grade degrees, speed, time and load; empty cells for values that do not exist
    (after a stall, ground outside the DEM).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from fallway.stations import station_table
    >>> route, _ = _example_route()
    >>> p = write_stations_csv(station_table(route, 25.0), pathlib.Path(tempfile.mkdtemp()) / "stations.csv")
    >>> print(p.read_text().splitlines()[2])
    25.000,500024.151,4499992.500,15.0002857,40.6507889,87.500,87.500,0.000,0.577350,30.0000,12.6585,3.9499,0.8660,
    """
    cols = table.columns()
    names = list(cols)
    n = len(table)
    lines = [",".join(names)]
    for i in range(n):
        row = [_fmt(cols[k][i], _STATION_DECIMALS[k]) for k in names[:-1]]
        row.append(cols["flags"][i])
        lines.append(",".join(row))
    path = Path(path)
    with atomic_write(path) as f:
        f.write("\n".join(lines) + "\n")
    return path


# --------------------------------------------------------------------------- summary JSON

def write_summary_json(route, path: str | os.PathLike, extra: dict | None = None, *,
                       crs=None) -> Path:
    """Write the route's numbers, its parameters and the caution as sorted, stable JSON.

    Keys in a fixed order: the fields of :class:`~fallway.results.RouteSummary` in
    their order (the same whatever the options; ``null`` where absent); ``mover``,
    ``limits``, ``line_spec`` and ``search`` (``dataclasses.asdict``); ``crs``
    (``"EPSG:n"`` or WKT, when given); then ``extra`` (e.g. the scenario), which wins on
    equal keys.  ``inf`` and ``NaN`` are written as ``null`` (a limit of ``null`` means
    no limit).  Same inputs, same bytes.

    Parameters
    ----------
    route : Route
    path : path-like
    extra : dict, optional
        More JSON-ready entries.
    crs : optional
        CRS of the map coordinates.

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> import json, tempfile, pathlib
    >>> route, terrain = _example_route()
    >>> p = write_summary_json(route, pathlib.Path(tempfile.mkdtemp()) / "summary.json", crs=terrain.crs)
    >>> doc = json.loads(p.read_text())
    >>> doc["crs"], doc["limits"]["max_grade"], doc["mover"]["mu"]
    ('EPSG:32633', None, 0.2)
    """
    doc = summary_document(route, extra, crs=crs)
    text = json.dumps(doc, indent=2, allow_nan=False, ensure_ascii=False)
    path = Path(path)
    with atomic_write(path) as f:
        f.write(text + "\n")
    return path


def summary_document(route, extra: dict | None = None, *, crs=None) -> dict:
    """The JSON-ready dictionary :func:`write_summary_json` writes."""
    doc: dict[str, Any] = dict(to_jsonable(route.summary.to_dict()))
    for name in ("mover", "limits", "line_spec", "search"):
        doc[name] = to_jsonable(dataclasses.asdict(getattr(route, name)))
    if crs is not None:
        doc["crs"] = crs_label(crs)
    if extra:
        doc.update(to_jsonable(dict(extra)))
    return doc


def write_reach_geotiff(reach_map, path) -> Path:
    """Write a two-band float32 GeoTIFF: band 1 arrival time (s), band 2 speed (m/s).

    NaN is the nodata value (unreachable cells).  The file is built in memory, then
    written under a temporary name in the same folder and renamed when complete.

    Examples
    --------
    >>> import numpy as np, tempfile, os, rasterio
    >>> from affine import Affine
    >>> from fallway.results import ReachMap
    >>> rm = ReachMap(np.array([[0.0, 1.0]]), np.array([[0.0, np.nan]]), Affine(1, 0, 0, 0, -1, 1),
    ...               None, (0.5, 0.5), {})
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = write_reach_geotiff(rm, os.path.join(d, "reach.tif"))
    ...     with rasterio.open(os.path.join(d, "reach.tif")) as src:
    ...         print(src.count, src.dtypes[0], src.descriptions)
    2 float32 ('arrival_time_s', 'arrival_speed_m_s')
    """
    import rasterio
    from rasterio.errors import RasterioError

    path = Path(path)
    if not path.parent.is_dir():
        raise FallwayIOError(f"output folder {path.parent} does not exist; create it first")
    rows, cols = np.shape(reach_map.time_s)
    bands = (np.asarray(reach_map.time_s, dtype=np.float32), np.asarray(reach_map.speed_m_s, dtype=np.float32))
    profile = dict(driver="GTiff", width=cols, height=rows, count=2, dtype="float32",
                   transform=reach_map.transform, nodata=float("nan"), compress="deflate",
                   tiled=rows >= 256 and cols >= 256)
    if reach_map.crs is not None:
        profile["crs"] = reach_map.crs
    # built in memory and written with Python's own file I/O: a write error (a full disk)
    # then raises with its errno, where GDAL's libtiff reports some only on stderr
    try:
        with rasterio.MemoryFile(ext=".tif") as mem:
            with mem.open(**profile) as dst:
                dst.write(bands[0], 1)
                dst.write(bands[1], 2)
                dst.set_band_description(1, "arrival_time_s")
                dst.set_band_description(2, "arrival_speed_m_s")
                dst.update_tags(start_x=str(reach_map.start[0]), start_y=str(reach_map.start[1]))
            data = mem.read()
    except RasterioError as err:
        raise FallwayIOError(f"cannot write {path}: {_gdal_failure(path.parent, err)}") from err
    with atomic_write(path, "wb") as fh:
        fh.write(data)
    return Path(path)
