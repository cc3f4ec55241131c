"""The saved regime model: everything needed to classify other data later.

A :class:`RegimeModel` is one xarray Dataset (selection, climatology
coefficients, weights, EOFs, centroids / mixture parameters, names) stored as
NetCDF, never pickle. The file carries a format version and a SHA-256
checksum of its arrays and its settings attribute, verified when it is loaded.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import xarray as xr

from .cluster import GaussianMixtureRegimes, KMeansRegimes
from .eof import EOF
from .errors import UserError
from .stacking import Layout

FORMAT_VERSION = 2
"""2: the checksum also covers the ``settings`` attribute."""


def _canonical(values: np.ndarray) -> bytes:
    """Bytes of an array independent of its on-disk type: float64, int64, or joined text."""
    if values.dtype.kind == "f":
        return np.ascontiguousarray(values, dtype=np.float64).tobytes()
    if values.dtype.kind in "iub":
        return np.ascontiguousarray(values, dtype=np.int64).tobytes()
    return "|".join(map(str, values.ravel())).encode()


def checksum(ds: xr.Dataset) -> str:
    """SHA-256 over the ``settings`` attribute and the names, shapes and values of every variable, in sorted order."""
    h = hashlib.sha256()
    h.update(str(ds.attrs.get("settings", "")).encode())
    for name in sorted(ds.variables):
        values = np.asarray(ds[name].values)
        h.update(name.encode())
        h.update(str(values.shape).encode())
        h.update(_canonical(values))
    return h.hexdigest()


class RegimeModel:
    """A fitted regime model held as an xarray Dataset.

    Parameters
    ----------
    dataset : xarray.Dataset
        Variables ``mask``, ``weight`` (grid), ``climatology`` (term, grid),
        ``eof_mean`` (grid), ``eof`` (mode, grid), ``eigenvalue`` (mode),
        ``centroid`` (regime, mode), for mixtures ``covariance`` and
        ``mixing_weight``; ``frequency`` and ``mean_duration`` (regime) of
        the fitting data; attribute ``settings`` (JSON of the selection and
        method settings).
    """

    def __init__(self, dataset: xr.Dataset):
        self.dataset = dataset

    @property
    def settings(self) -> dict:
        """Selection, anomaly and method settings the model was fitted with."""
        return json.loads(self.dataset.attrs["settings"])

    def layout(self) -> Layout:
        """The model's grid and the points it uses (``mask`` = 1)."""
        mask = self.dataset["mask"]
        return Layout(mask, mask.values.ravel() == 1)

    def weights(self, layout: Layout) -> xr.DataArray:
        """EOF weight of each used point, dims ``(feature)``."""
        return layout.flatten(self.dataset["weight"])

    def climatology(self) -> xr.DataArray | None:
        """Reference climatology coefficients ``(term, grid)``, or None when the model removed none."""
        if "climatology" not in self.dataset:
            return None
        clim = self.dataset["climatology"]
        terms = clim.attrs["terms"].split()
        if self.settings["climatology"] == "monthly":
            terms = [int(t) for t in terms]
        return clim.assign_coords(term=terms)

    def eof(self, layout: Layout) -> EOF:
        """The fitted EOFs as an :class:`~regimes.eof.EOF` on the used points, ready to ``transform``."""
        ds = self.dataset
        eof = EOF(modes=ds.sizes["mode"])
        eof.weights_ = self.weights(layout)
        eof.mean_ = layout.flatten(ds["eof_mean"])
        patterns = ds["eof"].transpose("mode", *layout.feature_dims).values.reshape(ds.sizes["mode"], -1)[:, layout.index]
        eof.components_ = xr.DataArray(patterns, dims=("mode", "feature"), coords={"mode": ds["mode"].values})
        eof.eigenvalues_ = ds["eigenvalue"]
        return eof

    def clusterer(self) -> KMeansRegimes | GaussianMixtureRegimes:
        """The fitted regimes (centroids, and for mixtures covariances and weights), ready to ``predict``."""
        ds, s = self.dataset, self.settings
        centroids = ds["centroid"].drop_vars("regime_name", errors="ignore")
        if s["method"] == "gaussian-mixture":
            found = GaussianMixtureRegimes(k=s["k"])
            found.covariances_ = ds["covariance"].drop_vars("regime_name", errors="ignore")
            found.mixing_weights_ = ds["mixing_weight"].drop_vars("regime_name", errors="ignore")
        else:
            found = KMeansRegimes(k=s["k"])
        found.centroids_ = centroids
        return found

    def stamped(self, attrs: dict | None = None) -> xr.Dataset:
        """The dataset to write, with extra global ``attrs``, the format version and the checksum."""
        ds = self.dataset.copy()
        ds.attrs.update(attrs or {})
        ds.attrs["model_format_version"] = FORMAT_VERSION
        ds.attrs["model_checksum"] = checksum(ds)
        return ds

    @classmethod
    def load(cls, path: str | Path) -> "RegimeModel":
        """Read a model file; refuse one of another format or whose arrays changed."""
        try:
            with xr.open_dataset(path, engine="netcdf4") as opened:
                ds = opened.load()
        except (OSError, ValueError, RuntimeError) as err:
            raise UserError(f"model file '{path}' cannot be read ({err}); give a model.nc written by 'regimes run'") from None
        version = ds.attrs.get("model_format_version")
        if version != FORMAT_VERSION:
            shown = "none" if version is None else str(version)
            raise UserError(f"model file '{path}' has format version {shown}, expected {FORMAT_VERSION}; refit the model with this version")
        stored = ds.attrs.get("model_checksum")
        if stored != checksum(ds):
            raise UserError(f"model file '{path}' fails its checksum (corrupted or edited); refit or restore the model")
        return cls(ds)
