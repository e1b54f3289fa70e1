"""A fitted :class:`~facies_ml.pipeline.FaciesPipeline` as plain data files, and back.

A model version folder holds only data, never code:

``state.json``
    the object tree of the fitted pipeline: numbers, text, lists and mappings, with markers
    for the few non-JSON things (``{"$array": key}`` = an array in ``arrays.npz``;
    ``{"$object": "TractSequenceModel", "state": {...}}`` = one of the classes in
    :data:`ALLOWED_CLASSES`, rebuilt attribute by attribute without calling any of its code).
``arrays.npz``
    every numeric array (training features, fitted statistics), read with
    ``numpy.load(..., allow_pickle=False)``, so object arrays are refused.
``lightgbm_<n>.txt``
    each LightGBM booster in LightGBM's own text model format.
``config/<key>.<ext>``
    copies of the settings files the model was trained with (facies scheme, rule table, curve
    aliases, plot style), read with ``yaml.safe_load`` so the model is self-contained.

Reading never unpickles and never imports a name taken from the files: a class name in
``state.json`` is looked up in :data:`ALLOWED_CLASSES` (our own fitted classes) and anything
else is refused. The worst a crafted model folder can do is give wrong numbers or fail to load
with :class:`~facies_ml.errors.ModelStoreError`.
"""

from __future__ import annotations

import functools
import json
import math
import re
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd

from facies_ml.applicability import FeatureEnvelope
from facies_ml.config import Config
from facies_ml.correlation import SequenceCorrelator
from facies_ml.errors import InputError, ModelStoreError
from facies_ml.lithofacies import LithofaciesClassifier, SubsetModels
from facies_ml.pipeline import FaciesPipeline
from facies_ml.sequence.durations import ExplicitDuration, MinimumGeometricDuration
from facies_ml.sequence.model import SequenceParameters, TractSequenceModel
from facies_ml.sequence.rules import TractRules
from facies_ml.sequence.surfaces import SurfaceChecks
from facies_ml.wells import GRNormalizer

STATE_FILE = "state.json"
ARRAYS_FILE = "arrays.npz"
CONFIG_FOLDER = "config"
BUNDLE_FORMAT = "facies_ml.state/1"

#: The only classes a model file may name; each is rebuilt from its stored attributes.
ALLOWED_CLASSES: dict[str, type] = {cls.__name__: cls for cls in (
    FaciesPipeline, LithofaciesClassifier, SubsetModels, FeatureEnvelope, GRNormalizer,
    TractRules, TractSequenceModel, SequenceParameters, ExplicitDuration,
    MinimumGeometricDuration, SurfaceChecks, SequenceCorrelator,
)}
_SAFE_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


class _Writer:
    """Turns an object tree into JSON-ready nodes, collecting arrays and booster texts."""

    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}
        self.texts: dict[str, str] = {}
        self.memo: dict[int, int] = {}       # id(object) -> reference number (shared objects)
        self.keep: list[Any] = []            # keeps memoized objects alive while writing

    def _array(self, a: np.ndarray) -> dict[str, Any]:
        if a.dtype.kind in "biuf":
            key = f"a{len(self.arrays)}"
            self.arrays[key] = a
            return {"$array": key}
        if a.dtype.kind in "OUS" and all(isinstance(v, str) for v in a.ravel().tolist()):
            return {"$text_array": a.ravel().tolist(), "shape": list(a.shape)}
        raise ModelStoreError(f"cannot store an array of dtype {a.dtype} in a model file")

    def node(self, obj: Any) -> Any:
        if obj is None or isinstance(obj, (bool, str)):
            return obj
        if isinstance(obj, (int, np.integer)) and not isinstance(obj, np.bool_):
            return int(obj)
        if isinstance(obj, np.bool_):
            return bool(obj)
        if isinstance(obj, (float, np.floating)):
            v = float(obj)
            return v if math.isfinite(v) else {"$float": repr(v)}
        if isinstance(obj, np.ndarray):
            return self._array(obj)
        if isinstance(obj, list):
            return [self.node(v) for v in obj]
        if isinstance(obj, tuple):
            return {"$tuple": [self.node(v) for v in obj]}
        if isinstance(obj, (set, frozenset)):
            return {"$set": [self.node(v) for v in sorted(obj, key=repr)]}
        if isinstance(obj, dict):
            if all(isinstance(k, str) and not k.startswith("$") for k in obj):
                return {k: self.node(v) for k, v in obj.items()}
            return {"$items": [[self.node(k), self.node(v)] for k, v in obj.items()]}
        if isinstance(obj, pd.Index):
            return {"$index": self._column(obj.to_numpy()), "name": self.node(obj.name)}
        if isinstance(obj, pd.Series):
            return {"$series": self._column(obj.to_numpy()), "index": self.node(obj.index),
                    "name": self.node(obj.name)}
        if isinstance(obj, pd.DataFrame):
            return {"$frame": [[self.node(c), self._column(obj[c].to_numpy())]
                               for c in obj.columns],
                    "index": self.node(obj.index)}
        if isinstance(obj, functools.partial):
            name = getattr(obj.func, "__name__", "")
            if ALLOWED_CLASSES.get(name) is not obj.func or obj.args:
                raise ModelStoreError(f"cannot store a factory of {name!r} in a model file")
            return {"$factory": name, "kwargs": self.node(dict(obj.keywords))}
        if id(obj) in self.memo:
            return {"$ref": self.memo[id(obj)]}
        if isinstance(obj, lgb.Booster):
            ref = self._remember(obj)
            name = f"lightgbm_{len(self.texts)}.txt"
            self.texts[name] = obj.model_to_string()
            return {"$lightgbm": name, "id": ref}
        if isinstance(obj, Config):
            ref = self._remember(obj)
            return {"$config": self.node(obj.raw), "id": ref}
        cls_name = type(obj).__name__
        if ALLOWED_CLASSES.get(cls_name) is type(obj):
            ref = self._remember(obj)
            return {"$object": cls_name, "id": ref, "state": self.node(dict(vars(obj)))}
        raise ModelStoreError(f"cannot store a {type(obj).__module__}.{cls_name} in a model "
                              "file (only data and facies_ml's fitted classes)")

    def _column(self, values: np.ndarray) -> Any:
        if values.dtype.kind == "O":
            return {"$values": [self.node(v) for v in values.tolist()]}
        return self.node(values)

    def _remember(self, obj: Any) -> int:
        self.memo[id(obj)] = len(self.memo)
        self.keep.append(obj)
        return self.memo[id(obj)]


