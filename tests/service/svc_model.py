"""A real model for the service tests: the bundled one if current, else a small one trained here."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

from detector.compare import DEFAULT_MODEL_PATH

_DETECTOR = Path(__file__).resolve().parents[2] / "detector"


def _model_key() -> str:
    """Digest of the code a trained model depends on (a change retrains the cached model)."""
    h = hashlib.sha256()
    for p in sorted([_DETECTOR / "features.py", _DETECTOR / "model.py", _DETECTOR / "training.py",
                     _DETECTOR / "scoring.py", *(_DETECTOR / "metrics").glob("*.py")]):
        h.update(p.read_bytes())
    return h.hexdigest()[:16]


def model_for_tests(cache_dir: Path, work_dir: Path) -> Path:
    """The bundled model if present and current, else a small real model trained on synthetic pairs.

    The trained model (24 simulated pairs of the bundled winding families, all four event classes) is
    cached in ``cache_dir`` keyed by the digest of the feature, metric and model code, so it is retrained
    whenever that code changes. Never a fake model.
    """
    from detector._validation import ShotcheckError
    from detector.features import SCHEMA_VERSION
    from detector.model import load_model

    if DEFAULT_MODEL_PATH.is_file():
        try:
            load_model(DEFAULT_MODEL_PATH, expected_schema=SCHEMA_VERSION)
            return DEFAULT_MODEL_PATH
        except ShotcheckError:  # bundled model of an older feature schema: train a current one
            pass
    dest = Path(cache_dir) / f"model-{_model_key()}.skops"
    if dest.is_file():
        return dest
    from detector.model import save_model
    from detector.training import extract_dataset, train
    from synthetic.dataset import generate

    ds = Path(work_dir) / "svc-dataset"
    shutil.rmtree(ds, ignore_errors=True)
    generate(24, ds, seed=11, workers=1, progress=False)
    data = extract_dataset(ds, workers=1, progress=False)
    model, _ = train(data, cv_folds=0, description="service tests: 24 synthetic pairs")
    tmp = dest.with_suffix(".tmp")
    save_model(model, tmp)
    tmp.replace(dest)
    shutil.rmtree(ds, ignore_errors=True)
    return dest
