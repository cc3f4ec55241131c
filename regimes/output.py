"""Writing results: CF-1.8 attributes, provenance, atomic files, the output folder.

Every file is written under a temporary name in the target folder and
renamed when complete; the files of one run are renamed together, once all
of them are written, so an interrupted or failed run leaves nothing under a
final name (CF conventions 1.8 for the attributes: flag_values/flag_meanings
in section 3.5, cell_methods in section 7.3, coordinates in chapter 4).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import os
import shutil
import signal
import sys
import threading
from importlib import metadata
from pathlib import Path

import numpy as np
import xarray as xr

from .config import FIGURE_FORMATS
from .errors import UserError

PACKAGES = ("regimes", "numpy", "scipy", "xarray", "dask", "netCDF4", "scikit-learn", "cftime")


def versions() -> str:
    """Versions of Python and the packages that shape the results, one string."""
    parts = [f"python {sys.version.split()[0]}"]
    for name in PACKAGES:
        try:
            parts.append(f"{name} {metadata.version(name)}")
        except metadata.PackageNotFoundError:
            parts.append(f"{name} unknown")
    return "; ".join(parts)


def provenance(command: str, config_text: str | None, inputs: list[str]) -> dict[str, str]:
    """Global attributes recording how a file was made."""
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    attrs = {
        "Conventions": "CF-1.8",
        "history": f"{now}: {command}",
        "source": f"regimes {_own_version()}",
        "package_versions": versions(),
        "input_files": "\n".join(inputs),
    }
    if config_text is not None:
        attrs["config"] = config_text
    return attrs


def _own_version() -> str:
    try:
        return metadata.version("regimes")
    except metadata.PackageNotFoundError:
        return "unknown"


def flag_meanings(names: list[str]) -> str:
    """CF ``flag_meanings``: blank-separated words, so spaces in names become underscores."""
    return " ".join("_".join(str(n).split()) for n in names)


def coordinate_attrs(ds: xr.Dataset) -> xr.Dataset:
    """Set the CF attributes of the standard coordinates present in ``ds``."""
    known = {
        "lat": {"standard_name": "latitude", "units": "degrees_north", "axis": "Y", "long_name": "latitude"},
        "lon": {"standard_name": "longitude", "units": "degrees_east", "axis": "X", "long_name": "longitude"},
        "time": {"standard_name": "time", "axis": "T", "long_name": "time"},
        "regime": {"long_name": "regime number (1 = most frequent)", "units": "1"},
        "mode": {"long_name": "EOF mode number", "units": "1"},
        "mode_": {"long_name": "EOF mode number (second index of a covariance)", "units": "1"},
    }
    for name, attrs in known.items():
        if name in ds.coords:
            keep = {k: v for k, v in ds[name].attrs.items() if k in ("positive", "calendar", "bounds")}
            ds[name].attrs = {**attrs, **keep}
    for name in ("level",):
        if name in ds.coords:
            ds[name].attrs.setdefault("long_name", "vertical level")
    return ds


def check_folder(folder: str | Path, overwrite: bool, inputs: list[str]) -> Path:
    """Refuse an existing output folder without ``overwrite``, or one that holds an input file."""
    folder = Path(folder).resolve()
    if folder.exists() and not folder.is_dir():
        raise UserError(f"output folder '{folder}' is an existing file; choose another output.dir")
    existing = next(p for p in (folder, *folder.parents) if p.exists())
    if not existing.is_dir():
        raise UserError(f"output folder '{folder}' cannot be made: '{existing}' is a file; choose another output.dir")
    for path in inputs:
        if folder in Path(path).resolve().parents:
            raise UserError(f"output folder '{folder}' contains the input file '{path}'; choose an output folder apart from the inputs")
    if folder.exists() and any(folder.iterdir()) and not overwrite:
        raise UserError(f"output folder '{folder}' already exists; pass --overwrite or choose another output folder")
    return folder


def _is_time(var: xr.Variable) -> bool:
    return var.dtype.kind == "M" or (var.dtype.kind == "O" and var.size > 0 and hasattr(var.values.flat[0], "calendar"))


def _encoding(ds: xr.Dataset) -> dict:
    """Per-variable encoding: no fill value on coordinates, 32-bit integers, float64 day counts for times."""
    enc = {}
    for name, var in ds.variables.items():
        e: dict = {"_FillValue": None} if name in ds.dims else {}
        if _is_time(var):
            e.update(units="days since 1850-01-01", dtype="float64", _FillValue=None)
        elif var.dtype.kind == "f" and name not in ds.dims:
            e.update(_FillValue=np.nan, zlib=True, complevel=4)
        elif var.dtype.kind in "iu" and var.dtype.itemsize > 4:
            e["dtype"] = "int32"
        enc[name] = e
    return enc


@contextlib.contextmanager
def _temporary(path: Path):
    """A temporary name beside ``path``; whatever is left under it at the end is removed."""
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        yield tmp
    finally:
        with contextlib.suppress(OSError):  # a read-only file system refuses even to remove a missing file
            tmp.unlink(missing_ok=True)


@contextlib.contextmanager
def _stop_signals_deferred():
    """Hold SIGINT and SIGTERM back while files are renamed, then deliver them (main thread only).

    So a run ends with all of its files renamed or none of them.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    previous = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
    for s in previous:
        signal.signal(s, lambda signum, frame: caught.append(signum))
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, signal.SIG_DFL if handler is None else handler)
        for s in caught[:1]:
            signal.raise_signal(s)


def _to_netcdf(ds: xr.Dataset, path: Path) -> None:
    ds.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=_encoding(ds))


