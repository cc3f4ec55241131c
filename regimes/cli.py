"""Command line: ``regimes run``, ``scan``, ``plot``, ``assign``, ``compare`` and ``init``.

User errors (:class:`~regimes.errors.UserError`, and mistakes in the command
line itself) end with one line on standard error and exit status 2; anything
else is a bug and keeps its traceback (exit status 1). SIGINT and SIGTERM end
a command cleanly: unfinished files are removed on the way out and the exit
status is 128 + the signal number (130, 143; common practice).
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import signal
import sys
import threading
from pathlib import Path

from . import config, output
from .errors import UserError

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)

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

    from . import data, output, pipeline, results, scan

    if args.surrogates is not None and args.surrogates < 0:
        raise UserError(f"--surrogates {args.surrogates}: expected a number >= 0")
    if args.restarts is not None and args.restarts < 2:
        raise UserError(f"--restarts {args.restarts}: the classifiability needs at least 2 restarts")
    if args.confidence is not None and not 0 < args.confidence < 1:
        raise UserError(f"--confidence {args.confidence}: expected a fraction strictly between 0 and 1, e.g. 0.9")
    ks = scan.parse_k_range(args.k) if args.k else None
    cfg, text = config.load(args.config)
    for key in ("surrogates", "restarts", "confidence"):
        if getattr(args, key) is not None:
            setattr(cfg.scan, key, getattr(args, key))
    folder = output.check_folder(args.output or str(Path(cfg.output.dir) / "scan"), args.overwrite, data.expand_paths(cfg.data.paths))
    with pipeline.stage("reading and preparing the field"):
        prep = pipeline.prepare(cfg)
    rng = np.random.default_rng(cfg.regimes.seed)  # the same generator and EOF seed as pipeline.analyse
    _, pcs = pipeline.principal_components(cfg, prep, rng)
    table = pipeline.scan_k(cfg, prep, pcs, rng, ks)
    command = " ".join(["regimes", *sys.argv[1:]])
    output.write(results.scan_file(table, output.provenance(command, text, prep.summary["files"])), folder / "scan.nc")
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


def _assign(args) -> None:
    from . import pipeline
    from .model import RegimeModel

    model = RegimeModel.load(args.model)
    cfg, text = config.for_model(model.settings, args.data, args.config, args.own_climatology)
    output_dir = args.output or str(Path(cfg.output.dir) / "assigned")
    pipeline.assign(cfg, text, model, args.model, output_dir=output_dir, overwrite=args.overwrite, command=" ".join(["regimes", *sys.argv[1:]]))


def _compare(args) -> None:
    from . import compare, output

    a, b = compare.read(args.a), compare.read(args.b)
    folder = output.check_folder(args.output, args.overwrite, a.inputs + b.inputs)
    result = compare.compare(a, b)
    result.attrs.update(output.provenance(" ".join(["regimes", *sys.argv[1:]]), None, a.inputs + b.inputs))
    result.attrs["title"] = "regimes: comparison of two regime sets"
    picture = compare.figure(result)
    output.write_all({"comparison.nc": output.coordinate_attrs(result), "comparison.png": picture}, folder, overwrite=False)
    print(compare.table(result))
    print(f"wrote {folder / 'comparison.nc'} and {folder / 'comparison.png'}")


def _init(args) -> None:
    path = Path(args.path)
    if path.is_dir():
        raise UserError(f"'{path}' is a folder; give the name of the config file to write, e.g. {path / 'regimes.toml'}")
    if path.exists() and not args.overwrite:
        raise UserError(f"'{path}' already exists; pass --overwrite or give another file name")
    if not path.parent.is_dir():
        raise UserError(f"folder '{path.parent}' does not exist; create it first or give another file name")
    output.write_text(config.reference_text(STARTER), path)
    print(f"wrote a starter config to {path}; edit [data] paths and variable, then: regimes run {path}")


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors end like every user error: one line, exit status 2."""

    def error(self, message: str):
        print(f"regimes: error: {message}; see '{self.prog} --help'", file=sys.stderr)
        sys.exit(2)