class _Reader:
    """Rebuilds the object tree from JSON nodes, arrays and booster texts."""

    def __init__(self, arrays: Any, folder: Path, config_dir: Path) -> None:
        self.arrays = arrays
        self.folder = folder
        self.config_dir = config_dir
        self.refs: dict[int, Any] = {}

    def _file(self, name: Any) -> Path:
        if not isinstance(name, str) or not _SAFE_NAME.match(name) or name.startswith("."):
            raise ModelStoreError(f"model file names a file outside its folder: {name!r}")
        return self.folder / name

    def node(self, n: Any) -> Any:
        if n is None or isinstance(n, (bool, int, float, str)):
            return n
        if isinstance(n, list):
            return [self.node(v) for v in n]
        if not isinstance(n, dict):
            raise ModelStoreError(f"unexpected value in the model state: {type(n).__name__}")
        markers = [k for k in n if k.startswith("$")]
        if not markers:
            return {k: self.node(v) for k, v in n.items()}
        kind = markers[0]
        handler: Callable[[dict[str, Any]], Any] | None = getattr(self, "_" + kind[1:], None)
        if handler is None:
            raise ModelStoreError(f"unknown entry {kind!r} in the model state")
        return handler(n)

    # one method per marker ------------------------------------------------------------
    def _array(self, n: dict[str, Any]) -> np.ndarray:
        key = n["$array"]
        if key not in self.arrays:
            raise ModelStoreError(f"array {key!r} is missing from {ARRAYS_FILE}")
        return self.arrays[key]

    def _text_array(self, n: dict[str, Any]) -> np.ndarray:
        return np.asarray([str(v) for v in n["$text_array"]], dtype=object).reshape(n["shape"])

    def _float(self, n: dict[str, Any]) -> float:
        if n["$float"] not in ("nan", "inf", "-inf"):
            raise ModelStoreError(f"bad number {n['$float']!r} in the model state")
        return float(n["$float"])

    def _tuple(self, n: dict[str, Any]) -> tuple[Any, ...]:
        return tuple(self.node(v) for v in n["$tuple"])

    def _set(self, n: dict[str, Any]) -> set[Any]:
        return {self.node(v) for v in n["$set"]}

    def _items(self, n: dict[str, Any]) -> dict[Any, Any]:
        return {self.node(k): self.node(v) for k, v in n["$items"]}

    def _values(self, n: dict[str, Any]) -> np.ndarray:
        out = np.empty(len(n["$values"]), dtype=object)
        out[:] = [self.node(v) for v in n["$values"]]
        return out

    def _index(self, n: dict[str, Any]) -> pd.Index:
        return pd.Index(self.node(n["$index"]), name=self.node(n["name"]))

    def _series(self, n: dict[str, Any]) -> pd.Series:
        return pd.Series(self.node(n["$series"]), index=self.node(n["index"]),
                         name=self.node(n["name"]))

    def _frame(self, n: dict[str, Any]) -> pd.DataFrame:
        columns = [(self.node(c), self.node(v)) for c, v in n["$frame"]]
        frame = pd.DataFrame({i: v for i, (_, v) in enumerate(columns)}, index=self.node(n["index"]))
        frame.columns = pd.Index([c for c, _ in columns])
        return frame

    def _factory(self, n: dict[str, Any]) -> functools.partial[Any]:
        return functools.partial(self._class(n["$factory"]), **self.node(n["kwargs"]))

    def _ref(self, n: dict[str, Any]) -> Any:
        if n["$ref"] not in self.refs:
            raise ModelStoreError(f"model state refers to an unknown object #{n['$ref']}")
        return self.refs[n["$ref"]]

    def _lightgbm(self, n: dict[str, Any]) -> lgb.Booster:
        path = self._file(n["$lightgbm"])
        if not path.is_file():
            raise ModelStoreError("LightGBM model file is missing", file=str(path))
        try:
            booster = lgb.Booster(model_str=path.read_text())
        except (lgb.basic.LightGBMError, ValueError, UnicodeDecodeError) as exc:
            raise ModelStoreError(f"LightGBM model could not be read ({exc.__class__.__name__})",
                                  file=str(path)) from None
        self.refs[int(n["id"])] = booster
        return booster

    def _config(self, n: dict[str, Any]) -> Config:
        raw = self.node(n["$config"])
        for key, value in (raw.get("files") or {}).items():
            self._file(Path(str(value)).name)      # names only, inside config/
            if Path(str(value)).parent != Path(CONFIG_FOLDER):
                raise ModelStoreError(f"model settings point files.{key} outside the model "
                                      f"folder: {value!r}")
        try:
            cfg = Config(raw=raw, base_dir=self.folder)
        except InputError as exc:
            raise ModelStoreError(f"model settings could not be read: {exc}") from None
        self.refs[int(n["id"])] = cfg
        return cfg

    def _object(self, n: dict[str, Any]) -> Any:
        cls = self._class(n["$object"])
        obj = cls.__new__(cls)
        self.refs[int(n["id"])] = obj                # before the state: parents may be shared
        state = self.node(n["state"])
        if not isinstance(state, dict):
            raise ModelStoreError(f"bad state for {n['$object']} in the model file")
        obj.__dict__.update(state)
        return obj

    @staticmethod
    def _class(name: Any) -> type:
        cls = ALLOWED_CLASSES.get(name) if isinstance(name, str) else None
        if cls is None:
            raise ModelStoreError(f"model file names a class that is not a facies_ml model "
                                  f"part: {name!r}; refusing to load")
        return cls


