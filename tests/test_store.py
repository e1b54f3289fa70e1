"""Model store: data-only model files, integrity (SHA-256), refusal of untrusted or escaping
files, atomic saves, champion pointer.

Outside references: Python's ``pickle`` protocol (a pickle runs code on load: the classic
``__reduce__`` -> ``os.system`` example from the ``pickle`` module's documentation is what the
store must never open); NumPy's ``allow_pickle=False`` contract for ``.npz`` object arrays;
``hashlib`` SHA-256.
"""

from __future__ import annotations

import json
import os
import pickle
import shutil

import numpy as np
import pandas as pd
import pytest

from facies_ml.api import load_project
from facies_ml.config import load_config
from facies_ml.errors import ModelStoreError
from facies_ml.pipeline import FaciesPipeline
from facies_ml.store import (
    list_versions,
    load_version,
    read_registry,
    save_version,
    set_champion,
    sha256_file,
)


@pytest.fixture(scope="module")
def fitted(tiny_basin, fast_config):
    cfg = load_config(fast_config)
    project = load_project(tiny_basin, tiny_basin / "core_intervals.csv", cfg)
    return FaciesPipeline(cfg).fit(project.cored, project.labels), project


def _save(pipe, model_dir, tiny_basin, **kw):
    return save_version(pipe, model_dir, training_files={"QM-K1": str(tiny_basin / "QM-K1.las")},
                        config_raw=pipe.config.raw, config_hash="abc", **kw)


def _rehash(folder, name):
    """Rewrite the manifest's SHA-256 of ``name`` as an attacker who edits both files would."""
    mpath = folder / "manifest.json"
    manifest = json.loads(mpath.read_text())
    manifest["files"][name] = sha256_file(folder / name)
    mpath.write_text(json.dumps(manifest))


def _strings(node):
    if isinstance(node, dict):
        for v in node.values():
            yield from _strings(v)
    elif isinstance(node, list):
        for v in node:
            yield from _strings(v)
    elif isinstance(node, str):
        yield node


def test_round_trip_gives_identical_predictions(fitted, tiny_basin, tmp_path):
    pipe, project = fitted
    model_dir = tmp_path / "models"
    v = _save(pipe, model_dir, tiny_basin, metrics={"overall": {"lithofacies_f1_macro": 0.5}})
    loaded, manifest = load_version(model_dir)
    assert v == "v001" and manifest["version"] == v
    for well in [w for w in project.wells if w.name in ("QM-K1", "QM-O1")]:  # full + subset
        a, b = pipe.predict_well(well), loaded.predict_well(well)
        pd.testing.assert_frame_equal(a.table, b.table)
        assert [(s.kind, s.depth, s.sequence) for s in a.surfaces] == \
               [(s.kind, s.depth, s.sequence) for s in b.surfaces]
    # hashlib's SHA-256 of every written file is what the manifest records
    folder = model_dir / v
    written = sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*")
                     if p.is_file() and p.name != "manifest.json")
    assert sorted(manifest["files"]) == written
    assert all(manifest["files"][n] == sha256_file(folder / n) for n in written)
    assert {"state.json", "arrays.npz", "lightgbm_0.txt"} <= set(written)
    assert manifest["training_wells"]["QM-K1"] == {
        "file": "QM-K1.las", "sha256": sha256_file(tiny_basin / "QM-K1.las")}
    # names and hashes only: no absolute path of this machine in the manifest
    assert not [s for s in _strings(manifest) if str(tmp_path) in s or s.startswith("/")]
    assert list_versions(model_dir)[0]["lithofacies_f1_macro"] == 0.5


