"""Command line: ``regimes run CONFIG``, ``regimes scan CONFIG`` and ``regimes init``.

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
    sc.add_argument("--k", default="2-8", help="range of k, e.g. 2-8 or 2,3,5 (default 2-8)")
    sc.add_argument("--surrogates", type=int, default=100, help="red-noise surrogates (default 100)")
    sc.add_argument("--restarts", type=int, default=50, help="k-means++ restarts per fit (default 50)")
    sc.add_argument("--confidence", type=float, default=0.90, help="confidence level of the red-noise test (default 0.90)")
    sc.add_argument("--output", help="output folder (default: output.dir/scan)")
    sc.add_argument("--overwrite", action="store_true", help="allow writing into an existing output folder")
    sc.set_defaults(func=_scan)
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
