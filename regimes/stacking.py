"""Between grids and matrices: stack sample and feature dims, drop and restore missing points.

Every analysis stage sees a 2-D ``(sample, feature)`` array. A :class:`Layout`
remembers the grid the features came from and which grid points were left
out (missing at every sample: land, ice), so results can be put back on the
grid with those points missing.
"""

from __future__ import annotations

import numpy as np
import xarray as xr


class Layout:
    """The grid behind the ``feature`` dimension.

    Parameters
    ----------
    template : xarray.DataArray
        A field on the grid (any sample dims are ignored); only its feature
        dims and their coordinates are kept.
    keep : numpy.ndarray of bool
        One flag per grid point (in C order of ``feature_dims``): True where
        the point takes part in the analysis.
    sample_dim : str
        The dimension that becomes ``sample`` (``time`` for daily maps).
    """

    def __init__(self, template: xr.DataArray, keep: np.ndarray, sample_dim: str = "time"):
        self.sample_dim = sample_dim
        self.feature_dims = tuple(d for d in template.dims if d != sample_dim)
        self.coords = {d: template[d].reset_coords(drop=True) for d in self.feature_dims}
        self.keep = np.asarray(keep, dtype=bool).ravel()
        self.index = np.flatnonzero(self.keep)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(self.coords[d].size for d in self.feature_dims)

    def stack(self, field: xr.DataArray) -> xr.DataArray:
        """``field`` (sample_dim, *feature_dims) -> ``(sample, feature)``, kept points only (lazy)."""
        field = field.transpose(self.sample_dim, *self.feature_dims)
        data = field.data.reshape(field.shape[0], -1)[:, self.index]
        return xr.DataArray(
            data,
            dims=("sample", "feature"),
            coords={"sample": field[self.sample_dim].values},
            attrs=field.attrs,
            name=field.name,
        )

    def flatten(self, grid: xr.DataArray) -> xr.DataArray:
        """A field without sample dim (e.g. weights) -> ``(feature)``, kept points only."""
        values = np.asarray(grid.transpose(*self.feature_dims).values).ravel()[self.index]
        return xr.DataArray(values, dims="feature", name=grid.name, attrs=grid.attrs)

    def unstack(self, values: xr.DataArray) -> xr.DataArray:
        """Put a ``feature`` dim back on the grid; points left out are NaN (in memory)."""
        other = [d for d in values.dims if d != "feature"]
        values = values.transpose(*other, "feature")
        full = np.full(values.shape[:-1] + (self.keep.size,), np.nan, dtype=np.result_type(values.dtype, np.float32))
        full[..., self.index] = np.asarray(values.values)
        coords = {d: values[d] for d in other if d in values.coords}
        coords.update(self.coords)
        out = xr.DataArray(full.reshape(values.shape[:-1] + self.shape), dims=(*other, *self.feature_dims), coords=coords)
        out.attrs = dict(values.attrs)
        return out.rename(values.name)

    def mask(self) -> xr.DataArray:
        """1 where a grid point takes part in the analysis, 0 where it was left out."""
        return xr.DataArray(self.keep.reshape(self.shape).astype("int8"), dims=self.feature_dims, coords=self.coords)
