"""Regenerate regimes/coastline_110m.npz, the coastline bundled with the package.

Source: Natural Earth 1:110m admin-0 countries (public domain,
https://www.naturalearthdata.com/about/terms-of-use/), as shipped in the
geopandas 0.14.4 wheel on the Python package index
(geopandas/datasets/naturalearth_lowres). The country polygons are merged
into land masses; the outlines of the land masses are the coastlines (the
borders between countries vanish in the merge). Edges that only close
polygons along the 180 meridian or the south pole are dropped.

Usage::

    python tools/make_coastline.py                       # fetches the wheel with pip download
    python tools/make_coastline.py geopandas-0.14.4-py3-none-any.whl

Needs shapely and pyshp (both come with cartopy).
"""

from __future__ import annotations

import io
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np
import shapefile
import shapely
from shapely.geometry import shape

WHEEL = "geopandas==0.14.4"
INSIDE = "geopandas/datasets/naturalearth_lowres/naturalearth_lowres"
TARGET = Path(__file__).resolve().parents[1] / "regimes" / "coastline_110m.npz"
EDGE = 1e-6  # degrees: how close to 180 or -90 a vertex must be to count as lying on it


def fetch_wheel(folder: Path) -> Path:
    subprocess.run([sys.executable, "-m", "pip", "download", "--no-deps", "--quiet", WHEEL, "-d", str(folder)], check=True)
    return next(folder.glob("geopandas-*.whl"))


def land(wheel: Path):
    with zipfile.ZipFile(wheel) as z:
        parts = {ext: io.BytesIO(z.read(f"{INSIDE}.{ext}")) for ext in ("shp", "shx", "dbf")}
    reader = shapefile.Reader(**parts)
    polygons = [shape(s.__geo_interface__) for s in reader.shapes()]
    return shapely.unary_union([shapely.make_valid(p) for p in polygons])


def on_frame(a: np.ndarray, b: np.ndarray) -> bool:
    """An edge that lies along the 180 meridian or the south pole (a polygon closure, not a coast)."""
    along_180 = abs(abs(a[0]) - 180) < EDGE and abs(abs(b[0]) - 180) < EDGE
    along_pole = a[1] < -90 + EDGE and b[1] < -90 + EDGE
    return along_180 or along_pole


def coast_lines(merged) -> list[np.ndarray]:
    lines = []
    for ring in shapely.get_parts(merged.boundary):
        xy = np.asarray(ring.coords)
        piece = [xy[0]]
        for a, b in zip(xy[:-1], xy[1:]):
            if on_frame(a, b):
                if len(piece) > 1:
                    lines.append(np.array(piece))
                piece = [b]
            else:
                piece.append(b)
        if len(piece) > 1:
            lines.append(np.array(piece))
    return lines


def main(argv: list[str]) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        wheel = Path(argv[0]) if argv else fetch_wheel(Path(tmp))
        lines = coast_lines(land(wheel))
    points = np.concatenate(lines).astype(np.float32)
    starts = np.cumsum([0] + [len(line) for line in lines[:-1]]).astype(np.int32)
    np.savez_compressed(
        TARGET,
        lonlat=points,
        starts=starts,
        source=np.array("Natural Earth 1:110m admin-0 countries (public domain), merged to land outlines; from geopandas 0.14.4"),
    )
    print(f"wrote {TARGET}: {len(lines)} lines, {len(points)} points, {TARGET.stat().st_size} bytes")


if __name__ == "__main__":
    main(sys.argv[1:])
