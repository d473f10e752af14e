"""Start the real service (uvicorn, loopback only) in a subprocess for load, crash and browser tests."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[2]


def free_port() -> int:
    """A free TCP port on 127.0.0.1."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    """``python -m detector.service_cli serve`` on 127.0.0.1 in its own process group.

    Parameters
    ----------
    data_dir, model_path : Path
    token : str
    log_path : Path
        stdout and stderr of the service.
    args : list of str
        Extra ``serve`` options.
    """

    def __init__(self, data_dir: Path, model_path: Path, token: str, log_path: Path, args: list[str] | None = None):
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.cmd = [sys.executable, "-m", "detector.service_cli", "serve", "--host", "127.0.0.1", "--port",
                    str(self.port), "--data", str(data_dir), "--model", str(model_path), *(args or [])]
        self.env = {**os.environ, "SHOTCHECK_TOKEN": token, "PYTHONPATH": str(REPO)}
        self.log_path = log_path
        self.proc: subprocess.Popen | None = None

    def start(self, timeout_s: float = 60.0) -> Server:
        """Start and wait until ``/ready`` answers 200."""
        log = open(self.log_path, "ab")
        self.proc = subprocess.Popen(self.cmd, cwd=REPO, env=self.env, stdout=log, stderr=subprocess.STDOUT,
                                     start_new_session=True)
        log.close()
        end = time.monotonic() + timeout_s
        while time.monotonic() < end:
            if self.proc.poll() is not None:
                raise RuntimeError(f"service exited with {self.proc.returncode}: {self.log()[-2000:]}")
            try:
                if httpx.get(self.url + "/ready", timeout=2.0).status_code == 200:
                    return self
            except httpx.HTTPError:
                pass
            time.sleep(0.2)
        self.stop()
        raise RuntimeError(f"service not ready after {timeout_s} s: {self.log()[-2000:]}")

    def kill9(self) -> None:
        """SIGKILL the service and its workers (its own process group)."""
        assert self.proc is not None
        os.killpg(self.proc.pid, signal.SIGKILL)
        self.proc.wait(10)

    def stop(self) -> int | None:
        """SIGTERM, then SIGKILL after 15 s; returns the exit status."""
        if self.proc is None or self.proc.poll() is not None:
            return None if self.proc is None else self.proc.returncode
        os.killpg(self.proc.pid, signal.SIGTERM)
        try:
            return self.proc.wait(15)
        except subprocess.TimeoutExpired:
            os.killpg(self.proc.pid, signal.SIGKILL)
            return self.proc.wait(10)

    def log(self) -> str:
        """The service's output so far."""
        return self.log_path.read_text(errors="replace") if self.log_path.is_file() else ""
