"""Load project settings (YAML) and the files they point to (facies scheme, aliases, rules)."""

from __future__ import annotations

import copy
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from facies_ml.errors import InputError
from facies_ml.resources import config_dir
from facies_ml.settings import Settings, check_settings

CONFIG_DIR = config_dir()  # bundled configs/ (repository folder, or inside an installed package)
DEFAULT_CONFIG = CONFIG_DIR / "default.yaml"


def read_yaml(path: str | Path) -> dict[str, Any]:
    """Read a YAML mapping; a missing or malformed file is an :class:`InputError`."""
    path = Path(path)
    if not path.is_file():
        raise InputError("configuration file not found", file=str(path))
    try:
        data = yaml.safe_load(path.read_text())
    except yaml.YAMLError as exc:
        raise InputError(f"not valid YAML ({exc.__class__.__name__})", file=str(path)) from None
    if not isinstance(data, dict):
        raise InputError("expected a mapping at the top level", file=str(path))
    return data


def _merge(base: dict[str, Any], override: dict[str, Any]) -> dict[str, Any]:
    out = copy.deepcopy(base)
    for key, value in override.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = _merge(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out


@dataclass(frozen=True)
class FaciesClass:
    code: int
    label: str
    name: str
    adjacent: tuple[str, ...] = ()


@dataclass(frozen=True)
class FaciesScheme:
    """The lithofacies classes a project predicts, in a fixed order (class index = position),
    and the systems tracts, which come from the sequence rule table's ``states`` (the one file
    that lists them; empty when the scheme is read on its own)."""

    name: str
    classes: tuple[FaciesClass, ...]
    systems_tracts: tuple[str, ...] = ()

    @property
    def labels(self) -> list[str]:
        return [c.label for c in self.classes]

    @property
    def codes(self) -> list[int]:
        return [c.code for c in self.classes]

    def index_of(self, value: object) -> int | None:
        """Class index for a label or a code (as int or text); ``None`` if unknown."""
        text = str(value).strip()
        for i, c in enumerate(self.classes):
            if text == c.label or text == str(c.code):
                return i
        try:
            number = float(text)
        except ValueError:
            return None
        for i, c in enumerate(self.classes):
            if number == c.code:
                return i
        return None

    def adjacency_matrix(self) -> list[list[bool]]:
        """``adj[i][j]`` is True when class j is the same as or adjacent to class i."""
        labels = self.labels
        n = len(labels)
        adj = [[i == j for j in range(n)] for i in range(n)]
        for i, c in enumerate(self.classes):
            for other in c.adjacent:
                if other in labels:
                    j = labels.index(other)
                    adj[i][j] = adj[j][i] = True
        return adj


FACIES_SCHEME_KEYS = ("name", "classes")


def load_facies_scheme(path: str | Path, systems_tracts: tuple[str, ...] = ()) -> FaciesScheme:
    """The facies scheme file (``name``, ``classes``); ``systems_tracts`` from the rule table."""
    data = read_yaml(path)
    for key in data:
        if key == "systems_tracts":
            raise InputError("systems_tracts: the tract list now lives only in the sequence "
                             "rule table (its 'states'); remove it here", file=str(path))
        if key not in FACIES_SCHEME_KEYS:
            raise InputError(f"{key}: unknown setting in a facies scheme (known: "
                             f"{', '.join(FACIES_SCHEME_KEYS)})", file=str(path))
    classes = []
    seen: set[str] = set()
    for i, item in enumerate(data.get("classes") or []):
        try:
            fc = FaciesClass(
                code=int(item["code"]),
                label=str(item["label"]),
                name=str(item.get("name", item["label"])),
                adjacent=tuple(str(a) for a in item.get("adjacent", []) or []),
            )
        except (KeyError, TypeError, ValueError):
            raise InputError(f"facies class #{i + 1} needs an integer code and a label",
                             file=str(path)) from None
        if fc.label in seen:
            raise InputError(f"facies label {fc.label!r} is listed twice", file=str(path))
        seen.add(fc.label)
        classes.append(fc)
    if len(classes) < 2:
        raise InputError("a facies scheme needs at least two classes", file=str(path))
    return FaciesScheme(name=str(data.get("name", Path(path).stem)), classes=tuple(classes),
                        systems_tracts=tuple(systems_tracts))


@dataclass
class Config:
    """Project settings plus the loaded facies scheme. ``raw`` is the merged YAML mapping;
    ``settings`` the same values as checked, typed objects (:mod:`facies_ml.settings`): a
    misspelt, mistyped or out-of-range key stops here with its key path, before any well is
    read."""

    raw: dict[str, Any]
    base_dir: Path
    settings: Settings = field(init=False)
    facies: FaciesScheme = field(init=False)

    def __post_init__(self) -> None:
        self.settings = check_settings(self.raw)
        self.facies = load_facies_scheme(self.path("facies_scheme"), self.tract_names())

    def tract_names(self) -> tuple[str, ...]:
        """Systems-tract names in rule-table order (``states`` of ``files.sequence_rules``)."""
        path = self.path("sequence_rules")
        states = read_yaml(path).get("states")
        if not isinstance(states, list) or len(states) < 2 or not all(
                isinstance(s, str) and s for s in states):
            raise InputError("states: give the systems-tract names as a list of at least two",
                             file=str(path))
        return tuple(states)

    def path(self, key: str) -> Path:
        """Absolute path of a file named under ``files:``."""
        value = self.raw.get("files", {}).get(key)
        if value is None:
            raise InputError(f"configuration has no files.{key}")
        p = Path(value)
        return p if p.is_absolute() else (self.base_dir / p)

    def section(self, name: str) -> dict[str, Any]:
        return dict(self.raw.get(name) or {})

    @property
    def working_unit(self) -> str:
        return str(self.raw["project"]["working_depth_unit"])

    @property
    def step(self) -> float:
        return float(self.raw["project"]["step"])

    @property
    def seed(self) -> int:
        return int(self.raw["project"].get("seed", 0))

    def digest(self) -> str:
        """SHA-256 of the settings and of every file they point to (stable across runs)."""
        h = hashlib.sha256(json.dumps(self.raw, sort_keys=True, default=str).encode())
        for key in sorted(self.raw.get("files", {})):
            p = self.path(key)
            if p.is_file():
                h.update(p.read_bytes())
        return h.hexdigest()


def load_config(path: str | Path | None = None, overrides: dict[str, Any] | None = None) -> Config:
    """Default settings, overlaid by the user file ``path`` (if any), then by ``overrides``.

    Relative ``files:`` entries in the user file resolve against the user file's folder;
    entries it leaves out resolve against the bundled ``configs/``.
    """
    raw = read_yaml(DEFAULT_CONFIG)
    base_dir = CONFIG_DIR
    if path is not None:
        user = read_yaml(path)
        user_dir = Path(path).resolve().parent
        for key, value in (user.get("files") or {}).items():
            p = Path(value)
            user["files"][key] = str(p if p.is_absolute() else user_dir / p)
        raw = _merge(raw, user)
    if overrides:
        raw = _merge(raw, overrides)
    try:
        return Config(raw=raw, base_dir=base_dir)
    except InputError as exc:
        if path is not None and exc.file is None:
            raise InputError(str(exc), file=str(path)) from None
        raise
