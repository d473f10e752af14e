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
from pathlib import Path
from typing import Any

from . import __version__
from ._validation import ShotcheckError, check_range

__all__ = ["main", "build_parser"]

PROG = "shotcheck"



def _positive_int(text: str) -> int:
    """argparse type: a whole number >= 1."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {text!r}")
    return v

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


def _tc_us(d: dict[str, Any]) -> float | None:
    """IEC time to chopping Tc [us] from the tolerance entry (``chopping_time_us`` is the instant)."""
    entry = (d.get("tolerance") or {}).get("time_to_chopping_us")
    return entry.get("value") if isinstance(entry, dict) else None


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
        ("time to chopping Tc", _tc_us(d), "us"),
        ("instant of chopping", d.get("chopping_time_us"), "us"),
        ("within tolerance", d.get("within_tolerance"), ""),
    ]
    lines = [f"Wave shape of {source} (IEC 60060-1)"]
    rec = d.get("record") or {}
    if rec:  # what was read: the channel evaluated, its unit in the file, the time base
        lines.append(f"  voltage channel {rec.get('voltage_channel')!r} [{rec.get('source_unit')}], "
                     f"{rec.get('sample_rate_Hz', 0) / 1e6:.6g} MS/s, {rec.get('n_samples')} samples")
    for name, value, unit in rows:
        if value is None and name not in ("test voltage", "within tolerance"):
            continue
        lines.append(f"  {name:<24}{_fmt(value):>12} {unit}".rstrip())
    tol = d.get("tolerance") or {}
    failed = [k for k, v in tol.items() if isinstance(v, dict) and v.get("pass") is False]
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
    if args.kind is not None:
        kwargs["kind"] = args.kind
    voltages = [c.name for c in record.channels if c.quantity == "voltage"]
    try:
        shape = evaluate_waveshape(record, **kwargs)
    except ShotcheckError as exc:
        if len(voltages) < 2 or args.voltage_channel is not None:
            raise
        # the first voltage channel was taken: with several, it may be the wrong one (a chopping gap's)
        raise ShotcheckError(f"{exc} (the voltage channel evaluated was {voltages[0]!r}, the first of "
                             f"{', '.join(repr(v) for v in voltages)}; --voltage-channel chooses another)") from None
    if args.test_voltage_kV is not None:
        # the option is a magnitude; a negative value insists on that polarity
        spec = args.test_voltage_kV * 1e3
        if spec > 0 and shape.test_voltage_V < 0:
            spec = -spec
        shape = evaluate_waveshape(record, specified_test_voltage_V=spec, **kwargs)
    result = shape.to_dict()
    v = record.voltage
    result["record"] = {"voltage_channel": v.name, "source_unit": v.source_unit,
                        "sample_rate_Hz": record.sampling_rate_Hz, "n_samples": record.n_samples}
    if args.json:
        print(dumps(result))
    else:
        print(waveshape_table(result, source))
    return 0


# ---------------------------------------------------------------------------------------- compare
def verdict_text(d: dict[str, Any], reference: str, test: str) -> str:
    """Readable summary of a verdict dictionary (the JSON of ``shotcheck compare --json``)."""
    from .model import EVENT_LABELS

    lines = [f"Reference: {reference}", f"Test:      {test}"]
    if d["fault_indicated"]:
        lines.append(f"VERDICT: FAULT INDICATED - {EVENT_LABELS.get(d['event'], d['event'])}")
    else:
        lines.append("VERDICT: no fault indicated")
    probs = ", ".join(f"{EVENT_LABELS.get(k, k)} {v:.2f}" for k, v in d["probabilities"].items())
    lines.append(f"  probabilities: {probs}")
    thr = (d.get("model") or {}).get("none_threshold")
    if thr is not None and d["probabilities"].get("none") is not None:
        kind = (d.get("model") or {}).get("none_threshold_kind", "all comparisons")
        lines.append(f"  decision: P(none) {d['probabilities']['none']:.4f} against the threshold {thr:.4f} "
                     f"for {kind}; a fault is indicated below it (or by a decisive metric alone)")
    if d.get("fault_time_us") is not None:
        lines.append(f"  fault instant: {d['fault_time_us']:.2f} us on the test record's time axis")
    if d.get("location") is not None:
        lines.append(f"  location: {d['location']:.2f} of the winding length from the line end")
    if d.get("exceeded"):
        lines.append("  metrics above their thresholds:")
        for e in d["exceeded"]:
            lines.append(f"    {e['metric']:<24} {e['value']:.4g} > {e['threshold']:.4g} ({e['ratio']:.2f} x)  "
                         f"{e['description']}")
    for w in d.get("warnings") or []:
        lines.append(f"  warning: {w}")
    m = d.get("model") or {}
    if m:
        lines.append(f"  model: {m.get('source') or m.get('name')}"
                     + (f", trained on {m['training_data']}" if m.get("training_data") else "")
                     + (f", created {m['created']}" if m.get("created") else ""))
    lines.append("  Advisory second opinion only: the responsible engineer decides.")
    return "\n".join(lines)


def _cmd_compare(args: argparse.Namespace) -> int:
    from .compare import compare

    ref = _load_record(args, args.reference)
    test = _load_record(args, args.test)
    verdict = compare(ref, test, model=args.model)
    d = verdict.to_dict()
    if args.report:
        from .report import write_report

        write_report(verdict, args.report, reference_name=args.reference, test_name=args.test)
    if args.json:
        print(dumps(d))
    else:
        print(verdict_text(d, args.reference, args.test))
        if args.report:
            print(f"report written to {args.report}")
    return 1 if d["fault_indicated"] else 0


def _data_description(directory: str) -> str:
    """``'1200 pairs of the family nv25_hv (seed 7), data set data/nv25'`` from a data set's manifest (its
    folder name alone where the manifest cannot be read): the model card's default training description."""
    try:
        man = json.loads((Path(directory) / "manifest.json").read_text(encoding="utf-8"))
        fams = [str(f["name"]) for f in man.get("families", [])]
        what = f"{int(man['n_cases'])} pairs of the famil{'ies' if len(fams) > 1 else 'y'} {', '.join(fams)}"
        return f"{what} (seed {man.get('seed')}), data set {directory}"
    except (OSError, ValueError, KeyError, TypeError):
        return f"data set {directory}"


