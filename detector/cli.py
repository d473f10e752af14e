"""The ``shotcheck`` command line.

``main(argv=None) -> int`` parses the arguments, runs one verb and returns the exit status:
0 success (and, for ``compare``, no fault indicated), 1 fault indicated, 2 input error. A
:class:`~detector._validation.ShotcheckError` or an unreadable file becomes one line on stderr and
exit status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from collections.abc import Callable, Sequence
from typing import Any

from . import __version__
from ._validation import ShotcheckError

__all__ = ["main", "build_parser"]

PROG = "shotcheck"


def _json_default(obj: Any) -> Any:
    """Turn numpy scalars and arrays into JSON values; NaN/inf become null."""
    import numpy as np

    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def _clean(obj: Any) -> Any:
    """Replace non-finite floats by None recursively (JSON has no NaN)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    return obj


def dumps(obj: Any) -> str:
    """JSON text of a result dictionary (NaN -> null, numpy -> Python)."""
    return json.dumps(_clean(obj), indent=2, default=_json_default)


# ---------------------------------------------------------------------------------------- waveshape
def _load_record(args: argparse.Namespace, path: str):
    from .formats import read

    return read(path, voltage_channel=args.voltage_channel, current_channel=args.current_channel)


def _fmt(value: Any, digits: int = 3) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.{digits}f}"
    return str(value)


def waveshape_table(d: dict[str, Any], source: str) -> str:
    """Readable table of a wave-shape result dictionary (the JSON of ``shotcheck waveshape --json``)."""
    rows = [
        ("wave kind", d.get("kind"), ""),
        ("polarity", d.get("polarity"), ""),
        ("test voltage", d.get("test_voltage_kV"), "kV"),
        ("extreme value", d.get("peak_kV"), "kV"),
        ("relative overshoot", d.get("overshoot_percent"), "%"),
        ("front time T1", d.get("front_time_us"), "us"),
        ("time to peak Tp", d.get("time_to_peak_us"), "us"),
        ("virtual origin O1", d.get("virtual_origin_us"), "us"),
        ("time to half-value T2", d.get("time_to_half_us"), "us"),
        ("time to chopping Tc", d.get("chopping_time_us"), "us"),
        ("within tolerance", d.get("within_tolerance"), ""),
    ]
    lines = [f"Wave shape of {source} (IEC 60060-1)"]
    for name, value, unit in rows:
        if value is None and name not in ("test voltage", "within tolerance"):
            continue
        lines.append(f"  {name:<24}{_fmt(value):>12} {unit}".rstrip())
    tol = d.get("tolerance") or {}
    failed = [k for k, v in tol.items() if isinstance(v, dict) and v.get("ok") is False]
    if failed:
        lines.append("  outside tolerance: " + ", ".join(failed))
    for w in d.get("warnings") or []:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def _cmd_waveshape(args: argparse.Namespace) -> int:
    from .waveshape import evaluate_waveshape

    if args.example:
        from .data import example_record

        record = example_record(args.example)
        source = f"built-in example '{args.example}'"
    elif args.record:
        record = _load_record(args, args.record)
        source = args.record
    else:
        raise ShotcheckError("waveshape needs a RECORD file (or --example full|chopped)")
    kwargs: dict[str, Any] = {}
    if args.test_voltage_kV is not None:
        kwargs["specified_test_voltage_V"] = args.test_voltage_kV * 1e3
    if args.kind is not None:
        kwargs["kind"] = args.kind
    result = evaluate_waveshape(record, **kwargs).to_dict()
    if args.json:
        print(dumps(result))
    else:
        print(waveshape_table(result, source))
    return 0


# ---------------------------------------------------------------------------------------- parser
def _add_channel_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--voltage-channel", metavar="NAME|INDEX", default=None,
                   help="voltage channel by name or index when a file has several (default: first by unit)")
    p.add_argument("--current-channel", metavar="NAME|INDEX", default=None,
                   help="current channel by name or index when a file has several (default: first by unit)")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every verb."""
    parser = argparse.ArgumentParser(
        prog=PROG,
        description="Second opinion on transformer lightning-impulse records: wave shape per IEC 60060-1 "
        "and comparison of reduced- and full-level shots. Output is advisory; the responsible engineer decides.",
    )
    parser.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", title="verbs")

    p = sub.add_parser("waveshape", help="IEC 60060-1 parameters of one record (T1, T2, Tc, test voltage)",
                       description="Evaluate the wave shape of one impulse record per IEC 60060-1:2010.")
    p.add_argument("record", nargs="?", metavar="RECORD", help="COMTRADE (.cfg/.cff) or CSV file")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.add_argument("--example", choices=("full", "chopped"), default=None,
                   help="evaluate a built-in example record instead of a file")
    p.add_argument("--kind", choices=("lightning_full", "lightning_chopped", "switching"), default=None,
                   help="wave kind (default: detected from the record)")
    p.add_argument("--test-voltage-kV", type=float, default=None, dest="test_voltage_kV",
                   help="specified test voltage in kV, for the +/-3 %% tolerance check")
    _add_channel_options(p)
    p.set_defaults(func=_cmd_waveshape)

    for name, module in _OPTIONAL_VERBS:
        _add_optional_verb(sub, name, module)
    return parser


#: verbs whose implementation lives in a module that registers its own sub-parser
_OPTIONAL_VERBS: list[tuple[str, str]] = [
    ("synth", "synthetic.synth_cli"),
]


def _add_optional_verb(sub: Any, name: str, module: str) -> None:
    import importlib

    try:
        mod = importlib.import_module(module)
    except ImportError:
        return
    mod.add_subparser(sub)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``shotcheck`` command line.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        Exit status: 0 success / no fault indicated, 1 fault indicated, 2 input error.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed its message
        return int(exc.code or 0)
    func: Callable[[argparse.Namespace], int] | None = getattr(args, "func", None)
    if func is None:
        parser.print_help()
        return 2
    try:
        return int(func(args))
    except ShotcheckError as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"{PROG}: error: {exc.filename}: file not found", file=sys.stderr)
        return 2
    except IsADirectoryError as exc:
        print(f"{PROG}: error: {exc.filename}: is a folder, expected a file", file=sys.stderr)
        return 2
    except PermissionError as exc:
        print(f"{PROG}: error: {exc.filename}: permission denied", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
