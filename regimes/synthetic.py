"""Synthetic daily fields with planted circulation regimes, for tests and demos.

The fields are invented: a constant background pressure, an annual cycle, one
of ``k`` fixed regime patterns per day chosen by a Markov chain, and spatially
smooth red noise. Because the regime sequence and the patterns are known, the
output can be used to check that a classification recovers them.

Public functions
----------------
planted_regimes
    Build a CF-style dataset and the matching planted truth.
write_netcdf
    Write a dataset with zlib compression, optionally packed to ``int16``.
"""

from __future__ import annotations

import bisect
import re
from datetime import datetime, timezone
from os import PathLike

import numpy as np
import xarray as xr
from scipy import ndimage, signal

__all__ = ["planted_regimes", "write_netcdf", "default_transition", "stationary_distribution"]

#: Background mean sea-level pressure, Pa.
BACKGROUND_PA = 101000.0

# Calendars returned as numpy datetime64; every other calendar uses cftime.
_NUMPY_CALENDARS = {"standard", "gregorian"}

# Number of days generated per block of noise (bounds temporary memory).
_BLOCK_DAYS = 512

# int16 packing: data are mapped into [-_PACK_HALF, _PACK_HALF]; the code
# -32768 is the fill value and +-32767 are left free as a rounding margin.
_PACK_HALF = 32766
_PACK_FILL = np.int16(-32768)

# Pattern selection: wanted largest |correlation| between two planted
# patterns, wanted smallest RMS difference (fraction of the peak value) and
# number of candidates tried per pattern. These, with the pattern widths in
# _candidate_pattern, are tuned so that the default field is recoverable by
# PCA + k-means (adjusted Rand index about 0.97 or better).
_TARGET_CORR = 0.35
_TARGET_DISTANCE = 0.55
_PATTERN_TRIES = 1000


# --------------------------------------------------------------------------
# transition matrix helpers
# --------------------------------------------------------------------------


def default_transition(k: int) -> np.ndarray:
    """Return the default ``(k, k)`` regime transition matrix.

    Parameters
    ----------
    k : int
        Number of regimes, at least 1.

    Returns
    -------
    numpy.ndarray
        Row-stochastic matrix (dimensionless probabilities per day). The
        diagonal (probability of staying in the same regime from one day to
        the next) runs linearly from 0.9 for the first regime to 0.8 for the
        last, i.e. mean residence times of 10 to 5 days; the rest of each row
        is spread evenly over the other regimes.
    """
    if k < 1:
        raise ValueError(f"k = {k}: need at least one regime")
    if k == 1:
        return np.ones((1, 1))
    stay = np.linspace(0.9, 0.8, k)
    matrix = np.empty((k, k))
    matrix[:] = ((1.0 - stay) / (k - 1))[:, None]
    np.fill_diagonal(matrix, stay)
    return matrix


def stationary_distribution(transition) -> np.ndarray:
    """Return the stationary distribution of a row-stochastic matrix.

    Parameters
    ----------
    transition : array_like, shape (k, k)
        Row-stochastic transition matrix; ``transition[i, j]`` is the
        probability of moving from regime ``i`` to regime ``j`` in one day.

    Returns
    -------
    numpy.ndarray, shape (k,)
        Probabilities ``pi`` (dimensionless, summing to 1) with
        ``pi @ transition == pi``.
    """
    p = np.asarray(transition, dtype=float)
    k = p.shape[0]
    system = np.vstack([p.T - np.eye(k), np.ones((1, k))])
    rhs = np.zeros(k + 1)
    rhs[-1] = 1.0
    pi, *_ = np.linalg.lstsq(system, rhs, rcond=None)
    pi = np.clip(pi, 0.0, None)
    return pi / pi.sum()


def _check_transition(transition, k: int) -> np.ndarray:
    if transition is None:
        return default_transition(k)
    p = np.array(transition, dtype=float)
    if p.shape != (k, k):
        raise ValueError(f"transition has shape {p.shape}; expected ({k}, {k}) for k = {k}")
    if not np.all(np.isfinite(p)) or np.any(p < 0):
        raise ValueError("transition must contain finite, non-negative probabilities")
    rows = p.sum(axis=1)
    if not np.allclose(rows, 1.0, atol=1e-6):
        raise ValueError(f"each row of transition must sum to 1; row sums are {np.round(rows, 6).tolist()}")
    return p / rows[:, None]


