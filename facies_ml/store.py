"""Versioned model folders with manifests, integrity checks and a champion pointer.

Layout of a model directory::

    MODEL_DIR/registry.json            {"champion": "v003", "versions": [...], "history": [...]}
    MODEL_DIR/v003/state.json          the fitted pipeline as data (see facies_ml.bundle)
    MODEL_DIR/v003/arrays.npz          its numeric arrays (read with allow_pickle=False)
    MODEL_DIR/v003/lightgbm_<n>.txt    its LightGBM boosters in LightGBM's text format
    MODEL_DIR/v003/config/*.yaml       the settings files it was trained with
    MODEL_DIR/v003/manifest.json       version, time, training wells (file name + SHA-256),
                                       settings + hash, features, package versions, held-out
                                       metrics, SHA-256 of every file above

Nothing in a model folder is code and loading never unpickles (:mod:`facies_ml.bundle`). The
SHA-256 list proves a file was not damaged or changed after the manifest was written, not who
wrote it. Version names must look like ``v001`` and resolve inside the model directory, so a
registry cannot serve a model from elsewhere. Every write goes to a temporary name first and is
renamed into place, so an interrupted save never leaves a half-written version or registry.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import tempfile
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from typing import Any

from facies_ml import __version__
from facies_ml.bundle import read_pipeline, write_pipeline
from facies_ml.errors import ModelStoreError

MANIFEST_FORMAT = "facies_ml.bundle/2"
OLD_FORMATS = ("facies_ml.bundle/1",)     # pickled bundles: refused, never opened
VERSION_NAME = re.compile(r"^v[0-9]{3,}$")
_UMASK = os.umask(0)
os.umask(_UMASK)
TRACKED_PACKAGES = (
    "facies_ml", "numpy", "pandas", "scikit-learn", "lightgbm", "hmmlearn",
)
STRICT_PACKAGES = ("lightgbm",)  # must match major.minor to load (same trees, same text format)


def sha256_file(path: str | Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def package_versions() -> dict[str, str]:
    out = {}
    for name in TRACKED_PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = __version__ if name == "facies_ml" else "absent"
    return out


def _write_json_atomic(path: Path, data: Any) -> None:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "w") as fh:
            json.dump(data, fh, indent=2, sort_keys=True, default=str)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def read_registry(model_dir: str | Path) -> dict[str, Any]:
    path = Path(model_dir) / "registry.json"
    if not path.is_file():
        return {"champion": None, "versions": [], "history": []}
    try:
        data = json.loads(path.read_text())
    except json.JSONDecodeError:
        raise ModelStoreError("registry is not valid JSON", file=str(path)) from None
    if not isinstance(data, dict) or "versions" not in data:
        raise ModelStoreError("not a facies_ml model registry", file=str(path))
    data.setdefault("history", [])
    return data


def _next_version(registry: dict[str, Any]) -> str:
    numbers = [int(v[1:]) for v in registry["versions"] if v[1:].isdigit()]
    return f"v{(max(numbers) + 1) if numbers else 1:03d}"


def save_version(
    pipeline: Any,
    model_dir: str | Path,
    *,
    training_files: dict[str, str],
    config_raw: dict[str, Any],
    config_hash: str,
    metrics: dict[str, Any] | None = None,
    notes: str = "",
    promote: bool = True,
    _fail_after_bundle: bool = False,
) -> str:
    """Write ``pipeline`` as a new version; make it champion if ``promote``. Returns the id.

    ``training_files`` maps well name -> path of its input file (its name and SHA-256 go into the
    manifest). ``config_raw`` is accepted for callers' symmetry; the manifest records the
    pipeline's own settings with ``files:`` pointing at the copies inside the version folder.
    ``_fail_after_bundle`` simulates an interruption (tests only).
    """
    model_dir = Path(model_dir)
    model_dir.mkdir(parents=True, exist_ok=True)
    registry = read_registry(model_dir)
    version = _next_version(registry)
    tmp_dir = Path(tempfile.mkdtemp(prefix=f".{version}.", dir=model_dir))
    try:
        portable_config = write_pipeline(pipeline, tmp_dir)
        if _fail_after_bundle:
            raise KeyboardInterrupt("simulated interruption during save")
        manifest = {
            "format": MANIFEST_FORMAT,
            "version": version,
            "created_utc": datetime.now(UTC).isoformat(timespec="seconds"),
            "training_wells": {
                name: {"file": Path(p).name,
                       "sha256": sha256_file(p) if Path(p).is_file() else None}
                for name, p in sorted(training_files.items())
            },
            "config": portable_config,
            "config_sha256": config_hash,
            "features": list(getattr(pipeline, "feature_names_", [])),
            "packages": package_versions(),
            "metrics": metrics or {},
            "notes": notes,
            "files": _hash_folder(tmp_dir),
        }
        _write_json_atomic(tmp_dir / "manifest.json", manifest)
        for path in tmp_dir.rglob("*"):
            os.chmod(path, (0o777 if path.is_dir() else 0o666) & ~_UMASK)
        os.chmod(tmp_dir, 0o777 & ~_UMASK)  # mkdtemp creates 0700
        os.replace(tmp_dir, model_dir / version)
    except BaseException:
        shutil.rmtree(tmp_dir, ignore_errors=True)
        raise
    registry["versions"].append(version)
    if promote or registry.get("champion") is None:
        registry["history"].append({"champion": version, "from": registry.get("champion"),
                                    "utc": manifest["created_utc"]})
        registry["champion"] = version
    _write_json_atomic(model_dir / "registry.json", registry)
    return version


def _hash_folder(folder: Path) -> dict[str, str]:
    """SHA-256 of every file under ``folder`` (POSIX relative names), manifest excluded."""
    return {p.relative_to(folder).as_posix(): sha256_file(p) for p in sorted(folder.rglob("*"))
            if p.is_file() and p.name != "manifest.json"}


def version_folder(model_dir: str | Path, version: Any) -> Path:
    """The folder of ``version``; refuses names that are not ``v<digits>`` or that resolve
    outside ``model_dir`` (a symlink or a registry entry such as ``../elsewhere/v001``)."""
    model_dir = Path(model_dir)
    if not isinstance(version, str) or not VERSION_NAME.match(version):
        raise ModelStoreError(f"model version {version!r} is not a version name like v001; "
                              "refusing to look outside the model folder",
                              file=str(model_dir / "registry.json"))
    folder = model_dir / version
    if folder.exists() and folder.resolve().parent != model_dir.resolve():
        raise ModelStoreError(f"model version {version} resolves outside the model folder; "
                              "refusing to load", file=str(folder))
    return folder


def read_manifest(model_dir: str | Path, version: str) -> dict[str, Any]:
    path = version_folder(model_dir, version) / "manifest.json"
    if not path.is_file():
        raise ModelStoreError(f"model version {version!r} has no manifest", file=str(path))
    try:
        manifest = json.loads(path.read_text())
    except json.JSONDecodeError:
        raise ModelStoreError("manifest is not valid JSON", file=str(path)) from None
    if isinstance(manifest, dict) and manifest.get("format") in OLD_FORMATS:
        raise ModelStoreError(f"model version {version} was saved by an older facies_ml as a "
                              "pickle, which this version never opens; retrain it",
                              file=str(path))
    if not isinstance(manifest, dict) or manifest.get("format") != MANIFEST_FORMAT:
        raise ModelStoreError("manifest was not written by facies_ml; refusing to load",
                              file=str(path))
    return manifest


def _major_minor(v: str) -> tuple[str, ...]:
    return tuple(v.split(".")[:2])


def load_version(model_dir: str | Path, version: str | None = None) -> tuple[Any, dict[str, Any]]:
    """Verify and load a version (default: the champion). Returns ``(pipeline, manifest)``."""
    model_dir = Path(model_dir)
    if not model_dir.is_dir():
        raise ModelStoreError("model directory not found", file=str(model_dir))
    registry = read_registry(model_dir)
    version = version or registry.get("champion")
    if not version:
        raise ModelStoreError("model directory holds no trained model; run 'facies-ml train'",
                              file=str(model_dir))
    manifest = read_manifest(model_dir, version)
    folder = version_folder(model_dir, version)
    files = manifest.get("files")
    if not isinstance(files, dict) or "state.json" not in files:
        raise ModelStoreError("manifest lists no model files; refusing to load",
                              file=str(folder / "manifest.json"))
    for name, digest in sorted(files.items()):
        path = folder / name
        inside = path.resolve().is_relative_to(folder.resolve())
        if not inside or not path.is_file():
            raise ModelStoreError("model file is missing" if inside else
                                  "manifest names a file outside the model folder",
                                  file=str(path))
        if sha256_file(path) != digest:
            raise ModelStoreError("SHA-256 does not match the manifest (damaged or altered "
                                  "file); refusing to load", file=str(path))
    here = package_versions()
    for name in STRICT_PACKAGES:
        saved = manifest.get("packages", {}).get(name, "absent")
        if _major_minor(saved) != _major_minor(here[name]):
            raise ModelStoreError(f"model was written with {name} {saved}, this machine has "
                                  f"{here[name]}; retrain or install the matching version",
                                  file=str(folder))
    pipeline = read_pipeline(folder)
    return pipeline, manifest


def set_champion(model_dir: str | Path, version: str) -> None:
    """Make ``version`` the serving model (rollback or promotion); it must verify first."""
    load_version(model_dir, version)
    registry = read_registry(model_dir)
    registry["history"].append({"champion": version, "from": registry.get("champion"),
                                "utc": datetime.now(UTC).isoformat(timespec="seconds")})
    registry["champion"] = version
    _write_json_atomic(Path(model_dir) / "registry.json", registry)


def list_versions(model_dir: str | Path) -> list[dict[str, Any]]:
    """One row per version: id, creation time, training wells, headline metrics, serving flag."""
    registry = read_registry(model_dir)
    rows = []
    for v in registry["versions"]:
        try:
            m = read_manifest(model_dir, v)
        except ModelStoreError as exc:
            rows.append({"version": v, "error": str(exc), "champion": v == registry["champion"]})
            continue
        overall = (m.get("metrics") or {}).get("overall", {})
        rows.append({
            "version": v,
            "created_utc": m.get("created_utc"),
            "training_wells": sorted(m.get("training_wells", {})),
            "lithofacies_f1_macro": overall.get("lithofacies_f1_macro"),
            "systems_tract_accuracy": overall.get("systems_tract_accuracy"),
            "champion": v == registry["champion"],
            "notes": m.get("notes", ""),
        })
    return rows
