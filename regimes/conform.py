"""Bringing other data to a saved model: ensemble members, units, vertical level, horizontal grid.

``regimes assign`` classifies data that were not fitted: a climate-model run,
a forecast ensemble, another reanalysis. :func:`to_model` turns such a field
(read and standardised by :mod:`regimes.data`) into one on the model's grid,
in the model's units, with an optional ``member`` dimension:

- a member dimension is found by CF attributes (``standard_name =
  realization``, or ``axis = E``) or by a common name (``member``,
  ``realization``, ``ensemble``, ``number``);
- units are converted with :mod:`regimes.units` (Pa and hPa convert; K and Pa
  are refused);
- the model's level is picked from the data's vertical axis, in the data's
  vertical units;
- the horizontal grid is the model's: the same points are selected when the
  data have them, otherwise the data are interpolated bilinearly (linear in
  latitude and in longitude, xarray ``interp``), with a warning naming both
  grids. A model region the data do not cover is refused.
"""

from __future__ import annotations

import logging

import numpy as np
import xarray as xr

from . import units
from .data import select_period
from .errors import UserError

log = logging.getLogger("regimes")

MEMBER_NAMES = {"member", "members", "realization", "realisation", "ensemble", "ens", "number", "member_id", "ensemble_member"}
"""Dimension names taken as an ensemble member axis when no CF attribute says so."""

TOLERANCE_DEG = 1e-4
"""Two coordinates closer than this (degrees) are the same grid line."""


def find_member(da: xr.DataArray) -> str | None:
    """The ensemble member dimension of a standardised field, or None.

    Raises
    ------
    UserError
        If a dimension is neither time, latitude, longitude, vertical nor a
        member, or if there are several member dimensions.
    """
    found = []
    for dim in da.dims:
        if dim in ("time", "lat", "lon", "level"):
            continue
        attrs = da[dim].attrs if dim in da.coords else {}
        if (
            str(attrs.get("standard_name", "")).lower() == "realization"
            or str(attrs.get("axis", "")).upper() == "E"
            or str(dim).lower() in MEMBER_NAMES
        ):
            found.append(dim)
        else:
            raise UserError(
                f"variable '{da.name}' has a dimension '{dim}' that is neither time, latitude, longitude, a vertical level "
                "nor an ensemble member (standard_name = 'realization'); select one value of it or mark it as members"
            )
    if len(found) > 1:
        raise UserError(f"variable '{da.name}' has several ensemble member dimensions ({', '.join(map(str, found))}); give one")
    return found[0] if found else None


def _members(field: xr.DataArray) -> xr.DataArray:
    member = find_member(field)
    if member is None:
        return field
    field = field.rename({member: "member"})
    if "member" not in field.coords:
        field = field.assign_coords(member=np.arange(field.sizes["member"], dtype=np.int32))
    attrs = {"standard_name": "realization", "long_name": "ensemble member", **field["member"].attrs}
    attrs.pop("axis", None)
    if np.issubdtype(field["member"].dtype, np.number):
        attrs.setdefault("units", "1")  # CF 1.8: the canonical units of standard_name realization
    field["member"].attrs = attrs
    log.info("%d ensemble members along '%s', classified member by member", field.sizes["member"], member)
    return field


