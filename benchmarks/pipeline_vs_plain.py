"""Wall time and peak memory of ``regimes run`` against a plain in-memory baseline.

The benchmark builds (once, cached in ``--workdir``) a daily field of invented
sea-level pressure with planted regimes on a 61 x 101 grid at 1 degree
(latitude 20..80 N, longitude 60 W..40 E), written as uncompressed float32
NetCDF (about 360 MB for 40 years). It then runs, each in a fresh subprocess:

ours
    ``python -m regimes run CONFIG --output DIR --overwrite --quiet`` with
    DJF, a daily climatology of 3 harmonics, sqrt(cos lat) weights, 10 EOF
    modes and k-means with k = 4, 100 restarts, seed 1;
plain
    ``benchmarks/plain_baseline.py``: the same steps the ordinary way
    (xarray load, day-of-year groupby climatology, scikit-learn PCA and
    KMeans, groupby composites, to_netcdf).

Wall time is measured around each subprocess (interpreter start and imports
included); peak memory is the child's own maximum resident set size from
``os.wait4``. With ``--repeat N`` the best (smallest) of N runs of each is
kept, for time and memory separately. The table compares the ratios
ours / plain with the targets (wall <= 0.35, memory <= 0.4) and gives the
adjusted Rand index between the two label sets (and against the planted
truth) as a sanity check.

Usage::

    .venv/bin/python benchmarks/pipeline_vs_plain.py [--years 40] [--workdir /tmp/regimes-bench] [--repeat 1]
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
LAT = np.arange(20.0, 80.0 + 0.5, 1.0)  # 61 latitudes
LON = np.arange(-60.0, 40.0 + 0.5, 1.0)  # 101 longitudes
WALL_TARGET = 0.35
MEMORY_TARGET = 0.40

CONFIG = """\
# Benchmark job (written by benchmarks/pipeline_vs_plain.py); synthetic data.
[data]
paths = ["{path}"]
variable = "psl"
lat = [20.0, 80.0]
lon = [-60.0, 40.0]
months = [12, 1, 2]

[anomalies]
climatology = "daily"
harmonics = 3

[eof]
weighting = "coslat"
modes = 10
{solver}
[regimes]
method = "kmeans"
k = 4
restarts = 100
seed = 1

[figures]
draw = false  # the plain script draws nothing either

