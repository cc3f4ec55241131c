"""The README table "When the input is wrong": a test for every row, named in the table.

Refused inputs run the command in this process through ``regimes.cli.main``
and check the answer: exit status 2, exactly one line on standard error that
starts ``regimes: error:`` and matches the row's pattern, and nothing written
(neither in the job's folder nor among the inputs).

To cover another command, add rows to ``REFUSED`` whose ``argv`` starts with
that command; ``{job}`` is the job file and ``{inputs}`` the folder of input
files made by the ``inputs`` fixture.
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import cftime
import netCDF4
import numpy as np
import pytest
import xarray as xr
from test_cli import job_text

from regimes import anomalies, cli, synthetic

LAT = np.arange(30.0, 71.0, 10.0)
LON = np.arange(-40.0, 21.0, 10.0)


def planted(years=2, calendar="standard", lat=LAT, lon=LON):
    ds, _ = synthetic.planted_regimes(years=years, lat=lat, lon=lon, k=3, seed=1, calendar=calendar)
    return ds


def without_time_encoding(ds):
    ds = ds.copy()
    ds["time"].encoding = {}
    return ds


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """A folder of input files, good and bad, shared by the rows."""
    folder = tmp_path_factory.mktemp("inputs")
    ds = planted()

    def write(d, name, **kw):
        path = folder / name
        path.parent.mkdir(exist_ok=True)
        synthetic.write_netcdf(d, path, **kw)
        return path

    write(ds, "good.nc")
    (folder / "not_netcdf.nc").write_text("station,date,pressure\nA,1981-01-01,1013.2\n")
    full = (folder / "good.nc").read_bytes()
    (folder / "truncated4.nc").write_bytes(full[: len(full) // 2])
    ds.to_netcdf(folder / "classic.nc", format="NETCDF3_64BIT")
    classic = (folder / "classic.nc").read_bytes()
    (folder / "truncated3.nc").write_bytes(classic[: int(0.9 * len(classic))])
    (folder / "folder.nc").mkdir()

    first, second = without_time_encoding(ds.sel(time="1981")), without_time_encoding(ds.sel(time="1982"))
    write(first, "grids/a.nc")
    write(second.assign_coords(lon=second["lon"] + 1.0), "grids/b.nc")
    write(first, "variables/a.nc")
    write(second.rename(psl="tas"), "variables/b.nc")
    write(first, "overlap/a.nc")
    write(without_time_encoding(ds.sel(time=slice("1981-12-01", "1982-12-31"))), "overlap/b.nc")

    anonymous = ds.rename(lat="y", lon="x")
    anonymous["y"].attrs, anonymous["x"].attrs = {}, {}
    write(anonymous, "anonymous_axes.nc")
    lat2, lon2 = np.meshgrid(LAT, LON, indexing="ij")
    curvilinear = xr.Dataset(
        {"psl": (("time", "y", "x"), ds["psl"].values, ds["psl"].attrs)},
        coords={
            "time": ds["time"],
            "lat": (("y", "x"), lat2, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": (("y", "x"), lon2, {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    write(curvilinear, "curvilinear.nc")
    write(ds.isel(time=0, drop=True), "no_time.nc")
    write(ds, "bad_time_units.nc")
    with netCDF4.Dataset(folder / "bad_time_units.nc", "a") as nc:
        nc["time"].units = "fortnights since the thaw"

    t = ds["time"].values.copy()
    t[[100, 101]] = t[[101, 100]]
    write(ds.assign_coords(time=t), "unsorted.nc")
    t = ds["time"].values.copy()
    t[200] = t[199]
    write(ds.assign_coords(time=t), "repeated.nc")

    scattered = ds.copy(deep=True)
    scattered["psl"].values[[40, 41, 300], 1, 2] = np.nan  # 10 and 11 February, 28 October 1981
    write(scattered, "scattered.nc")
    write(scattered, "scattered_packed.nc", pack=True)
    constant = ds.copy(deep=True)
    constant["psl"].values[:] = 101000.0
    write(constant, "constant.nc")
    missing = ds.copy(deep=True)
    missing["psl"].values[:] = np.nan
    write(missing, "all_missing.nc")
    levels = ds.expand_dims(plev=[1000.0, 500.0], axis=1)
    levels["plev"].attrs = {"units": "hPa", "axis": "Z", "positive": "down"}
    write(levels, "levels.nc")
    janfeb = ds.isel(time=np.flatnonzero(ds["time"].dt.month.isin([1, 2]).values))
    write(janfeb, "janfeb.nc")
    return folder


@dataclass(frozen=True)
class Refusal:
    """One refused input: the command line, the job, and the answer expected."""

    answer: str  # regular expression searched in the error line
    config: dict = field(default_factory=dict)  # changes to the small job, {"section": {"key": value}}
    argv: tuple = ("run", "{job}")
    paths: str = "{inputs}/good.nc"
    text: str | None = None  # the job file's whole text instead of the small job
    setup: Callable[[Path], None] | None = None  # makes things in the job's folder first


def existing_output(folder: Path) -> None:
    (folder / "out").mkdir()
    (folder / "out" / "notes.txt").write_text("an earlier result\n")


def existing_scan_output(folder: Path) -> None:
    (folder / "out" / "scan").mkdir(parents=True)
    (folder / "out" / "scan" / "scan.nc").write_text("an earlier scan\n")


def existing_config(folder: Path) -> None:
    (folder / "starter.toml").write_text("# mine\n")


CODE = "__import__('os').system('touch evaluated')"

# Row names are those named in the README table (test_readme_table_names_every_row_and_existing_tests).
REFUSED = {
    # input files
    "missing file": Refusal(r"input file '\S*absent\.nc' not found; check data\.paths", paths="absent.nc"),
    "file that is a folder": Refusal(r"input '\S*folder\.nc' is a folder, not a file", paths="{inputs}/folder.nc"),
    "glob matching a folder": Refusal(r"input '\S*folder\.nc' is a folder, not a file", paths="{inputs}/fold*.nc"),
    "file that is not NetCDF": Refusal(r"input file '\S*not_netcdf\.nc' cannot be read as NetCDF \(.+\)", paths="{inputs}/not_netcdf.nc"),
    "truncated NetCDF-4 file": Refusal(r"input file '\S*truncated4\.nc' cannot be read as NetCDF \(NetCDF: HDF error\)", paths="{inputs}/truncated4.nc"),
    "truncated classic NetCDF file": Refusal(r"input file '\S*truncated3\.nc' is truncated or damaged", paths="{inputs}/truncated3.nc"),
    "glob matching nothing": Refusal(r"input pattern '\S*nothing_\*\.nc' matches no file", paths="nothing_*.nc"),
    "files on different grids": Refusal(r"cannot be combined .*'\S*b\.nc' has another lon axis than '\S*a\.nc'", paths="{inputs}/grids/*.nc"),
    "files of different variables": Refusal(r"cannot be combined .*'\S*b\.nc' holds tas but '\S*a\.nc' holds psl", paths="{inputs}/variables/*.nc"),
    "files whose periods overlap": Refusal(r"cannot be combined .*periods of '\S*a\.nc' and '\S*b\.nc' overlap \(both hold 1981-12-01\)", paths="{inputs}/overlap/*.nc"),
    "missing variable": Refusal(r"variable 'tas' is not in the input files; variables present: psl; set data\.variable", {"data": {"variable": "tas"}}),
    "coordinates that cannot be identified": Refusal(
        r"variable 'psl' has no coordinate identifiable as lat .*coordinates present: time, y, x", paths="{inputs}/anonymous_axes.nc"
    ),
    "2-D latitude and longitude": Refusal(r"2-D latitude/longitude; .*regrid", paths="{inputs}/curvilinear.nc"),
    "time units that cannot be decoded": Refusal(
        r"input file '\S*bad_time_units\.nc' has a time axis that cannot be decoded \(unable to decode time units 'fortnights since the thaw'",
        paths="{inputs}/bad_time_units.nc",
    ),
    "no time axis": Refusal(r"no coordinate identifiable as time", paths="{inputs}/no_time.nc"),
    "time not increasing": Refusal(r"time axis goes back from 1981-04-12 to 1981-04-11 at time step 102", paths="{inputs}/unsorted.nc"),
    "repeated time": Refusal(r"time 1981-07-19 appears twice \(time steps 200 and 201\)", paths="{inputs}/repeated.nc"),
    "scattered missing values": Refusal(
        r"variable 'psl' has missing values on 3 day\(s\), first on 1981-02-10, .*data\.drop_incomplete_days = true", paths="{inputs}/scattered.nc"
    ),
    "packed int16 with _FillValue at scattered points": Refusal(
        r"variable 'psl' has missing values on 3 day\(s\), first on 1981-02-10", paths="{inputs}/scattered_packed.nc"
    ),
    "constant field": Refusal(r"does not vary in time", paths="{inputs}/constant.nc"),
    "all-missing field": Refusal(r"missing at every selected grid point and time", paths="{inputs}/all_missing.nc"),
    "too few days for k": Refusal(
        r"regimes\.k = 20 is larger than the number of selected days \(10\)",
        {"data": {"period": ["1982-01-01", "1982-01-10"]}, "anomalies": {"climatology": "none"}, "regimes": {"k": 20}},
    ),
    # selections
    "latitude box selecting nothing": Refusal(r"data\.lat = \[0\.0, 10\.0\] selects no latitude", {"data": {"lat": [0.0, 10.0]}}),
    "longitude box selecting nothing": Refusal(r"data\.lon = \[100\.0, 120\.0\] selects no longitude", {"data": {"lon": [100.0, 120.0]}}),
    "level without vertical axis": Refusal(r"data\.level = 500 is set but 'psl' has no vertical coordinate", {"data": {"level": 500}}),
    "level not in the file": Refusal(r"data\.level = 700 is not a level .*levels present \(hPa\): 1000, 500", {"data": {"level": 700}}, paths="{inputs}/levels.nc"),
    "period outside the data": Refusal(r"data\.period = .*selects no time step", {"data": {"period": ["2000-01-01", "2000-12-31"]}}),
    # 30 February is not a day of the standard calendar of this file (CF conventions 1.8 sec. 4.4.1)
    "period with a day the calendar lacks": Refusal(r"data\.period = .*not a valid period in the data's calendar", {"data": {"period": ["1982-02-30", "1982-03-31"]}}),
    "months absent from the data": Refusal(
        r"data\.months = \[7, 8\] selects no time step", {"data": {"months": [7, 8]}, "anomalies": {"climatology": "monthly"}}, paths="{inputs}/janfeb.nc"
    ),
    "period and months without overlap": Refusal(
        r"data\.months = \[7, 8\] selects no time step",
        {"data": {"period": ["1982-01-01", "1982-02-28"], "months": [7, 8]}, "anomalies": {"climatology": "none"}},
    ),
    # the config file
    "config file missing": Refusal(r"config file '\S*nope\.toml' not found", argv=("run", "nope.toml")),
    "config file that is a folder": Refusal(r"config file '\S*inputs\S*' cannot be read", argv=("run", "{inputs}")),
    "config not valid TOML": Refusal(r"is not valid TOML: .*\(at line 3, column 12\)", text='[data]\npaths = "x.nc"\nvariable = = "psl"\n'),
    "config key misspelt": Refusal(r"config key 'regimes\.restart' is unknown; did you mean 'restarts'\?", {"regimes": {"restart": 5}}),
    "config section misspelt": Refusal(r"config section '\[regime\]' is unknown; did you mean 'regimes'\?", {"regime": {"k": 3}}),
    "config value of the wrong kind": Refusal(r"config key 'regimes\.k' = '4': expected a whole number from 1 to 50", {"regimes": {"k": "4"}}),
    "required config key missing": Refusal(r"config key 'data\.variable' is required", text='[data]\npaths = "x.nc"\n'),
    # config files are data: text that looks like code stays text
    "code in a config text value": Refusal(r"variable '__import__\('os'\)\.system\('touch evaluated'\)' is not in the input files", {"data": {"variable": CODE}}),
    "code in a config number value": Refusal(r"config key 'regimes\.k' = \"__import__.*\": expected a whole number", {"regimes": {"k": CODE}}),
    # outputs
    "existing output folder": Refusal(r"output folder '\S*out' already exists; pass --overwrite", setup=existing_output),
    "output folder holding an input": Refusal(
        r"output folder '\S*inputs\S*' contains the input file", {"output": {"dir": "{inputs}"}}, argv=("run", "{job}", "--overwrite")
    ),
    "output folder that is an input file": Refusal(r"output folder '\S*good\.nc' is an existing file", {"output": {"dir": "{inputs}/good.nc"}}),
    "output folder inside a file": Refusal(r"output folder '\S*good\.nc/out' cannot be made: '\S*good\.nc' is a file", {"output": {"dir": "{inputs}/good.nc/out"}}),
    # regimes scan
    "scan: bad --k": Refusal(r"--k '9-3': expected distinct integers >= 2", argv=("scan", "{job}", "--k", "9-3")),
    "scan: negative --surrogates": Refusal(r"--surrogates -1: expected a number >= 0", argv=("scan", "{job}", "--surrogates", "-1")),
    "scan: too few --restarts": Refusal(r"--restarts 1: the classifiability needs at least 2 restarts", argv=("scan", "{job}", "--restarts", "1")),
    "scan: --confidence outside (0, 1)": Refusal(r"--confidence 1\.5: expected a fraction strictly between 0 and 1", argv=("scan", "{job}", "--confidence", "1.5")),
    "scan: bad input file": Refusal(r"input file '\S*absent\.nc' not found", argv=("scan", "{job}"), paths="absent.nc"),
    "scan: existing output folder": Refusal(r"output folder '\S*scan' already exists; pass --overwrite", argv=("scan", "{job}"), setup=existing_scan_output),
    # regimes init
    "init: file exists": Refusal(r"'starter\.toml' already exists; pass --overwrite", argv=("init", "starter.toml"), setup=existing_config),
    "init: folder missing": Refusal(r"folder 'nowhere' does not exist", argv=("init", "nowhere/job.toml")),
    "init: name of a folder": Refusal(r"'\S*inputs\S*' is a folder; give the name of the config file", argv=("init", "{inputs}")),
    # the command line itself
    "unknown command": Refusal(r"argument command: invalid choice: 'rnu'.*; see 'regimes --help'", argv=("rnu", "{job}")),
    "missing argument": Refusal(r"the following arguments are required: config; see 'regimes run --help'", argv=("run",)),
    "option value of the wrong kind": Refusal(r"argument --surrogates: invalid int value: 'many'", argv=("scan", "{job}", "--surrogates", "many")),
}


def expand(value, folder: Path):
    """Fill ``{inputs}`` in strings, lists and dicts."""
    if isinstance(value, str):
        return value.replace("{inputs}", str(folder))
    if isinstance(value, (list, tuple)):
        return type(value)(expand(v, folder) for v in value)
    if isinstance(value, dict):
        return {k: expand(v, folder) for k, v in value.items()}
    return value


def snapshot(*folders: Path) -> dict:
    """Every path under the folders with its size and modification time."""
    return {p: (p.stat().st_size, p.stat().st_mtime_ns) for folder in folders for p in sorted(folder.rglob("*"))}


def run_cli(argv: list[str]) -> int:
    """``regimes ARGV`` in this process; its exit status (usage errors exit through SystemExit)."""
    try:
        return cli.main(argv)
    except SystemExit as stop:
        return stop.code


@pytest.mark.parametrize("row", list(REFUSED))
def test_refused(row, inputs, tmp_path, monkeypatch, capsys):
    case = REFUSED[row]
    monkeypatch.chdir(tmp_path)
    job = tmp_path / "job.toml"
    job.write_text(case.text if case.text is not None else job_text(expand(case.paths, inputs), **expand(case.config, inputs)))
    if case.setup:
        case.setup(tmp_path)
    before = snapshot(tmp_path, inputs)
    status = run_cli(["--quiet", *(expand(a, inputs).replace("{job}", str(job)) for a in case.argv)])
    err = capsys.readouterr().err
    assert status == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("regimes: error: "), err
    assert re.search(case.answer, lines[0]), lines[0]
    assert snapshot(tmp_path, inputs) == before


# --------------------------------------------------------------------------
# inputs that are accepted
# --------------------------------------------------------------------------


def run_job(folder: Path, paths, **sections) -> Path:
    """Run the small job through the command line in this process; the output folder."""
    job = folder / "job.toml"
    job.write_text(job_text(paths, **sections))
    assert run_cli(["--quiet", "run", str(job)]) == 0
    return folder / "out"


def labels_and_composites(out: Path):
    with xr.open_dataset(out / "labels.nc") as labels, xr.open_dataset(out / "composites.nc") as comp:
        return labels["label"].load(), comp["anomaly_composite"].load()


def test_gaps_are_reported_and_break_episodes(inputs, tmp_path, caplog):
    ds = planted()
    gappy = ds.drop_isel(time=range(50, 60))  # 20 February .. 1 March 1981 missing
    synthetic.write_netcdf(gappy, tmp_path / "gappy.nc")
    caplog.set_level(logging.INFO, logger="regimes")
    out = run_job(tmp_path, tmp_path / "gappy.nc")
    # the log names the gap
    assert any("1 gap(s), about 10 time step(s) missing in all, the first after 1981-02-19 (next 1981-03-02)" in r.getMessage() for r in caplog.records)
    labels = xr.open_dataset(out / "labels.nc")
    stats = xr.open_dataset(out / "statistics.nc")
    assert labels.sizes["time"] == ds.sizes["time"] - 10
    after = labels["segment_start"].sel(time="1981-03-02")
    assert int(after) == 1 and int(labels["segment_start"].sum()) == 2
    # no episode spans the gap, and no transition is counted across it
    start, end = stats["episode_start"].values, stats["episode_end"].values
    gap_start = np.datetime64("1981-02-19")
    assert not np.any((start <= gap_start) & (end >= np.datetime64("1981-03-02")))
    assert int(stats["transition_count"].sum()) == labels.sizes["time"] - 2


def fft_day_of_year_climatology(values: xr.DataArray, year_length: int, harmonics: int) -> np.ndarray:
    """Reference for calendars whose years all have ``year_length`` days and complete years.

    The day-of-year mean by xarray groupby, smoothed by keeping its first
    ``harmonics`` harmonics with numpy's FFT (the smoothed daily climatology
    of common practice), evaluated on every day.
    """
    mean = values.astype("float64").groupby("time.dayofyear").mean("time")
    assert mean.sizes["dayofyear"] == year_length
    spectrum = np.fft.rfft(mean.values, axis=0)
    spectrum[harmonics + 1 :] = 0.0
    smooth = np.fft.irfft(spectrum, n=year_length, axis=0)
    return smooth[values["time"].dt.dayofyear.values - 1]


def lstsq_climatology(values: xr.DataArray, harmonics: int) -> np.ndarray:
    """Reference for calendars with years of unequal length (julian, standard).

    The day-of-year mean has no single period there, so the reference is the
    least-squares fit (numpy.linalg.lstsq) of a mean and ``harmonics`` annual
    harmonics of the fraction of the calendar year elapsed, computed by cftime
    date arithmetic.
    """
    dates = values["time"].values  # cftime dates

    def new_year(year):
        return cftime.datetime(year, 1, 1, calendar=dates[0].calendar)

    phase = np.array([(d - new_year(d.year)) / (new_year(d.year + 1) - new_year(d.year)) for d in dates])
    columns = [np.ones_like(phase)]
    for h in range(1, harmonics + 1):
        columns += [np.cos(2 * np.pi * h * phase), np.sin(2 * np.pi * h * phase)]
    basis = np.stack(columns, axis=1)
    y = values.astype("float64").values.reshape(len(dates), -1)
    coef = np.linalg.lstsq(basis, y, rcond=None)[0]
    return (basis @ coef).reshape(values.shape)


YEAR_LENGTH = {"noleap": 365, "360_day": 360, "all_leap": 366}


@pytest.mark.parametrize("calendar", ["noleap", "360_day", "all_leap", "julian"])
def test_non_standard_calendars(calendar, tmp_path):
    """The whole job runs in the file's own calendar, and its climatology equals an outside reference."""
    ds = planted(years=4, calendar=calendar)  # 1981-1984: 1984 is a leap year of the julian calendar
    synthetic.write_netcdf(ds, tmp_path / "field.nc")
    out = run_job(tmp_path, tmp_path / "field.nc")
    cftime_times = xr.coders.CFDatetimeCoder(use_cftime=True)
    with xr.open_dataset(out / "labels.nc", decode_times=cftime_times) as labels:
        assert labels.sizes["time"] == ds.sizes["time"]
        assert labels["time"].values[0].calendar == calendar
    values = xr.open_dataset(tmp_path / "field.nc", decode_times=cftime_times)["psl"].load()
    # the climatology the job saved in its model (3 harmonics, the default), on every day of the file
    with xr.open_dataset(out / "model.nc") as model:
        coefficients = model["climatology"].load()
    basis = anomalies.harmonic_basis(values["time"], 3)
    assert coefficients.attrs["terms"].split() == list(basis["term"].values)
    fitted = (basis.values @ coefficients.values.reshape(basis.sizes["term"], -1)).reshape(values.shape)
    if calendar in YEAR_LENGTH:
        reference = fft_day_of_year_climatology(values, YEAR_LENGTH[calendar], 3)
    else:
        reference = lstsq_climatology(values, 3)
    # a ~1e5 Pa field read as float32: 1e-6 relative (IEEE 754 single precision, 6e-8 per rounding)
    np.testing.assert_allclose(fitted, reference, rtol=1e-6)
    # and the seasonal part alone, to 1e-3 of its range
    seasonal = reference - reference.mean(axis=0)
    assert np.max(np.abs((fitted - reference.mean(axis=0)) - seasonal)) <= 1e-3 * np.ptp(seasonal)


