"""The systems-tract rule table: states, allowed up-section transitions, minimum thicknesses.

All transitions are read UP-SECTION (from the deepest sample upward): ``allowed[i, j]`` is True
when tract ``j`` may directly overlie tract ``i``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from facies_ml.config import read_yaml
from facies_ml.errors import InputError

M_PER_FT = 0.3048
SURFACE_KINDS = ("SB", "MFS")


def _to_unit(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a thickness between ft and m."""
    if from_unit == to_unit:
        return value
    return value * M_PER_FT if from_unit == "ft" else value / M_PER_FT


@dataclass(frozen=True, eq=False)
class TractRules:
    """Loaded rule table. ``allowed`` is (n, n) bool, ``[from, to]`` up-section, diagonal True.

    ``min_thickness`` is in ``thickness_unit`` (ft or m). ``sb_transitions`` and
    ``mfs_transitions`` list the enabled ``(from, to)`` name pairs that make a sequence boundary
    or the maximum flooding surface; ``disabled`` lists the optional transitions left off.
    """

    states: tuple[str, ...]
    allowed: np.ndarray
    min_thickness: dict[str, float]
    thickness_unit: str
    sb_transitions: tuple[tuple[str, str], ...] = ()
    mfs_transitions: tuple[tuple[str, str], ...] = ()
    disabled: tuple[tuple[str, str], ...] = ()
    source: str = field(default="", compare=False)

    @property
    def n_states(self) -> int:
        return len(self.states)

    def index(self, name: str) -> int:
        """Position of a state name in :attr:`states`."""
        if name not in self.states:
            raise InputError(f"unknown systems tract {name!r}; known: {', '.join(self.states)}",
                             file=self.source or None)
        return self.states.index(name)

    def surface_kind(self, lower: int, upper: int) -> str | None:
        """'SB', 'MFS' or None for the up-section transition ``lower -> upper`` (indices)."""
        pair = (self.states[lower], self.states[upper])
        if pair in self.sb_transitions:
            return "SB"
        if pair in self.mfs_transitions:
            return "MFS"
        return None

    def count_violations(self, path: np.ndarray) -> int:
        """Number of forbidden consecutive transitions in an up-section int ``path``.

        Entries of -1 are gaps (unlabelled samples): pairs touching a gap are not counted.
        """
        p = np.asarray(path)
        if p.ndim != 1:
            raise InputError("a tract path must be one-dimensional")
        if p.size < 2:
            return 0
        if not np.issubdtype(p.dtype, np.integer):
            raise InputError("a tract path must hold integer tract indices")
        bad = np.flatnonzero((p < -1) | (p >= self.n_states))
        if bad.size:
            raise InputError(f"tract index {int(p[bad[0]])} is outside 0..{self.n_states - 1}",
                             row=int(bad[0]))
        a, b = p[:-1], p[1:]
        ok = (a >= 0) & (b >= 0)
        return int(np.count_nonzero(~self.allowed[a[ok], b[ok]]))

    def min_samples(self, step: float, depth_unit: str) -> dict[str, int]:
        """Minimum thickness of each state as a number of samples of ``step`` ``depth_unit``.

        ``ceil(thickness / step)`` with a 1e-9 tolerance (so 4 ft at 0.1524 m is 8 samples),
        never below 1.
        """
        if depth_unit not in ("ft", "m"):
            raise InputError(f"depth unit must be 'ft' or 'm', not {depth_unit!r}")
        if not (isinstance(step, int | float) and math.isfinite(step) and step > 0):
            raise InputError(f"sample step must be a positive number, not {step!r}")
        out = {}
        for name in self.states:
            thick = _to_unit(self.min_thickness[name], self.thickness_unit, depth_unit)
            out[name] = max(1, int(math.ceil(thick / step - 1e-9)))
        return out


def _thickness(entry: Any, where: str, file: str) -> tuple[float, str]:
    if not isinstance(entry, dict) or set(entry) - {"value", "unit"} or "value" not in entry:
        raise InputError(f"min_thickness of {where} must look like {{value: 4.0, unit: ft}}",
                         file=file)
    value, unit = entry["value"], entry.get("unit")
    if isinstance(value, bool) or not isinstance(value, int | float) or not value >= 0:
        raise InputError(f"min_thickness of {where} must be a number >= 0, not {value!r}",
                         file=file)
    if unit not in ("ft", "m"):
        raise InputError(f"min_thickness unit of {where} must be 'ft' or 'm', not {unit!r}",
                         file=file)
    return float(value), str(unit)


