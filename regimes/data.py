"""Reading NetCDF inputs: open lazily, identify coordinates, select.

Owns everything between file names and a lazily loaded, selected field with
named dims ``time``, ``lat``, ``lon`` (and ``level`` when a vertical axis
remains). Coordinates are identified by their CF attributes (``standard_name``,
``axis``, ``units``; CF conventions 1.8 chapter 4), never by fixed names.
Packing (``scale_factor``/``add_offset``/``_FillValue``) and calendars are
decoded by xarray with cftime.
"""

from __future__ import annotations

import glob
import logging
from pathlib import Path

import numpy as np
import xarray as xr

from .errors import UserError

log = logging.getLogger("regimes")

_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
_PRESSURE_UNITS = {"pa", "hpa", "mbar", "millibar", "bar", "kpa", "dbar", "decibar"}
_VERTICAL_NAMES = {
    "air_pressure", "depth", "height", "altitude", "model_level_number",
    "atmosphere_hybrid_sigma_pressure_coordinate", "sea_water_pressure",
}


def expand_paths(patterns: list[str]) -> list[str]:
    """Expand file names and glob patterns into a sorted list of existing files.

    Raises
    ------
    UserError
        If a plain file name does not exist, a pattern matches nothing, or a
        name (or a match) is a folder.
    """
    files: list[str] = []
    for pattern in patterns:
        if glob.has_magic(pattern):
            found = sorted(glob.glob(pattern))
            if not found:
                raise UserError(f"input pattern '{pattern}' matches no file; check data.paths")
            files.extend(found)
        elif not Path(pattern).exists():
            raise UserError(f"input file '{pattern}' not found; check data.paths")
        else:
            files.append(pattern)
    for name in files:
        if Path(name).is_dir():
            raise UserError(f"input '{name}' is a folder, not a file; give file names or a pattern such as '{Path(name) / '*.nc'}' in data.paths")
    return list(dict.fromkeys(str(Path(f).resolve()) for f in files))


_CLASSIC_MAGIC = (b"CDF\x01", b"CDF\x02")


def _check_classic_complete(path: str) -> None:
    """Refuse a classic-format (NetCDF-3) file whose variables end past the end of the file.

    The netCDF library reads the missing part of a truncated classic file as
    zeros without complaint (HDF5-based NetCDF-4 files are checked by the
    library itself). scipy's reader of the classic format maps the file and
    lays each variable over it, which fails when the file is too short; no
    data are read.
    """
    with open(path, "rb") as f:
        if f.read(4) not in _CLASSIC_MAGIC:
            return
    from scipy.io import netcdf_file

    try:
        with netcdf_file(path, mmap=True):
            pass
    except (ValueError, TypeError, OSError, IndexError):
        raise UserError(f"input file '{path}' is truncated or damaged (its variables end past the end of the file); copy or download it again") from None


def _open_one(path: str, chunk_days: int) -> xr.Dataset:
    """Open one file lazily, in dask chunks of ``chunk_days`` time steps.

    The chunks are cut from the file's lazy arrays, so each chunk reads only
    its own slice, whatever the file's own chunking (a contiguous variable
    would otherwise be one chunk: the whole field at once).
    """
    try:
        _check_classic_complete(path)
        ds = xr.open_dataset(path, engine="netcdf4", chunks=None, decode_times=xr.coders.CFDatetimeCoder(use_cftime=None))
    except ValueError as err:
        if "decode time" in str(err):
            reason = str(err).split(" Try ")[0].rstrip(".")  # without xarray's advice on its own options
            raise UserError(
                f"input file '{path}' has a time axis that cannot be decoded ({reason}); give CF time units such as "
                "'days since 1981-01-01 00:00:00' and a CF calendar"
            ) from None
        raise UserError(f"input file '{path}' cannot be read as NetCDF ({err}); check that it is a complete NetCDF file") from None
    except (OSError, RuntimeError, KeyError, IndexError, TypeError) as err:
        reason = getattr(err, "strerror", None) or err
        raise UserError(f"input file '{path}' cannot be read as NetCDF ({reason}); check that it is a complete NetCDF file") from None
    time_dims = {name for name in ds.dims if name in ds.coords and _is_time(ds[name])}
    return ds.chunk({name: (chunk_days if name in time_dims else -1) for name in ds.dims})


