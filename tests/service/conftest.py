"""Fixtures of the service tests: a real (small) model, record files, and an app in a TestClient."""

from __future__ import annotations

from pathlib import Path

import pytest
import svc_model
import svc_records

TOKEN = "test-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}


@pytest.fixture(scope="session")
def model_path(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A real model (see :func:`svc_model.model_for_tests`)."""
    return svc_model.model_for_tests(Path(request.config.cache.mkdir("shotcheck-service-model")),
                                     tmp_path_factory.mktemp("model"))


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
