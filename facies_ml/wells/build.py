"""Turn raw file columns into a conditioned :class:`Well` (shared by the LAS and table readers).

Order of operations (all depth-symmetric, none stratigraphic): text -> numbers, null sentinels,
missing/duplicate depths, sort downward, curve roles and units, median ("wrong units?") check,
physical ranges, despiking, resampling to the regular working grid, caliper bad-hole flag.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.wells import clean
from facies_ml.wells.model import FT_PER_M, ROLES, Well, depth_factor
from facies_ml.wells.roles import AliasTable, load_alias_table

ROLE_UNITS = {
    "gr_api": "API", "rt_ohmm": "ohm.m", "rhob_g_cc": "g/cc", "nphi_v_v": "v/v",
    "pe_b_e": "b/e", "dtc_us_ft": "us/ft", "cali_in": "in", "bs_in": "in",
    "k_pct": "%", "u_ppm": "ppm", "th_ppm": "ppm",
}


@dataclass
class RawCurve:
    mnemonic: str            # as in the file (lasio may add ":n" to repeated names)
    unit: str                # as in the file ("" when none)
    values: Any              # array-like of numbers or text, same length as the depth column
    descr: str = ""          # the file's curve description, if any


@dataclass
class RawWell:
    """One well as read from a file, before any conditioning. Depth in ``depth_unit``."""

    name: str
    source: str
    depth: Any
    depth_unit: str          # "ft" | "m"
    curves: list[RawCurve]
    null_values: list[float] = field(default_factory=list)
    header: dict[str, Any] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    depth_mnemonic: str = "DEPT"     # the index curve's name in the file
    depth_unit_text: str = ""        # the index unit as written in the file ("F", "M", ...)
    warnings: list[str] = field(default_factory=list)   # found while reading the file


log = logging.getLogger("facies_ml.wells")
SHOWN = 3   # depths / rows / cell texts quoted in one warning


def where_text(well: str, source: str = "", curve: str | None = None) -> str:
    """``well 'QM-O5' (QM-O5.las), curve 'GR'`` -- the place a warning is about."""
    out = f"well {well!r}" + (f" ({Path(source).name})" if source else "")
    return out + (f", curve {curve!r}" if curve else "")


def emit_warnings(messages: list[str]) -> None:
    """Print intake warnings on the console (the ``facies_ml.wells`` logger, level WARNING;
    without a configured handler Python's last-resort handler writes them to stderr)."""
    for m in messages:
        log.warning("warning: %s", m)


def depths_text(depths: Any, unit: str) -> str:
    """``1001, 1001.5, 1002 ft (+4 more, 1001-1010 ft)`` for a list of depths."""
    d = np.asarray(depths, dtype=float)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return "(no usable depth)"
    shown = ", ".join(f"{x:g}" for x in d[:SHOWN])
    more = "" if d.size <= SHOWN else f" (+{d.size - SHOWN} more, {d.min():g}-{d.max():g} {unit})"
    return f"{shown} {unit}{more}"


def _cell_examples(values: Any, mask: np.ndarray) -> str:
    seen: list[str] = []
    for v in np.asarray(values, dtype=object)[mask]:
        t = repr(str(v).strip()[:16])
        if t not in seen:
            seen.append(t)
        if len(seen) == 2:
            break
    return ", ".join(seen)


@lru_cache(maxsize=8)
def _alias_cached(path: str, mtime: float) -> AliasTable:
    return load_alias_table(path)


def alias_table(config: Config) -> AliasTable:
    """The alias table named by ``files.curve_aliases`` (cached per file version)."""
    p = config.path("curve_aliases")
    if not p.is_file():
        raise InputError("curve alias table not found", file=str(p))
    return _alias_cached(str(p), p.stat().st_mtime)


def intake_settings(config: Config) -> dict[str, Any]:
    """The ``intake:`` section with defaults for keys a user file may leave out."""
    s = config.section("intake")
    s.setdefault("null_values", [-999.25])
    s.setdefault("despike_window", 5)
    s.setdefault("despike_threshold", 6.0)
    s.setdefault("despike_roles", ["gr_api", "rt_ohmm", "rhob_g_cc", "nphi_v_v", "pe_b_e",
                                   "dtc_us_ft", "k_pct", "u_ppm", "th_ppm"])
    s.setdefault("log_scale_roles", ["rt_ohmm"])
    s.setdefault("washout_caliper_excess_in", 2.0)
    s.setdefault("bad_hole_roles", ["rhob_g_cc", "nphi_v_v", "pe_b_e"])
    s.setdefault("max_gap_interpolate", 2.0)
    s.setdefault("unknown_unit", "error")
    s.setdefault("max_samples", 2_000_000)
    if s["unknown_unit"] not in ("error", "warn"):
        raise InputError(f"intake.unknown_unit must be 'error' or 'warn', not {s['unknown_unit']!r}")
    return s


def _py(value: Any) -> Any:
    """Plain JSON-friendly Python value."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def build_well(raw: RawWell, config: Config) -> Well:
    """Condition ``raw`` into a :class:`Well` on the regular working grid (depth downward)."""
    aliases = alias_table(config)
    s = intake_settings(config)
    where = {"file": raw.source, "well": raw.name}
    notes = list(raw.notes)
    dropped: dict[str, int] = {}
    work_unit, step = config.working_unit, config.step
    nulls = list(s["null_values"]) + list(raw.null_values)

    warnings = list(raw.warnings)
    unit0 = raw.depth_unit
    depth, depth_text = clean.parse_numbers(raw.depth)
    depth, _ = clean.replace_nulls(depth, nulls)
    n = depth.size
    if n == 0:
        raise InputError("no data rows", **where)
    keep = np.isfinite(depth)
    if (~keep).sum():
        dropped["missing_depth_rows"] = int((~keep).sum())
        lost = np.flatnonzero(~keep) + 1
        kind = (f"{int(depth_text.sum())} not numbers, e.g. "
                f"{_cell_examples(raw.depth, depth_text)}; " if depth_text.any() else "")
        warnings.append(f"{where_text(raw.name, raw.source, raw.depth_mnemonic)}: "
                        f"{lost.size} row(s) without a usable depth ({kind}blank, null or "
                        f"infinite otherwise) dropped: data row(s) "
                        f"{', '.join(str(r) for r in lost[:SHOWN])}"
                        f"{'' if lost.size <= SHOWN else f' (+{lost.size - SHOWN} more)'}")
    dup = pd.Series(depth).duplicated(keep="first").to_numpy() & keep
    if dup.sum():
        dropped["duplicate_depth_rows"] = int(dup.sum())
        warnings.append(f"{where_text(raw.name, raw.source, raw.depth_mnemonic)}: "
                        f"{int(dup.sum())} row(s) repeat an earlier depth and were dropped "
                        f"(kept the first occurrence), at {depths_text(depth[dup], unit0)}")
    keep &= ~dup
    if not keep.any():
        raise InputError("no usable depth samples", **where)
    rows = np.flatnonzero(keep)
    d = depth[rows]
    order = np.argsort(d, kind="mergesort")
    if np.any(np.diff(d) < 0):
        notes.append("depth was not increasing downward; rows sorted by depth")
    rows, d = rows[order], d[order]
    file_step = float(np.median(np.diff(d))) if d.size > 1 else None
    if unit0 == "ft" and file_step is not None and any(
            abs(file_step - float(m)) <= 0.005 * float(m)
            for m in (s.get("metre_like_steps") or [])):
        warnings.append(
            f"{where_text(raw.name, raw.source, raw.depth_mnemonic)}: depth labelled "
            f"{raw.depth_unit_text or 'ft'!r} (feet) but its step {file_step:g} is a metric "
            f"step ({file_step * FT_PER_M:.3g} ft if the depths are metres), depths "
            f"{d[0]:g}-{d[-1]:g}; if they are metres, fix the depth unit (LAS: ~Curve "
            f"{raw.depth_mnemonic}.M and ~Well STRT/STOP/STEP .M; table: --depth-unit m)")

    # Every file curve is converted once: kept as read (the well's ``original``, file
    # mnemonics) and, when the alias table knows it, a candidate for its role. The role steps
    # below start with a unit conversion that makes a new array, so the original is untouched.
    curves_found: list[dict[str, Any]] = []
    candidates: dict[str, list[tuple[int, int, RawCurve, np.ndarray]]] = {}
    original_cols: dict[str, np.ndarray] = {}
    original_units = {raw.depth_mnemonic: raw.depth_unit_text}
    original_descr: dict[str, str] = {}
    n_non_numeric = n_null = 0
    for i, c in enumerate(raw.curves):
        role = aliases.role_of(c.mnemonic)
        curves_found.append({"mnemonic": str(c.mnemonic), "unit": str(c.unit or ""), "role": role})
        vals, text = clean.parse_numbers(c.values)
        if len(vals) != n:
            if role is None:
                continue  # not a curve we use: left out of the original too
            raise InputError(f"curve has {len(vals)} values for {n} depth rows", curve=c.mnemonic,
                             **where)
        bad = int(text.sum())
        inf = np.isinf(vals)
        if role is None and bad and bad == int((text | np.isfinite(vals)).sum()):
            notes.append(f"column {c.mnemonic!r} holds text only; not a curve")
            bad = 0
        if bad or inf.any():
            parts = []
            if bad:
                parts.append(f"{bad} cell(s) not numbers (e.g. {_cell_examples(c.values, text)})"
                             f" at {depths_text(depth[text], unit0)}")
            if inf.any():
                parts.append(f"{int(inf.sum())} infinite value(s) at "
                             f"{depths_text(depth[inf], unit0)}")
            warnings.append(f"{where_text(raw.name, raw.source, str(c.mnemonic))}: "
                            f"{'; '.join(parts)}; set to missing")
        vals, k = clean.replace_nulls(vals, nulls)
        k -= int(inf.sum())
        vals = vals[rows]
        name = str(c.mnemonic)
        while name in original_cols or name == raw.depth_mnemonic:
            name += "_"
        original_cols[name] = vals
        original_units[name] = str(c.unit or "")
        original_descr[name] = str(c.descr or "")
        if role is None:
            continue
        n_non_numeric += bad
        n_null += k
        candidates.setdefault(role, []).append((aliases.rank(role, c.mnemonic), i, c, vals))
    original = pd.DataFrame(original_cols, index=pd.Index(d, name=raw.depth_mnemonic))
    if n_non_numeric:
        dropped["non_numeric_cells"] = n_non_numeric
    if n_null:
        dropped["null_value_cells"] = n_null
    if not candidates:
        raise InputError("no curve recognised by the alias table (curves: "
                         + ", ".join(str(c.mnemonic) for c in raw.curves) + ")", **where)

    roles_info: dict[str, dict[str, Any]] = {}
    unusable: dict[str, dict[str, str]] = {}
    values: dict[str, np.ndarray] = {}
    out_rng: dict[str, int] = {}
    despiked: dict[str, int] = {}
    for role in ROLES:
        if role not in candidates:
            continue
        cands = sorted(candidates[role], key=lambda t: (t[0], t[1]))
        usable = [t for t in cands if np.isfinite(t[3]).any()]
        if not usable:
            mn = str(cands[0][2].mnemonic)
            unusable[role] = {"mnemonic": mn, "reason": "all null"}
            warnings.append(f"{where_text(raw.name, raw.source, mn)}: the {role} curve has no "
                            "data (every value null or missing); the well is read without it")
            continue
        _, _, c, vals = usable[0]
        spec = aliases.roles[role]
        unit = str(c.unit or "")
        factor = aliases.factor(role, unit)
        if factor is None:
            accepted = ", ".join(sorted(u or "(blank)" for u in spec.units))
            msg = f"unit {unit!r} is not accepted for {role} (accepted: {accepted})"
            if s["unknown_unit"] == "error":
                raise InputError(msg, curve=c.mnemonic, **where)
            notes.append(f"{c.mnemonic}: {msg}; taken as {ROLE_UNITS[role]}")
            factor = 1.0
        vals = vals * factor
        finite = vals[np.isfinite(vals)]
        flat_min = s.get("flat_curve_min_samples")
        if (flat_min is not None and role not in (s.get("flat_curve_exempt_roles") or [])
                and finite.size >= int(flat_min) and float(np.ptp(finite)) == 0.0):
            unusable[role] = {"mnemonic": str(c.mnemonic),
                              "reason": f"constant {finite[0]:g} {ROLE_UNITS[role]}"}
            warnings.append(f"{where_text(raw.name, raw.source, str(c.mnemonic))}: the {role} "
                            f"curve is constant ({finite[0]:g} {ROLE_UNITS[role]} over "
                            f"{finite.size} samples, {d[0]:g}-{d[-1]:g} {unit0}), not a log "
                            "reading; the well is read without it")
            continue
        med = float(np.nanmedian(vals))
        lo, hi = spec.median_range
        if not lo <= med <= hi:
            raise InputError(f"median {med:g} {ROLE_UNITS[role]} (after conversion from "
                             f"{unit or 'blank unit'}) is outside the plausible {lo:g} to {hi:g} "
                             f"for {role}: wrong units?", curve=c.mnemonic, **where)
        vlo, vhi = spec.valid_range
        with np.errstate(invalid="ignore"):
            outside = np.isfinite(vals) & ((vals < vlo) | (vals > vhi))
        vals, k = clean.out_of_range(vals, vlo, vhi)
        if k:
            out_rng[role] = k
            warnings.append(f"{where_text(raw.name, raw.source, str(c.mnemonic))}: {k} "
                            f"value(s) outside the valid {vlo:g} to {vhi:g} {ROLE_UNITS[role]} "
                            f"for {role} set to missing, at {depths_text(d[outside], unit0)}")
        if role in s["despike_roles"]:
            vals, k = clean.despike(vals, int(s["despike_window"]), float(s["despike_threshold"]),
                                    log_scale=role in s["log_scale_roles"])
            if k:
                despiked[role] = k
        values[role] = vals
        conv = "none" if factor == 1.0 else f"x {factor:.10g}"
        roles_info[role] = {
            "mnemonic": str(c.mnemonic), "unit": unit,
            "converted": f"{unit or '(blank)'} -> {ROLE_UNITS[role]} ({conv})",
            "alternatives": [str(t[2].mnemonic) for t in cands if t[2] is not c],
        }

    # regular grid in the working unit
    f = depth_factor(raw.depth_unit, work_unit)
    dw = d * f
    has_data = np.zeros(dw.size, dtype=bool)
    for vals in values.values():
        has_data |= np.isfinite(vals)
    if not has_data.any():
        raise InputError("no usable samples: every recognised curve is empty after cleaning",
                         **where)
    top, bottom = float(dw[has_data][0]), float(dw[has_data][-1])
    n_trim = int(np.argmax(has_data)) + int(np.argmax(has_data[::-1]))
    if n_trim:
        notes.append(f"{n_trim} row(s) above/below the logged interval have no data in any "
                     "recognised curve; not gridded")
    if (bottom - top) / step > float(s["max_samples"]):
        raise InputError(f"depth range {top / f:g} to {bottom / f:g} {raw.depth_unit} would give "
                         f"more than intake.max_samples samples", depth=top / f,
                         unit=raw.depth_unit, **where)
    grid = clean.regular_grid(top, bottom, step)
    if grid.size == 0:
        grid = np.array([round(round(top / step) * step, 10)])
    max_gap = float(s["max_gap_interpolate"])
    if dw.size > 1:
        med_step = float(np.median(np.diff(dw)))
        if med_step * 1.01 > max_gap:
            notes.append(f"file step {med_step:g} {work_unit} exceeds intake.max_gap_interpolate; "
                         f"gaps up to {med_step * 1.01:g} {work_unit} interpolated")
            max_gap = med_step * 1.01
    curves = pd.DataFrame(
        {role: clean.resample(dw, v, grid, max_gap) for role, v in values.items()},
        index=pd.Index(grid, name=f"depth_{work_unit}"),
    )

    flags = pd.DataFrame({"bad_hole": np.zeros(grid.size, dtype=bool)}, index=curves.index)
    bad_hole_nulled: dict[str, int] = {}
    bad_hole_ref = None
    if "cali_in" in curves:
        bs = curves["bs_in"].to_numpy() if "bs_in" in curves else None
        mask, bad_hole_ref = clean.bad_hole_mask(curves["cali_in"].to_numpy(), bs,
                                                 float(s["washout_caliper_excess_in"]))
        flags["bad_hole"] = mask
        for role in s["bad_hole_roles"]:
            if role in curves:
                hit = mask & curves[role].notna().to_numpy()
                if hit.any():
                    bad_hole_nulled[role] = int(hit.sum())
                    curves.loc[hit, role] = np.nan
    else:
        notes.append("no caliper: bad-hole flag not computed")

    for role in list(curves.columns):
        if curves[role].isna().all():
            mn = str(roles_info.get(role, {}).get("mnemonic", role))
            unusable[role] = {"mnemonic": mn, "reason": "no data left after cleaning"}
            warnings.append(f"{where_text(raw.name, raw.source, mn)}: the {role} curve has no "
                            "data left after cleaning (bad hole, spikes, gaps); the well is read "
                            "without it")
            curves = curves.drop(columns=role)
            roles_info.pop(role, None)
    if curves.shape[1] == 0:
        raise InputError("no usable samples after cleaning", **where)
    for role in curves.columns:
        roles_info[role]["null_fraction"] = round(float(curves[role].isna().mean()), 6)

    intake = {
        "file": raw.source,
        "well": raw.name,
        "depth_unit_original": raw.depth_unit,
        "depth_unit": work_unit,
        "step": step,
        "top": _py(float(grid[0])),
        "base": _py(float(grid[-1])),
        "n_samples": int(grid.size),
        "curves_found": curves_found,
        "roles": roles_info,
        "dropped": dropped,
        "bad_hole_samples": int(flags["bad_hole"].sum()),
        "bad_hole_reference": bad_hole_ref,
        "bad_hole_nulled": bad_hole_nulled,
        "despiked": despiked,
        "out_of_range": out_rng,
        "file_step": _py(file_step),
        "depth_unit_label": raw.depth_unit_text,
        "unusable_curves": unusable,
        "notes": notes,
        "warnings": warnings,
    }
    emit_warnings(warnings)
    header = {k: _py(v) for k, v in raw.header.items()}
    return Well(name=raw.name, curves=curves, depth_unit=work_unit,
                original_depth_unit=raw.depth_unit, step=step, source=raw.source, flags=flags,
                header=header, intake=intake, original=original, original_units=original_units,
                original_descr=original_descr)

