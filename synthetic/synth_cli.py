"""The ``shotcheck synth`` verb: generate a labelled synthetic data set.

``shotcheck synth --cases N --out DIR --seed S [--design FILE.toml] [--workers K]
[--scheduler ADDRESS] [--comtrade] [--no-progress]``

Registered by :mod:`detector.cli` through :func:`add_subparser`; :func:`run` returns the exit status
and raises :class:`~detector._validation.ShotcheckError` on bad input (the CLI turns it into exit 2).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from detector._validation import ShotcheckError

__all__ = ["add_subparser", "run"]


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {text!r}")
    return v


def _seed(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}")
    return v


def add_subparser(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``synth`` verb to an argparse sub-parser collection.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The ``synth`` parser (its default ``func`` is :func:`run`).
    """
    p = subparsers.add_parser(
        "synth",
        help="simulate a labelled data set of reduced/full shot pairs with and without faults",
        description="Simulate record pairs (reduced-level reference, full-level test) of windings drawn from "
        "a winding family, with balanced event classes (none, turn_to_turn, to_ground, discharge_only), and "
        "store them as compressed shards plus labels.csv. Same seed, same data, whatever the worker count.",
    )
    p.add_argument("--cases", type=_positive_int, required=True, metavar="N", help="number of record pairs")
    p.add_argument("--out", required=True, metavar="DIR", help="output directory (new or empty)")
    p.add_argument("--seed", type=_seed, required=True, metavar="S", help="root seed (whole number >= 0)")
    p.add_argument("--design", action="append", default=None, metavar="FILE.toml",
                   help="winding family TOML file or bundled family name (distribution, power); may be "
                   "repeated; default: all bundled families")
    p.add_argument("--workers", type=_positive_int, default=None, metavar="K",
                   help="local worker processes (default: number of CPUs)")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="address of a running Dask distributed scheduler, e.g. tcp://10.0.0.5:8786")
    p.add_argument("--comtrade", action="store_true", help="also write every record as COMTRADE (.cfg/.dat)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``shotcheck synth`` with parsed arguments.

    Parameters
    ----------
    args : argparse.Namespace
        From the parser built by :func:`add_subparser`.

    Returns
    -------
    int
        0 on success.

    Raises
    ------
    ShotcheckError
        Bad design file, bad arguments, a data set or other files in ``--out``, unreachable scheduler.
    """
    from .dataset import generate

    if args.scheduler is not None and args.workers is not None:
        raise ShotcheckError("--workers and --scheduler exclude each other: the cluster decides the workers")
    out = Path(args.out)
    if out.is_dir() and any(out.iterdir()) and not (out / "manifest.json").exists():
        # a folder of other files: the shards and labels must not mix with them (a data set already
        # there is refused by generate with its own message)
        raise ShotcheckError(f"{out}: is not empty; --out takes a new or empty directory")
    design = args.design
    if design is not None and len(design) == 1:
        design = design[0]
    man = generate(
        args.cases, args.out, seed=args.seed, design_file=design, workers=args.workers,
        scheduler=args.scheduler, write_comtrade=args.comtrade, progress=not args.no_progress,
    )
    counts = ", ".join(f"{k} {v}" for k, v in sorted(man["event_counts"].items()))
    sys.stderr.write(
        f"wrote {man['n_cases']} pairs in {man['n_shards']} shard(s) to {args.out} "
        f"({man['elapsed_s']:.1f} s, {man['pairs_per_s']:.2f} pairs/s, {man['runner']}); {counts}\n"
    )
    return 0
