"""The engine keeps recently read references with their wave-shape evaluation: bounded, keyed, never a failure."""

from __future__ import annotations

import dataclasses

import pytest
import svc_records

import detector.service.engine as engine_mod
from detector.service.engine import InputError
from detector.store import Store


@dataclasses.dataclass(frozen=True)
class _Rec:  # what Engine.reference looks at of a StoredRecord
    digest: str
    name: str


@pytest.fixture
def engine(tmp_path, monkeypatch):
    eng = engine_mod.Engine(Store(tmp_path / "data"), model=None)
    reads: list[str] = []
    record = svc_records.impulse_record(4000, seed=1)

    def read(rec, *, field, voltage_channel=None, current_channel=None):
        reads.append(rec.digest)
        if rec.digest.startswith("bad"):
            raise InputError(f"{rec.name}: unreadable", field=field)
        return record

    monkeypatch.setattr(eng, "read", read)
    eng.reads = reads  # type: ignore[attr-defined]
    return eng


def test_a_reference_is_read_and_evaluated_once(engine):
    r1, s1 = engine.reference(_Rec("d1", "ref.csv"))
    r2, s2 = engine.reference(_Rec("d1", "ref.csv"))
    assert r1 is r2 and s1 is s2 and s1 is not None and s1.kind == "lightning_full"
    assert engine.reads == ["d1"]
    # another file name or channel choice is another entry (names appear in messages)
    engine.reference(_Rec("d1", "copy.csv"))
    engine.reference(_Rec("d1", "ref.csv"), voltage_channel="U")
    assert engine.reads == ["d1", "d1", "d1"]


def test_the_oldest_reference_goes_first(engine):
    for k in range(engine_mod.REFERENCE_CACHE_SIZE + 1):
        engine.reference(_Rec(f"d{k}", "ref.csv"))
    engine.reference(_Rec(f"d{engine_mod.REFERENCE_CACHE_SIZE}", "ref.csv"))  # kept
    assert engine.reads.count(f"d{engine_mod.REFERENCE_CACHE_SIZE}") == 1
    engine.reference(_Rec("d0", "ref.csv"))  # evicted, read again
    assert engine.reads.count("d0") == 2


def test_records_beyond_the_byte_limit_are_not_kept(engine, monkeypatch):
    monkeypatch.setattr(engine_mod, "REFERENCE_CACHE_BYTES", 1000)
    engine.reference(_Rec("d1", "ref.csv"))
    engine.reference(_Rec("d1", "ref.csv"))
    assert engine.reads == ["d1", "d1"]


def test_a_failed_read_is_not_kept(engine):
    for _ in range(2):
        with pytest.raises(InputError, match="unreadable"):
            engine.reference(_Rec("bad1", "ref.csv"))
    assert engine.reads == ["bad1", "bad1"]
