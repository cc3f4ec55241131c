"""Coastlines that draw without a network.

cartopy fetches its Natural Earth shapes on first use, which fails offline.
Here cartopy's own coastline files are used only when they are already on
disk (its ``pre_existing_data_dir`` or ``data_dir``); otherwise the coastline
bundled with the package is drawn: Natural Earth 1:110m (public domain),
merged from the admin-0 country outlines by ``tools/make_coastline.py`` and
stored as line vertices in ``coastline_110m.npz``. Nothing here downloads.
"""

from __future__ import annotations

import functools
from pathlib import Path

import cartopy
import numpy as np
import shapely
from cartopy.io import Downloader
from cartopy.io.shapereader import Reader

BUNDLED = Path(__file__).with_name("coastline_110m.npz")

STYLE = {"facecolor": "none", "edgecolor": "#1f1f1f", "linewidth": 0.7}

FINE_SPAN = 40.0
"""Regions narrower than this (degrees of longitude and latitude) prefer cartopy's 1:50m coastline when present."""


@functools.lru_cache(maxsize=1)
def bundled() -> list[shapely.LineString]:
    """The bundled coastline as line strings in longitude, latitude (degrees)."""
    with np.load(BUNDLED) as stored:
        points, starts = stored["lonlat"].astype(float), stored["starts"]
    return [shapely.LineString(line) for line in np.split(points, starts[1:])]


def cartopy_file(resolution: str) -> Path | None:
    """cartopy's Natural Earth coastline shapefile at ``resolution`` if it is already on disk, else None (never downloads)."""
    fields = {"config": cartopy.config, "category": "physical", "name": "coastline", "resolution": resolution}
    finder = Downloader.from_config(("shapefiles", "natural_earth", resolution, "physical", "coastline"))
    for path in (finder.pre_downloaded_path(fields), finder.target_path(fields)):
        if path is not None and Path(path).is_file():
            return Path(path)
    return None


def source(span: float = 360.0) -> tuple[str, list]:
    """Where the coastline comes from ('cartopy 50m', 'cartopy 110m' or 'bundled 110m') and its geometries."""
    for resolution in (("50m", "110m") if span < FINE_SPAN else ("110m",)):
        path = cartopy_file(resolution)
        if path is not None:
            return f"cartopy {resolution}", list(Reader(path).geometries())
    return "bundled 110m", bundled()


def clip(lines: list, region, margin: float = 5.0) -> list:
    """The parts of ``lines`` (longitude, latitude) inside ``region`` plus ``margin`` degrees, in the region's frame.

    Longitudes are shifted into the region's plate carree frame
    (-span/2..span/2 about its centre); a line is cut where it jumps across
    the frame's seam, on the far side of the globe from the region.
    """
    half = region.span / 2.0 + margin
    window = shapely.box(-min(half, 180.0), region.south - margin, min(half, 180.0), region.north + margin)
    kept = []
    for line in lines:
        for part in shapely.get_parts(line):
            xy = np.asarray(part.coords)
            x = (xy[:, 0] - region.centre + 180.0) % 360.0 - 180.0
            for piece in np.split(np.c_[x, xy[:, 1]], np.flatnonzero(np.abs(np.diff(x)) > 180.0) + 1):
                if len(piece) > 1:
                    inside = shapely.LineString(piece).intersection(window)
                    if not inside.is_empty:
                        kept.append(inside)
    return kept


def draw(ax, region) -> str:
    """Add coastlines to a cartopy GeoAxes showing ``region`` (:class:`regimes.maps.Region`); returns the source used.

    The artist gets the gid ``coastline``.
    """
    name, lines = source(max(region.span, region.north - region.south))
    artist = ax.add_geometries(clip(lines, region), crs=region.frame, **STYLE)
    artist.set_gid("coastline")
    artist.set_label(name)
    return name