def parser() -> argparse.ArgumentParser:
    p = _Parser(prog="regimes", description="Classify gridded fields into recurring regimes.")
    p.add_argument("--quiet", action="store_true", help="log warnings only")
    sub = p.add_subparsers(dest="command", required=True)
    run = sub.add_parser("run", help="run the job described by a config file")
    run.add_argument("config", help="TOML config file")
    run.add_argument("--output", help="output folder (overrides output.dir)")
    run.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    run.set_defaults(func=_run)
    sc = sub.add_parser("scan", help="scan the number of regimes: classifiability, red-noise significance, stability")
    sc.add_argument("config", help="TOML config file")
    sc.add_argument("--k", help="k to try, e.g. 2-8 or 2,3,5 (default: scan.k_range of the config)")
    sc.add_argument("--surrogates", type=int, help="red-noise surrogates (default: scan.surrogates)")
    sc.add_argument("--restarts", type=int, help="k-means++ restarts per fit (default: scan.restarts)")
    sc.add_argument("--confidence", type=float, help="confidence level of the red-noise test (default: scan.confidence)")
    sc.add_argument("--output", help="output folder (default: output.dir/scan)")
    sc.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    sc.set_defaults(func=_scan)
    plot = sub.add_parser("plot", help="redraw the figures and the report of a finished run or scan (no recomputing)")
    plot.add_argument("folder", help="output folder of 'regimes run', 'regimes assign' or 'regimes scan'")
    plot.add_argument("--format", choices=config.FIGURE_FORMATS, help="figure file format (default: the run's figures.format)")
    plot.add_argument("--dpi", type=int, help="resolution of PNG figures (default: the run's figures.dpi)")
    plot.add_argument("--projection", choices=config.PROJECTIONS, help="map projection (default: the run's figures.projection)")
    plot.add_argument("--colormap", choices=config.COLORMAPS, help="diverging colour map of the maps (default: the run's figures.colormap)")
    plot.set_defaults(func=_plot)
    asg = sub.add_parser("assign", help="classify other data with a saved regime model")
    asg.add_argument("model", help="model file (model.nc of a run)")
    asg.add_argument("data", nargs="+", help="NetCDF files or glob patterns to classify")
    asg.add_argument("--config", help="TOML config: data.variable, data.period, regimes.unassigned_below, assign.climatology, output.dir, ...")
    asg.add_argument("--own-climatology", action="store_true", help="anomalies from a climatology fitted on the new data (assign.climatology = 'own')")
    asg.add_argument("--output", help="output folder (default: output.dir/assigned)")
    asg.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    asg.set_defaults(func=_assign)
    cmp = sub.add_parser("compare", help="match the regimes of two runs or models and report their differences")
    cmp.add_argument("a", help="output folder of a run (or assignment), or a model file")
    cmp.add_argument("b", help="output folder of a run (or assignment), or a model file")
    cmp.add_argument("--output", default="comparison", help="output folder (default ./comparison)")
    cmp.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    cmp.set_defaults(func=_compare)
    init = sub.add_parser("init", help="write a starter config listing every key")
    init.add_argument("path", nargs="?", default="regimes.toml", help="file to write (default regimes.toml)")
    init.add_argument("--overwrite", action="store_true", help="replace an existing file")
    init.set_defaults(func=_init)
    return p


class Interrupted(KeyboardInterrupt):
    """SIGINT or SIGTERM arrived; raised in the main thread so that unfinished files are removed on the way out."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _interrupt(signum, frame):
    raise Interrupted(signum)


@contextlib.contextmanager
def _stop_signals_raise():
    """Within the block, SIGINT and SIGTERM raise :class:`Interrupted` (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {s: signal.getsignal(s) for s in STOP_SIGNALS}
    for s in STOP_SIGNALS:
        signal.signal(s, _interrupt)
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, signal.SIG_DFL if handler is None else handler)


def one_line(message: object) -> str:
    """A message on one line (continuation lines joined by '; ')."""
    return "; ".join(part.strip() for part in str(message).splitlines() if part.strip())


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    logging.basicConfig(
        level=logging.WARNING if args.quiet else logging.INFO,
        format="regimes %(relativeCreated)7.0f ms  %(message)s",
        stream=sys.stderr,
    )
    try:
        with _stop_signals_raise():
            args.func(args)
    except UserError as err:
        print(f"regimes: error: {one_line(err)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as err:
        signum = getattr(err, "signum", signal.SIGINT)
        print(f"regimes: interrupted by {signal.Signals(signum).name}; unfinished files were removed", file=sys.stderr)
        return 128 + signum
    return 0


if __name__ == "__main__":
    sys.exit(main())
