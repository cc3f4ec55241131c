"""Command line: ``regimes run CONFIG`` and ``regimes init``.

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
