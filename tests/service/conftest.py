"""Fixtures of the service tests: a real (small) model, record files, and an app in a TestClient."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pytest

from detector.compare import DEFAULT_MODEL_PATH

import svc_records

TOKEN = "test-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
_DETECTOR = Path(__file__).resolve().parents[2] / "detector"


def _model_key() -> str:
    """Digest of the code a trained model depends on (a change retrains the cached model)."""
    h = hashlib.sha256()
    for p in sorted([_DETECTOR / "features.py", _DETECTOR / "model.py", _DETECTOR / "training.py",
                     _DETECTOR / "scoring.py", *(_DETECTOR / "metrics").glob("*.py")]):
        h.update(p.read_bytes())
    return h.hexdigest()[:16]


@pytest.fixture(scope="session")
def model_path(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The bundled model if present and current, else a small real model trained on synthetic pairs.

    The trained model (24 simulated pairs, all four event classes) is cached in pytest's cache folder
    keyed by the digest of the feature, metric and model code, so it is retrained whenever that code
    changes.
    """
    if DEFAULT_MODEL_PATH.is_file():
        from detector._validation import ShotcheckError
        from detector.features import SCHEMA_VERSION
        from detector.model import load_model

        try:
            load_model(DEFAULT_MODEL_PATH, expected_schema=SCHEMA_VERSION)
            return DEFAULT_MODEL_PATH
        except ShotcheckError:  # bundled model of an older feature schema: train a current one
            pass
    cache = Path(request.config.cache.mkdir("shotcheck-service-model"))
    dest = cache / f"model-{_model_key()}.skops"
    if dest.is_file():
        return dest
    from detector.model import save_model
    from detector.training import extract_dataset, train
    from synthetic.dataset import generate

    ds = tmp_path_factory.mktemp("svc-dataset") / "set"
    generate(24, ds, seed=11, workers=1, progress=False)
    data = extract_dataset(ds, workers=1, progress=False)
    model, _ = train(data, cv_folds=0, description="service tests: 24 synthetic pairs")
    tmp = dest.with_suffix(".tmp")
    save_model(model, tmp)
    tmp.replace(dest)
    shutil.rmtree(ds, ignore_errors=True)
    return dest


@pytest.fixture(scope="session")
def record_files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, list[Path]]:
    """Record files in every accepted form: reduced (CSV), full (.cfg + .dat, .cff), chopped (.cff)."""
    d = tmp_path_factory.mktemp("svc-records")
    w = svc_records.write_record
    return {
        "reduced_csv": w(svc_records.impulse_record(12_000, level_percent=75.0, seed=1), d / "TX_01_reduced_75.csv"),
        "full_cfg": w(svc_records.impulse_record(12_000, seed=2), d / "TX_02_full_100.cfg", data_format="BINARY32"),
        "full_cff": w(svc_records.impulse_record(12_000, seed=3), d / "TX_05_full_100.cff"),
        "chopped_cff": w(svc_records.impulse_record(12_000, level_percent=115.0, kind="chopped", seed=4),
                         d / "TX_03_chopped_115.cff"),
        "reduced2_csv": w(svc_records.impulse_record(12_000, level_percent=75.0, seed=5), d / "TX_06_reduced_75.csv"),
    }


@pytest.fixture
def settings(tmp_path: Path, model_path: Path):
    """Settings with a token, a fresh data folder and the test model."""
    from detector.service.settings import Settings

    return Settings(data_dir=tmp_path / "data", token=TOKEN, model_path=model_path)


@pytest.fixture
def client(settings):
    """A TestClient running the app's lifespan (model loaded, store open)."""
    from fastapi.testclient import TestClient

    from detector.service.app import create_app

    with TestClient(create_app(settings), raise_server_exceptions=False) as c:
        yield c
