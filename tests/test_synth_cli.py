"""The ``shotcheck synth`` verb, called through its own parser and through detector.cli.main."""

from __future__ import annotations

import argparse

import pytest

from detector._validation import ShotcheckError
from synthetic import synth_cli
from synthetic.dataset import load_dataset, read_labels
from synthetic.scenario import DESIGN_DIR


def parse(argv):
    parser = argparse.ArgumentParser(prog="shotcheck")
    sub = parser.add_subparsers(dest="verb")
    synth_cli.add_subparser(sub)
    return parser.parse_args(["synth", *argv])


def test_run_writes_a_data_set_with_comtrade(tmp_path, capsys):
    out = tmp_path / "set"
    args = parse(["--cases", "4", "--out", str(out), "--seed", "7", "--workers", "1",
                  "--design", str(DESIGN_DIR / "distribution.toml"), "--comtrade"])
    assert args.func is synth_cli.run
    assert synth_cli.run(args) == 0
    err = capsys.readouterr().err
    assert "wrote 4 pairs" in err and "synth" in err  # summary line and the tqdm bar go to stderr
    labels = read_labels(out)
    assert len(labels) == 4 and {lab["family"] for lab in labels} == {"distribution"}
    from detector.formats import read

    cfgs = sorted((out / "comtrade").glob("*.cfg"))
    assert len(cfgs) == 8
    ref, test, lab = next(iter(load_dataset(out)))
    back = read(out / "comtrade" / "case_000000_test.cfg")
    assert back.n_samples == test.n_samples
    assert back.sampling_rate_Hz == pytest.approx(test.sampling_rate_Hz)
    # BINARY COMTRADE holds the recorder codes exactly (scale factor = one LSB)
    lsb = 2 * test.meta["voltage_range_V"] / 2 ** test.meta["bits"]
    assert abs(back.voltage.samples - test.voltage.samples).max() <= 0.5 * lsb
    assert abs(back.current.samples - test.current.samples).max() <= 0.5 * 2 * test.meta["current_range_A"] / 2 ** test.meta["bits"]


@pytest.mark.parametrize(
    "argv, message",
    [
        (["--cases", "0", "--out", "x", "--seed", "1"], "expected a whole number >= 1"),
        (["--cases", "two", "--out", "x", "--seed", "1"], "expected a whole number"),
        (["--cases", "2", "--out", "x", "--seed", "-3"], "expected a whole number >= 0"),
    ],
)
def test_bad_numbers_are_rejected_by_the_parser(argv, message, capsys):
    with pytest.raises(SystemExit) as info:
        parse(argv)
    assert info.value.code == 2
    assert message in capsys.readouterr().err


def test_bad_toml_raises_shotcheck_error_naming_file_and_key(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text((DESIGN_DIR / "power.toml").read_text().replace("k0 =", "k_0 ="))
    args = parse(["--cases", "2", "--out", str(tmp_path / "o"), "--seed", "1", "--design", str(bad)])
    with pytest.raises(ShotcheckError, match=r"bad.toml: \[winding\] k_0: unknown key.*Did you mean 'k0'"):
        synth_cli.run(args)


def test_workers_and_scheduler_exclude_each_other(tmp_path):
    args = parse(["--cases", "2", "--out", str(tmp_path / "o"), "--seed", "1", "--workers", "2",
                  "--scheduler", "tcp://127.0.0.1:1"])
    with pytest.raises(ShotcheckError, match="exclude each other"):
        synth_cli.run(args)


def test_main_exit_status_2_on_bad_design(tmp_path, capsys):
    from detector.cli import main

    code = main(["synth", "--cases", "2", "--out", str(tmp_path / "o"), "--seed", "1",
                 "--design", str(tmp_path / "none.toml")])
    assert code == 2
    assert "cannot read the design file" in capsys.readouterr().err


def test_out_folder_holding_other_files_is_refused(tmp_path, capsys):
    from detector.cli import main

    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "notes.txt").write_text("lab notes", encoding="utf-8")
    assert main(["synth", "--cases", "2", "--out", str(busy), "--seed", "1"]) == 2
    assert "busy: is not empty; --out takes a new or empty directory" in capsys.readouterr().err
    assert sorted(p.name for p in busy.iterdir()) == ["notes.txt"]  # nothing written
