"""Command line: ``regimes run CONFIG``, ``regimes scan CONFIG``, ``regimes plot FOLDER`` and ``regimes init``.

User errors (:class:`~regimes.errors.UserError`) end with one line on
standard error and exit status 2; anything else is a bug and keeps its
traceback (exit status 1).
"""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path

from . import config
from .errors import UserError

STARTER = {
    "data": {"paths": ["data/*.nc"], "variable": "psl", "lat": [20.0, 80.0], "lon": [-90.0, 30.0], "months": [12, 1, 2]},
    "output": {"dir": "results"},
}


def _run(args) -> None:
    from . import pipeline

    cfg, text = config.load(args.config)
    pipeline.run(cfg, text, output_dir=args.output, overwrite=args.overwrite, command=" ".join(["regimes", *sys.argv[1:]]))


def _scan(args) -> None:
    import numpy as np

    from . import data, output, pipeline, scan
    from .eof import EOF

    ks = scan.parse_k_range(args.k)
    if args.surrogates < 0:
        raise UserError(f"--surrogates {args.surrogates}: expected a number >= 0")
    if args.restarts < 2:
        raise UserError(f"--restarts {args.restarts}: the classifiability needs at least 2 restarts")
    if not 0 < args.confidence < 1:
        raise UserError(f"--confidence {args.confidence}: expected a fraction strictly between 0 and 1, e.g. 0.9")
    cfg, text = config.load(args.config)
    folder = output.check_folder(args.output or str(Path(cfg.output.dir) / "scan"), args.overwrite, data.expand_paths(cfg.data.paths))
    with pipeline.stage("reading and preparing the field"):
        prep = pipeline.prepare(cfg)
    e, r = cfg.eof, cfg.regimes
    rng = np.random.default_rng(r.seed)  # the same generator and EOF seed as pipeline.analyse
    with pipeline.stage("EOF analysis"):
        eof = EOF(e.modes, e.variance_fraction, e.solver, seed=int(rng.integers(2**31 - 1))).fit(prep.anomaly, prep.weights)
        pcs = eof.transform(prep.anomaly).compute()
    with pipeline.stage(f"scan of k = {ks[0]}..{ks[-1]} ({args.restarts} restarts, {args.surrogates} surrogates)"):
        table = scan.scan(
            pcs, prep.segment_start, prep.season_year, ks, rng,
            restarts=args.restarts, surrogates=args.surrogates, confidence=args.confidence, max_iterations=r.max_iterations,
        )
    command = " ".join(["regimes", *sys.argv[1:]])
    table.attrs.update(output.provenance(command, text, prep.summary["files"]))
    table.attrs["title"] = "number-of-regimes scan"
    output.write(output.coordinate_attrs(table), folder / "scan.nc")
    print(scan.table(table))
    print(table.attrs["recommendation"])
    print(f"wrote {folder / 'scan.nc'}")
    if cfg.figures.draw:
        from . import finished, report

        with pipeline.stage("figures"):
            report.draw_all(finished.open_folder(folder), cfg.figures)


def _plot(args) -> None:
    from . import finished

    found = finished.open_folder(args.folder)
    from . import report  # matplotlib and cartopy, once the folder is known to be finished

    overrides = {"format": args.format, "dpi": args.dpi, "projection": args.projection, "colormap": args.colormap}
    written = report.draw_all(found, config.figure_settings(found.config_text, overrides))
    print(f"wrote {len(written)} file{'s' if len(written) != 1 else ''} into {found.folder}")


def _init(args) -> None:
    path = Path(args.path)
    if path.exists() and not args.overwrite:
        raise UserError(f"'{path}' already exists; pass --overwrite or give another file name")
    path.write_text(config.reference_text(STARTER), encoding="utf-8")
    print(f"wrote a starter config to {path}; edit [data] paths and variable, then: regimes run {path}")


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="regimes", description="Classify gridded fields into recurring regimes.")
    p.add_argument("--quiet", action="store_true", help="log warnings only")
    sub = p.add_subparsers(dest="command", required=True)
    run = sub.add_parser("run", help="run the job described by a config file")
    run.add_argument("config", help="TOML config file")
    run.add_argument("--output", help="output folder (overrides output.dir)")
    run.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    run.set_defaults(func=_run)
    sc = sub.add_parser("scan", help="scan the number of regimes: classifiability, red-noise significance, stability")
    sc.add_argument("config", help="TOML config file")
    sc.add_argument("--k", default="2-8", help="range of k, e.g. 2-8 or 2,3,5 (default 2-8)")
    sc.add_argument("--surrogates", type=int, default=100, help="red-noise surrogates (default 100)")
    sc.add_argument("--restarts", type=int, default=50, help="k-means++ restarts per fit (default 50)")
    sc.add_argument("--confidence", type=float, default=0.90, help="confidence level of the red-noise test (default 0.90)")
    sc.add_argument("--output", help="output folder (default: output.dir/scan)")
    sc.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    sc.set_defaults(func=_scan)
    plot = sub.add_parser("plot", help="redraw the figures and the report of a finished run or scan (no recomputing)")
    plot.add_argument("folder", help="output folder of 'regimes run' or 'regimes scan'")
    plot.add_argument("--format", choices=config.FIGURE_FORMATS, help="figure file format (default: the run's figures.format)")
    plot.add_argument("--dpi", type=int, help="resolution of PNG figures (default: the run's figures.dpi)")
    plot.add_argument("--projection", choices=config.PROJECTIONS, help="map projection (default: the run's figures.projection)")
    plot.add_argument("--colormap", choices=config.COLORMAPS, help="diverging colour map of the maps (default: the run's figures.colormap)")
    plot.set_defaults(func=_plot)
    init = sub.add_parser("init", help="write a starter config listing every key")
    init.add_argument("path", nargs="?", default="regimes.toml", help="file to write (default regimes.toml)")
    init.add_argument("--overwrite", action="store_true", help="replace an existing file")
    init.set_defaults(func=_init)
    return p


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    logging.basicConfig(
        level=logging.WARNING if args.quiet else logging.INFO,
        format="regimes %(relativeCreated)7.0f ms  %(message)s",
        stream=sys.stderr,
    )
    try:
        args.func(args)
    except UserError as err:
        print(f"regimes: error: {err}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