def _level(field: xr.DataArray, settings: dict, grid: xr.DataArray) -> xr.DataArray:
    """Pick the model's vertical level(s); refuse a vertical axis the model has not got."""
    name = field.name
    present = "level" in field.dims
    levels = field["level"].values.astype(float) if present else np.array([])
    data_units = field["level"].attrs.get("units") if present else None
    if settings.get("level") is not None:
        if not present:
            return field
        wanted = float(settings["level"])
        change = units.conversion(settings.get("level_units"), data_units, f"the vertical axis of '{name}'") if settings.get("level_units") and data_units else None
        if change is not None:
            wanted = wanted * change[0] + change[1]
        hit = np.flatnonzero(np.isclose(levels, wanted, rtol=1e-6, atol=1e-6))
        if hit.size == 0:
            raise UserError(
                f"the model was fitted on level {settings['level']:g} {settings.get('level_units') or ''} but the levels of '{name}' are "
                f"{', '.join(f'{v:g}' for v in levels)} {data_units or ''}; give data on the model's level"
            )
        level_attrs = dict(field["level"].attrs)
        if settings.get("level_units"):
            level_attrs["units"] = settings["level_units"]
        return field.isel(level=int(hit[0]), drop=True).assign_coords(level=((), float(settings["level"]), level_attrs))
    if "level" in grid.dims:
        if not present:
            raise UserError(f"the model was fitted on {grid.sizes['level']} vertical levels but '{name}' has no vertical axis; give data on the model's levels")
        model_levels = grid["level"].values.astype(float)
        index = [np.flatnonzero(np.isclose(levels, v, rtol=1e-6, atol=1e-6)) for v in model_levels]
        if any(i.size == 0 for i in index):
            raise UserError(
                f"the model's levels {', '.join(f'{v:g}' for v in model_levels)} are not all among the levels of '{name}' "
                f"({', '.join(f'{v:g}' for v in levels)}); give data on the model's levels"
            )
        return field.isel(level=[int(i[0]) for i in index]).assign_coords(level=grid["level"])
    if present and field.sizes["level"] > 1:
        raise UserError(
            f"'{name}' has {field.sizes['level']} vertical levels but the model was fitted on a field without a vertical axis; "
            "give data on one level (the model's)"
        )
    return field.isel(level=0, drop=True) if present else field


def _units(field: xr.DataArray, target: str | None) -> xr.DataArray:
    source = field.attrs.get("units")
    if target is None:
        return field
    if source is None:
        log.warning("variable '%s' has no units attribute; taken to be in the model's units, %s", field.name, target)
        return field.assign_attrs(units=target)
    change = units.conversion(source, target, f"variable '{field.name}'")
    if change is None:
        return field
    factor, offset = change
    log.info("converting '%s' from %s to %s", field.name, source, target)
    converted = (field.astype(np.float64) * factor + offset).astype(np.float32)
    return converted.assign_attrs({**field.attrs, "units": target}).rename(field.name)


def _describe(lat: np.ndarray, lon: np.ndarray) -> str:
    def step(v):
        return f"{float(np.median(np.abs(np.diff(v)))):g}" if v.size > 1 else "-"

    return (
        f"{lat.size} x {lon.size} points, {step(lat)} x {step(lon)} degrees, "
        f"{lat.min():g} to {lat.max():g} N, {lon.min():g} to {lon.max():g} E"
    )


def _matches(target: np.ndarray, source: np.ndarray) -> np.ndarray | None:
    """Index in ``source`` (sorted) of each ``target`` value, or None if one is not a grid line of ``source``."""
    right = np.clip(np.searchsorted(source, target), 0, source.size - 1)
    left = np.clip(right - 1, 0, source.size - 1)
    index = np.where(np.abs(source[left] - target) < np.abs(source[right] - target), left, right)
    return index if np.all(np.abs(source[index] - target) <= TOLERANCE_DEG) else None


def _block(target: np.ndarray, source: np.ndarray) -> slice:
    """The smallest run of ``source`` (sorted) that brackets every ``target`` value."""
    first = max(int(np.searchsorted(source, target.min() + TOLERANCE_DEG, side="right")) - 1, 0)
    last = min(int(np.searchsorted(source, target.max() - TOLERANCE_DEG, side="left")), source.size - 1)
    return slice(first, last + 1)