def _mismatch(parts: list[xr.Dataset], files: list[str]) -> str | None:
    """The first file whose variables or grid differ from the first file's, described; None if all agree."""
    first = parts[0]
    for part, name in zip(parts[1:], files[1:]):
        if set(part.data_vars) != set(first.data_vars):
            return (
                f"'{name}' holds {', '.join(map(str, part.data_vars)) or 'no variable'} but "
                f"'{files[0]}' holds {', '.join(map(str, first.data_vars)) or 'no variable'}"
            )
        for dim in first.dims:
            if dim in first.coords and not _is_time(first[dim]) and (
                dim not in part.coords or not np.array_equal(part[dim].values, first[dim].values)
            ):
                return f"'{name}' has another {dim} axis than '{files[0]}'"
    spans = []
    for part, name in zip(parts, files):
        times = [part[d] for d in part.dims if d in part.coords and _is_time(part[d]) and part[d].size]
        if times:
            spans.append((times[0].values.min(), times[0].values.max(), name))
    try:
        spans.sort(key=lambda span: span[0])
    except TypeError:
        return "their time axes are in different calendars"
    for (_, end, name), (start, _, later) in zip(spans, spans[1:]):
        if start <= end:
            return f"the periods of '{name}' and '{later}' overlap (both hold {format_time(start)})"
    return None


def open_inputs(patterns: list[str], chunk_days: int = 365) -> xr.Dataset:
    """Open one or several NetCDF files lazily as one dataset.

    Parameters
    ----------
    patterns : list of str
        File names or glob patterns (absolute, or relative to the working folder).
    chunk_days : int
        Time steps per dask chunk.

    Returns
    -------
    xarray.Dataset
        Dask-backed dataset; several files are combined along their coordinates.
        ``ds.attrs["input_files"]`` lists the files read.
    """
    files = expand_paths(patterns)
    parts = [_open_one(f, chunk_days) for f in files]
    if len(parts) == 1:
        ds = parts[0]
    else:
        try:
            ds = xr.combine_by_coords(parts, combine_attrs="drop_conflicts", join="exact", data_vars="minimal", coords="minimal", compat="override")
        except (ValueError, KeyError) as err:
            raise UserError(
                f"input files cannot be combined into one dataset: {_mismatch(parts, files) or err}; "
                "give files of the same variables on one grid, each covering its own period"
            ) from None
    ds.attrs["input_files"] = files
    return ds


def _attr(da: xr.DataArray, name: str) -> str:
    return str(da.attrs.get(name, "")).strip().lower()


def _is_time(c: xr.DataArray) -> bool:
    return _attr(c, "axis") == "t" or _attr(c, "standard_name") == "time" or np.issubdtype(c.dtype, np.datetime64) or (
        c.dtype == object and c.size > 0 and hasattr(c.values.flat[0], "calendar")
    )


def _is_lat(c: xr.DataArray) -> bool:
    return _attr(c, "standard_name") in ("latitude", "grid_latitude") or _attr(c, "units") in _LAT_UNITS or (
        _attr(c, "axis") == "y" and _attr(c, "units").startswith("degree")
    )


def _is_lon(c: xr.DataArray) -> bool:
    return _attr(c, "standard_name") in ("longitude", "grid_longitude") or _attr(c, "units") in _LON_UNITS or (
        _attr(c, "axis") == "x" and _attr(c, "units").startswith("degree")
    )


def _is_vertical(c: xr.DataArray) -> bool:
    return (
        _attr(c, "axis") == "z"
        or _attr(c, "positive") in ("up", "down")
        or _attr(c, "standard_name") in _VERTICAL_NAMES
        or (c.ndim == 1 and _attr(c, "units") in _PRESSURE_UNITS)
    )