def load_rules(path: str | Path) -> TractRules:
    """Read and validate a rule table (YAML). Every problem is an :class:`InputError`."""
    file = str(path)
    data = read_yaml(path)
    states_raw = data.get("states")
    if not isinstance(states_raw, list) or len(states_raw) < 2:
        raise InputError("'states' must list at least two systems tracts", file=file)
    states = tuple(str(s) for s in states_raw)
    if len(set(states)) != len(states):
        raise InputError("a state is listed twice under 'states'", file=file)
    n = len(states)

    # --- minimum thickness
    thick_raw = data.get("min_thickness") or {}
    if not isinstance(thick_raw, dict):
        raise InputError("'min_thickness' must be a mapping of state -> {value, unit}", file=file)
    for key in thick_raw:
        if key != "default" and key not in states:
            raise InputError(f"min_thickness names unknown state {key!r}", file=file)
    parsed = {k: _thickness(v, f"state {k!r}" if k != "default" else "'default'", file)
              for k, v in thick_raw.items()}
    if "default" in parsed:
        unit = parsed["default"][1]
    elif parsed:
        unit = next(iter(parsed.values()))[1]
    else:
        raise InputError("'min_thickness' is missing (give at least a default)", file=file)
    min_thickness = {}
    for s in states:
        if s in parsed:
            v, u = parsed[s]
        elif "default" in parsed:
            v, u = parsed["default"]
        else:
            raise InputError(f"state {s!r} has no min_thickness and there is no default",
                             file=file)
        min_thickness[s] = _to_unit(v, u, unit)

    # --- transitions
    trans_raw = data.get("transitions")
    if not isinstance(trans_raw, list) or not trans_raw:
        raise InputError("'transitions' must be a non-empty list", file=file)
    allowed = np.eye(n, dtype=bool)
    sb, mfs, disabled, seen = [], [], [], set()
    for i, item in enumerate(trans_raw):
        where = f"transition #{i + 1}"
        if not isinstance(item, dict) or "from" not in item or "to" not in item:
            raise InputError(f"{where} needs 'from' and 'to'", file=file)
        unknown_keys = set(item) - {"from", "to", "enabled", "surface", "note"}
        if unknown_keys:
            raise InputError(f"{where} has unknown key(s) {sorted(unknown_keys)}", file=file)
        a, b = str(item["from"]), str(item["to"])
        for s in (a, b):
            if s not in states:
                raise InputError(f"{where} names unknown state {s!r}; known: "
                                 f"{', '.join(states)}", file=file)
        if a == b:
            raise InputError(f"{where} ({a} -> {b}): self transitions are always allowed; "
                             "do not list them", file=file)
        if (a, b) in seen:
            raise InputError(f"{where} ({a} -> {b}) is listed twice", file=file)
        seen.add((a, b))
        enabled = item.get("enabled", True)
        if not isinstance(enabled, bool):
            raise InputError(f"{where} ({a} -> {b}): 'enabled' must be true or false, "
                             f"not {enabled!r}", file=file)
        surface = item.get("surface", "none")
        surface = "none" if surface is None else str(surface)
        if surface not in (*SURFACE_KINDS, "none"):
            raise InputError(f"{where} ({a} -> {b}): surface must be SB, MFS or none, "
                             f"not {surface!r}", file=file)
        if not enabled:
            disabled.append((a, b))
            continue
        allowed[states.index(a), states.index(b)] = True
        if surface == "SB":
            sb.append((a, b))
        elif surface == "MFS":
            mfs.append((a, b))

    off = allowed & ~np.eye(n, dtype=bool)
    for k, s in enumerate(states):
        if not off[:, k].any():
            raise InputError(f"state {s!r} is unreachable: no enabled transition leads into it "
                             "from another state", file=file)
        if not off[k, :].any():
            raise InputError(f"state {s!r} has no exit: no enabled transition leads from it "
                             "to another state", file=file)
    allowed.setflags(write=False)
    return TractRules(states=states, allowed=allowed, min_thickness=min_thickness,
                      thickness_unit=unit, sb_transitions=tuple(sb), mfs_transitions=tuple(mfs),
                      disabled=tuple(disabled), source=file)
