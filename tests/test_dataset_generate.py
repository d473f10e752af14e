"""End-to-end data set generation on the real simulator: storage, reproducibility, labels, Dask."""

from __future__ import annotations

import filecmp
import math

import numpy as np
import pytest

from detector._validation import ShotcheckError
from synthetic.dataset import LABEL_COLUMNS, generate, load_dataset, read_labels
from synthetic.scenario import DESIGN_DIR, EVENT_CLASSES

N_SMALL = 8


@pytest.fixture(scope="module")
def small_set(tmp_path_factory):
    out = tmp_path_factory.mktemp("set_w1")
    man = generate(N_SMALL, out, seed=42, workers=1, progress=False)
    return out, man


def test_layout_labels_and_balance(small_set):
    out, man = small_set
    assert (out / "manifest.json").is_file() and (out / "shard_00000.npz").is_file()
    assert man["n_cases"] == N_SMALL and man["n_shards"] == 1
    labels = read_labels(out)
    assert [lab["case_id"] for lab in labels] == list(range(N_SMALL))
    assert set(labels[0]) == set(LABEL_COLUMNS)
    # the four classes exactly balanced: case i has class i mod 4
    counts = {c: sum(lab["event"] == c for lab in labels) for c in EVENT_CLASSES}
    assert counts == {c: N_SMALL // 4 for c in EVENT_CLASSES}
    for lab in labels:
        if lab["event"] == "none":
            assert math.isnan(lab["position"]) and math.isnan(lab["fault_time_us"])
            assert lab["fault_node_a"] == -2
        else:
            assert lab["fault_occurred"]
            assert 0.0 <= lab["position"] <= 1.0
            assert lab["fault_phase"] in ("front", "crest", "tail")
            assert lab["fault_time_us"] > 0
        assert 50 <= lab["reference_level_percent"] <= 75
        assert lab["bits"] in (10, 12, 14)
        assert lab["sample_rate_Hz"] in (50e6, 100e6, 125e6, 200e6, 250e6)


def test_records_round_trip_and_match_labels(small_set):
    out, _ = small_set
    n = n_chopped = 0
    for ref, test, lab in load_dataset(out):
        n += 1
        assert [c.name for c in ref.channels] == ["U", "I_N"] and [c.name for c in test.channels] == ["U", "I_N"]
        assert test.sampling_rate_Hz == pytest.approx(lab["sample_rate_Hz"])
        assert ref.meta["level_percent"] == pytest.approx(lab["reference_level_percent"])
        assert test.meta["level_percent"] == 100.0
        assert test.meta["shot_kind"] == lab["test_kind"]
        assert ref.meta["shot_kind"] == lab["reference_kind"]
        # samples are whole codes of the recorder's LSB (exact storage)
        lsb = 2 * test.meta["voltage_range_V"] / 2 ** test.meta["bits"]
        np.testing.assert_allclose(test.voltage.samples / lsb, np.rint(test.voltage.samples / lsb), atol=1e-9)
        # the test shot's extreme voltage is near the BIL (the generator was designed for it)
        peak = np.abs(test.voltage.samples).max()
        if lab["test_kind"] == "full" and lab["event"] in ("none", "discharge_only"):
            assert peak == pytest.approx(lab["bil_kV"] * 1e3, rel=0.05)
        if not math.isnan(lab["fault_time_us"]):
            assert 0 < lab["fault_time_us"] < test.duration_s * 1e6
        for rec, key in ((ref, "chop_time_reference_us"), (test, "chop_time_test_us")):
            if not math.isnan(lab[key]):
                # the labelled gap closing instant is where the recorded voltage collapses
                a = np.abs(rec.voltage.samples)
                t_half = rec.times()[np.argmax((a < 0.5 * a.max()) & (np.arange(a.size) > np.argmax(a)))]
                assert lab[key] * 1e-6 < t_half < lab[key] * 1e-6 + 1e-6
                n_chopped += 1
    assert n == N_SMALL
    assert n_chopped >= 1


@pytest.mark.slow
def test_same_seed_same_bytes_whatever_the_worker_count(small_set, tmp_path):
    out1, _ = small_set
    out2 = tmp_path / "w2"
    man = generate(N_SMALL, out2, seed=42, workers=2, progress=False)
    assert man["runner"] == "local:2"  # really two loky processes
    assert filecmp.cmp(out1 / "shard_00000.npz", out2 / "shard_00000.npz", shallow=False)
    assert filecmp.cmp(out1 / "labels.csv", out2 / "labels.csv", shallow=False)


def test_other_seed_other_data_and_subset_is_prefix(small_set, tmp_path):
    out1, _ = small_set
    out3 = tmp_path / "first4"
    generate(4, out3, seed=42, workers=1, progress=False)
    a = list(load_dataset(out1))[:4]
    b = list(load_dataset(out3))
    for (r1, t1, l1), (r2, t2, l2) in zip(a, b, strict=True):
        # case i depends only on (seed, i): a shorter run reproduces the first cases
        np.testing.assert_array_equal(t1.current.samples, t2.current.samples)
        np.testing.assert_array_equal(r1.voltage.samples, r2.voltage.samples)
        assert {k: v for k, v in l1.items() if k not in ("shard",)} == pytest.approx(
            {k: v for k, v in l2.items() if k not in ("shard",)}, nan_ok=True)
    other = tmp_path / "seed43"
    generate(1, other, seed=43, workers=1, progress=False)
    (_, t_other, _), = list(load_dataset(other))
    assert t_other.n_samples != a[0][1].n_samples or not np.array_equal(t_other.current.samples,
                                                                         a[0][1].current.samples)


@pytest.mark.slow
def test_dask_local_cluster_gives_the_same_data(small_set, tmp_path):
    distributed = pytest.importorskip("distributed")
    out1, _ = small_set
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        generate(N_SMALL, tmp_path / "dask", seed=42, scheduler=cluster.scheduler_address, progress=False)
    assert filecmp.cmp(out1 / "shard_00000.npz", tmp_path / "dask" / "shard_00000.npz", shallow=False)
    assert filecmp.cmp(out1 / "labels.csv", tmp_path / "dask" / "labels.csv", shallow=False)


def test_user_family_file(tmp_path):
    text = (DESIGN_DIR / "distribution.toml").read_text().replace('name = "distribution"', 'name = "lab_units"')
    p = tmp_path / "lab.toml"
    p.write_text(text)
    generate(4, tmp_path / "lab", seed=3, design_file=p, workers=1, progress=False)
    labels = read_labels(tmp_path / "lab")
    assert {lab["family"] for lab in labels} == {"lab_units"}


def test_bad_arguments(tmp_path, small_set):
    out1, _ = small_set
    with pytest.raises(ShotcheckError, match="n_cases"):
        generate(0, tmp_path / "x", seed=1)
    with pytest.raises(ShotcheckError, match="seed"):
        generate(2, tmp_path / "x", seed=-1)
    with pytest.raises(ShotcheckError, match="workers"):
        generate(2, tmp_path / "x", seed=1, workers=0)
    with pytest.raises(ShotcheckError, match="already holds a data set"):
        generate(2, out1, seed=1)
    with pytest.raises(ShotcheckError, match="cannot read the design file"):
        generate(2, tmp_path / "x", seed=1, design_file=tmp_path / "missing.toml")
    with pytest.raises(ShotcheckError, match="not a data set"):
        list(load_dataset(tmp_path))


def test_damaged_data_set_files_are_named_in_the_error(tmp_path, small_set):
    import shutil

    src, _ = small_set
    d = tmp_path / "copy"
    shutil.copytree(src, d)
    lines = (d / "labels.csv").read_text(encoding="utf-8").splitlines()
    # a truncated last line
    (d / "labels.csv").write_text("\n".join(lines[:-1] + [lines[-1][:40]]) + "\n", encoding="utf-8")
    with pytest.raises(ShotcheckError, match=rf"labels.csv: line {len(lines)}: .*missing; expected "
                                             rf"{len(LABEL_COLUMNS)} fields"):
        read_labels(d)
    # a value that is not a number
    bad = lines[1].split(",")
    bad[list(LABEL_COLUMNS).index("sample_rate_Hz")] = "fast"
    (d / "labels.csv").write_text("\n".join([lines[0], ",".join(bad)] + lines[2:]) + "\n", encoding="utf-8")
    with pytest.raises(ShotcheckError, match=r"labels.csv: line 2: sample_rate_Hz: expected a number, got 'fast'"):
        read_labels(d)
    (d / "labels.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    shard = sorted(d.glob("shard_*.npz"))[0]
    # a shard holding pickled objects is refused, never unpickled; one without the arrays too
    np.savez(shard, case_id=np.array([{"x": 1}], dtype=object))
    with pytest.raises(ShotcheckError, match=rf"{shard.name}: not a shard written by generate\(\) \(not an archive"):
        list(load_dataset(d))
    np.savez(shard, case_id=np.arange(3))
    with pytest.raises(ShotcheckError, match=rf"{shard.name}: not a shard written by generate\(\) \(missing arrays"):
        list(load_dataset(d))
    shard.unlink()
    with pytest.raises(ShotcheckError, match=rf"{shard.name}: missing"):
        list(load_dataset(d))


def test_fault_instant_label_is_on_the_test_record_time_axis():
    """With every benign difference switched off, the test and the scaled reference agree to within
    quantisation until the labelled fault instant, and differ clearly right after it."""
    import dataclasses

    from synthetic.scenario import make_pair, sample_scenario

    sc = sample_scenario(np.random.default_rng(8), "distribution", event="to_ground", seed=8)
    quiet = {"noise_lsb": 0.0, "interference_amplitude_lsb": 0.0, "baseline_offset_lsb": 0.0, "bits": 14}
    sc = dataclasses.replace(
        sc, front_resistor_drift=0.0, tail_resistor_drift=0.0, magnetising_test_H=sc.magnetising_reference_H,
        test_kind="full", reference_chopped=False, chop_time_test_s=None, chop_time_reference_s=None,
        recorder_test={**sc.recorder_test, **quiet},
        recorder_reference={**sc.recorder_test, **quiet, "current_range_scale": 1.0},
        fault={**sc.fault, "node": 3, "target_phase": "crest", "arc_resistance_ohm": 1.0},
    )
    ref, test, lab = make_pair(sc)
    assert lab["fault_occurred"]
    k = test.meta["level_percent"] / ref.meta["level_percent"]
    # put the reference on the test's time axis with the known trigger instants (cubic-free, linear)
    t_sim = test.times() - test.meta["trigger_time_s"]
    v_ref = np.interp(t_sim, ref.times() - ref.meta["trigger_time_s"], ref.voltage.samples * k)
    lsb = 2 * test.meta["voltage_range_V"] / 2**14
    d = np.abs(test.voltage.samples - v_ref) / lsb
    tf = lab["fault_time_us"] * 1e-6
    # skip the first 0.5 us of the front: linear interpolation of a 20-ns-sampled foot errs by ~10 LSB
    settled = t_sim > 0.5e-6
    before = settled & (test.times() < tf - 0.05e-6)
    after = (test.times() > tf + 0.2e-6) & (test.times() < tf + 2e-6)
    # before the fault: quantisation of both shots (the reference's scaled by the level ratio)
    assert before.sum() > 20
    assert d[before].max() < 4.0
    onset = test.times()[np.argmax(settled & (d > 8.0))]
    assert tf - 0.05e-6 <= onset <= tf + 0.3e-6
    assert d[after].max() > 50.0