def find_coordinates(da: xr.DataArray) -> dict[str, str | None]:
    """Identify the time, latitude, longitude and vertical coordinates of a variable.

    Returns
    -------
    dict
        Keys ``time``, ``lat``, ``lon``, ``vertical``; values are coordinate
        names in ``da`` (``vertical`` may be None).

    Raises
    ------
    UserError
        If time, latitude or longitude cannot be identified.
    """
    found: dict[str, str | None] = {"time": None, "lat": None, "lon": None, "vertical": None}
    tests = {"time": _is_time, "lat": _is_lat, "lon": _is_lon, "vertical": _is_vertical}
    names = list(da.dims) + [c for c in da.coords if c not in da.dims]
    for role, test in tests.items():
        for name in names:
            if name in da.coords and test(da[name]) and name not in found.values():
                found[role] = name
                break
    for role in ("time", "lat", "lon"):
        if found[role] is None:
            raise UserError(
                f"variable '{da.name}' has no coordinate identifiable as {role} (by standard_name, axis or units); "
                f"coordinates present: {', '.join(names)}; add CF attributes to the file"
            )
    return found


def pick_variable(ds: xr.Dataset, name: str) -> xr.DataArray:
    """Return ``ds[name]`` or a one-line error listing the variables present."""
    if name not in ds.data_vars:
        present = ", ".join(v for v in ds.data_vars if ds[v].ndim >= 2) or "none"
        raise UserError(f"variable '{name}' is not in the input files; variables present: {present}; set data.variable")
    return ds[name]


def _cell_area(da: xr.DataArray, ds: xr.Dataset, lat: str, lon: str) -> xr.DataArray | None:
    """Cell areas (m^2) from a CF cell-measures variable, else from coordinate bounds."""
    from .weights import cell_area

    measure = str(da.attrs.get("cell_measures", ""))
    if "area:" in measure:
        name = measure.split("area:")[1].split()[0]
        if name in ds.variables and set(ds[name].dims) <= set(da.dims):
            return ds[name].load()
    bounds = [ds.variables.get(str(ds[c].attrs.get("bounds"))) for c in (lat, lon)]
    if all(b is not None and b.ndim == 2 for b in bounds) and ds[lat].ndim == ds[lon].ndim == 1:
        area = cell_area(np.asarray(bounds[0]), np.asarray(bounds[1]))
        return xr.DataArray(area, dims=(ds[lat].dims[0], ds[lon].dims[0]))
    return None


def standardise(da: xr.DataArray, ds: xr.Dataset, chunk_days: int) -> xr.DataArray:
    """Rename the identified coordinates to ``time``, ``lat``, ``lon``, ``level``.

    The field is cast to float32 and chunked along time. Cell areas from the
    file (cell measures or bounds), when present, ride along as the
    ``cell_area`` coordinate so that every later selection keeps them aligned.
    """
    roles = find_coordinates(da)
    area = _cell_area(da, ds, roles["lat"], roles["lon"])
    if area is not None:
        da = da.assign_coords(cell_area=area)
    rename = {roles["time"]: "time", roles["lat"]: "lat", roles["lon"]: "lon"}
    if roles["vertical"] is not None:
        rename[roles["vertical"]] = "level"
    rename = {k: v for k, v in rename.items() if k != v}
    da = da.rename(rename)
    if da["lat"].ndim != 1 or da["lon"].ndim != 1:
        raise UserError(
            f"variable '{da.name}' has {da['lat'].ndim}-D latitude/longitude; this version needs a regular "
            "latitude-longitude grid with 1-D coordinates; regrid the input first"
        )
    if "time" not in da.dims:
        raise UserError(f"variable '{da.name}' has no time dimension; give daily or monthly fields")
    if "level" in da.coords and "level" not in da.dims:
        da = da.drop_vars("level")
    return da.astype("float32").chunk({d: (chunk_days if d == "time" else -1) for d in da.dims})