# --------------------------------------------------------------------------
# building blocks
# --------------------------------------------------------------------------


def _daily_time(start: str, years: int, calendar: str) -> xr.DataArray:
    """Daily time coordinate covering ``years`` whole calendar years from ``start``."""
    match = re.fullmatch(r"\s*(-?\d{1,4})-(\d{2})-(\d{2})\s*", str(start))
    if not match:
        raise ValueError(f"start = {start!r}: expected a date written YYYY-MM-DD")
    if years < 1:
        raise ValueError(f"years = {years}: need at least one year")
    year, month, day = int(match[1]), match[2], match[3]
    first = f"{year:04d}-{month}-{day}"
    end = f"{year + years:04d}-{month}-{day}"
    calendar = str(calendar).lower()
    use_cftime = calendar not in _NUMPY_CALENDARS
    try:
        index = xr.date_range(
            first, end, freq="D", calendar=calendar, use_cftime=use_cftime, inclusive="left"
        )
    except (ValueError, TypeError) as err:
        raise ValueError(f"cannot build daily times from {first} for {years} years in calendar {calendar!r}: {err}") from err
    time = xr.DataArray(index, dims="time", name="time")
    time.attrs = {"axis": "T", "standard_name": "time", "long_name": "time"}
    time.encoding = {"units": f"days since {first} 00:00:00", "calendar": calendar}
    return time


def _normalised(values: np.ndarray) -> np.ndarray:
    """Map coordinates linearly onto [0, 1] (0.5 for a single value)."""
    lo, hi = float(np.min(values)), float(np.max(values))
    if hi == lo:
        return np.full(values.shape, 0.5)
    return (values - lo) / (hi - lo)


def _weighted_corr(a: np.ndarray, b: np.ndarray, weight: np.ndarray) -> tuple[float, float]:
    """Centred and uncentred area-weighted pattern correlation of two maps."""
    w = weight / weight.sum()
    am, bm = a - (w * a).sum(), b - (w * b).sum()
    def ratio(top, bottom):
        return float(top / bottom) if bottom > 0 else 0.0

    centred = ratio((w * am * bm).sum(), np.sqrt((w * am * am).sum() * (w * bm * bm).sum()))
    uncentred = ratio((w * a * b).sum(), np.sqrt((w * a * a).sum() * (w * b * b).sum()))
    return centred, uncentred


def _candidate_pattern(rng: np.random.Generator, u: np.ndarray, v: np.ndarray, size: float = 1.0) -> np.ndarray:
    """One smooth pattern made of Gaussian highs and lows, peak |value| = 1.

    ``u`` and ``v`` are normalised longitude and latitude (2-D, in [0, 1]).
    The pattern is a dipole (one high, one low) with, half the time, a
    weaker third centre of random sign. ``size`` scales the widths of the
    centres (0.18 to 0.28 of the domain span for ``size=1``).
    """
    while True:
        centres = rng.uniform(0.12, 0.88, size=(2, 2))
        if np.hypot(*(centres[0] - centres[1])) >= 0.35:
            break
    widths = size * rng.uniform(0.18, 0.28, size=3)
    signs = [1.0, -1.0]
    weights = [1.0, rng.uniform(0.7, 1.0)]
    if rng.random() < 0.5:
        centres = np.vstack([centres, rng.uniform(0.1, 0.9, size=(1, 2))])
        signs.append(rng.choice([-1.0, 1.0]))
        weights.append(rng.uniform(0.35, 0.6))
    field = np.zeros_like(u)
    for (cu, cv), width, sign, weight in zip(centres, widths, signs, weights):
        field += sign * weight * np.exp(-((u - cu) ** 2 + (v - cv) ** 2) / (2.0 * width**2))
    if rng.random() < 0.5:
        field = -field
    return field / np.abs(field).max()


