"""The ``serve`` and ``watch`` verbs of the ``shotcheck`` command.

:func:`add_subparsers` registers both on the main parser's sub-parsers; each sets ``func`` to a
function taking the parsed arguments and returning the exit status (0 ok, 2 input or setup error).
``python -m detector.service_cli serve ...`` runs them without the main command.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from ._validation import ShotcheckError
from .sequence import PLANS

__all__ = ["add_subparsers", "add_subparser", "cmd_serve", "cmd_watch", "settings_from_args", "main"]


def add_subparsers(subparsers: Any) -> None:
    """Add the ``serve`` and ``watch`` verbs to an ``argparse`` sub-parser collection.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        As returned by ``parser.add_subparsers()``.
    """
    p = subparsers.add_parser(
        "serve", help="run the HTTP service for the acquisition chain",
        description="Run the HTTP service: comparisons, wave shapes and test sequences over HTTP, stored durably. "
        "Writes need a bearer token from SHOTCHECK_TOKEN or --token-file; without one the service only "
        "listens on loopback.")
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8750, help="TCP port (default 8750)")
    p.add_argument("--data", default="shotcheck-data", metavar="DIR",
                   help="folder of the store: database and uploaded files (default ./shotcheck-data)")
    p.add_argument("--workers", type=int, default=1, metavar="N", help="worker processes (default 1)")
    p.add_argument("--token-file", default=None, metavar="PATH",
                   help="file holding the bearer token for writes (else SHOTCHECK_TOKEN)")
    p.add_argument("--model", default=None, metavar="PATH", help="model file (default: the bundled model)")
    p.add_argument("--max-upload-MB", type=float, default=64.0, dest="max_upload_MB",
                   help="largest request body in MB (default 64)")
    p.add_argument("--max-inflight", type=int, default=16, metavar="N",
                   help="requests working at once per worker before 503 + Retry-After (default 16)")
    p.add_argument("--threads", type=int, default=1, metavar="N",
                   help="comparison threads per worker (default 1; use --workers to use more cores)")
    p.set_defaults(func=cmd_serve)

    w = subparsers.add_parser(
        "watch", help="process shot files dropped into per-sequence folders",
        description="Watch DIR: every sub-folder is a test sequence; each shot file dropped there is processed "
        "once it stops growing, and its verdict JSON (or a reason file) is written beside it.")
    w.add_argument("folder", metavar="DIR", help="folder whose sub-folders are sequences")
    w.add_argument("--data", default=None, metavar="DIR", help="store folder (default DIR/.shotcheck)")
    w.add_argument("--model", default=None, metavar="PATH", help="model file (default: the bundled model)")
    w.add_argument("--plan", default="iec", choices=tuple(PLANS), help="shot order of new sequences")
    w.add_argument("--interval", type=float, default=1.0, metavar="S", help="seconds between scans (default 1)")
    w.add_argument("--settle", type=float, default=2.0, metavar="S",
                   help="a file is taken after its size stays the same this long (default 2 s)")
    w.add_argument("--report", action="store_true", help="also write an HTML report beside each verdict")
    w.add_argument("--once", action="store_true", help="process what is there, then stop")
    w.add_argument("--max-runtime", type=float, default=None, metavar="S", help="stop after this many seconds")
    w.set_defaults(func=cmd_watch)


#: Same function under the name detector/cli.py's optional-verb table calls (registers both verbs).
add_subparser = add_subparsers


def settings_from_args(args: argparse.Namespace, environ: dict[str, str] | None = None) -> Any:
    """Build the service :class:`~detector.service.settings.Settings` from ``serve`` arguments.

    Raises
    ------
    ShotcheckError
        Unreadable token file, bad limits, or a non-loopback host without a token.
    """
    from .service.settings import ENV_TOKEN, Settings, read_token_file

    env = os.environ if environ is None else environ
    token = read_token_file(args.token_file) if args.token_file else (env.get(ENV_TOKEN) or None)
    if args.max_upload_MB <= 0:
        raise ShotcheckError("--max-upload-MB must be positive")
    return Settings(data_dir=Path(args.data), host=args.host, port=args.port, token=token,
                    model_path=None if args.model is None else Path(args.model),
                    max_upload_bytes=int(args.max_upload_MB * 1024 * 1024), max_inflight=args.max_inflight,
                    compute_threads=args.threads, workers=args.workers)


def cmd_serve(args: argparse.Namespace) -> int:
    """Run the service until interrupted; returns the exit status."""
    import uvicorn

    from .compare import default_model
    from .service.app import create_app
    from .service.settings import ENV_SETTINGS

    settings = settings_from_args(args)
    default_model(settings.model_path)  # refuse a missing, foreign or untrusted model before listening
    if settings.workers > 1:
        os.environ[ENV_SETTINGS] = settings.to_json()
        uvicorn.run("detector.service.app:app_from_environment", factory=True, host=settings.host,
                    port=settings.port, workers=settings.workers, log_level="warning", timeout_graceful_shutdown=10)
    else:
        uvicorn.run(create_app(settings), host=settings.host, port=settings.port, log_level="warning",
                    timeout_graceful_shutdown=10)
    return 0


def cmd_watch(args: argparse.Namespace) -> int:
    """Run the watcher; returns the exit status."""
    from .watch import Watcher

    w = Watcher(args.folder, data_dir=args.data, model_path=args.model, plan=args.plan, settle_s=args.settle,
                report=args.report)
    if args.once:
        w.settle_s = 0.0
        w.scan_once()
        return 0
    w.run(interval_s=args.interval, max_runtime_s=args.max_runtime)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``serve`` or ``watch`` without the main command (``python -m detector.service_cli``)."""
    parser = argparse.ArgumentParser(prog="shotcheck")
    add_subparsers(parser.add_subparsers(dest="verb", required=True))
    args = parser.parse_args(argv)
    try:
        return int(args.func(args))
    except ShotcheckError as exc:
        print(f"shotcheck {args.verb}: {exc}", file=sys.stderr)  # noqa: T201
        return 2


if __name__ == "__main__":
    sys.exit(main())
