"""The package code passes the project's ruff rules (pyproject [tool.ruff]); tests and scripts are not linted."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_is_clean_on_the_packages():
    exe = shutil.which("ruff")
    cmd = [exe] if exe else [sys.executable, "-m", "ruff"]
    res = subprocess.run([*cmd, "check", "--output-format", "concise", "detector", "synthetic"], cwd=ROOT,
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stdout + res.stderr