def write(ds: xr.Dataset, path: Path) -> Path:
    """Write ``ds`` to ``path`` atomically (temporary name in the same folder, then rename)."""
    return write_all({Path(path).name: ds}, Path(path).parent, overwrite=False)[0]


def write_text(text: str, path: Path) -> Path:
    """Write a text file atomically (temporary name in the same folder, then rename)."""
    path = Path(path)
    with _writing(path), _temporary(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    return path


def write_bytes(content: bytes, path: Path) -> Path:
    """Write ``content`` (a figure, a page) to ``path`` atomically, like :func:`write_text`."""
    path = Path(path)
    with _writing(path):
        path.parent.mkdir(parents=True, exist_ok=True)
        with _temporary(path) as tmp:
            tmp.write_bytes(content)
            os.replace(tmp, path)
    return path


def remove_drawn(folder: Path) -> None:
    """Remove the figures (PNG, PDF, SVG) and the report that an earlier run left in ``folder`` (not in its subfolders)."""
    for path in folder.iterdir():
        if path.is_file() and (path.suffix.lstrip(".") in FIGURE_FORMATS or path.name == "report.html"):
            path.unlink()


RUN_FILES = ("labels.nc", "composites.nc", "statistics.nc", "eofs.nc", "model.nc")
"""The result files of ``regimes run``; an assignment writes the first three."""
ASSIGN_FILES = RUN_FILES[:3]

RESULT_FILES = frozenset({*RUN_FILES, "scan.nc"})
"""The NetCDF files a run or an assignment may write; with ``--overwrite`` those of an earlier run that
the new one does not write are removed, and no other file."""


FULL_BELOW_BYTES = 1 << 20
"""A failed write into a folder with less free space than this is taken for a full disk."""

PROBE_BYTES = 1 << 16
"""Size of the plain write that asks the file system why a write failed."""


def _probe(folder: Path) -> int | None:
    """The error number of a small plain write into ``folder`` (None when it succeeds); the probe file is removed."""
    probe = folder / f".regimes-write-probe-{os.getpid()}"
    try:
        with open(probe, "wb") as handle:
            handle.write(bytes(PROBE_BYTES))
            handle.flush()
            os.fsync(handle.fileno())
    except OSError as error:
        return error.errno
    finally:
        with contextlib.suppress(OSError):
            probe.unlink(missing_ok=True)
    return None


def _unwritable(path: Path, error: Exception) -> UserError | None:
    """The user's error behind a failed write of ``path``, or None when the failure is not the user's.

    Parameters
    ----------
    path : Path
        The file (or folder) that could not be written.
    error : Exception
        What the write raised.

    Returns
    -------
    UserError or None
        A full disk, an exceeded quota, no permission or a read-only file
        system, in one line that says what to do; None for anything else.

    Notes
    -----
    The netCDF library reports a full disk as 'NetCDF: HDF error', or as a
    permission error when the disk is already full as the file is created,
    and never passes a quota's error number on. So the folder is asked with a
    small plain write, and its free space is read.
    """
    if isinstance(error, RuntimeError) and "HDF error" not in str(error):
        return None
    folder = next(p for p in path.parents if p.exists())
    code = _probe(folder) or getattr(error, "errno", None)
    free = shutil.disk_usage(folder).free
    if code == errno.EDQUOT:
        return UserError(f"cannot write '{path}': the disk quota is exceeded; free some space or choose another output folder")
    if code == errno.ENOSPC or free < FULL_BELOW_BYTES:
        return UserError(f"cannot write '{path}': the disk is full ({free // 1024} KiB free); free some space or choose another output folder")
    if code in (errno.EACCES, errno.EPERM, errno.EROFS):
        return UserError(f"cannot write '{path}': {os.strerror(code).lower()}; choose an output folder you can write to")
    return None


@contextlib.contextmanager
def _writing(path: Path):
    """Turn a failed write of ``path`` into a :class:`UserError` when it is the user's to fix (:func:`_unwritable`)."""
    try:
        yield
    except (OSError, RuntimeError) as error:
        user_error = _unwritable(path, error)
        if user_error is None:
            raise
        raise user_error from error


def write_all(files: dict[str, xr.Dataset | bytes], folder: Path, overwrite: bool) -> list[Path]:
    """Write several result files into ``folder``: all under temporary names, then all renamed.

    A dataset is written as NetCDF; bytes (a figure) are written as they are.

    If anything fails or the run is interrupted before the renaming, the
    temporary files are removed (a full disk or a folder without write
    permission is a :class:`UserError`), and so is ``folder`` when this call created
    it. With ``overwrite``, result files (:data:`RESULT_FILES`) of an earlier
    run that this run does not produce are removed, so the folder holds one run only.
    """
    folder = Path(folder)
    created = not folder.exists()
    with _writing(folder):
        folder.mkdir(parents=True, exist_ok=True)
    try:
        with contextlib.ExitStack() as temporaries:
            written = {}
            for name, ds in files.items():
                written[name] = temporaries.enter_context(_temporary(folder / name))
                with _writing(folder / name):
                    if isinstance(ds, bytes):
                        written[name].write_bytes(ds)
                    else:
                        _to_netcdf(ds, written[name])
            with _stop_signals_deferred():
                for name, tmp in written.items():
                    os.replace(tmp, folder / name)
                if overwrite:
                    for stale in RESULT_FILES - set(files):
                        (folder / stale).unlink(missing_ok=True)
    except BaseException:
        if created and not any(folder.iterdir()):
            folder.rmdir()
        raise
    return [folder / name for name in files]
