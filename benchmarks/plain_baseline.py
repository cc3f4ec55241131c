"""Plain in-memory baseline of the regime job, for ``pipeline_vs_plain.py``.

The same steps as ``regimes run`` with the benchmark's config, done the
ordinary way with xarray and scikit-learn, everything loaded in memory:

1. open the file with xarray and load the whole field;
2. climatology: ``groupby('time.dayofyear').mean()``, then anomalies;
3. keep December, January and February;
4. weight every grid point by sqrt(cos latitude);
5. ``sklearn.decomposition.PCA(n_components=10)`` on the (day x point) matrix;
6. ``sklearn.cluster.KMeans(n_clusters=4, n_init=100, random_state=1)`` on the PCs;
7. composites: mean anomaly and mean raw field of each cluster (``groupby``);
8. write the labels and the composites with ``to_netcdf``.

Usage::

    python benchmarks/plain_baseline.py INPUT.nc OUTPUT_DIR [--variable psl]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import xarray as xr
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA

MONTHS = [12, 1, 2]
MODES = 10
K = 4
RESTARTS = 100
SEED = 1


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("input", help="daily NetCDF file with (time, lat, lon)")
    p.add_argument("output", help="output folder (created)")
    p.add_argument("--variable", default="psl")
    args = p.parse_args(argv)
    out = Path(args.output)
    out.mkdir(parents=True, exist_ok=True)

    field = xr.open_dataset(args.input)[args.variable].load()

    climatology = field.groupby("time.dayofyear").mean("time")
    anomaly = field.groupby("time.dayofyear") - climatology
    winter = np.isin(field["time"].dt.month.values, MONTHS)
    anomaly = anomaly.isel(time=winter).drop_vars("dayofyear", errors="ignore")
    raw = field.isel(time=winter)

    weight = np.sqrt(np.cos(np.deg2rad(anomaly["lat"])))
    weighted = anomaly * weight
    matrix = weighted.values.reshape(weighted.sizes["time"], -1)

    pcs = PCA(n_components=MODES).fit_transform(matrix)
    km = KMeans(n_clusters=K, n_init=RESTARTS, random_state=SEED).fit(pcs)

    labels = xr.DataArray(km.labels_.astype(np.int8) + 1, dims="time", coords={"time": anomaly["time"]}, name="label")
    composites = xr.Dataset(
        {
            "anomaly_composite": anomaly.groupby(labels).mean("time"),
            f"{args.variable}_composite": raw.groupby(labels).mean("time"),
        }
    )
    labels.to_dataset().to_netcdf(out / "labels.nc")
    composites.to_netcdf(out / "composites.nc")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