def _regime_patterns(rng, lat, lon, k, amplitude):
    """``k`` mutually distinct smooth patterns (regime, lat, lon) in Pa.

    Candidates are drawn until one is both weakly correlated with the
    patterns already chosen (|correlation| <= ``_TARGET_CORR``) and far from
    them (area-weighted RMS difference >= ``_TARGET_DISTANCE`` times the peak
    value); if none qualifies the best candidate is kept, provided its
    correlation with every other pattern stays below 0.5.
    """
    v, u = np.meshgrid(_normalised(lat), _normalised(lon), indexing="ij")
    # area weights (cos latitude) for correlations and distances
    weight = np.broadcast_to(np.clip(np.cos(np.deg2rad(lat)), 0.0, None)[:, None], u.shape) + 1e-12
    weight = weight / weight.sum()
    # more regimes need smaller centres to stay distinct
    size = min(1.0, np.sqrt(4.0 / k))
    patterns: list[np.ndarray] = []
    for number in range(k):
        best, best_score = None, np.inf
        for _ in range(_PATTERN_TRIES):
            candidate = _candidate_pattern(rng, u, v, size)
            score = 0.0
            for other in patterns:
                corr = max(abs(c) for c in _weighted_corr(candidate, other, weight))
                distance = np.sqrt((weight * (candidate - other) ** 2).sum())
                score = max(score, corr / _TARGET_CORR, _TARGET_DISTANCE / max(distance, 1e-12))
            if score < best_score:
                best, best_score = candidate, score
            if score <= 1.0:
                break
        worst = max((max(_weighted_corr(best, other, weight)) for other in patterns), default=-1.0)
        if worst >= 0.5:
            raise ValueError(
                f"could not plant {k} distinct patterns on this {lat.size} x {lon.size} grid "
                f"(regime {number + 1} correlates {worst:.2f} with another); use fewer regimes or a larger domain"
            )
        patterns.append(best)
    return amplitude * np.stack(patterns)


def _markov_labels(rng, transition, stationary, n):
    """Regime indices 0..k-1 of a Markov chain started from ``stationary``."""
    draws = rng.random(n).tolist()
    rows = np.cumsum(transition, axis=1)
    rows[:, -1] = np.inf
    rows = [row.tolist() for row in rows]
    first = np.cumsum(stationary)
    first[-1] = np.inf
    labels = np.empty(n, dtype=np.int32)
    state = bisect.bisect_right(first.tolist(), draws[0])
    labels[0] = state
    for t in range(1, n):
        state = bisect.bisect_right(rows[state], draws[t])
        labels[t] = state
    return labels


def _smoothing_operator(coord: np.ndarray, scale_deg: float) -> np.ndarray:
    """Matrix applying a 1-D Gaussian filter (scipy.ndimage) along one axis.

    Rows are normalised so that smoothing unit white noise gives unit
    variance at every point, including near the edges.
    """
    n = coord.size
    if n < 2 or scale_deg <= 0:
        return np.eye(n)
    spacing = float(np.mean(np.abs(np.diff(coord))))
    sigma = scale_deg / spacing
    operator = ndimage.gaussian_filter1d(np.eye(n), sigma, axis=0, mode="reflect", truncate=4.0)
    return operator / np.sqrt((operator**2).sum(axis=1, keepdims=True))


def _seasonal_cycle(time: xr.DataArray, lat, lon, seasonal):
    """Annual harmonic: per-day phase (time,) and amplitude map (lat, lon) in Pa.

    The amplitude grows from 40 % of ``seasonal`` at the equatorward edge to
    100 % at the poleward edge; the phase shifts by up to 0.08 year across
    the longitude span. Lowest pressure falls in early winter.
    """
    doy = time.dt.dayofyear.values.astype(float)
    length = time.dt.days_in_year.values.astype(float)
    year_fraction = (doy - 0.5) / length
    v, u = np.meshgrid(_normalised(np.abs(lat)), _normalised(lon), indexing="ij")
    amplitude = seasonal * (0.4 + 0.6 * v)
    phase = 0.08 * u
    return year_fraction, amplitude, phase


# --------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------