def _portable_config(cfg: Config, folder: Path) -> dict[str, Any]:
    """Copy the files the settings point to into ``folder/config/``; return the settings with
    ``files:`` entries rewritten to those copies (relative to the version folder)."""
    raw = json.loads(json.dumps(cfg.raw, default=str))
    target = folder / CONFIG_FOLDER
    target.mkdir(exist_ok=True)
    for key in sorted(raw.get("files") or {}):
        src = cfg.path(key)
        if not src.is_file():
            raise ModelStoreError(f"settings file files.{key} not found; cannot save the model",
                                  file=str(src))
        name = f"{key}{src.suffix or '.yaml'}"
        shutil.copyfile(src, target / name)
        raw["files"][key] = f"{CONFIG_FOLDER}/{name}"
    return raw


def write_pipeline(pipeline: FaciesPipeline, folder: str | Path) -> dict[str, Any]:
    """Write ``pipeline`` as data files into the existing, empty ``folder``.

    Returns the portable settings (``files:`` pointing into the folder) for the manifest.
    """
    folder = Path(folder)
    raw = _portable_config(pipeline.config, folder)
    writer = _Writer()
    writer.memo[id(pipeline.config)] = 0
    writer.keep.append(pipeline.config)
    tree = {"format": BUNDLE_FORMAT, "config": {"$config": writer.node(raw), "id": 0},
            "pipeline": writer.node(pipeline)}
    with open(folder / ARRAYS_FILE, "wb") as fh:
        np.savez_compressed(fh, **writer.arrays)
    for name, text in writer.texts.items():
        (folder / name).write_text(text)
    (folder / STATE_FILE).write_text(json.dumps(tree, indent=1, allow_nan=False))
    return raw


def read_pipeline(folder: str | Path) -> FaciesPipeline:
    """Rebuild the fitted pipeline saved by :func:`write_pipeline` (no code is run)."""
    folder = Path(folder)
    state_path = folder / STATE_FILE
    try:
        tree = json.loads(state_path.read_text())
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ModelStoreError(f"model state could not be read ({exc.__class__.__name__})",
                              file=str(state_path)) from None
    if not isinstance(tree, dict) or tree.get("format") != BUNDLE_FORMAT:
        raise ModelStoreError("model state was not written by this facies_ml format",
                              file=str(state_path))
    try:
        with np.load(folder / ARRAYS_FILE, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (OSError, ValueError) as exc:
        raise ModelStoreError(f"model arrays could not be read ({exc.__class__.__name__}: "
                              f"{exc})", file=str(folder / ARRAYS_FILE)) from None
    reader = _Reader(arrays, folder, folder / CONFIG_FOLDER)
    try:
        reader.node(tree["config"])
        pipeline = reader.node(tree["pipeline"])
    except ModelStoreError:
        raise
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ModelStoreError(f"model state is damaged ({exc.__class__.__name__}: {exc})",
                              file=str(state_path)) from None
    if not isinstance(pipeline, FaciesPipeline):
        raise ModelStoreError("model state does not hold a fitted pipeline", file=str(state_path))
    return pipeline