def reordered(ds: xr.Dataset, how: str) -> xr.Dataset:
    if how == "latitude descending":
        return ds.isel(lat=slice(None, None, -1))
    if how == "longitude 0..360":
        return ds.assign_coords(lon=ds["lon"] % 360).sortby("lon")
    if how == "longitude not monotonic":
        return ds.isel(lon=[3, 0, 6, 1, 5, 2, 4])
    raise ValueError(how)


@pytest.fixture(scope="module")
def baseline(inputs, tmp_path_factory):
    """Labels and composites of the small job on the good file (box crossing 0 deg E)."""
    folder = tmp_path_factory.mktemp("baseline")
    return labels_and_composites(run_job(folder, inputs / "good.nc", data={"lat": [30.0, 70.0], "lon": [-40.0, 20.0]}))


@pytest.mark.parametrize("how", ["latitude descending", "longitude 0..360", "longitude not monotonic"])
def test_grid_order_and_longitude_convention_do_not_change_results(how, baseline, tmp_path):
    ds = reordered(planted(), how)
    synthetic.write_netcdf(ds, tmp_path / "field.nc")
    labels, comp = labels_and_composites(run_job(tmp_path, tmp_path / "field.nc", data={"lat": [70.0, 30.0], "lon": [-40.0, 20.0]}))
    np.testing.assert_array_equal(labels.values, baseline[0].values)
    np.testing.assert_array_equal(comp.values, baseline[1].values)
    np.testing.assert_array_equal(comp["lat"].values, LAT)  # south to north
    np.testing.assert_array_equal(comp["lon"].values, LON)  # eastward from the box's west edge