def planted_regimes(
    years: int = 20,
    start: str = "1981-01-01",
    calendar: str = "standard",
    lat=None,
    lon=None,
    k: int = 4,
    transition=None,
    amplitude: float = 1200.0,
    noise: float = 300.0,
    noise_lag1: float = 0.6,
    noise_scale_deg: float = 15.0,
    seasonal: float = 800.0,
    variable: str = "psl",
    seed: int = 0,
    dtype="float32",
) -> tuple[xr.Dataset, xr.Dataset]:
    """Build a daily gridded pressure field with planted circulation regimes.

    The field is ``101000 Pa + annual cycle + pattern[label[t]] + noise``:

    * the annual cycle is one harmonic of the calendar year whose amplitude
      varies smoothly in space (so a climatology made of a few harmonics, or
      a per-day-of-year mean, removes it);
    * ``label`` is a first-order Markov chain with the given transition
      matrix, started from its stationary distribution and running through
      all days without restarting at year ends;
    * each regime pattern is a smooth arrangement of Gaussian highs and lows
      (a dipole, sometimes with a weaker third centre) with peak
      ``|value| == amplitude``; any two patterns have centred and uncentred
      area-weighted correlation below 0.5 (for the default grid and ``k``
      the magnitude is at most 0.35, and they differ by at least 0.55 x
      ``amplitude`` RMS);
    * the noise is AR(1) in time with lag-1 autocorrelation ``noise_lag1``,
      smoothed in space by a Gaussian filter of width ``noise_scale_deg``
      and scaled so that its standard deviation is ``noise`` at every point.

    One :class:`numpy.random.Generator` seeded with ``seed`` drives
    everything, so equal arguments give identical output.

    Parameters
    ----------
    years : int, default 20
        Number of whole calendar years, starting at ``start``.
    start : str, default "1981-01-01"
        First day, written ``YYYY-MM-DD``.
    calendar : str, default "standard"
        CF calendar: ``standard`` (times as numpy datetime64) or any cftime
        calendar such as ``noleap``, ``360_day``, ``all_leap``, ``julian``
        (times as cftime objects).
    lat, lon : array_like, optional
        1-D grid coordinates in degrees north / east. Defaults are
        ``numpy.arange(20, 80.1, 5.0)`` and ``numpy.arange(-90, 30.1, 5.0)``.
    k : int, default 4
        Number of regimes.
    transition : array_like, shape (k, k), optional
        Row-stochastic daily transition matrix; ``transition[i, j]`` is the
        probability of regime ``j + 1`` following regime ``i + 1``. Default:
        :func:`default_transition` (persistence 0.9 down to 0.8).
    amplitude : float, default 1200
        Peak absolute value of every regime pattern, Pa.
    noise : float, default 300
        Standard deviation of the red noise at every grid point, Pa.
    noise_lag1 : float, default 0.6
        Lag-1 (one day) autocorrelation of the noise, in (-1, 1).
    noise_scale_deg : float, default 15
        Standard deviation of the Gaussian smoothing applied to the noise,
        degrees of latitude / longitude (0 for white noise in space).
    seasonal : float, default 800
        Largest amplitude of the annual harmonic, Pa.
    variable : str, default "psl"
        Name of the data variable.
    seed : int, default 0
        Seed of the random generator.
    dtype : str or numpy.dtype, default "float32"
        Floating-point type of the data variable.

    Returns
    -------
    data : xarray.Dataset
        CF-style dataset with ``variable`` on dims ``(time, lat, lon)``, Pa.
    truth : xarray.Dataset
        ``label`` (time; int32, regimes numbered 1..k), ``pattern``
        (regime, lat, lon; Pa), ``transition`` (regime_from, regime_to;
        probability per day) and ``stationary`` (regime; probability).

    Notes
    -----
    The noise is generated in float32 and in blocks of days, so memory use is
    close to the size of the returned array.
    """
    if k < 1:
        raise ValueError(f"k = {k}: need at least one regime")
    if not -1.0 < noise_lag1 < 1.0:
        raise ValueError(f"noise_lag1 = {noise_lag1}: must lie strictly between -1 and 1")
    if noise < 0 or amplitude < 0 or noise_scale_deg < 0:
        raise ValueError("amplitude, noise and noise_scale_deg must not be negative")
    dtype = np.dtype(dtype)
    if dtype.kind != "f":
        raise ValueError(f"dtype = {dtype}: need a floating-point type")

    lat = np.arange(20.0, 80.1, 5.0) if lat is None else np.asarray(lat, dtype=float).ravel()
    lon = np.arange(-90.0, 30.1, 5.0) if lon is None else np.asarray(lon, dtype=float).ravel()
    if lat.size == 0 or lon.size == 0:
        raise ValueError("lat and lon need at least one value each")
    if np.any(np.abs(lat) > 90):
        raise ValueError("lat values must lie within -90..90 degrees")

    p = _check_transition(transition, k)
    pi = stationary_distribution(p)
    time = _daily_time(start, years, calendar)
    n, nlat, nlon = time.size, lat.size, lon.size

    rng = np.random.default_rng(seed)
    patterns = _regime_patterns(rng, lat, lon, k, float(amplitude))
    labels = _markov_labels(rng, p, pi, n)
    year_fraction, season_amp, season_phase = _seasonal_cycle(time, lat, lon, float(seasonal))

    smooth_lat = _smoothing_operator(lat, noise_scale_deg).astype(np.float32)
    smooth_lon_t = _smoothing_operator(lon, noise_scale_deg).T.astype(np.float32).copy()
    lag = np.float32(noise_lag1)
    innovation = np.float32(np.sqrt(1.0 - noise_lag1**2))
    ar_b = np.array([innovation], dtype=np.float32)
    ar_a = np.array([1.0, -lag], dtype=np.float32)

    def smooth(white: np.ndarray) -> np.ndarray:
        blocks = white.shape[0]
        along_lon = (white.reshape(blocks * nlat, nlon) @ smooth_lon_t).reshape(blocks, nlat, nlon)
        return np.matmul(smooth_lat, along_lon)

    # Stationary start: the day before the first day has unit variance.
    previous = smooth(rng.standard_normal((1, nlat, nlon), dtype=np.float32))
    state = lag * previous

    values = np.empty((n, nlat, nlon), dtype=dtype)
    season_cos = (season_amp * np.cos(2 * np.pi * season_phase)).astype(np.float32)
    season_sin = (season_amp * np.sin(2 * np.pi * season_phase)).astype(np.float32)
    patterns32 = patterns.astype(np.float32)
    for first in range(0, n, _BLOCK_DAYS):
        last = min(first + _BLOCK_DAYS, n)
        red = smooth(rng.standard_normal((last - first, nlat, nlon), dtype=np.float32))
        red, state = signal.lfilter(ar_b, ar_a, red, axis=0, zi=state)
        red = red.astype(np.float32, copy=False)
        red *= np.float32(noise)
        # -cos(2 pi (f - phase)) = -(cos 2pi f cos 2pi phase + sin 2pi f sin 2pi phase)
        angle = 2 * np.pi * year_fraction[first:last]
        c = np.cos(angle).astype(np.float32)[:, None, None]
        s = np.sin(angle).astype(np.float32)[:, None, None]
        red -= c * season_cos
        red -= s * season_sin
        red += patterns32[labels[first:last]]
        red += np.float32(BACKGROUND_PA)
        values[first:last] = red

    lat_da = xr.DataArray(
        lat, dims="lat", attrs={"units": "degrees_north", "standard_name": "latitude", "long_name": "latitude", "axis": "Y"}
    )
    lon_da = xr.DataArray(
        lon, dims="lon", attrs={"units": "degrees_east", "standard_name": "longitude", "long_name": "longitude", "axis": "X"}
    )
    coords = {"time": time, "lat": lat_da, "lon": lon_da}
    field = xr.DataArray(
        values,
        dims=("time", "lat", "lon"),
        coords=coords,
        name=variable,
        attrs={
            "units": "Pa",
            "standard_name": "air_pressure_at_mean_sea_level",
            "long_name": "synthetic sea-level pressure with planted regimes",
        },
    )
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    settings = (
        f"k={k}, seed={seed}, amplitude={amplitude} Pa, noise={noise} Pa, noise_lag1={noise_lag1}, "
        f"noise_scale_deg={noise_scale_deg}, seasonal={seasonal} Pa, calendar={time.encoding['calendar']}"
    )
    data = xr.Dataset(
        {variable: field},
        attrs={
            "title": "Synthetic daily field with planted circulation regimes",
            "Conventions": "CF-1.8",
            "source": "regimes.synthetic.planted_regimes (synthetic; no observations)",
            "history": f"{stamp}: created by regimes.synthetic.planted_regimes ({settings})",
            "comment": "Invented data for testing; every regime, pattern and noise value is planted.",
        },
    )

    regime = np.arange(1, k + 1, dtype=np.int32)
    truth = xr.Dataset(
        {
            "label": xr.DataArray(
                labels + 1,
                dims="time",
                attrs={"long_name": "planted regime of each day", "units": "1", "valid_range": np.array([1, k], dtype=np.int32)},
            ),
            "pattern": xr.DataArray(
                patterns.astype(dtype),
                dims=("regime", "lat", "lon"),
                attrs={"long_name": "planted regime pattern (anomaly added on regime days)", "units": "Pa"},
            ),
            "transition": xr.DataArray(
                p,
                dims=("regime_from", "regime_to"),
                attrs={"long_name": "daily regime transition probability", "units": "1"},
            ),
            "stationary": xr.DataArray(
                pi, dims="regime", attrs={"long_name": "stationary regime probability", "units": "1"}
            ),
        },
        coords={
            "time": time,
            "lat": lat_da,
            "lon": lon_da,
            "regime": ("regime", regime, {"long_name": "regime number"}),
            "regime_from": ("regime_from", regime, {"long_name": "regime on the earlier day"}),
            "regime_to": ("regime_to", regime, {"long_name": "regime on the later day"}),
        },
        attrs={
            "title": "Planted truth for a synthetic regime field",
            "Conventions": "CF-1.8",
            "source": "regimes.synthetic.planted_regimes",
            "history": data.attrs["history"],
            "noise_std_Pa": float(noise),
            "noise_lag1": float(noise_lag1),
            "noise_scale_deg": float(noise_scale_deg),
            "seasonal_amplitude_Pa": float(seasonal),
            "background_Pa": BACKGROUND_PA,
            "seed": int(seed),
        },
    )
    return data, truth


