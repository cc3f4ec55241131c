"""Reading a finished output folder back: what the figures and the report are drawn from.

A finished run is a folder holding the five result files of ``regimes run``
(see :mod:`regimes.results`); a finished assignment holds the three of
``regimes assign`` (labels, composites, statistics; its ``labels.nc`` names
the model file in the attribute ``model_file``); a finished scan is a folder
holding the ``scan.nc`` of ``regimes scan``. A run folder may also hold a
scan, either beside the results or in its ``scan`` subfolder (where
``regimes scan`` puts it by default). Nothing here computes on the field.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import xarray as xr

from .errors import UserError
from .output import ASSIGN_FILES, RUN_FILES

SCAN_FILE = "scan.nc"
CHECK = {"labels.nc": "label", "composites.nc": "anomaly_composite", "statistics.nc": "frequency", "eofs.nc": "eof",
         "model.nc": "centroid", SCAN_FILE: "classifiability"}
"""A variable each file must hold to count as written by regimes."""


@dataclass
class Finished:
    """The datasets of a finished run, assignment and/or scan, loaded into memory.

    ``kind`` is "run" (the five result files), "assignment" (labels,
    composites and statistics of ``regimes assign``) or "scan" (a scan only).
    """

    folder: Path
    kind: str = "scan"
    labels: xr.Dataset | None = None
    composites: xr.Dataset | None = None
    statistics: xr.Dataset | None = None
    eofs: xr.Dataset | None = None
    model: xr.Dataset | None = None
    scan: xr.Dataset | None = None
    scan_folder: Path | None = None

    @property
    def has_results(self) -> bool:
        """True for a run or an assignment: there are labels, composites and statistics to draw."""
        return self.labels is not None

    @property
    def settings(self) -> dict:
        """Selection and method settings: of the model file (run), or as recorded in labels.nc (assignment)."""
        ds = self.model if self.kind == "run" else self.labels
        return json.loads(ds.attrs["settings"])

    @property
    def config_text(self) -> str | None:
        """The config file's text as recorded in the outputs (None when the run was started without one)."""
        ds = self.labels if self.has_results else self.scan
        return ds.attrs.get("config")


def read_result(path: Path) -> xr.Dataset:
    """One result file loaded into memory; a file that cannot be read or was not written by regimes is a UserError."""
    try:
        with xr.open_dataset(path, engine="netcdf4") as opened:
            ds = opened.load()
    except (OSError, ValueError, RuntimeError) as err:
        raise UserError(f"'{path}' cannot be read ({err}); rerun the job that wrote it") from None
    if CHECK[path.name] not in ds:
        raise UserError(f"'{path}' holds no '{CHECK[path.name]}'; it was not written by regimes, rerun the job")
    return ds


def scan_path(folder: Path) -> Path | None:
    """The scan file in ``folder`` or in its ``scan`` subfolder, if any."""
    for path in (folder / SCAN_FILE, folder / "scan" / SCAN_FILE):
        if path.is_file():
            return path
    return None


def _is_assignment(folder: Path, present: list[str]) -> bool:
    """The three files of ``regimes assign``, its labels.nc naming the model it came from."""
    if set(present) != set(ASSIGN_FILES):
        return False
    try:
        with xr.open_dataset(folder / "labels.nc", engine="netcdf4") as labels:
            return "model_file" in labels.attrs
    except (OSError, ValueError, RuntimeError):
        return True  # an assignment's damaged labels.nc: read_result names it


def open_folder(folder: str | Path) -> Finished:
    """Load a finished run (with its scan, if one is there), a finished assignment or a finished scan.

    Raises
    ------
    UserError
        If ``folder`` is neither, naming what is missing.
    """
    folder = Path(folder).resolve()
    if not folder.is_dir():
        raise UserError(f"'{folder}' is not a folder; give the output folder of a finished 'regimes run', 'regimes assign' or 'regimes scan'")
    present = [name for name in RUN_FILES if (folder / name).is_file()]
    scan = scan_path(folder)
    kind = "run" if len(present) == len(RUN_FILES) else "assignment" if _is_assignment(folder, present) else "scan"
    if kind == "scan" and not (scan is not None and scan.parent == folder):
        missing = ", ".join(name for name in RUN_FILES if name not in present)
        raise UserError(f"'{folder}' is not a finished run (missing {missing}); give the output folder of a finished 'regimes run', 'regimes assign' or 'regimes scan'")
    found = Finished(folder, kind)
    for name in RUN_FILES if kind == "run" else ASSIGN_FILES if kind == "assignment" else ():
        setattr(found, name[:-3], read_result(folder / name))
    if kind == "assignment" and "settings" not in found.labels.attrs:
        raise UserError(f"'{folder / 'labels.nc'}' records no settings; rerun the 'regimes assign' that wrote it")
    if scan is not None:
        found.scan, found.scan_folder = read_result(scan), scan.parent
    return found
