"""The saved model file: format version and checksum verified on load; a damaged model is refused in one line."""

from __future__ import annotations

import re

import netCDF4
import numpy as np
import pytest

from regimes import config, pipeline, synthetic
from regimes.errors import UserError
from regimes.model import FORMAT_VERSION, RegimeModel


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    """model.nc of a small run."""
    folder = tmp_path_factory.mktemp("model")
    ds, _ = synthetic.planted_regimes(years=2, lat=np.arange(30.0, 71.0, 10.0), lon=np.arange(-40.0, 21.0, 10.0), k=3, seed=1)
    synthetic.write_netcdf(ds, folder / "field.nc")
    (folder / "job.toml").write_text('[data]\npaths = "field.nc"\nvariable = "psl"\n[regimes]\nk = 3\nrestarts = 3\n[output]\ndir = "out"\n')
    cfg, text = config.load(folder / "job.toml")
    return pipeline.run(cfg, text) / "model.nc"


def damaged_copy(model_file, tmp_path, how: str):
    path = tmp_path / "model.nc"
    path.write_bytes(model_file.read_bytes())
    if how == "truncated":
        path.write_bytes(model_file.read_bytes()[: model_file.stat().st_size // 2])
    elif how == "one centroid value changed":
        with netCDF4.Dataset(path, "a") as nc:
            nc["centroid"][0, 0] = nc["centroid"][0, 0] + 1.0
    elif how == "one EOF value changed by a rounding error":
        with netCDF4.Dataset(path, "a") as nc:
            value = np.float64(nc["eof"][0, 0, 0])
            nc["eof"][0, 0, 0] = np.nextafter(value, np.inf)
    elif how == "settings edited":
        with netCDF4.Dataset(path, "a") as nc:
            nc.settings = nc.settings.replace('"k": 3', '"k": 2')
    elif how == "checksum removed":
        with netCDF4.Dataset(path, "a") as nc:
            nc.delncattr("model_checksum")
    elif how == "another format version":
        with netCDF4.Dataset(path, "a") as nc:
            nc.model_format_version = FORMAT_VERSION + 1
    elif how == "not NetCDF":
        path.write_text("not a model\n")
    elif how == "missing":
        path.unlink()
    else:
        raise ValueError(how)
    return path


def test_intact_model_loads(model_file):
    model = RegimeModel.load(model_file)
    assert model.settings["k"] == 3
    assert model.dataset["centroid"].sizes["regime"] == 3


@pytest.mark.parametrize(
    "how, answer",
    [
        ("truncated", "cannot be read"),
        ("one centroid value changed", "fails its checksum"),
        ("one EOF value changed by a rounding error", "fails its checksum"),
        ("settings edited", "fails its checksum"),
        ("checksum removed", "fails its checksum"),
        ("another format version", rf"has format version {FORMAT_VERSION + 1}, expected {FORMAT_VERSION}; refit"),
        ("not NetCDF", "cannot be read"),
        ("missing", "cannot be read"),
    ],
)
def test_damaged_model_is_refused_in_one_line(model_file, tmp_path, how, answer):
    path = damaged_copy(model_file, tmp_path, how)
    with pytest.raises(UserError) as err:
        RegimeModel.load(path)
    message = str(err.value)
    assert re.search(answer, message) and f"model file '{path}'" in message
    assert "\n" not in message