def _cmd_train(args: argparse.Namespace) -> int:
    from .model import save_model
    from .training import (
        class_counts,
        extract_dataset,
        report_text,
        save_report,
        threshold_notes,
        train,
    )

    # the options and the output folder first: not after minutes of work
    check_range("--false-alarm-rate", args.false_alarm_rate, 0.0, 0.5, low_inclusive=False)
    if args.cv_folds < 2:
        # without out-of-fold benign pairs the threshold would stay at an untuned 0.5 and the false-alarm
        # target would be ignored without a word
        raise ShotcheckError(f"--cv-folds: must be at least 2, got {args.cv_folds}; the decision threshold is set "
                             "on the cross-validated benign pairs to the --false-alarm-rate")
    out_dir = Path(args.out).expanduser().resolve().parent
    if not out_dir.is_dir():
        raise ShotcheckError(f"{args.out}: --out: the folder {out_dir} does not exist; create it first")
    data = extract_dataset(args.data, workers=args.workers, progress=not args.no_progress)
    try:
        model, rep = train(data, false_alarm_rate_target=args.false_alarm_rate, seed=args.seed,
                           cv_folds=args.cv_folds, description=args.description or _data_description(args.data))
    except ValueError as exc:  # an estimator refusing the data: in practice a set too small or too one-sided
        raise ShotcheckError(f"{args.data}: training failed on this data set ({class_counts(data.event)}): "
                             f"{type(exc).__name__}: {exc}; a class with few usable pairs is the usual cause "
                             "(see the counts; make more pairs of it)") from None
    save_model(model, args.out)
    for note in threshold_notes(data, args.false_alarm_rate):
        print(f"note: {note}")
    print(f"cross-validated figures (grouped by winding design, {args.cv_folds} folds):")
    n_left = model.card.get("n_invisible_faults_left_out")
    if n_left:
        print(f"left out of training and figures: {n_left} faulted pairs whose effect is under "
              f"{model.card.get('min_effect_lsb', 1):g} recorder code(s) (noise-free)")
    print(report_text(rep))
    print(f"model written to {args.out}")
    if args.report_json:
        save_report(rep, args.report_json)
    return 0


def _cmd_evaluate(args: argparse.Namespace) -> int:
    from .compare import default_model
    from .training import evaluate, extract_dataset, report_text, save_report

    model = default_model(args.model)
    data = extract_dataset(args.data, workers=args.workers, progress=not args.no_progress)
    rep = evaluate(model, data)
    print(report_text(rep))
    if args.json_out:
        save_report(rep, args.json_out)
    if args.roc:
        from .training import plot_roc

        plot_roc(rep, args.roc)
        print(f"ROC figure written to {args.roc}")
    return 0


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from .compare import default_model
    from .model import save_model
    from .scoring import calibrate_thresholds, decisive_thresholds, false_alarm_rate
    from .training import extract_dataset

    model = default_model(args.model)
    data = extract_dataset(args.data, workers=args.workers, progress=not args.no_progress)
    benign = data.X[data.event == "none"]
    thr = calibrate_thresholds(benign, false_alarm_rate=args.false_alarm_rate)
    thr.update(decisive_thresholds(benign))  # faults on their own: above every benign pair of the set
    model.thresholds = thr
    card = dict(model.card)
    card["thresholds_calibrated_on"] = f"{args.data} ({benign.shape[0]} benign pairs)"
    card["false_alarm_rate_target"] = args.false_alarm_rate
    model.card = card
    save_model(model, args.out)
    print(f"thresholds calibrated on {benign.shape[0]} benign pairs to a false-alarm rate of "
          f"{args.false_alarm_rate:g} (achieved {false_alarm_rate(benign, thr):.4f}):")
    for k, v in thr.items():
        print(f"  {k:<24} {v:.4g}")
    print(f"model written to {args.out}")
    return 0


