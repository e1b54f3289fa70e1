"""Model store: integrity (SHA-256), refusal of untrusted files, atomic saves, champion pointer."""

from __future__ import annotations

import json

import pytest
from sklearn.linear_model import LogisticRegression

from facies_ml.errors import ModelStoreError
from facies_ml.store import (
    list_versions,
    load_version,
    read_registry,
    save_version,
    set_champion,
    sha256_file,
)


def _model() -> LogisticRegression:
    return LogisticRegression(C=0.5).fit([[0.0], [1.0], [2.0], [3.0]], [0, 0, 1, 1])


def _save(model_dir, tmp_path, **kw):
    src = tmp_path / "K1.las"
    src.write_text("~Version\n")
    return save_version(_model(), model_dir, training_files={"K1": str(src)},
                        config_raw={"a": 1}, config_hash="abc", **kw)


def test_round_trip_and_manifest(tmp_path):
    model_dir = tmp_path / "models"
    v = _save(model_dir, tmp_path, metrics={"overall": {"lithofacies_f1_macro": 0.5}})
    model, manifest = load_version(model_dir)
    assert v == "v001" and manifest["version"] == v
    assert model.predict([[3.0]])[0] == 1
    # hashlib's SHA-256 of the written files is what the manifest records
    assert manifest["bundle_sha256"] == sha256_file(model_dir / v / "bundle.joblib")
    assert manifest["training_wells"]["K1"]["sha256"] == sha256_file(tmp_path / "K1.las")
    assert {"numpy", "scikit-learn", "lightgbm"} <= set(manifest["packages"])
    assert list_versions(model_dir)[0]["lithofacies_f1_macro"] == 0.5


def test_flipped_byte_is_refused(tmp_path):
    model_dir = tmp_path / "models"
    v = _save(model_dir, tmp_path)
    bundle = model_dir / v / "bundle.joblib"
    data = bytearray(bundle.read_bytes())
    data[len(data) // 2] ^= 0x01
    bundle.write_bytes(bytes(data))
    with pytest.raises(ModelStoreError, match="SHA-256 does not match"):
        load_version(model_dir)


def test_foreign_manifest_is_refused(tmp_path):
    model_dir = tmp_path / "models"
    v = _save(model_dir, tmp_path)
    mpath = model_dir / v / "manifest.json"
    manifest = json.loads(mpath.read_text())
    manifest["format"] = "something-else"
    mpath.write_text(json.dumps(manifest))
    with pytest.raises(ModelStoreError, match="not written by facies_ml"):
        load_version(model_dir)


def test_package_version_mismatch_is_refused(tmp_path):
    model_dir = tmp_path / "models"
    v = _save(model_dir, tmp_path)
    mpath = model_dir / v / "manifest.json"
    manifest = json.loads(mpath.read_text())
    manifest["packages"]["lightgbm"] = "0.1.0"
    mpath.write_text(json.dumps(manifest))
    with pytest.raises(ModelStoreError, match="lightgbm 0.1.0"):
        load_version(model_dir)


def test_interrupted_save_keeps_previous_champion(tmp_path):
    model_dir = tmp_path / "models"
    first = _save(model_dir, tmp_path)
    with pytest.raises(KeyboardInterrupt):
        _save(model_dir, tmp_path, _fail_after_bundle=True)
    assert read_registry(model_dir)["champion"] == first
    assert read_registry(model_dir)["versions"] == [first]
    leftovers = [p.name for p in model_dir.iterdir() if p.name not in (first, "registry.json")]
    assert leftovers == []
    model, _ = load_version(model_dir)
    assert model.predict([[0.0]])[0] == 0


def test_rollback_and_non_promoted_version(tmp_path):
    model_dir = tmp_path / "models"
    v1 = _save(model_dir, tmp_path)
    v2 = _save(model_dir, tmp_path, promote=False)
    assert read_registry(model_dir)["champion"] == v1
    set_champion(model_dir, v2)
    assert read_registry(model_dir)["champion"] == v2
    set_champion(model_dir, v1)
    assert [r["champion"] for r in list_versions(model_dir)] == [True, False]


def test_missing_model_dir_message(tmp_path):
    with pytest.raises(ModelStoreError, match="model directory not found"):
        load_version(tmp_path / "nope")
    (tmp_path / "empty").mkdir()
    with pytest.raises(ModelStoreError, match="no trained model"):
        load_version(tmp_path / "empty")
