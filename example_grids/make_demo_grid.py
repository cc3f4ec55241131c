"""Write the bundled demo grid: synthetic daily sea-level pressure with planted regimes.

The scenario is invented: the "Orvane Sea", an imaginary mid-latitude ocean
sector on a 5-degree grid (20..80 degrees north, 90 west..30 east), twenty
years of daily fields from 1991-01-01 with four planted regimes. No real
observations are involved.

Run from the repository root::

    python example_grids/make_demo_grid.py
    python example_grids/make_demo_grid.py --output /tmp/demo.nc --truth /tmp/demo_truth.nc
"""

from __future__ import annotations

import argparse
import sys
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

try:
    from regimes.synthetic import planted_regimes, write_netcdf
except ImportError:  # running from a source checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    from regimes.synthetic import planted_regimes, write_netcdf

SCENARIO = "Orvane Sea"
YEARS = 20
START = "1991-01-01"
REGIMES = 4
SEED = 0
LAT = np.arange(20.0, 80.1, 5.0)  # degrees_north
LON = np.arange(-90.0, 30.1, 5.0)  # degrees_east


def build(seed: int = SEED):
    """Return ``(data, truth)`` for the demo scenario.

    Parameters
    ----------
    seed : int, default 0
        Seed of the random generator.

    Returns
    -------
    data, truth : xarray.Dataset
        As from :func:`regimes.synthetic.planted_regimes`, with the demo's
        global attributes set on ``data``.
    """
    data, truth = planted_regimes(
        years=YEARS, start=START, calendar="standard", lat=LAT, lon=LON, k=REGIMES, seed=seed
    )
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    data.attrs = {
        "title": f"Synthetic daily sea-level pressure, {SCENARIO} sector (invented)",
        "Conventions": "CF-1.8",
        "source": "regimes.synthetic.planted_regimes (synthetic; no observations)",
        "history": f"{stamp}: created by example_grids/make_demo_grid.py (seed={seed})",
        "comment": (
            f"Synthetic sea-level pressure of an invented mid-latitude ocean sector, the {SCENARIO}, "
            f"made for the regimes demo. {REGIMES} circulation regimes are planted, following a "
            "persistent Markov chain, on top of a 101000 Pa background, an annual cycle and spatially "
            "smooth red noise. The place and the data are fictitious."
        ),
        "scenario": SCENARIO,
        "planted_regimes": REGIMES,
        "seed": seed,
    }
    truth.attrs["title"] = f"Planted truth for the {SCENARIO} demo grid"
    truth.attrs["history"] = data.attrs["history"]
    return data, truth


def main(argv: list[str] | None = None) -> int:
    """Command-line entry point; returns the process exit status."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--output", default="example_grids/demo_pressure.nc", help="netCDF file to write (default: %(default)s)"
    )
    parser.add_argument("--truth", default=None, help="also write the planted labels and patterns to this netCDF file")
    parser.add_argument("--seed", type=int, default=SEED, help="random seed (default: %(default)s)")
    args = parser.parse_args(argv)

    data, truth = build(args.seed)
    output = Path(args.output)
    output.parent.mkdir(parents=True, exist_ok=True)
    write_netcdf(data, output, pack=True)
    print(f"wrote {output} ({output.stat().st_size / 1e6:.2f} MB)")
    if args.truth:
        truth_path = Path(args.truth)
        truth_path.parent.mkdir(parents=True, exist_ok=True)
        write_netcdf(truth, truth_path)
        print(f"wrote {truth_path} ({truth_path.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
