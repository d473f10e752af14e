"""A bounded load generator: N client threads posting unique 20 000-sample comparisons for a set time."""

from __future__ import annotations

import dataclasses
import threading
import time
from pathlib import Path

import httpx
import numpy as np
import svc_records


@dataclasses.dataclass
class LoadResult:
    """What the clients saw."""

    duration_s: float
    statuses: dict[int, int]
    latencies_s: list[float]
    ok_ids: list[str]
    errors: list[str]
    retry_after: list[str]

    @property
    def ok(self) -> int:
        return sum(n for s, n in self.statuses.items() if 200 <= s < 300)

    @property
    def rate_per_s(self) -> float:
        return self.ok / self.duration_s

    def percentile_ms(self, q: float) -> float:
        return float(np.percentile(np.array(self.latencies_s) * 1e3, q)) if self.latencies_s else float("nan")

    def line(self) -> str:
        return (f"{self.ok} comparisons in {self.duration_s:.1f} s = {self.rate_per_s:.1f}/s; latency p50 "
                f"{self.percentile_ms(50):.0f} ms, p99 {self.percentile_ms(99):.0f} ms; statuses {self.statuses}; "
                f"{len(self.errors)} transport errors")


def comtrade_pair(folder: Path, n_samples: int = 20_000) -> tuple[list[tuple[str, bytes]], list[tuple[str, bytes]]]:
    """A reduced and a full record as COMTRADE BINARY32 (name, bytes) lists."""
    out = []
    for name, level, seed in (("ref_reduced_75.cfg", 75.0, 1), ("test_full_100.cfg", 100.0, 2)):
        paths = svc_records.write_record(svc_records.impulse_record(n_samples, level_percent=level, seed=seed),
                                         folder / name, data_format="BINARY32")
        out.append([(p.name, p.read_bytes()) for p in paths])
    return out[0], out[1]


def _unique(files: list[tuple[str, bytes]], tag: str) -> list[tuple[str, bytes]]:
    """Same samples, a station name of its own: new content, so no request is answered from the store."""
    out = []
    for name, data in files:
        if name.endswith(".cfg"):
            first, rest = data.split(b"\n", 1)
            data = tag.encode() + b"," + first.split(b",", 1)[1] + b"\n" + rest
        out.append((name, data))
    return out


def run_load(url: str, token: str, reference, test, *, clients: int = 8, duration_s: float = 10.0,
             timeout_s: float = 30.0, stop: threading.Event | None = None) -> LoadResult:
    """Post comparisons from ``clients`` threads until ``duration_s`` passes or ``stop`` is set."""
    lock = threading.Lock()
    statuses: dict[int, int] = {}
    lat: list[float] = []
    ids: list[str] = []
    errors: list[str] = []
    retry: list[str] = []
    stop = stop or threading.Event()
    t_end = time.monotonic() + duration_s

    def client(k: int) -> None:
        n = 0
        with httpx.Client(base_url=url, timeout=timeout_s, headers={"Authorization": f"Bearer {token}"}) as c:
            while time.monotonic() < t_end and not stop.is_set():
                tag = f"LOAD-{k:02d}-{n:06d}-{time.monotonic_ns()}"
                n += 1
                files = [("reference", f) for f in reference] + [("test", f) for f in _unique(test, tag)]
                t0 = time.perf_counter()
                try:
                    r = c.post("/v1/comparisons", files=files)
                except httpx.HTTPError as exc:
                    with lock:
                        errors.append(type(exc).__name__)
                    if stop.is_set():
                        return
                    time.sleep(0.2)
                    continue
                dt = time.perf_counter() - t0
                with lock:
                    statuses[r.status_code] = statuses.get(r.status_code, 0) + 1
                    if 200 <= r.status_code < 300:
                        lat.append(dt)
                        ids.append(r.json()["id"])
                    elif "retry-after" in r.headers:
                        retry.append(r.headers["retry-after"])
                if r.status_code == 503:
                    time.sleep(float(r.headers.get("retry-after", "1")) * 0.2)

    t0 = time.monotonic()
    threads = [threading.Thread(target=client, args=(k,), daemon=True) for k in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(duration_s + timeout_s + 10)
    return LoadResult(time.monotonic() - t0, statuses, lat, ids, errors, retry)


def run_shot_load(url: str, token: str, reference, test, *, clients: int = 2, duration_s: float = 10.0,
                  timeout_s: float = 30.0, stop: threading.Event | None = None) -> tuple[list[str], list[str], dict]:
    """Each client opens a sequence, posts its reference shot, then unique full-level shots until stopped.

    Returns
    -------
    sequence_ids, ok_shot_ids, statuses
    """
    lock = threading.Lock()
    seqs: list[str] = []
    shots: list[str] = []
    statuses: dict[int, int] = {}
    stop = stop or threading.Event()
    t_end = time.monotonic() + duration_s

    def client(k: int) -> None:
        with httpx.Client(base_url=url, timeout=timeout_s, headers={"Authorization": f"Bearer {token}"}) as c:
            try:
                sid = c.post("/v1/sequences", json={"unit_id": "TX-0000-SVC", "terminal": f"{k}U",
                                                    "plan": "iec"}).json()["id"]
                r = c.post(f"/v1/sequences/{sid}/shots", files=[("record", f) for f in reference],
                           data={"kind": "reduced", "level_percent": "75"})
                r.raise_for_status()
            except httpx.HTTPError:
                return
            with lock:
                seqs.append(sid)
            n = 0
            while time.monotonic() < t_end and not stop.is_set():
                n += 1
                files = [("record", f) for f in _unique(test, f"SHOT-{k:02d}-{n:06d}")]
                try:
                    r = c.post(f"/v1/sequences/{sid}/shots", files=files, data={"kind": "full", "level_percent": "100"})
                except httpx.HTTPError:
                    if stop.is_set():
                        return
                    time.sleep(0.2)
                    continue
                with lock:
                    statuses[r.status_code] = statuses.get(r.status_code, 0) + 1
                    if 200 <= r.status_code < 300:
                        shots.append(r.json()["id"])

    threads = [threading.Thread(target=client, args=(k,), daemon=True) for k in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(duration_s + timeout_s + 10)
    return seqs, shots, statuses