def test_box_crossing_180_in_either_convention(tmp_path):
    """A box over the 180 meridian gives the same results whether the file runs 0..360 or -180..180."""
    east = planted(lon=np.arange(150.0, 211.0, 10.0))  # 150 .. 210 deg E
    results = []
    for name, lon in (("0..360", east["lon"].values), ("-180..180", (east["lon"].values + 180) % 360 - 180)):
        folder = tmp_path / name
        folder.mkdir()
        ds = east.assign_coords(lon=("lon", lon, east["lon"].attrs)).sortby("lon")
        synthetic.write_netcdf(ds, folder / "field.nc")
        results.append(labels_and_composites(run_job(folder, folder / "field.nc", data={"lon": [150.0, -150.0]})))
    (labels_a, comp_a), (labels_b, comp_b) = results
    np.testing.assert_array_equal(labels_a.values, labels_b.values)
    np.testing.assert_array_equal(comp_a.values, comp_b.values)
    np.testing.assert_array_equal(comp_a["lon"].values % 360, np.arange(150.0, 211.0, 10.0) % 360)


def test_scattered_missing_days_dropped_when_asked(inputs, tmp_path, caplog):
    caplog.set_level(logging.INFO, logger="regimes")
    out = run_job(tmp_path, inputs / "scattered.nc", data={"drop_incomplete_days": True})
    assert any("leaving out 3 day(s) with missing values, first 1981-02-10" in r.getMessage() for r in caplog.records)
    labels = xr.open_dataset(out / "labels.nc")
    dropped = np.array(["1981-02-10", "1981-02-11", "1981-10-28"], dtype="datetime64[ns]")
    assert labels.sizes["time"] == 730 - 3
    assert not np.isin(dropped, labels["time"].values).any()
    # the dropped days are gaps: the days after them start new runs of consecutive days
    assert labels["segment_start"].sel(time=["1981-02-12", "1981-10-29"]).values.tolist() == [1, 1]
    assert int(labels["segment_start"].sum()) == 3


def test_readme_table_names_every_row_and_existing_tests():
    """The README table and this module stay in step: every refused row is named once, and every test named exists."""
    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    table = readme.split("## When the input is wrong", 1)[1].split("\n## ", 1)[0]
    assert sorted(re.findall(r"`refused\[(.+?)\]`", table)) == sorted(REFUSED)
    tests = Path(__file__).parent
    for module, name in re.findall(r"`(test_\w+\.py)::(test_\w+)`", table):
        assert re.search(rf"^def {name}\(", (tests / module).read_text(encoding="utf-8"), re.MULTILINE), f"{module}::{name}"
