"""Shard storage of recorded pairs: exact round trip and byte-reproducible files (analytic waveforms)."""

from __future__ import annotations

import filecmp

import numpy as np

from synthetic.dataset import _decode, _encode, _shard_arrays, _write_npz
from synthetic.digitiser import Digitiser, digitise_waveforms


def _record(seed, level):
    t = np.arange(0, 40e-6, 2.5e-9)
    u = np.exp(-t / 68.22e-6) - np.exp(-t / 0.405e-6)  # 1.2/50 us shape (Kuffel, Zaengl & Kuffel, 2nd ed.)
    v = -level * 300e3 * u / u.max()
    dg = Digitiser(voltage_range_V=400e3, current_range_A=50.0, bits=14, noise_lsb=1.0, bandwidth_Hz=40e6)
    return digitise_waveforms(t, v, v / 1e4, dg, rng=np.random.default_rng(seed),
                              meta={"shot_kind": "reduced" if level < 1 else "full", "level_percent": 100 * level})


def test_encode_decode_is_exact():
    rec = _record(1, 0.6)
    back = _decode(*(lambda e: (e["U"], e["I"], np.asarray(e["lsb"]), e["dt"], e["meta"]))(_encode(rec)), "x")
    np.testing.assert_array_equal(back.voltage.samples, rec.voltage.samples)
    np.testing.assert_array_equal(back.current.samples, rec.current.samples)
    assert back.sample_interval_s == rec.sample_interval_s
    assert dict(back.meta) == dict(rec.meta)
    assert back.processing == rec.processing


def test_shard_files_are_byte_reproducible_and_loadable(tmp_path):
    cases = [{"ref": _encode(_record(2 * k, 0.6)), "test": _encode(_record(2 * k + 1, 1.0)),
              "label": {"case_id": k}} for k in range(3)]
    a, b = tmp_path / "a.npz", tmp_path / "b.npz"
    _write_npz(a, _shard_arrays(cases))
    _write_npz(b, _shard_arrays(cases))
    assert filecmp.cmp(a, b, shallow=False)
    with np.load(a, allow_pickle=False) as z:
        assert list(z["case_id"]) == [0, 1, 2]
        off = z["test_offsets"]
        assert off[-1] == z["test_U"].size and z["test_U"].dtype == np.int16
        np.testing.assert_array_equal(z["test_U"][off[1]:off[2]], cases[1]["test"]["U"])
