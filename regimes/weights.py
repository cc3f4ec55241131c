"""Area weights of grid points for the EOF analysis.

Weighting each point by the square root of the area it represents makes the
covariance of the weighted field area-weighted (common practice; reviewed in
Hannachi, Jolliffe & Stephenson 2007, Int. J. Climatol. 27, 1119-1152).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .errors import UserError

EARTH_RADIUS_M = 6371008.8
"""Earth's mean radius R1 in metres (IUGG; Moritz 2000, J. Geodesy 74, GRS80)."""


def cell_area(lat_bounds: np.ndarray, lon_bounds: np.ndarray, radius: float = EARTH_RADIUS_M) -> np.ndarray:
    """Exact area of latitude-longitude cells on a sphere.

    ``A = R^2 * dlon * (sin(lat2) - sin(lat1))`` with ``dlon`` in radians.

    Parameters
    ----------
    lat_bounds : array (nlat, 2)
        Southern and northern edges, degrees north.
    lon_bounds : array (nlon, 2)
        Western and eastern edges, degrees east.
    radius : float
        Sphere radius in metres.

    Returns
    -------
    numpy.ndarray (nlat, nlon)
        Cell areas in square metres.
    """
    lat_bounds = np.clip(np.asarray(lat_bounds, dtype=float), -90.0, 90.0)
    band = np.abs(np.diff(np.sin(np.deg2rad(lat_bounds)), axis=1))[:, 0]
    width = np.deg2rad(np.abs(np.diff(np.asarray(lon_bounds, dtype=float), axis=1)))[:, 0]
    return radius**2 * band[:, None] * width[None, :]


def midpoint_bounds(centres: np.ndarray, clip: tuple[float, float] | None = None) -> np.ndarray:
    """Cell edges halfway between 1-D cell centres; the outer edges mirror the inner ones."""
    c = np.asarray(centres, dtype=float)
    if c.size == 1:
        raise UserError("a single latitude or longitude has no cell width; use eof.weighting = 'coslat' or 'none'")
    mid = (c[1:] + c[:-1]) / 2
    edges = np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
    if clip is not None:
        edges = np.clip(edges, *clip)
    return np.stack([edges[:-1], edges[1:]], axis=1)


def area_weights(field: xr.DataArray, method: str) -> xr.DataArray:
    """Weights per grid point: sqrt(cos lat), sqrt(cell area), or ones.

    Parameters
    ----------
    field : xarray.DataArray
        Selected field with 1-D ``lat`` and ``lon``; for ``cell-area`` an
        optional ``cell_area`` coordinate (m^2, attached when the data are read
        from a CF cell-measures variable or from coordinate bounds).
    method : {'coslat', 'cell-area', 'none'}
        ``cell-area`` uses the ``cell_area`` coordinate, else the exact
        area of cells whose edges lie halfway between cell centres. Areas are
        divided by their largest value before the square root.

    Returns
    -------
    xarray.DataArray
        Dims ``(lat, lon)``, dimensionless, at most 1.
    """
    ones = xr.ones_like(field["lat"] * field["lon"], dtype=float).transpose("lat", "lon")
    if method == "none":
        return ones.rename("weight")
    if method == "coslat":
        return (np.sqrt(np.clip(np.cos(np.deg2rad(field["lat"])), 0.0, None)) * ones).rename("weight")
    if "cell_area" in field.coords:
        area = field["cell_area"].reset_coords(drop=True).transpose("lat", "lon").astype(float)
    else:
        edges = cell_area(midpoint_bounds(field["lat"].values, (-90, 90)), midpoint_bounds(field["lon"].values))
        area = ones * edges
    return np.sqrt(area / float(area.max())).rename("weight").drop_vars("cell_area", errors="ignore")