def _lon_positions(lon: np.ndarray, west: float, east: float) -> tuple[np.ndarray, np.ndarray]:
    """Indices of longitudes inside [west, east] going eastward, and their values.

    Longitudes are returned continuous from ``west`` (so a box crossing 180
    gives values above 180 when ``west`` is in 0..360 convention, or crossing
    0 gives negative values in -180..180 convention), ordered eastward.
    """
    span = (east - west) % 360.0
    if span == 0 and east != west:
        span = 360.0
    offset = (lon - west) % 360.0
    inside = np.flatnonzero(offset <= span + 1e-9)
    order = inside[np.argsort(offset[inside], kind="stable")]
    return order, west + offset[order]


def select(
    da: xr.DataArray,
    lat: list[float] | None = None,
    lon: list[float] | None = None,
    level: float | None = None,
    period: list[str] | None = None,
) -> xr.DataArray:
    """Cut a latitude-longitude box, a vertical level and a period (lazily).

    Parameters
    ----------
    da : xarray.DataArray
        Field with dims ``time``, ``lat``, ``lon`` (and perhaps ``level``).
    lat : [float, float], optional
        Latitude range in degrees north, either order.
    lon : [float, float], optional
        Longitude range ``[west, east]`` in degrees east, either convention;
        ``west > east`` (e.g. ``[160, -150]``) crosses the 180 meridian.
    level : float, optional
        Vertical level in the file's vertical units.
    period : [str, str], optional
        First and last day, ``"YYYY-MM-DD"``.

    Returns
    -------
    xarray.DataArray
        Latitude ascending; longitude eastward from ``west``.
    """
    name = da.name
    if lat is not None:
        lo, hi = sorted(lat)
        idx = np.flatnonzero((da["lat"].values >= lo - 1e-9) & (da["lat"].values <= hi + 1e-9))
        if idx.size == 0:
            raise UserError(
                f"data.lat = {lat} selects no latitude of '{name}' (file covers "
                f"{float(da['lat'].min()):g} to {float(da['lat'].max()):g}); widen the box"
            )
        da = da.isel(lat=idx)
    da = da.isel(lat=np.argsort(da["lat"].values, kind="stable"))
    lons = da["lon"].values.astype(float)
    if lon is not None:
        order, values = _lon_positions(lons, lon[0], lon[1])
        if order.size == 0:
            raise UserError(f"data.lon = {lon} selects no longitude of '{name}'; check the box")
    else:
        order = np.argsort(lons, kind="stable")
        values = lons[order]
    da = da.isel(lon=order).assign_coords(lon=("lon", values, da["lon"].attrs))
    if level is not None:
        if "level" not in da.dims:
            raise UserError(f"data.level = {level:g} is set but '{name}' has no vertical coordinate; remove data.level")
        levels = da["level"].values.astype(float)
        hit = np.flatnonzero(np.isclose(levels, level, rtol=1e-6, atol=1e-6))
        if hit.size == 0:
            units = da["level"].attrs.get("units", "")
            raise UserError(
                f"data.level = {level:g} is not a level of '{name}'; levels present ({units}): "
                f"{', '.join(f'{v:g}' for v in levels)}; give one of them"
            )
        da = da.isel(level=int(hit[0]))
    if period is not None:
        da = select_period(da, period, "data.period")
    return da.chunk({d: -1 for d in da.dims if d != "time"})


def select_period(da: xr.DataArray, period: list[str], key: str) -> xr.DataArray:
    """Time steps from ``period[0]`` to ``period[1]`` inclusive; ``key`` names the config key in errors."""
    try:
        out = da.sel(time=slice(period[0], period[1]))
    except (TypeError, ValueError, KeyError) as err:
        raise UserError(f"{key} = {period} is not a valid period in the data's calendar ({err}); give days that exist in it") from None
    if out.sizes["time"] == 0:
        raise UserError(f"{key} = {period} selects no time step of '{da.name}'; check the period against the files")
    return out


def season_start(months: list[int]) -> int:
    """The first month of a season: the month after the largest gap in the circular month list."""
    ms = sorted(set(months))
    if len(ms) == 12:
        return 1
    gaps = [((ms[(i + 1) % len(ms)] - m) % 12, ms[(i + 1) % len(ms)]) for i, m in enumerate(ms)]
    return max(gaps, key=lambda g: (g[0], -g[1]))[1]


