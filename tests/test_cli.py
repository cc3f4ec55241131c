"""Tests of the command line, run as a subprocess: ``python -m regimes ...``."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from regimes import config, synthetic

OUTPUTS = {"labels.nc", "composites.nc", "statistics.nc", "eofs.nc", "model.nc"}
LAT = np.arange(30.0, 71.0, 10.0)
LON = np.arange(-40.0, 21.0, 10.0)


def regimes_cli(*args, cwd):
    return subprocess.run(
        [sys.executable, "-m", "regimes", *map(str, args)],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=300,
    )


def toml_value(value):
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return repr(value)


def job_text(paths, **sections):
    """A small job: few modes and restarts, no figures (tests/test_figures.py draws them); extra keys as section={key: value}."""
    base = {
        "data": {"paths": str(paths), "variable": "psl"},
        "eof": {"modes": 4},
        "regimes": {"k": 3, "restarts": 3},
        "figures": {"draw": False},
        "output": {"dir": "out"},
    }
    for name, keys in sections.items():
        base.setdefault(name, {}).update(keys)
    lines = []
    for name, keys in base.items():
        lines.append(f"[{name}]")
        lines += [f"{k} = {toml_value(v)}" for k, v in keys.items()]
    return "\n".join(lines) + "\n"


def assert_one_error_line(result):
    assert result.returncode == 2, result.stderr
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("regimes: error:"), lines[0]
    return lines[0]


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """The planted field (4 years, coarse grid) and a few variants of it, on disk."""
    folder = tmp_path_factory.mktemp("inputs")
    ds, _ = synthetic.planted_regimes(years=4, lat=LAT, lon=LON, k=3, seed=1)
    files = {"good": folder / "psl.nc"}
    synthetic.write_netcdf(ds, files["good"])

    constant = ds.copy(deep=True)
    constant["psl"].values[:] = 101000.0
    files["constant"] = folder / "constant.nc"
    synthetic.write_netcdf(constant, files["constant"])

    missing = ds.copy(deep=True)
    missing["psl"].values[:] = np.nan
    files["missing"] = folder / "allmissing.nc"
    synthetic.write_netcdf(missing, files["missing"])

    janfeb = ds.isel(time=np.flatnonzero(ds["time"].dt.month.isin([1, 2]).values))
    files["janfeb"] = folder / "janfeb.nc"
    synthetic.write_netcdf(janfeb, files["janfeb"])
    return files


def snapshot(folder: Path):
    return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in sorted(folder.iterdir())}


def test_run_then_refuse_then_overwrite(inputs, tmp_path):
    cfg = tmp_path / "job.toml"
    cfg.write_text(job_text(inputs["good"]))
    result = regimes_cli("run", cfg, cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    out = tmp_path / "out"
    assert {p.name for p in out.iterdir()} == OUTPUTS
    with xr.open_dataset(out / "labels.nc") as labels:
        assert labels.sizes["time"] == 4 * 365 + 1  # 1981-1984, 1984 a leap year
    before = snapshot(out)

    again = regimes_cli("run", cfg, cwd=tmp_path)
    line = assert_one_error_line(again)
    assert "overwrite" in line
    assert snapshot(out) == before

    forced = regimes_cli("run", cfg, "--overwrite", cwd=tmp_path)
    assert forced.returncode == 0, forced.stderr
    assert {p.name for p in out.iterdir()} == OUTPUTS


def test_run_with_output_option(inputs, tmp_path):
    cfg = tmp_path / "job.toml"
    cfg.write_text(job_text(inputs["good"], regimes={"k": 2, "restarts": 2}, data={"months": [12, 1, 2]}))
    result = regimes_cli("--quiet", "run", cfg, "--output", tmp_path / "elsewhere", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert not (tmp_path / "out").exists()
    assert {p.name for p in (tmp_path / "elsewhere").iterdir()} == OUTPUTS


# Each case: (file key or literal path, extra config sections, raw config text override, words expected in the message)
BAD_INPUTS = {
    "missing file": (None, {"data": {"paths": "absent.nc"}}, None, ["absent.nc"]),
    "glob matching nothing": (None, {"data": {"paths": "nothing_*.nc"}}, None, ["nothing_*.nc"]),
    "missing variable": ("good", {"data": {"variable": "tas"}}, None, ["tas", "psl"]),
    "latitude box selecting nothing": ("good", {"data": {"lat": [0.0, 10.0]}}, None, ["data.lat"]),
    "longitude box selecting nothing": ("good", {"data": {"lon": [100.0, 120.0]}}, None, ["data.lon"]),
    "level without vertical axis": ("good", {"data": {"level": 500}}, None, ["data.level"]),
    "period outside the data": ("good", {"data": {"period": ["2000-01-01", "2000-12-31"]}}, None, ["data.period"]),
    # 30 February is not a day of the standard calendar of this file
    "period with a day the calendar lacks": ("good", {"data": {"period": ["1982-02-30", "1982-03-31"]}}, None, ["data.period"]),
    "months absent from the data": ("janfeb", {"data": {"months": [7, 8]}, "anomalies": {"climatology": "monthly"}}, None, ["data.months"]),
    "period and months without overlap": (
        "good",
        {"data": {"period": ["1982-01-01", "1982-02-28"], "months": [7, 8]}, "anomalies": {"climatology": "none"}},
        None,
        ["data.months"],
    ),
    "period and months without overlap, daily climatology": (
        "good",
        {"data": {"period": ["1982-01-01", "1982-02-28"], "months": [7, 8]}},
        None,
        ["months"],
    ),
    "constant field": ("constant", {}, None, ["vary"]),
    "all-missing field": ("missing", {}, None, ["missing"]),
    "k larger than the number of days": (
        "good",
        {"data": {"period": ["1982-01-01", "1982-01-10"]}, "anomalies": {"climatology": "none"}, "regimes": {"k": 20}},
        None,
        ["regimes.k"],
    ),
    "config typo": ("good", {"regimes": {"restart": 5}}, None, ["regimes.restart", "restarts"]),
    "invalid TOML": ("good", {}, '[data]\npaths = "x.nc"\nvariable = = "psl"\n', ["line 3"]),
}


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_bad_input_is_one_line_exit_2_and_no_output(inputs, tmp_path, case):
    key, extra, raw, words = BAD_INPUTS[case]
    cfg = tmp_path / "job.toml"
    text = raw if raw is not None else job_text(inputs[key] if key else "placeholder", **extra)
    cfg.write_text(text)
    result = regimes_cli("--quiet", "run", cfg, cwd=tmp_path)
    line = assert_one_error_line(result)
    for word in words:
        assert word in line, line
    assert not (tmp_path / "out").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["job.toml"]


def test_bad_input_without_quiet_has_no_traceback(inputs, tmp_path):
    """Progress lines may precede it, but the error itself is one final line and no traceback."""
    # the constant field fails late, after progress lines have been logged
    cfg = tmp_path / "job.toml"
    cfg.write_text(job_text(inputs["constant"]))
    result = regimes_cli("run", cfg, cwd=tmp_path)
    assert result.returncode == 2
    lines = result.stderr.splitlines()
    assert "Traceback" not in result.stderr
    assert [line for line in lines if line.startswith("regimes: error:")] == [lines[-1]]
    assert not (tmp_path / "out").exists()


def test_missing_config_file(tmp_path):
    result = regimes_cli("--quiet", "run", tmp_path / "nope.toml", cwd=tmp_path)
    line = assert_one_error_line(result)
    assert "nope.toml" in line


def test_init_writes_valid_config_and_refuses_to_overwrite(inputs, tmp_path):
    path = tmp_path / "sub" / "job.toml"
    path.parent.mkdir()
    result = regimes_cli("init", path, cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    text = path.read_text()
    raw = tomllib.loads(text)
    # every key of the schema is listed (set or commented out)
    for section, keys in config.SCHEMA.items():
        for key in keys:
            assert f"{key} = " in text, f"{section}.{key}"
    raw["data"]["paths"] = [str(inputs["good"])]
    cfg = config.validate(raw, path.parent)
    assert cfg.data.paths == [str(inputs["good"])]
    assert Path(cfg.output.dir).parent == path.parent.resolve()

    again = regimes_cli("init", path, cwd=tmp_path)
    line = assert_one_error_line(again)
    assert str(path.name) in line
    assert path.read_text() == text

    replaced = regimes_cli("init", path, "--overwrite", cwd=tmp_path)
    assert replaced.returncode == 0, replaced.stderr
    assert tomllib.loads(path.read_text()) == tomllib.loads(text)
