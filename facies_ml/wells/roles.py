"""Curve roles: map file mnemonics onto canonical roles and convert their units.

The alias table lives in ``configs/curve_aliases.yaml`` (see the comments there).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from facies_ml.errors import InputError
from facies_ml.wells.model import ROLES


def norm_mnemonic(name: object) -> str:
    """Upper-case, trimmed mnemonic without a duplicate suffix such as ``GR:2``."""
    text = str(name).strip().upper()
    return re.sub(r":\d+$", "", text)


def norm_unit(unit: object) -> str:
    """Upper-case unit text with spaces removed (``"ohm.m"`` -> ``"OHM.M"``)."""
    if unit is None:
        return ""
    return re.sub(r"\s+", "", str(unit)).upper()


def _parse_factor(value: Any, where: str) -> float:
    if isinstance(value, bool):
        raise InputError(f"unit conversion {value!r} is not a number", file=where)
    if isinstance(value, int | float):
        return float(value)
    text = str(value).strip()
    try:
        if text.startswith("/"):
            return 1.0 / float(text[1:])
        if text.startswith("*"):
            return float(text[1:])
        return float(text)
    except (ValueError, ZeroDivisionError):
        raise InputError(f"unit conversion {value!r} is not a number, '/N' or '*N'",
                         file=where) from None


@dataclass(frozen=True)
class RoleSpec:
    """One canonical role: preferred mnemonics, accepted units (-> factor) and value ranges."""

    role: str
    mnemonics: tuple[str, ...]
    units: dict[str, float]
    valid_range: tuple[float, float]
    median_range: tuple[float, float]


@dataclass(frozen=True)
class AliasTable:
    """The loaded alias table: depth mnemonics/units and one :class:`RoleSpec` per role."""

    depth_mnemonics: tuple[str, ...]
    depth_units: dict[str, str]          # normalized unit text -> "ft" | "m"
    roles: dict[str, RoleSpec]

    def role_of(self, mnemonic: str) -> str | None:
        """Canonical role for a file mnemonic, or ``None``."""
        m = norm_mnemonic(mnemonic)
        for spec in self.roles.values():
            if m in spec.mnemonics:
                return spec.role
        return None

    def rank(self, role: str, mnemonic: str) -> int:
        """Preference rank of ``mnemonic`` for ``role`` (0 = most preferred)."""
        return self.roles[role].mnemonics.index(norm_mnemonic(mnemonic))

    def depth_unit(self, unit: object) -> str | None:
        """``"ft"``/``"m"`` for a depth unit text, ``None`` if not recognised."""
        return self.depth_units.get(norm_unit(unit))

    def is_depth(self, mnemonic: object) -> bool:
        return norm_mnemonic(mnemonic) in self.depth_mnemonics

    def factor(self, role: str, unit: object) -> float | None:
        """Multiplier from ``unit`` to the role's unit, ``None`` if the unit is not accepted."""
        return self.roles[role].units.get(norm_unit(unit))


def _pair(value: Any, role: str, key: str, where: str) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in value)
    except (TypeError, ValueError):
        raise InputError(f"roles.{role}.{key} must be [low, high]", file=where) from None
    if not low < high:
        raise InputError(f"roles.{role}.{key} needs low < high", file=where)
    return low, high


def load_alias_table(path: str | Path) -> AliasTable:
    """Read and check ``curve_aliases.yaml``; every role must be one of :data:`ROLES`."""
    from facies_ml.config import read_yaml

    where = str(path)
    data = read_yaml(path)
    depth = data.get("depth") or {}
    depth_mn = tuple(norm_mnemonic(m) for m in depth.get("mnemonics") or [])
    if not depth_mn:
        raise InputError("depth.mnemonics is empty", file=where)
    depth_units: dict[str, str] = {}
    for unit, texts in (depth.get("units") or {}).items():
        if unit not in ("ft", "m"):
            raise InputError(f"depth.units key {unit!r} must be 'ft' or 'm'", file=where)
        for t in texts:
            depth_units[norm_unit(t)] = unit
    roles: dict[str, RoleSpec] = {}
    seen: dict[str, str] = {}
    for role, spec in (data.get("roles") or {}).items():
        if role not in ROLES:
            raise InputError(f"unknown role {role!r} (known: {', '.join(ROLES)})", file=where)
        mnemonics = tuple(norm_mnemonic(m) for m in spec.get("mnemonics") or [])
        for m in mnemonics:
            if m in seen and seen[m] != role:
                raise InputError(f"mnemonic {m!r} is listed for {seen[m]} and {role}", file=where)
            seen[m] = role
        units = {norm_unit(u): _parse_factor(f, where) for u, f in (spec.get("units") or {}).items()}
        roles[role] = RoleSpec(
            role=role,
            mnemonics=mnemonics,
            units=units,
            valid_range=_pair(spec.get("range"), role, "range", where),
            median_range=_pair(spec.get("median"), role, "median", where),
        )
    return AliasTable(depth_mnemonics=depth_mn, depth_units=depth_units, roles=roles)
