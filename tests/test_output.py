"""Results are never half-written: failed and interrupted runs leave nothing under the final names."""

from __future__ import annotations

import errno
import signal
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import xarray as xr
from test_cli import checkout_env

from regimes import cli, output, synthetic
from regimes.errors import UserError


def small_dataset(value: float = 1.0) -> xr.Dataset:
    return xr.Dataset({"v": ("x", np.full(3, value, dtype=np.float32))}, coords={"x": np.arange(3.0)})


def test_failure_while_writing_leaves_nothing(tmp_path, monkeypatch):
    """The second of two files fails: the first is not renamed, no temporary is left, the new folder is removed."""
    calls = []
    original = output._to_netcdf

    def failing(ds, path):
        calls.append(path)
        if len(calls) == 2:
            raise OSError("disk full")
        original(ds, path)

    monkeypatch.setattr(output, "_to_netcdf", failing)
    folder = tmp_path / "results"
    with pytest.raises(OSError):
        output.write_all({"a.nc": small_dataset(), "b.nc": small_dataset()}, folder, overwrite=False)
    assert calls[0].parent == folder and calls[0].name != "a.nc"  # written under a temporary name
    assert not folder.exists()


@pytest.mark.parametrize("failure, free, message", [
    # the netCDF library reports a full disk only as an HDF error; the free space left tells
    (RuntimeError("NetCDF: HDF error"), 4096, r"cannot write '.*a\.nc': the disk is full \(4 KiB free\); free some space or choose another output folder"),
    (OSError(errno.ENOSPC, "No space left on device"), 10**9, r"the disk is full"),
    (PermissionError(errno.EACCES, "Permission denied"), 10**9, r"cannot write '.*a\.nc': permission denied; choose an output folder you can write to"),
    (OSError(errno.EROFS, "Read-only file system"), 10**9, r"read-only file system; choose an output folder you can write to"),
], ids=["full disk, HDF error", "full disk, ENOSPC", "no permission", "read-only"])
def test_a_full_disk_or_a_locked_folder_is_a_user_error(tmp_path, monkeypatch, capsys, failure, free, message):
    def failing(ds, path):
        raise failure

    monkeypatch.setattr(output, "_to_netcdf", failing)
    monkeypatch.setattr(output.shutil, "disk_usage", lambda path: SimpleNamespace(free=free))
    with pytest.raises(UserError, match=message):
        output.write_all({"a.nc": small_dataset()}, tmp_path / "results", overwrite=False)
    assert not (tmp_path / "results").exists()
    # from the command line: one line, exit status 2, nothing written
    job = tmp_path / "job.toml"
    job.write_text('[data]\nvariable = "psl"\npaths = "small.nc"\n[eof]\nmodes = 3\n[regimes]\nk = 2\nrestarts = 2\n[output]\ndir = "out"\n')
    synthetic.write_netcdf(synthetic.planted_regimes(years=1, lat=np.arange(30.0, 71.0, 20.0), lon=np.arange(-40.0, 21.0, 20.0), k=2, seed=1)[0],
                           tmp_path / "small.nc")
    monkeypatch.chdir(tmp_path)
    assert cli.main(["--quiet", "run", str(job)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("regimes: error: cannot write ") and "Traceback" not in err[0]
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("failure, probe, message", [
    # the netCDF library says 'permission denied' when the disk is already full as it creates the file
    (PermissionError(errno.EACCES, "Permission denied"), errno.ENOSPC, r"the disk is full"),
    # and passes no quota error on: the probe write gets it
    (RuntimeError("NetCDF: HDF error"), errno.EDQUOT, r"the disk quota is exceeded; free some space or choose another output folder"),
], ids=["permission error on a full disk", "quota"])
def test_the_probe_write_tells_what_the_netcdf_library_hides(tmp_path, monkeypatch, failure, probe, message):
    def failing(ds, path):
        raise failure

    monkeypatch.setattr(output, "_to_netcdf", failing)
    monkeypatch.setattr(output, "_probe", lambda folder: probe)
    with pytest.raises(UserError, match=message):
        output.write_all({"a.nc": small_dataset()}, tmp_path / "results", overwrite=False)


def test_other_netcdf_errors_stay_bugs_even_on_a_nearly_full_disk(tmp_path, monkeypatch):
    def failing(ds, path):
        raise RuntimeError("NetCDF: Invalid dimension ID or name")

    monkeypatch.setattr(output, "_to_netcdf", failing)
    monkeypatch.setattr(output.shutil, "disk_usage", lambda path: SimpleNamespace(free=0))
    with pytest.raises(RuntimeError, match="Invalid dimension"):
        output.write_all({"a.nc": small_dataset()}, tmp_path / "results", overwrite=False)


def test_a_folder_that_cannot_be_made_or_cleaned_is_a_user_error(tmp_path, monkeypatch):
    real_mkdir = Path.mkdir

    def no_mkdir(self, *args, **kwargs):
        if self.name == "results":
            raise PermissionError(errno.EACCES, "Permission denied")
        return real_mkdir(self, *args, **kwargs)

    monkeypatch.setattr(Path, "mkdir", no_mkdir)
    monkeypatch.setattr(output, "_probe", lambda folder: errno.EACCES)
    with pytest.raises(UserError, match=r"cannot write '.*results': permission denied"):
        output.write_all({"a.nc": small_dataset()}, tmp_path / "results", overwrite=False)
    monkeypatch.undo()
    # an existing folder on a read-only file system: even removing the missing temporary file fails there
    (tmp_path / "existing").mkdir()

    def read_only(*args, **kwargs):
        raise OSError(errno.EROFS, "Read-only file system")

    monkeypatch.setattr(output, "_to_netcdf", read_only)
    monkeypatch.setattr(Path, "unlink", read_only)
    monkeypatch.setattr(output, "_probe", lambda folder: errno.EROFS)
    with pytest.raises(UserError, match="read-only file system"):
        output.write_all({"a.nc": small_dataset()}, tmp_path / "existing", overwrite=False)


def test_a_figure_on_a_full_disk_is_a_user_error(tmp_path, monkeypatch):
    def full(self, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(Path, "write_bytes", full)
    with pytest.raises(UserError, match=r"cannot write '.*durations\.png': the disk is full"):
        output.write_bytes(b"png", tmp_path / "durations.png")
    assert list(tmp_path.iterdir()) == []


def test_failure_keeps_an_earlier_run_whole(tmp_path, monkeypatch):
    """With --overwrite, a failed run leaves the earlier results as they were."""
    folder = tmp_path / "results"
    output.write_all({"a.nc": small_dataset(1.0), "b.nc": small_dataset(1.0)}, folder, overwrite=False)
    before = {p.name: p.read_bytes() for p in folder.iterdir()}

    def failing(ds, path):
        raise OSError("disk full")

    monkeypatch.setattr(output, "_to_netcdf", failing)
    with pytest.raises(OSError):
        output.write_all({"a.nc": small_dataset(2.0), "b.nc": small_dataset(2.0)}, folder, overwrite=True)
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before


def test_write_replaces_whole_files(tmp_path):
    path = output.write(small_dataset(3.0), tmp_path / "one.nc")
    with xr.open_dataset(path) as ds:
        assert ds["v"].values.tolist() == [3.0, 3.0, 3.0]
    assert [p.name for p in tmp_path.iterdir()] == ["one.nc"]


# --------------------------------------------------------------------------
# interrupted runs (a real ``python -m regimes run`` in a subprocess)
# --------------------------------------------------------------------------

# Runs ``regimes`` with every NetCDF write followed by a pause, so that a signal
# can be sent while the result files are being written (after one is complete).
SLOW_WRITER = """
import runpy, sys, time
import xarray as xr
write = xr.Dataset.to_netcdf
def slow(self, path, *args, **kwargs):
    result = write(self, path, *args, **kwargs)
    print(f"test: wrote {path}", file=sys.stderr, flush=True)
    time.sleep(0.5)
    return result
xr.Dataset.to_netcdf = slow
sys.argv = ["regimes", *sys.argv[1:]]
runpy.run_module("regimes", run_name="__main__")
"""


@pytest.fixture(scope="module")
def jobs(tmp_path_factory):
    """Input fields: one whose job runs for a few seconds (eight years, 400 k-means restarts), one small."""
    folder = tmp_path_factory.mktemp("jobs")
    big, _ = synthetic.planted_regimes(years=8, lat=np.arange(25.0, 76.0, 5.0), lon=np.arange(-80.0, 21.0, 5.0), k=4, seed=2)
    synthetic.write_netcdf(big, folder / "big.nc")
    small, _ = synthetic.planted_regimes(years=2, lat=np.arange(30.0, 71.0, 10.0), lon=np.arange(-40.0, 21.0, 10.0), k=3, seed=1)
    synthetic.write_netcdf(small, folder / "small.nc")
    return {
        "computing": f'paths = "{folder / "big.nc"}"\n[regimes]\nk = 4\nrestarts = 400\n',
        "writing": f'paths = "{folder / "small.nc"}"\n[regimes]\nk = 3\nrestarts = 3\n',
    }


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
@pytest.mark.parametrize(
    "phase, marker",
    [("computing", "EOF analysis ..."), ("writing", "test: wrote")],  # while writing: after the second file
    ids=["while computing", "while writing"],
)
def test_interrupted_run_leaves_nothing(jobs, tmp_path, signum, phase, marker):
    """The signal is sent once the run is under way (a log line has appeared)."""
    job = tmp_path / "job.toml"
    job.write_text(f'[data]\nvariable = "psl"\n{jobs[phase]}[output]\ndir = "out"\n')
    command = [sys.executable, "-m", "regimes"] if phase == "computing" else [sys.executable, "-c", SLOW_WRITER]
    proc = subprocess.Popen([*command, "run", str(job)], cwd=tmp_path, env=checkout_env(), stderr=subprocess.PIPE, text=True)
    seen = []
    wanted = 1 if phase == "computing" else 2
    try:
        for line in proc.stderr:
            seen.append(line)
            if "".join(seen).count(marker) == wanted:
                proc.send_signal(signum)
                break
        rest = proc.communicate(timeout=120)[1]
    finally:
        proc.kill()
    assert "".join(seen).count(marker) == wanted, "".join(seen)
    # exit status 128 + signal number: 130 for SIGINT, 143 for SIGTERM (common practice)
    assert proc.returncode == 128 + signum, "".join(seen) + rest
    assert rest.splitlines()[-1] == f"regimes: interrupted by {signal.Signals(signum).name}; unfinished files were removed"
    assert "Traceback" not in rest
    # nothing under the final names, no temporary file, and the output folder this run created is gone
    assert sorted(p.name for p in tmp_path.rglob("*")) == ["job.toml"]