def season_year(time: xr.DataArray, months: list[int] | None) -> xr.DataArray:
    """Label each time by the year its season starts in (DJF 1990/91 -> 1990).

    Parameters
    ----------
    time : xarray.DataArray
        Time coordinate.
    months : list of int or None
        Months of the season; None means the whole year (label = calendar year).
    """
    year = time.dt.year
    if months is None:
        return year.rename("season_year")
    start = season_start(months)
    return (year - (time.dt.month < start).astype(int)).rename("season_year")


def select_months(da: xr.DataArray, months: list[int] | None) -> xr.DataArray:
    """Keep only the time steps in the given months (lazily)."""
    if months is None:
        return da
    keep = np.isin(da["time"].dt.month.values, months)
    if not keep.any():
        raise UserError(f"data.months = {months} selects no time step in the selected period; check the season")
    return da.isel(time=np.flatnonzero(keep))


def day_numbers(time: xr.DataArray) -> np.ndarray:
    """Days since the first time step, as float64, in the time axis' own calendar."""
    values = time.values
    if np.issubdtype(values.dtype, np.datetime64):
        return (values - values[0]) / np.timedelta64(1, "D")
    import cftime

    first = values[0]
    units = f"days since {first.year:04d}-{first.month:02d}-{first.day:02d}"
    return np.asarray(cftime.date2num(list(values), units, calendar=first.calendar), dtype=float)


def format_time(value) -> str:
    """A time step as ``YYYY-MM-DD``, with the time of day when it is not midnight."""
    text = str(value).replace("T", " ")[:19]
    return text[:10] if text.endswith("00:00:00") else text


def typical_step(time: xr.DataArray) -> float:
    """The median spacing of a time axis in days; refuses repeated or decreasing time steps.

    Raises
    ------
    UserError
        Naming the first repeated or out-of-order time step and its position.
    """
    days = day_numbers(time)
    step = np.diff(days)
    bad = np.flatnonzero(step <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        here, before = format_time(time.values[i]), format_time(time.values[i - 1])
        what = f"time {here} appears twice (time steps {i} and {i + 1})" if step[i - 1] == 0 else (
            f"time axis goes back from {before} to {here} at time step {i + 1}"
        )
        raise UserError(f"{what}; {bad.size} repeated or out-of-order time step(s) in all; remove repeated or unsorted time steps from the inputs")
    return float(np.median(step)) if step.size else 1.0


def segment_starts(time: xr.DataArray, step: float | None = None) -> np.ndarray:
    """Boolean mask: True where a run of consecutive time steps begins.

    Two steps are consecutive when they are at most 1.5 typical steps apart,
    so a season boundary or a gap in the files starts a new segment.

    Parameters
    ----------
    time : xarray.DataArray
        Time axis, increasing.
    step : float, optional
        Typical step in days; by default the median spacing of ``time``. Give
        the step of the whole input when ``time`` has been thinned (seasons
        cut, days dropped), so that every missing step still breaks a segment.
    """
    days = day_numbers(time)
    typical = typical_step(time) if step is None else step
    starts = np.ones(days.size, dtype=bool)
    starts[1:] = np.diff(days) > 1.5 * typical
    return starts


def describe_gaps(time: xr.DataArray, step: float) -> str | None:
    """One sentence on the gaps of a time axis (steps missing between its first and last time), or None."""
    starts = segment_starts(time, step)[1:]
    if not starts.any():
        return None
    days = np.diff(day_numbers(time))[starts]
    first = int(np.flatnonzero(starts)[0])
    missing = int(np.round(days / step - 1).sum())
    return (
        f"the time axis has {int(starts.sum())} gap(s), about {missing} time step(s) missing in all, the first after "
        f"{format_time(time.values[first])} (next {format_time(time.values[first + 1])}); no episode or transition spans a gap"
    )


def time_step_kind(time: xr.DataArray) -> str:
    """'daily' or 'monthly', from the median spacing of the time axis."""
    return "monthly" if 27 <= typical_step(time) <= 32 else "daily"
