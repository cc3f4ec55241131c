"""Map geometry: the region a grid covers, the projection that suits it, and drawing a field on it.

Longitudes may come in either convention (-180..180 or 0..360) and a region
may cross the 0 or the 180 meridian: :func:`region_of` finds the contiguous
eastward span of the grid's longitudes (the complement of the largest gap
around the circle), and fields are drawn in a plate carree frame centred on
that span, so no seam runs through the data.

Projection rule of ``auto`` (common practice for regional climate maps):
polar stereographic for polar caps, Lambert conformal conic for mid-latitude
sectors, plate carree for tropical bands and regions that straddle the equator.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import cartopy.crs as ccrs
import matplotlib.path as mpath
import numpy as np
import xarray as xr

from . import coastline

log = logging.getLogger("regimes")

CONIC = ("lambert-conformal", "albers-equal-area")

TROPICS = 30.0
"""Regions within this latitude of the equator are tropical bands (degrees)."""

POLAR_EDGE = 80.0
"""A region reaching this latitude over at least half the circle is a polar cap (degrees)."""


@dataclass(frozen=True)
class Region:
    """A latitude-longitude box: ``west`` to ``west + span`` eastward, ``south`` to ``north`` (degrees)."""

    west: float
    span: float
    south: float
    north: float
    full_circle: bool

    @property
    def centre(self) -> float:
        """Central longitude in -180..180 (degrees east)."""
        return float((self.west + self.span / 2 + 180.0) % 360.0 - 180.0)

    @property
    def southern(self) -> bool:
        """Mostly south of the equator."""
        return self.south + self.north < 0

    @property
    def frame(self) -> ccrs.PlateCarree:
        """Plate carree frame centred on the region: its longitudes run -span/2..span/2 without a seam."""
        return ccrs.PlateCarree(central_longitude=self.centre)


def region_of(lat: np.ndarray, lon: np.ndarray) -> Region:
    """The region covered by grid-point centres ``lat`` and ``lon`` (degrees, any longitude convention).

    The longitudes' span is the circle minus its largest gap between
    neighbouring points; a grid whose largest gap is no larger than 1.5 of
    its typical spacing goes all the way round.
    """
    lons = np.unique(np.mod(np.asarray(lon, dtype=float), 360.0))
    lat = np.asarray(lat, dtype=float)
    south, north = float(np.nanmin(lat)), float(np.nanmax(lat))
    if lons.size < 2:
        return Region(float(lons[0]), 0.0, south, north, False)
    gaps = np.diff(np.append(lons, lons[0] + 360.0))
    widest = int(np.argmax(gaps))
    full = gaps[widest] <= 1.5 * np.median(gaps)
    if full:
        return Region(-180.0, 360.0, south, north, True)
    west = lons[(widest + 1) % lons.size]
    return Region(float((west + 180.0) % 360.0 - 180.0), float(360.0 - gaps[widest]), south, north, False)


def choose(region: Region, name: str = "auto") -> str:
    """The projection for ``region``: ``name`` itself, or the ``auto`` rule (see the module docstring).

    A cone cannot hold a region that reaches both sides of the equator: a
    conic ``name`` is then replaced by plate carree, with a warning.
    """
    straddles = region.south < 0 < region.north
    if name in CONIC and straddles:
        log.warning("figures.projection = '%s' cannot show latitudes %g to %g (both sides of the equator); drawing plate carree",
                    name, region.south, region.north)
        return "plate-carree"
    if name != "auto":
        return name
    if max(abs(region.south), abs(region.north)) <= TROPICS or straddles:
        return "plate-carree"
    poleward = max(abs(region.south), abs(region.north))
    if (poleward >= POLAR_EDGE and region.span >= 180.0) or (region.full_circle and poleward >= 60.0):
        return "polar-stereographic"
    return "lambert-conformal"


def projection(region: Region, name: str) -> ccrs.Projection:
    """The cartopy projection called ``name`` (one of :data:`regimes.config.PROJECTIONS` but ``auto``), centred on ``region``."""
    south, north, centre = region.south, region.north, region.centre
    northern = not region.southern
    if name == "polar-stereographic":
        pole = ccrs.NorthPolarStereo if northern else ccrs.SouthPolarStereo
        return pole(central_longitude=0.0 if region.full_circle else centre)
    third = (north - south) / 6.0
    parallels = (south + third, north - third)
    middle = (south + north) / 2.0
    if name == "lambert-conformal":
        # the cone opens towards the equator; cut it off beyond the region's equatorward edge
        cutoff = max(-89.0, south - 15.0) if northern else min(89.0, north + 15.0)
        return ccrs.LambertConformal(central_longitude=centre, central_latitude=middle, standard_parallels=parallels, cutoff=cutoff)
    if name == "albers-equal-area":
        return ccrs.AlbersEqualArea(central_longitude=centre, central_latitude=middle, standard_parallels=parallels)
    return ccrs.PlateCarree(central_longitude=centre)


def _outline(region: Region, steps: int = 60) -> np.ndarray:
    """The region's edge in its own frame, (n, 2), closed, densified so that it bends with the projection."""
    half = region.span / 2.0
    x = np.linspace(-half, half, steps)
    y = np.linspace(region.south, region.north, steps)
    edge = [np.c_[x, np.full(steps, region.south)], np.c_[np.full(steps, half), y],
            np.c_[x[::-1], np.full(steps, region.north)], np.c_[np.full(steps, -half), y[::-1]]]
    return np.concatenate(edge)