def _cmd_sensitivity(args: argparse.Namespace) -> int:
    from .compare import default_model
    from .training import save_report, sensitivity_turns

    model = default_model(args.model)
    turns = [int(x) for x in args.turns.split(",")]
    res = sensitivity_turns(model, args.out, turns=turns, cases=args.cases, seed=args.seed, workers=args.workers)
    print("shorted turns of 1000 (12 bits, 100 MS/s): detected / false alarms "
          f"(in brackets: {100 * res['confidence_level']:g} % confidence interval)")
    for k, r in res["per_turns"].items():
        ci, fi = r["detected_interval"], r["false_alarms_interval"]
        print(f"  {k:>4}  ({100 * r['fraction_of_winding']:.1f} %)  {r['detected']:.3f}"
              + ("" if ci is None else f" [{ci[0]:.2f}, {ci[1]:.2f}]") + f" / {r['false_alarms']:.3f}"
              + ("" if fi is None else f" [{fi[0]:.3f}, {fi[1]:.3f}]") + f"  n={r['n']}")
        print("        " + "; ".join(f"{name} {b['detected']:.2f} of {b['n_faults']}"
                                     for name, b in r.get("by_comparison", {}).items()))
    print(f"smallest short detected in 95 % of cases: {res['smallest_detected_95']} turn(s); "
          f"shown to be detected in at least 95 % (the interval's lower bound): {res['smallest_shown_95']} turn(s)")
    if args.json_out:
        save_report(res, args.json_out)
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    return run_demo(out_dir=args.out, json_output=args.json)


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
                   help="specified test voltage in kV (magnitude; the record's polarity is taken), for the "
                   "+/-3 %% tolerance check")
    _add_channel_options(p)
    p.set_defaults(func=_cmd_waveshape)

    p = sub.add_parser("compare", help="compare a test shot with its reference shot: fault or not, which, "
                       "when, where", description="Compare a full-level (full or chopped) test record with the "
                       "reduced-level reference record of the same terminal. Exit status 0: no fault indicated, "
                       "1: fault indicated, 2: input error.")
    p.add_argument("reference", metavar="REFERENCE", help="reduced-level full wave (COMTRADE or CSV)")
    p.add_argument("test", metavar="TEST", help="full-level full or chopped wave (COMTRADE or CSV)")
    p.add_argument("--json", action="store_true", help="print the verdict as JSON")
    p.add_argument("--report", metavar="PATH", default=None, help="write a self-contained HTML report")
    p.add_argument("--model", metavar="PATH", default=None, help="model file (default: the bundled model)")
    _add_channel_options(p)
    p.set_defaults(func=_cmd_compare)

    p = sub.add_parser("demo", help="simulate an invented unit with a turn-to-turn fault, compare, write a report",
                       description="Run the whole job on a simulated example: reduced-level and full-level shots "
                       "of an invented transformer whose winding suffers a turn-to-turn breakdown.")
    p.add_argument("--out", metavar="DIR", default="shotcheck-demo", help="folder for records and report")
    p.add_argument("--json", action="store_true", help="print the verdict as JSON")
    p.set_defaults(func=_cmd_demo)

    from synthetic.synth_cli import add_subparser as _add_synth

    _add_synth(sub)

    def _data_options(q: argparse.ArgumentParser) -> None:
        q.add_argument("--workers", type=_positive_int, default=None, metavar="K",
                       help="processes for reading the records (features, and the inputs at the fault instant); "
                       "default: all cores")
        q.add_argument("--no-progress", action="store_true", help="no progress bar")

    p = sub.add_parser("train", help="train the classifier and locator on a synthetic data set",
                       description="Extract features of a data set written by `shotcheck synth`, report "
                       "cross-validated figures grouped by winding design, fit thresholds, classifier and "
                       "locator, and write a model file (skops).")
    p.add_argument("data", metavar="DATA", help="data set folder")
    p.add_argument("--out", metavar="MODEL", required=True, help="model file to write (.skops)")
    p.add_argument("--false-alarm-rate", type=float, default=0.01, help="target share of benign pairs indicated as faults, as a fraction (0.01 = 1 %%, the default)")
    p.add_argument("--seed", type=int, default=0, help="seed of the estimators")
    p.add_argument("--cv-folds", type=int, default=3,
                   help="folds of the grouped cross-validation (at least 2: the decision threshold is set on "
                        "the out-of-fold benign pairs)")
    p.add_argument("--description", default=None, help="training-data description for the model card")
    p.add_argument("--report-json", default=None, metavar="PATH", help="write the figures as JSON")
    _data_options(p)
    p.set_defaults(func=_cmd_train)

    p = sub.add_parser("evaluate", help="detection rates, false alarms, confusion matrix of a model on a data set",
                       description="Evaluate a model on a held-out data set written by `shotcheck synth`.")
    p.add_argument("model", metavar="MODEL", help="model file (.skops)")
    p.add_argument("data", metavar="DATA", help="data set folder")
    p.add_argument("--json-out", default=None, metavar="PATH", help="write the figures as JSON")
    p.add_argument("--roc", default=None, metavar="PNG", help="write a ROC figure")
    _data_options(p)
    p.set_defaults(func=_cmd_evaluate)

    p = sub.add_parser("calibrate", help="calibrate the thresholds of a model on benign pairs",
                       description="Set a model's thresholds so that benign pairs of a data set exceed any of "
                       "them at most at the stated false-alarm rate.")
    p.add_argument("data", metavar="DATA", help="data set folder with benign (none) pairs")
    p.add_argument("--model", default=None, metavar="PATH", help="model to start from (default: bundled)")
    p.add_argument("--out", required=True, metavar="MODEL", help="model file to write")
    p.add_argument("--false-alarm-rate", type=float, default=0.01, help="target share of benign pairs indicated as faults, as a fraction (0.01 = 1 %%, the default)")
    _data_options(p)
    p.set_defaults(func=_cmd_calibrate)

    p = sub.add_parser("sensitivity", help="smallest turn-to-turn short a model detects (1000-turn winding)",
                       description="Simulate shorts of a few turns in a 1000-turn winding recorded at 12 bits and "
                       "100 MS/s, with healthy pairs alike, and report the detection rate per number of turns.")
    p.add_argument("--model", default=None, metavar="PATH", help="model file (default: bundled)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the simulated pairs")
    p.add_argument("--turns", default="1,2,3,5,10", help="comma-separated numbers of shorted turns")
    p.add_argument("--cases", type=int, default=40, help="pairs per number of turns (half healthy)")
    p.add_argument("--seed", type=int, default=11, help="root seed")
    p.add_argument("--workers", type=_positive_int, default=None, metavar="K", help="processes (default: all cores)")
    p.add_argument("--json-out", default=None, metavar="PATH", help="write the result as JSON")
    p.set_defaults(func=_cmd_sensitivity)

    try:
        from .service_cli import add_subparsers as _add_service
    except ImportError as exc:  # the service extra (fastapi, uvicorn) is not installed
        _missing = str(exc)

        def _no_service(args: argparse.Namespace) -> int:
            raise ShotcheckError(f"the service needs its extra: pip install 'shotcheck[service]' ({_missing})")

        for verb in ("serve", "watch"):
            q = sub.add_parser(verb, help=f"{verb} (needs the service extra)")
            q.set_defaults(func=_no_service)
    else:
        _add_service(sub)
    return parser