def test_model_files_hold_no_pickles(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    folder = tmp_path / "models" / _save(pipe, tmp_path / "models", tiny_basin)
    with np.load(folder / "arrays.npz", allow_pickle=False) as npz:   # raises on object arrays
        assert all(npz[k].dtype.kind in "biuf" for k in npz.files)
    json.loads((folder / "state.json").read_text())
    for path in folder.rglob("*"):
        if path.is_file() and path.suffix != ".npz":
            path.read_text(encoding="utf-8")          # text files only, no binary blobs
        if path.is_file():
            assert not path.read_bytes().startswith(b"\x80")   # pickle protocol 2+ opcode PROTO


class _RunsCode:
    """The pickle documentation's warning case: unpickling calls ``__reduce__``'s callable."""

    def __init__(self, marker):
        self.marker = marker

    def __reduce__(self):
        return (open, (str(self.marker), "w"))


def test_a_pickle_in_the_model_folder_is_never_opened(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    folder = model_dir / _save(pipe, model_dir, tiny_basin)
    marker = tmp_path / "code_ran"
    # 1. an old-style pickled bundle with a matching hash in an old-format manifest
    (folder / "bundle.joblib").write_bytes(pickle.dumps(_RunsCode(marker)))
    manifest = json.loads((folder / "manifest.json").read_text())
    old = dict(manifest, format="facies_ml.bundle/1",
               bundle_sha256=sha256_file(folder / "bundle.joblib"))
    (folder / "manifest.json").write_text(json.dumps(old))
    with pytest.raises(ModelStoreError, match="pickle"):
        load_version(model_dir)
    assert not marker.exists()
    # 2. a pickled object array inside arrays.npz, hashes rewritten to match
    (folder / "manifest.json").write_text(json.dumps(manifest))
    arrays = dict(np.load(folder / "arrays.npz", allow_pickle=False))
    arrays["a0"] = np.array([_RunsCode(marker)], dtype=object)
    np.savez(folder / "arrays.npz", **arrays)
    _rehash(folder, "arrays.npz")
    with pytest.raises(ModelStoreError, match="arrays could not be read"):
        load_version(model_dir)
    assert not marker.exists()


def test_state_naming_a_foreign_class_is_refused(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    folder = model_dir / _save(pipe, model_dir, tiny_basin)
    state = json.loads((folder / "state.json").read_text())
    state["pipeline"]["state"]["envelope_"] = {"$object": "Popen", "id": 999, "state": {}}
    (folder / "state.json").write_text(json.dumps(state))
    _rehash(folder, "state.json")
    with pytest.raises(ModelStoreError, match="not a facies_ml model part"):
        load_version(model_dir)
    state["pipeline"]["state"]["envelope_"] = {"$lightgbm": "../../outside.txt", "id": 998}
    (folder / "state.json").write_text(json.dumps(state))
    _rehash(folder, "state.json")
    with pytest.raises(ModelStoreError, match="outside its folder"):
        load_version(model_dir)


def test_flipped_byte_is_refused(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    booster = model_dir / _save(pipe, model_dir, tiny_basin) / "lightgbm_0.txt"
    data = bytearray(booster.read_bytes())
    data[len(data) // 2] ^= 0x01
    booster.write_bytes(bytes(data))
    with pytest.raises(ModelStoreError, match="SHA-256 does not match"):
        load_version(model_dir)


def test_versions_outside_the_model_folder_are_refused(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    elsewhere = tmp_path / "elsewhere"
    _save(pipe, elsewhere, tiny_basin)
    model_dir = tmp_path / "models"
    model_dir.mkdir()
    (model_dir / "registry.json").write_text(json.dumps(
        {"champion": "../elsewhere/v001", "versions": ["../elsewhere/v001"], "history": []}))
    with pytest.raises(ModelStoreError, match="not a version name"):
        load_version(model_dir)
    os.symlink(elsewhere / "v001", model_dir / "v001")       # a version folder that escapes
    (model_dir / "registry.json").write_text(json.dumps(
        {"champion": "v001", "versions": ["v001"], "history": []}))
    with pytest.raises(ModelStoreError, match="outside the model folder"):
        load_version(model_dir)
    os.unlink(model_dir / "v001")
    shutil.copytree(elsewhere / "v001", model_dir / "v001")
    mpath = model_dir / "v001" / "manifest.json"
    manifest = json.loads(mpath.read_text())
    manifest["files"]["../../elsewhere/v001/state.json"] = manifest["files"]["state.json"]
    mpath.write_text(json.dumps(manifest))
    with pytest.raises(ModelStoreError, match="outside the model folder"):
        load_version(model_dir)


def test_foreign_manifest_and_package_mismatch_are_refused(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    mpath = model_dir / _save(pipe, model_dir, tiny_basin) / "manifest.json"
    manifest = json.loads(mpath.read_text())
    mpath.write_text(json.dumps(dict(manifest, format="something-else")))
    with pytest.raises(ModelStoreError, match="not written by facies_ml"):
        load_version(model_dir)
    manifest["packages"]["lightgbm"] = "0.1.0"
    mpath.write_text(json.dumps(manifest))
    with pytest.raises(ModelStoreError, match="lightgbm 0.1.0"):
        load_version(model_dir)


def test_interrupted_save_keeps_previous_champion(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    first = _save(pipe, model_dir, tiny_basin)
    with pytest.raises(KeyboardInterrupt):
        _save(pipe, model_dir, tiny_basin, _fail_after_bundle=True)
    assert read_registry(model_dir)["champion"] == first
    assert read_registry(model_dir)["versions"] == [first]
    leftovers = [p.name for p in model_dir.iterdir() if p.name not in (first, "registry.json")]
    assert leftovers == []
    load_version(model_dir)


def test_rollback_and_non_promoted_version(fitted, tiny_basin, tmp_path):
    pipe, _ = fitted
    model_dir = tmp_path / "models"
    v1 = _save(pipe, model_dir, tiny_basin)
    v2 = _save(pipe, model_dir, tiny_basin, promote=False)
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
