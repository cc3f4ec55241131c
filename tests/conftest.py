"""Shared fixtures: a small finished run (with its figures and report) and a scan beside it."""

from __future__ import annotations

import numpy as np
import pytest

from regimes import cli, config, pipeline, synthetic

SMALL_LAT = np.arange(30.0, 71.0, 10.0)
SMALL_LON = np.arange(-40.0, 21.0, 10.0)


@pytest.fixture(scope="session")
def finished_run(tmp_path_factory):
    """A finished run of four winters of planted regimes on a coarse grid, with a scan in out/scan, drawn by ``pipeline.run``.

    Built once per test session (per xdist worker); planted data from :mod:`regimes.synthetic`. Tests copy it before changing it.
    The scan comes first (``regimes scan`` draws its figure), then the run
    into the same folder, so that its report includes the scan.
    """
    folder = tmp_path_factory.mktemp("finished")
    data, _ = synthetic.planted_regimes(years=4, lat=SMALL_LAT, lon=SMALL_LON, k=3, seed=4)
    synthetic.write_netcdf(data, folder / "psl.nc")
    job = folder / "job.toml"
    job.write_text(
        """
[data]
paths = ["psl.nc"]
variable = "psl"
months = [12, 1, 2]
[eof]
modes = 4
[regimes]
k = 3
restarts = 3
names = ["zonal", "blocked", "ridge"]
[figures]
dpi = 80
eof_modes = 3
[output]
dir = "out"
"""
    )
    assert cli.main(["--quiet", "scan", str(job), "--k", "2-3", "--surrogates", "3", "--restarts", "3"]) == 0
    assert (folder / "out" / "scan" / "scan_diagnostics.png").is_file()
    cfg, text = config.load(job)
    return pipeline.run(cfg, text, overwrite=True)
