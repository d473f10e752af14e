"""The serve and watch verbs, called as functions (the lead wires them into detector/cli.py)."""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import TOKEN

from detector._validation import ShotcheckError
from detector.service_cli import add_subparsers, main, settings_from_args

REPO = Path(__file__).resolve().parents[2]


def _parse(argv):
    parser = argparse.ArgumentParser(prog="shotcheck")
    add_subparsers(parser.add_subparsers(dest="verb"))
    return parser.parse_args(argv)


def test_watch_takes_every_named_plan():
    from detector.sequence import PLANS

    for name in PLANS:
        assert _parse(["watch", "/tmp/x", "--plan", name]).plan == name


def test_serve_defaults_and_token_sources(tmp_path):
    args = _parse(["serve", "--data", str(tmp_path)])
    assert (args.host, args.port, args.workers) == ("127.0.0.1", 8750, 1)
    assert settings_from_args(args, environ={}).token is None
    assert settings_from_args(args, environ={"SHOTCHECK_TOKEN": TOKEN}).token == TOKEN
    tf = tmp_path / "tok"
    tf.write_text(TOKEN + "\n")
    s = settings_from_args(_parse(["serve", "--data", str(tmp_path), "--token-file", str(tf), "--max-upload-MB", "8"]),
                           environ={"SHOTCHECK_TOKEN": "ignored-when-a-file-is-given"})
    assert s.token == TOKEN and s.max_upload_bytes == 8 * 1024 * 1024


def test_serve_refuses_a_network_address_without_a_token(tmp_path, capsys):
    with pytest.raises(ShotcheckError, match="loopback"):
        settings_from_args(_parse(["serve", "--host", "0.0.0.0", "--data", str(tmp_path)]), environ={})
    assert main(["serve", "--host", "0.0.0.0", "--data", str(tmp_path), "--model", "x.skops"]) == 2
    assert "not a loopback address" in capsys.readouterr().err


def test_serve_refuses_an_untrusted_model_file(tmp_path, capsys):
    import fractions

    import skops.io as sio

    bad = tmp_path / "foreign.skops"
    sio.dump({"format": "shotcheck-model", "classifier": fractions.Fraction(1, 3)}, bad)
    assert main(["serve", "--data", str(tmp_path / "d"), "--model", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "trusted" in err and "fractions.Fraction" in err
    assert main(["serve", "--data", str(tmp_path / "d"), "--model", str(tmp_path / "none.skops")]) == 2
    assert "not found" in capsys.readouterr().err


def test_watch_once_through_main(tmp_path, model_path, record_files):
    seq = tmp_path / "drop" / "TX-0000-SVC_2V"
    seq.mkdir(parents=True)
    for key in ("reduced_csv", "full_cff"):
        for p in record_files[key]:
            (seq / p.name).write_bytes(p.read_bytes())
    assert main(["watch", str(tmp_path / "drop"), "--model", str(model_path), "--once"]) == 0
    assert sorted(p.name for p in seq.glob("*.verdict.json")) == ["TX_01_reduced_75.csv.verdict.json",
                                                                "TX_05_full_100.cff.verdict.json"]
    assert main(["watch", str(tmp_path / "missing")]) == 2


def test_core_modules_stay_framework_free():
    """detector.metrics, detector.features, detector.compare, detector.store, detector.sequence and synthetic
    import neither fastapi nor pydantic (the service is the only web-framework user)."""
    code = ("import sys, detector.metrics, detector.features, detector.compare, detector.store, detector.sequence, "
            "detector.watch, detector.service.engine, synthetic; "
            "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('fastapi', 'pydantic', 'starlette')); "
            "print(bad); sys.exit(1 if bad else 0)")
    r = subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout + r.stderr


def test_verbs_through_the_shotcheck_command(tmp_path, capsys):
    from detector.cli import main as shotcheck_main

    assert shotcheck_main(["serve", "--host", "0.0.0.0", "--data", str(tmp_path)]) == 2
    assert "not a loopback address" in capsys.readouterr().err
    assert shotcheck_main(["watch", str(tmp_path / "missing")]) == 2
    assert "not a folder" in capsys.readouterr().err
