"""Tests of the command line, run as a subprocess: ``python -m regimes ...``."""

from __future__ import annotations

import os
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


CHECKOUT = Path(__file__).resolve().parents[1]


def checkout_env() -> dict:
    """Environment in which ``python -m regimes`` imports this checkout, whatever is installed."""
    return {**os.environ, "PYTHONPATH": os.pathsep.join([str(CHECKOUT), os.environ.get("PYTHONPATH", "")])}


def regimes_cli(*args, cwd):
    return subprocess.run(
        [sys.executable, "-m", "regimes", *map(str, args)],
        cwd=cwd,
        env=checkout_env(),
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
    """The planted field (4 years, coarse grid) and a constant variant of it, on disk."""
    folder = tmp_path_factory.mktemp("inputs")
    ds, _ = synthetic.planted_regimes(years=4, lat=LAT, lon=LON, k=3, seed=1)
    files = {"good": folder / "psl.nc"}
    synthetic.write_netcdf(ds, files["good"])

    constant = ds.copy(deep=True)
    constant["psl"].values[:] = 101000.0
    files["constant"] = folder / "constant.nc"
    synthetic.write_netcdf(constant, files["constant"])
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


# A planted bug: an internal function raises RuntimeError, then ``regimes`` runs as usual.
PLANTED_BUG = """
import runpy, sys
import regimes.{module}
def broken(*args, **kwargs):
    raise RuntimeError("planted bug")
regimes.{module}.{function} = broken
sys.argv = ["regimes", *sys.argv[1:]]
runpy.run_module("regimes", run_name="__main__")
"""


def test_a_bug_keeps_its_traceback_and_exits_1(inputs, tmp_path):
    cfg = tmp_path / "job.toml"
    cfg.write_text(job_text(inputs["good"]))
    result = subprocess.run(
        [sys.executable, "-c", PLANTED_BUG.format(module="data", function="open_inputs"), "run", str(cfg)],
        cwd=tmp_path, env=checkout_env(), capture_output=True, text=True, timeout=300,
    )
    # an uncaught exception: Python prints the traceback and exits with status 1 (Python documentation, sys.exit)
    assert result.returncode == 1, result.stderr
    assert "Traceback (most recent call last)" in result.stderr
    assert result.stderr.splitlines()[-1] == "RuntimeError: planted bug"
    assert "regimes: error" not in result.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["job.toml"]


@pytest.mark.parametrize(
    "argv, module, function",
    [
        (["scan", "{job}"], "data", "open_inputs"),
        (["init", "{folder}/new.toml"], "config", "reference_text"),
        (["plot", "{folder}"], "finished", "open_folder"),
        (["assign", "{folder}/model.nc", "{folder}/data.nc"], "model", "RegimeModel.load"),
        (["compare", "{folder}", "{folder}", "--output", "{folder}/cmp"], "compare", "read"),
    ],
    ids=["scan", "init", "plot", "assign", "compare"],
)
def test_a_bug_is_not_turned_into_a_user_error(inputs, tmp_path, monkeypatch, argv, module, function):
    """In every command, only UserError becomes the one-line answer; anything else propagates."""
    import importlib

    from regimes import cli

    def broken(*args, **kwargs):
        raise RuntimeError("planted bug")

    owner = importlib.import_module(f"regimes.{module}")
    *path, name = function.split(".")
    for attribute in path:
        owner = getattr(owner, attribute)
    monkeypatch.setattr(owner, name, broken)
    cfg = tmp_path / "job.toml"
    cfg.write_text(job_text(inputs["good"]))
    with pytest.raises(RuntimeError, match="planted bug"):
        cli.main([a.replace("{job}", str(cfg)).replace("{folder}", str(tmp_path)) for a in argv])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["job.toml"]