def aspect(region: Region, crs: ccrs.Projection) -> float:
    """Height / width of the region drawn in ``crs``."""
    if region.full_circle and isinstance(crs, ccrs.Stereographic):
        return 1.0
    xy = crs.transform_points(region.frame, *_outline(region).T)[:, :2]
    width, height = np.ptp(xy[:, 0]), np.ptp(xy[:, 1])
    return float(height / width) if width > 0 else 1.0


def frame_axes(ax, region: Region) -> None:
    """Set the extent and outline of a GeoAxes to ``region``, with labelled gridlines."""
    if region.full_circle and isinstance(ax.projection, ccrs.Stereographic):
        extent = [-180, 180, -90.0, region.north] if region.southern else [-180, 180, region.south, 90.0]
        ax.set_extent(extent, ccrs.PlateCarree())
        theta = np.linspace(0, 2 * np.pi, 200)
        ax.set_boundary(mpath.Path(np.c_[np.cos(theta), np.sin(theta)] * 0.5 + 0.5), transform=ax.transAxes)
    else:
        half = region.span / 2.0
        ax.set_extent([-half, half, region.south, region.north], region.frame)
        if not isinstance(ax.projection, ccrs.PlateCarree):
            to_data = region.frame._as_mpl_transform(ax) - ax.transData
            ax.set_boundary(to_data.transform_path(mpath.Path(_outline(region))))
    lines = ax.gridlines(
        crs=ccrs.PlateCarree(), draw_labels=True, x_inline=False, y_inline=False, rotate_labels=False,
        linewidth=0.4, color="#7a7a7a", alpha=0.6, linestyle=(0, (2, 3)),
    )
    lines.n_steps = 30
    lines.right_labels = False
    lines.top_labels, lines.bottom_labels = region.southern, not region.southern  # longitudes on the equatorward edge
    lines.xlabel_style = lines.ylabel_style = {"size": 7, "color": "#404040"}


def continuous(da: xr.DataArray, region: Region) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Longitudes in the region's frame (increasing, no seam), latitudes, and values (lat, lon) to draw.

    A grid that goes all the way round gets its first column repeated at the
    end, so that contours close across the seam.
    """
    da = da.transpose("lat", "lon")
    x = (np.asarray(da["lon"].values, dtype=float) - region.centre + 180.0) % 360.0 - 180.0
    order = np.argsort(x, kind="stable")
    x, values = x[order], np.asarray(da.values, dtype=float)[:, order]
    if region.full_circle:
        x, values = np.append(x, x[0] + 360.0), np.concatenate([values, values[:, :1]], axis=1)
    lat = np.asarray(da["lat"].values, dtype=float)
    rows = np.argsort(lat, kind="stable")
    return x, lat[rows], values[rows]


def draw_field(ax, da: xr.DataArray, region: Region, levels: np.ndarray, cmap) -> object:
    """Filled contours with contour lines (negative dashed) of a (lat, lon) field, and coastlines.

    Returns the filled-contour set (for a colour bar). Points missing in
    ``da`` (left out of the analysis) stay blank.
    """
    x, y, values = continuous(da, region)
    filled = ax.contourf(x, y, values, levels=levels, cmap=cmap, extend="neither", transform=region.frame)
    lines = [level for level in levels if level != 0]
    ax.contour(x, y, values, levels=lines, colors="#2b2b2b", linewidths=0.5, negative_linestyles="dashed", transform=region.frame)
    coastline.draw(ax, region)
    frame_axes(ax, region)
    return filled