def _packing(values: np.ndarray) -> tuple[float, float] | None:
    """CF int16 ``(scale_factor, add_offset)`` covering the finite data range."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return None
    lo, hi = float(finite.min()), float(finite.max())
    if hi == lo:
        return 1.0, lo
    return (hi - lo) / (2 * _PACK_HALF), (hi + lo) / 2.0


def _pack_int16(values: np.ndarray, scale: float, offset: float) -> np.ndarray:
    """Quantise to int16 (NaN becomes the fill value), working in blocks."""
    packed = np.empty(values.shape, dtype=np.int16)
    flat_in = values.reshape(values.shape[0], -1) if values.ndim > 1 else values.reshape(-1, 1)
    flat_out = packed.reshape(flat_in.shape)
    step = max(1, 4_000_000 // max(1, flat_in.shape[1]))
    for first in range(0, flat_in.shape[0], step):
        chunk = (flat_in[first : first + step].astype(np.float64) - offset) / scale
        missing = ~np.isfinite(chunk)
        chunk = np.clip(np.rint(np.where(missing, 0.0, chunk)), -_PACK_HALF - 1, _PACK_HALF + 1)
        out = chunk.astype(np.int16)
        out[missing] = _PACK_FILL
        flat_out[first : first + step] = out
    return packed


def write_netcdf(ds: xr.Dataset, path: str | PathLike, pack: bool = False) -> None:
    """Write a dataset to netCDF-4 with zlib compression.

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset to write, e.g. either output of :func:`planted_regimes`.
    path : str or path-like
        Output file; overwritten if it exists.
    pack : bool, default False
        If true, store every floating-point data variable as ``int16`` with
        CF packing attributes: ``scale_factor`` and ``add_offset`` (float64,
        in the variable's units) chosen so the finite data range maps onto
        -32766..32766, and ``_FillValue = -32768`` for missing values. The
        quantisation error is at most ``scale_factor / 2``. Readers such as
        xarray unpack to float64.

    Notes
    -----
    The netCDF4 engine is used. Daily time coordinates are written as
    ``days since <first day>`` in their own calendar unless the time
    coordinate already carries an encoding.
    """
    out = ds.copy(deep=False)
    encoding: dict[str, dict] = {}
    for name in list(out.data_vars):
        var = out[name]
        enc: dict = {"zlib": True, "complevel": 4, "shuffle": True}
        params = _packing(np.asarray(var.values)) if pack and var.dtype.kind == "f" else None
        if params is not None:
            scale, offset = params
            packed = _pack_int16(np.asarray(var.values), scale, offset)
            attrs = dict(var.attrs)
            attrs["scale_factor"] = np.float64(scale)
            attrs["add_offset"] = np.float64(offset)
            out[name] = xr.Variable(var.dims, packed, attrs)
            enc.update({"dtype": "int16", "_FillValue": _PACK_FILL})
        elif var.dtype.kind not in "biuf":
            enc = {}
        out[name].encoding = {}
        encoding[name] = enc
    for name in out.coords:
        if out[name].dtype.kind == "f" and "_FillValue" not in out[name].encoding:
            # CF: coordinate variables carry no fill value
            encoding[name] = {"_FillValue": None}
    if "time" in out.coords and out["time"].size:
        first = out["time"].values[0]
        day = str(np.datetime_as_string(first, unit="D")) if isinstance(first, np.datetime64) else first.strftime("%Y-%m-%d")
        units = out["time"].encoding.get("units", f"days since {day} 00:00:00")
        encoding["time"] = {"units": units, "dtype": "int32", "_FillValue": None}
    out.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=encoding)