def _input_error(message: str, want_json: bool, path: object = None, field: str | None = None,
                 detail: str | None = None) -> int:
    """Report an input error: the message on stderr and, for ``--json``, an object on stdout that an
    acquisition chain reading the JSON can act on (``error``, ``file``, ``field``, ``detail``). Returns 2."""
    print(f"{PROG}: error: {message}", file=sys.stderr)
    if want_json:
        print(json.dumps({"error": message, "file": None if path is None else str(path), "field": field,
                          "detail": detail if detail is not None else message, "exit_status": 2}))
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``shotcheck`` command line.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        Exit status: 0 success / no fault indicated, 1 fault indicated, 2 input error (its message on
        stderr, and with ``--json`` also as a JSON object on stdout).
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
    want_json = bool(getattr(args, "json", False))
    try:
        return int(func(args))
    except ShotcheckError as exc:
        return _input_error(str(exc), want_json, getattr(exc, "path", None), getattr(exc, "field", None),
                            getattr(exc, "detail", None))
    except FileNotFoundError as exc:
        return _input_error(f"{exc.filename}: file not found", want_json, exc.filename)
    except IsADirectoryError as exc:
        return _input_error(f"{exc.filename}: is a folder, expected a file", want_json, exc.filename)
    except PermissionError as exc:
        return _input_error(f"{exc.filename}: permission denied", want_json, exc.filename)
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into a pager or head that closed early
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