[output]
dir = "out-ours"
"""


def build_inputs(workdir: Path, years: int, seed: int) -> tuple[Path, Path]:
    """Write the synthetic field and its planted truth once; reuse them afterwards."""
    stem = f"psl_{years}y_{LAT.size}x{LON.size}_seed{seed}"
    data_path, truth_path = workdir / f"{stem}.nc", workdir / f"{stem}_truth.nc"
    if data_path.is_file() and truth_path.is_file():
        return data_path, truth_path
    from regimes.synthetic import planted_regimes

    print(f"building {data_path} ({years} years, {LAT.size} x {LON.size} points) ...", flush=True)
    started = time.perf_counter()
    data, truth = planted_regimes(years=years, lat=LAT, lon=LON, k=4, seed=seed)
    units = {"time": {"units": f"days since {str(data['time'].values[0])[:10]} 00:00:00"}}
    # Uncompressed float32: no zlib, no packing (the benchmark measures reading, not inflating).
    data_tmp, truth_tmp = data_path.with_suffix(".tmp"), truth_path.with_suffix(".tmp")
    data.to_netcdf(data_tmp, engine="netcdf4", format="NETCDF4", encoding={"psl": {"zlib": False, "dtype": "float32"}, **units})
    truth.to_netcdf(truth_tmp, engine="netcdf4", format="NETCDF4", encoding=units)
    del data, truth
    truth_tmp.replace(truth_path)
    data_tmp.replace(data_path)  # last: its presence marks a complete cache
    print(f"built in {time.perf_counter() - started:.1f} s, {data_path.stat().st_size / 1e6:.0f} MB", flush=True)
    return data_path, truth_path


def busy_cpu_seconds() -> float | None:
    """CPU seconds spent busy by the whole machine since boot (Linux /proc/stat), or None."""
    try:
        with open("/proc/stat") as f:
            fields = [float(v) for v in f.readline().split()[1:]]
    except (OSError, ValueError):
        return None
    idle = fields[3] + (fields[4] if len(fields) > 4 else 0.0)  # idle + iowait
    return (sum(fields[:8]) - idle) / os.sysconf("SC_CLK_TCK")  # user..steal, not guest (counted in user)


def wait_for_quiet(limit_s: float, busy_fraction: float = 0.15) -> float:
    """Wait (at most ``limit_s``) until the machine is nearly idle; return the last busy fraction seen."""
    deadline = time.monotonic() + limit_s
    cpus = os.cpu_count() or 1
    while True:
        before = busy_cpu_seconds()
        if before is None:
            return 0.0
        time.sleep(1.0)
        fraction = (busy_cpu_seconds() - before) / cpus
        if fraction <= busy_fraction or time.monotonic() >= deadline:
            return fraction
        time.sleep(2.0)


def measure(cmd: list[str], log_path: Path) -> tuple[float, float, float | None]:
    """Run ``cmd`` in a fresh process.

    Returns wall seconds, peak RSS in MiB of that child alone, and the CPU
    seconds that other processes used on the machine meanwhile (None where
    /proc/stat is not available).
    """
    with open(log_path, "w") as log:
        machine_before = busy_cpu_seconds()
        started = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, cwd=log_path.parent)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - started
        machine_after = busy_cpu_seconds()
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        sys.exit(f"command failed with status {proc.returncode}: {' '.join(cmd)}\n--- {log_path} ---\n{log_path.read_text()[-4000:]}")
    others = None
    if machine_before is not None and machine_after is not None:
        others = max(0.0, machine_after - machine_before - usage.ru_utime - usage.ru_stime)
    return wall, usage.ru_maxrss / 1024.0, others  # Linux reports ru_maxrss in KiB


def read_labels(path: Path):
    import xarray as xr

    with xr.open_dataset(path) as ds:
        return ds["label"].load()


def agreement(ours_path: Path, plain_path: Path, truth_path: Path) -> dict:
    """Adjusted Rand indices: ours vs plain, and each vs the planted truth, on common days."""
    from sklearn.metrics import adjusted_rand_score

    ours, plain, truth = read_labels(ours_path), read_labels(plain_path), read_labels(truth_path)
    common = np.intersect1d(ours["time"].values, plain["time"].values)
    a = ours.sel(time=common).values
    b = plain.sel(time=common).values
    t = truth.sel(time=common).values
    return {
        "days": (ours.size, plain.size, common.size),
        "ours_plain": adjusted_rand_score(a, b),
        "ours_truth": adjusted_rand_score(t, a),
        "plain_truth": adjusted_rand_score(t, b),
    }


def blas_summary() -> str:
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        return "threadpoolctl not installed"
    parts = [
        f"{i.get('internal_api')} {i.get('version')} {i.get('architecture', '')} x{i.get('num_threads')}".strip()
        for i in threadpool_info()
        if i.get("user_api") == "blas"
    ]
    return "; ".join(parts) or "no BLAS found"


def stage_lines(log_path: Path) -> list[str]:
    return [line.strip() for line in log_path.read_text(errors="replace").splitlines() if re.search(r" done in | finished in ", line)]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Time and peak memory of 'regimes run' against a plain xarray + scikit-learn baseline.")
    p.add_argument("--years", type=int, default=40, help="years of daily data (default 40)")
    p.add_argument("--workdir", default="/tmp/regimes-bench", help="folder for the cached input, configs, outputs and logs")
    p.add_argument("--repeat", type=int, default=1, help="run each side N times and keep the best (default 1)")
    p.add_argument("--seed", type=int, default=0, help="seed of the synthetic field (default 0)")
    p.add_argument(
        "--solver", choices=("auto", "exact", "randomized"), default=None,
        help="set eof.solver in the config (default: leave it out, i.e. the project's default 'auto')",
    )
    p.add_argument(
        "--quiet-wait", type=float, default=60.0,
        help="before each run wait up to this many seconds for the machine to be nearly idle (0: do not wait)",
    )
    p.add_argument("--log-stages", action="store_true", help="run ours without --quiet and print its stage timings")
    args = p.parse_args(argv)
    if args.years < 1 or args.repeat < 1:
        p.error("--years and --repeat must be at least 1")

    workdir = Path(args.workdir).resolve()
    workdir.mkdir(parents=True, exist_ok=True)
    data_path, truth_path = build_inputs(workdir, args.years, args.seed)
    config_path = workdir / "bench.toml"
    config_path.write_text(CONFIG.format(
        path=str(data_path).replace("\\", "/"), solver=f'solver = "{args.solver}"\n' if args.solver else ""
    ), encoding="utf-8")
    ours_dir, plain_dir = workdir / "out-ours", workdir / "out-plain"

    python = sys.executable
    ours_cmd = [python, "-m", "regimes"] + ([] if args.log_stages else ["--quiet"])
    ours_cmd += ["run", str(config_path), "--output", str(ours_dir), "--overwrite"]
    plain_cmd = [python, str(HERE / "plain_baseline.py"), str(data_path), str(plain_dir)]

    with open(data_path, "rb") as f:  # warm the page cache so both sides read from memory
        while f.read(1 << 24):
            pass

    runs: dict[str, list[tuple[float, float, float]]] = {"ours": [], "plain": []}
    for i in range(args.repeat):
        for name, cmd in (("ours", ours_cmd), ("plain", plain_cmd)):
            if args.quiet_wait > 0:
                wait_for_quiet(args.quiet_wait)
            wall, rss, others = measure(cmd, workdir / f"{name}.log")
            share = 0.0 if others is None else others / (wall * (os.cpu_count() or 1))
            runs[name].append((wall, rss, share))
            load = "" if others is None else f"  (other processes used {others:.1f} CPU-s, {100 * share:.0f} % of the machine)"
            print(f"run {i + 1}/{args.repeat} {name:5s}: {wall:7.1f} s  {rss:7.0f} MiB{load}", flush=True)

    best = {name: (min(w for w, _, _ in r), min(m for _, m, _ in r)) for name, r in runs.items()}
    # share of the machine used by other processes during the fastest run of each side
    disturbed = max(min(r)[2] for r in runs.values())
    wall_ratio = best["ours"][0] / best["plain"][0]
    rss_ratio = best["ours"][1] / best["plain"][1]
    agree = agreement(ours_dir / "labels.nc", plain_dir / "labels.nc", truth_path)

    n_days = agree["days"][0]
    env = ", ".join(f"{k}={os.environ[k]!r}" if k in os.environ else f"{k} unset" for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE"))
    ok = lambda r, t: "yes" if r <= t else "NO"  # noqa: E731
    print()
    print(f"input: {args.years} years daily, {LAT.size} x {LON.size} points, {data_path.stat().st_size / 1e6:.0f} MB uncompressed; {n_days} DJF days")
    print(f"machine: {os.cpu_count()} CPUs; BLAS: {blas_summary()}; {env}")
    print(f"best of {args.repeat} run(s) each, fresh process per run; eof.solver = {args.solver or 'auto (default)'}")
    if disturbed > 0.10:
        print(f"WARNING: other processes used up to {100 * disturbed:.0f} % of the machine during a fastest run; wall times are inflated")
    print()
    print(f"{'':28s}{'wall (s)':>12s}{'peak RSS (MiB)':>18s}")
    print(f"{'ours (regimes run)':28s}{best['ours'][0]:12.1f}{best['ours'][1]:18.0f}")
    print(f"{'plain (xarray + sklearn)':28s}{best['plain'][0]:12.1f}{best['plain'][1]:18.0f}")
    print(f"{'ratio ours / plain':28s}{wall_ratio:12.3f}{rss_ratio:18.3f}")
    print(f"{'target':28s}{'<= ' + format(WALL_TARGET, '.2f'):>12s}{'<= ' + format(MEMORY_TARGET, '.2f'):>18s}")
    print(f"{'meets target':28s}{ok(wall_ratio, WALL_TARGET):>12s}{ok(rss_ratio, MEMORY_TARGET):>18s}")
    print()
    print(
        f"adjusted Rand index, ours vs plain: {agree['ours_plain']:.4f} on {agree['days'][2]} common days "
        f"(ours {agree['days'][0]}, plain {agree['days'][1]}); vs planted truth: ours {agree['ours_truth']:.4f}, "
        f"plain {agree['plain_truth']:.4f}"
    )
    if args.log_stages:
        print()
        print("stage timings of the last 'ours' run:")
        for line in stage_lines(workdir / "ours.log"):
            print("  " + line)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