def regrid(field: xr.DataArray, lat: np.ndarray, lon: np.ndarray, what: str, onto: str = "the model's grid") -> xr.DataArray:
    """Put ``field`` on the grid ``(lat, lon)``: the same points when present, else bilinear interpolation.

    Parameters
    ----------
    field : xarray.DataArray
        Dims include ``lat`` and ``lon`` (1-D, degrees, any order or
        longitude convention); lazy arrays stay lazy.
    lat : array
        Target latitudes, ascending (degrees north).
    lon : array
        Target longitudes, eastward and continuous (degrees east; may pass
        180 or 360, as :func:`regimes.data.select` gives them).
    what : str
        Names the data in messages.
    onto : str
        Names the target grid in messages.

    Returns
    -------
    xarray.DataArray
        On exactly the target coordinates. A global source is treated as
        periodic in longitude.

    Raises
    ------
    UserError
        If the source does not cover the target region.
    """
    lat, lon = np.asarray(lat, dtype=float), np.asarray(lon, dtype=float)
    field = field.drop_vars("cell_area", errors="ignore")
    field = field.isel(lat=np.argsort(field["lat"].values, kind="stable"))
    src_lat = field["lat"].values.astype(float)
    # longitudes continuous in a frame centred on the target region, so no seam falls inside it
    origin = (lon[0] + lon[-1]) / 2 - 180.0
    frame = origin + (field["lon"].values.astype(float) - origin) % 360.0
    order = np.argsort(frame, kind="stable")
    field = field.isel(lon=order).assign_coords(lon=("lon", frame[order], field["lon"].attrs))
    src_lon = frame[order]
    described = _describe(src_lat, src_lon)
    if src_lon.size > 1 and src_lon[0] + 360.0 - src_lon[-1] <= 1.5 * np.diff(src_lon).max():
        # a global grid: close the circle with one column on each side
        west = field.isel(lon=[-1]).assign_coords(lon=("lon", [src_lon[-1] - 360.0], field["lon"].attrs))
        east = field.isel(lon=[0]).assign_coords(lon=("lon", [src_lon[0] + 360.0], field["lon"].attrs))
        field = xr.concat([west, field, east], "lon")
        src_lon = field["lon"].values
    for values, source, axis in ((lat, src_lat, "latitudes"), (lon, src_lon, "longitudes")):
        if values.min() < source.min() - TOLERANCE_DEG or values.max() > source.max() + TOLERANCE_DEG:
            raise UserError(
                f"{what} covers {axis} {source.min():g} to {source.max():g} but {onto} spans "
                f"{values.min():g} to {values.max():g}; give data covering {onto} ({_describe(lat, lon)})"
            )
    interpolate = {}
    for dim, values, source in (("lat", lat, src_lat), ("lon", lon, src_lon)):
        index = _matches(values, source)
        if index is not None:
            field = field.isel({dim: index})
        else:
            field = field.isel({dim: _block(values, source)})
            interpolate[dim] = np.clip(values, source.min(), source.max())
    if interpolate:
        log.warning("interpolating %s bilinearly from its grid (%s) to %s (%s)", what, described, onto, _describe(lat, lon))
        field = field.interp(interpolate, method="linear").astype(field.dtype)
    return field.assign_coords(lat=("lat", lat), lon=("lon", lon))


def to_model(field: xr.DataArray, model, period: list[str] | None = None) -> xr.DataArray:
    """A standardised field (:func:`regimes.data.standardise`) on a saved model's grid, units and level.

    Parameters
    ----------
    field : xarray.DataArray
        Dims ``time``, ``lat``, ``lon``, perhaps ``level`` and a member dimension.
    model : regimes.model.RegimeModel
    period : [str, str], optional
        First and last day to classify.

    Returns
    -------
    xarray.DataArray
        Dims ``([member,] time, *model grid dims)``, lazy, in the model's units;
        ``member`` is chunked one member at a time.
    """
    settings, grid = model.settings, model.dataset["mask"]
    name = field.name
    field = _members(field)
    field = _level(field, settings, grid)
    field = _units(field, settings.get("units"))
    if period is not None:
        field = select_period(field, period, "data.period")
    field = regrid(field, grid["lat"].values, grid["lon"].values, f"variable '{name}'")
    spatial = tuple(d for d in field.dims if d not in ("member", "time"))
    if set(spatial) != set(grid.dims):
        raise UserError(f"variable '{name}' has grid dims ({', '.join(spatial)}) but the model's grid has ({', '.join(grid.dims)}); give data on the model's grid")
    field = field.transpose(*(("member",) if "member" in field.dims else ()), "time", *grid.dims)
    for dim in grid.dims:
        field = field.assign_coords({dim: grid[dim]})
    return field.chunk({"member": 1} if "member" in field.dims else {})
