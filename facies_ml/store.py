"""Versioned model bundles with manifests, integrity checks and a champion pointer.

Layout of a model directory::

    MODEL_DIR/registry.json            {"champion": "v003", "versions": [...], "history": [...]}
    MODEL_DIR/v003/bundle.joblib       the fitted FaciesPipeline (joblib)
    MODEL_DIR/v003/manifest.json       version, time, training wells + SHA-256 of their files,
                                       config + hash, features, package versions, metrics,
                                       SHA-256 of bundle.joblib

A joblib file can execute code when loaded, so :func:`load_version` only opens a bundle whose
manifest was written by this tool and whose SHA-256 matches; anything else is refused.
Every write goes to a temporary name first and is renamed into place, so an interrupted save
never leaves a half-written version or registry.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from typing import Any

import joblib

from facies_ml import __version__
from facies_ml.errors import ModelStoreError

MANIFEST_FORMAT = "facies_ml.bundle/1"
_UMASK = os.umask(0)
os.umask(_UMASK)
TRACKED_PACKAGES = (
    "facies_ml", "numpy", "pandas", "scikit-learn", "lightgbm", "hmmlearn", "joblib",
)
STRICT_PACKAGES = ("scikit-learn", "lightgbm", "numpy")  # must match major.minor to load


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

    ``training_files`` maps well name -> path of its input file (hashed into the manifest).
    ``_fail_after_bundle`` simulates an interruption (tests only).
    """
    model_dir = Path(model_dir)
    model_dir.mkdir(parents=True, exist_ok=True)
    registry = read_registry(model_dir)
    version = _next_version(registry)
    tmp_dir = Path(tempfile.mkdtemp(prefix=f".{version}.", dir=model_dir))
    try:
        bundle_path = tmp_dir / "bundle.joblib"
        joblib.dump(pipeline, bundle_path, compress=3)
        if _fail_after_bundle:
            raise KeyboardInterrupt("simulated interruption during save")
        manifest = {
            "format": MANIFEST_FORMAT,
            "version": version,
            "created_utc": datetime.now(UTC).isoformat(timespec="seconds"),
            "training_wells": {
                name: {"file": str(p), "sha256": sha256_file(p) if Path(p).is_file() else None}
                for name, p in sorted(training_files.items())
            },
            "config": config_raw,
            "config_sha256": config_hash,
            "features": list(getattr(pipeline, "feature_names_", [])),
            "packages": package_versions(),
            "metrics": metrics or {},
            "notes": notes,
            "bundle_sha256": sha256_file(bundle_path),
        }
        _write_json_atomic(tmp_dir / "manifest.json", manifest)
        os.chmod(bundle_path, 0o666 & ~_UMASK)
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


def read_manifest(model_dir: str | Path, version: str) -> dict[str, Any]:
    path = Path(model_dir) / version / "manifest.json"
    if not path.is_file():
        raise ModelStoreError(f"model version {version!r} has no manifest", file=str(path))
    try:
        manifest = json.loads(path.read_text())
    except json.JSONDecodeError:
        raise ModelStoreError("manifest is not valid JSON", file=str(path)) from None
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
    bundle = model_dir / version / "bundle.joblib"
    if not bundle.is_file():
        raise ModelStoreError("bundle file is missing", file=str(bundle))
    if sha256_file(bundle) != manifest.get("bundle_sha256"):
        raise ModelStoreError("bundle SHA-256 does not match its manifest (corrupt or altered "
                              "file); refusing to load", file=str(bundle))
    here = package_versions()
    for name in STRICT_PACKAGES:
        saved = manifest.get("packages", {}).get(name, "absent")
        if _major_minor(saved) != _major_minor(here[name]):
            raise ModelStoreError(f"bundle was written with {name} {saved}, this machine has "
                                  f"{here[name]}; retrain or install the matching version",
                                  file=str(bundle))
    try:
        pipeline = joblib.load(bundle)
    except Exception as exc:  # noqa: BLE001 - any unpickling failure is a corrupt bundle
        raise ModelStoreError(f"bundle could not be read ({exc.__class__.__name__})",
                              file=str(bundle)) from None
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
