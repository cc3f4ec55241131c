"""Wall time and peak memory of the classifiability + red-noise scan: our compiled k-means against scikit-learn.

Both sides compute, for k = 2..8, the classifiability index over R restarts
(Michelangeli, Vautard & Legras 1995) of the observed PCs and of S red-noise
surrogates (the same surrogates: independent AR(1) per PC, restarted at each
season start; :func:`regimes.scan.ar1_surrogates`). They differ only in the
clustering:

ours
    :func:`regimes.scan.surrogate_classifiability` / :func:`regimes.scan.restart_fits`:
    the R restarts of a k seeded and iterated in compiled code
    (regimes.kmeans: greedy k-means++, Lloyd with Hamerly's bounds and
    float32 screening of distances, run to convergence), surrogates over a thread pool;
sklearn
    ``sklearn.cluster.KMeans(n_clusters=k, n_init=1, random_state=...)`` in a
    Python loop over the R restarts, surrogates one after the other (its own
    OpenMP threads run inside each fit).

The PCs are those of the 40-year benchmark grid of ``pipeline_vs_plain.py``
(planted regimes, 61 x 101 points, DJF, daily climatology of 3 harmonics,
coslat weights, 10 modes, seed 1), built once through ``pipeline.prepare``
and the EOF fit, cached in ``--workdir``. Each side runs in a fresh
subprocess; peak memory is the child's maximum resident set size. Ours runs
before and after scikit-learn's (much longer) side; the speed-up is taken on
the mean of the two, and the ratio to each is printed too, because a shared
machine's speed can drift by a quarter within the run.

Usage::

    .venv/bin/python benchmarks/scan_vs_sklearn.py [--surrogates 100] [--restarts 50] [--workdir /tmp/regimes-scan-bench]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
KS = list(range(2, 9))


def build_pcs(workdir: Path, years: int) -> Path:
    """PCs of the benchmark grid (cached): the field via pipeline_vs_plain.build_inputs, then prepare + EOF."""
    target = workdir / f"pcs_{years}y.npz"
    if target.is_file():
        return target
    sys.path.insert(0, str(HERE))
    from pipeline_vs_plain import CONFIG, build_inputs  # the same job, so the same PCs

    from regimes import config, pipeline

    data_path, _ = build_inputs(workdir, years, 0)
    job = workdir / "scan_bench.toml"
    job.write_text(CONFIG.format(path=data_path, solver=""))
    cfg, _ = config.load(job)
    prep = pipeline.prepare(cfg)
    _, pcs = pipeline.principal_components(cfg, prep, np.random.default_rng(cfg.regimes.seed))
    np.savez(target, pcs=pcs.values, segment_start=prep.segment_start, season_year=prep.season_year)
    return target


def side_ours(x, start, restarts, surrogates, workers):
    from regimes import scan

    rng = np.random.default_rng(1)
    observed = [scan.classifiability(scan.restart_fits(x, k, restarts, rng)[0]) for k in KS]
    noise = scan.surrogate_classifiability(x, start, KS, restarts, surrogates, rng, workers=workers)
    return observed, noise


def side_sklearn(x, start, restarts, surrogates, workers):
    from sklearn.cluster import KMeans

    from regimes import scan

    rng = np.random.default_rng(1)

    def index(data, k, seed0):
        centres = np.stack([KMeans(n_clusters=k, n_init=1, random_state=seed0 + r).fit(data).cluster_centers_ for r in range(restarts)])
        return scan.classifiability(centres)

    observed = [index(x, k, 0) for k in KS]
    params = scan.ar1_parameters(x, start)
    seeds = np.random.SeedSequence(int(rng.integers(2**63))).spawn(surrogates)
    noise = []
    for s, seed in enumerate(seeds):
        sur = scan.ar1_surrogates(*params, start, np.random.default_rng(seed))
        noise.append([index(sur, k, 1000 * (s + 1)) for k in KS])
    return observed, np.array(noise)


def child(args) -> int:
    z = np.load(args.pcs)
    x, start = z["pcs"].astype(np.float64), z["segment_start"]
    t = time.perf_counter()
    fn = side_ours if args.child == "ours" else side_sklearn
    observed, noise = fn(x, start, args.restarts, args.surrogates, args.workers)
    wall = time.perf_counter() - t
    q = np.quantile(noise, 0.9, axis=0)
    print(json.dumps({"wall": wall, "observed": list(map(float, observed)), "q90": list(map(float, q))}))
    return 0


def measure(cmd):
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
    out = proc.stdout.read()
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - started
    if status != 0:
        raise SystemExit(f"child failed: {' '.join(cmd)}")
    return wall, usage.ru_maxrss / 1024, json.loads(out.strip().splitlines()[-1])


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--years", type=int, default=40)
    p.add_argument("--surrogates", type=int, default=100)
    p.add_argument("--restarts", type=int, default=50)
    p.add_argument("--workers", type=int, default=os.cpu_count())
    p.add_argument("--workdir", default="/tmp/regimes-scan-bench")
    p.add_argument("--only", choices=["ours", "sklearn"], help="run one side only")
    p.add_argument("--child", choices=["ours", "sklearn"], help=argparse.SUPPRESS)
    p.add_argument("--pcs", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.child:
        return child(args)
    workdir = Path(args.workdir)
    workdir.mkdir(parents=True, exist_ok=True)
    pcs = build_pcs(workdir, args.years)
    n = np.load(pcs)["pcs"].shape
    print(f"PCs {n[0]} days x {n[1]} modes; k = {KS[0]}..{KS[-1]}; {args.surrogates} surrogates x {args.restarts} restarts; "
          f"{os.cpu_count()} cores, {args.workers} worker threads (ours)")
    walls = {"ours": [], "sklearn": []}
    # ours runs before and after the long scikit-learn side, so that a change in the machine's speed meanwhile shows
    for side in ([args.only] if args.only else ["ours", "sklearn", "ours"]):
        cmd = [sys.executable, __file__, "--child", side, "--pcs", str(pcs), "--restarts", str(args.restarts),
               "--surrogates", str(args.surrogates), "--workers", str(args.workers)]
        wall, rss, res = measure(cmd)
        walls[side].append(wall)
        print(f"{side:8s} wall {wall:8.1f} s (scan itself {res['wall']:.1f} s)  peak RSS {rss:7.0f} MiB")
        print(f"         classifiability {' '.join(f'{v:.3f}' for v in res['observed'])}")
        print(f"         surrogate q90   {' '.join(f'{v:.3f}' for v in res['q90'])}")
    if walls["ours"] and walls["sklearn"]:
        ours = sum(walls["ours"]) / len(walls["ours"])
        ratios = " and ".join(f"{walls['sklearn'][0] / w:.2f}x" for w in walls["ours"])
        print(f"speed-up sklearn / ours: {walls['sklearn'][0] / ours:.2f}x on the mean of ours ({ratios} on each run; target >= 10x); "
              f"ours {ours:.1f} s (target < 60 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
