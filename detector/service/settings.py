"""Typed settings of the service, passed to :func:`detector.service.app.create_app` (no global singleton)."""

from __future__ import annotations

import dataclasses
import ipaddress
import json
import os
from pathlib import Path
from typing import Any

from .._validation import ShotcheckError

__all__ = ["Settings", "is_loopback", "read_token_file", "ENV_TOKEN", "ENV_SETTINGS"]

#: Environment variable holding the bearer token for writes.
ENV_TOKEN = "SHOTCHECK_TOKEN"
#: Environment variable through which ``serve --workers N`` hands the settings to worker processes.
ENV_SETTINGS = "SHOTCHECK_SERVICE_SETTINGS"


def is_loopback(host: str) -> bool:
    """Whether ``host`` names a loopback address (``127.0.0.0/8``, ``::1``, ``localhost``)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def read_token_file(path: str | os.PathLike) -> str:
    """Read a bearer token from a file (first line, blanks stripped).

    Raises
    ------
    ShotcheckError
        Missing/unreadable file or an empty or too short token (fewer than 16 characters).
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ShotcheckError(f"{p}: cannot read the token file ({exc})") from None
    token = text.strip().splitlines()[0].strip() if text.strip() else ""
    if len(token) < 16:
        raise ShotcheckError(f"{p}: the token must be at least 16 characters long")
    return token


@dataclasses.dataclass(frozen=True)
class Settings:
    """Service settings.

    Parameters
    ----------
    data_dir : Path
        Folder of the store (database and uploaded files).
    host : str
        Address to listen on; a non-loopback address requires ``token``.
    port : int
        TCP port.
    token : str or None
        Bearer token required for writes (POST); None allows unauthenticated writes on loopback only.
    model_path : Path or None
        Model file (skops); None uses the bundled model.
    max_upload_bytes : int
        Largest request body accepted [bytes]; larger bodies get 413.
    max_inflight : int
        Requests doing work at once per process; further ones get 503 with ``Retry-After``.
    compute_threads : int
        Threads per process running comparisons. One per process, and as many worker processes as cores,
        gave the highest throughput on 2 cores (27/s against 18/s with two threads per process).
    retry_after_s : int
        Value of the ``Retry-After`` header on 503 [s].
    workers : int
        uvicorn worker processes (``serve --workers``).
    """

    data_dir: Path
    host: str = "127.0.0.1"
    port: int = 8750
    token: str | None = None
    model_path: Path | None = None
    max_upload_bytes: int = 64 * 1024 * 1024
    max_inflight: int = 16
    compute_threads: int = 1
    retry_after_s: int = 1
    workers: int = 1

    def __post_init__(self) -> None:
        object.__setattr__(self, "data_dir", Path(self.data_dir))
        if self.model_path is not None:
            object.__setattr__(self, "model_path", Path(self.model_path))
        if self.token is not None and len(self.token) < 16:
            raise ShotcheckError("token: must be at least 16 characters long")
        for name in ("port", "max_upload_bytes", "max_inflight", "compute_threads", "retry_after_s", "workers"):
            v = getattr(self, name)
            if not isinstance(v, int) or isinstance(v, bool) or v < (0 if name == "port" else 1):
                raise ShotcheckError(f"{name}: must be a positive integer, got {v!r}")
        if not is_loopback(self.host) and not self.token:
            raise ShotcheckError(
                f"host {self.host!r} is not a loopback address: set a token ({ENV_TOKEN} or --token-file) "
                "before listening on a network"
            )

    def to_json(self) -> str:
        """JSON form (for worker processes); the token is included, so keep it in the environment only."""
        d: dict[str, Any] = dataclasses.asdict(self)
        d["data_dir"] = str(self.data_dir)
        d["model_path"] = None if self.model_path is None else str(self.model_path)
        return json.dumps(d)

    @classmethod
    def from_json(cls, text: str) -> Settings:
        """Inverse of :meth:`to_json`."""
        return cls(**json.loads(text))
