"""CSV / Parquet tables of one or many wells -> :class:`RawWell` objects.

A table has one row per depth sample (depth increasing downward within a well is not
required; rows are sorted during conditioning), a depth column, optionally a well column,
and curve columns named by mnemonic. Tables carry no unit row: curve units come from
``intake.table.units`` ({mnemonic: unit}) and default to each role's own unit.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pandas as pd

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.wells.build import RawCurve, RawWell, alias_table
from facies_ml.wells.las import one_line

TABLE_SUFFIXES = (".csv", ".parquet")


def table_settings(config: Config) -> dict[str, Any]:
    t = dict(config.section("intake").get("table") or {})
    t.setdefault("well_columns", ["well", "WELL", "well_name", "WELL_NAME"])
    t.setdefault("depth_columns", ["depth", "DEPT", "DEPTH", "DEPTH_MD", "MD"])
    t.setdefault("depth_unit", "m")
    t.setdefault("units", {})
    return t


def _find(columns: list[str], wanted: list[str]) -> str | None:
    lower = {str(c).strip().lower(): c for c in reversed(columns)}
    for w in wanted:
        if str(w).strip().lower() in lower:
            return lower[str(w).strip().lower()]
    return None


def read_frame(path: str | Path, nrows: int | None = None) -> pd.DataFrame:
    """Read a CSV (all cells as text) or Parquet file; problems become :class:`InputError`."""
    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("table file not found", file=src)
    try:
        if path.suffix.lower() == ".parquet":
            frame = pd.read_parquet(path)
            if nrows is not None:
                frame = frame.head(nrows)
        else:
            frame = pd.read_csv(path, dtype=str, nrows=nrows, skipinitialspace=True)
    except pd.errors.EmptyDataError:
        raise InputError("table is empty", file=src) from None
    except Exception as exc:  # parser errors, bad encodings, bad parquet
        raise InputError(f"cannot read table ({one_line(exc)})", file=src) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def table_kind(path: str | Path, config: Config) -> tuple[bool, str]:
    """(True, "") if the table looks like well logs: a depth column and a recognised curve."""
    frame = read_frame(path, nrows=0 if Path(path).suffix.lower() == ".csv" else 1)
    cols = list(frame.columns)
    t = table_settings(config)
    if _find_depth(cols, list(t["depth_columns"])) is None:
        return False, "no depth column (looked for " + ", ".join(t["depth_columns"]) + ")"
    aliases = alias_table(config)
    if not any(aliases.role_of(c) for c in cols):
        return False, "no column is a curve known to the alias table"
    return True, ""


def _find_depth(columns: list[str], wanted: list[str]) -> str | None:
    """Depth column: a configured name, or one with a unit suffix (``DEPTH_M``, ``depth_ft``)."""
    found = _find(columns, wanted)
    if found is None:
        found = _find(columns, [f"{w}{sfx}" for w in wanted for sfx in ("_m", "_ft")])
    return found


def _depth_unit_from_name(column: str) -> str | None:
    m = re.search(r"[_ ](ft|m)$", column.strip().lower())
    return m.group(1) if m else None


def table_raw_wells(path: str | Path, config: Config, well_column: str | None = None,
                    depth_column: str | None = None,
                    depth_unit: str | None = None) -> list[RawWell]:
    """Split a table into raw wells (file row order kept within each well)."""
    src = str(path)
    frame = read_frame(path)
    cols = list(frame.columns)
    t = table_settings(config)
    aliases = alias_table(config)
    if frame.empty:
        raise InputError("table has no data rows", file=src)
    if well_column is not None and well_column not in cols:
        raise InputError(f"well column {well_column!r} not found", file=src)
    wcol = well_column or _find(cols, list(t["well_columns"]))
    if depth_column is not None and depth_column not in cols:
        raise InputError(f"depth column {depth_column!r} not found", file=src)
    dcol = depth_column or _find_depth(cols, list(t["depth_columns"]))
    if dcol is None:
        raise InputError("no depth column (looked for " + ", ".join(t["depth_columns"]) + ")",
                         file=src)
    unit = depth_unit or _depth_unit_from_name(dcol) or t["depth_unit"]
    unit = aliases.depth_unit(unit) or (unit if unit in ("ft", "m") else None)
    if unit is None:
        raise InputError(f"depth unit {depth_unit or t['depth_unit']!r} not recognised",
                         file=src, curve=dcol)
    units = {str(k).upper(): str(v) for k, v in (t["units"] or {}).items()}
    curve_cols = [c for c in cols if c not in (wcol, dcol)]
    notes = [f"table: depth column {dcol!r} in {unit}; curve units "
             + ("from intake.table.units" if units else "assumed to be the role units")]
    if wcol is None:
        groups = [(Path(path).stem, frame)]
        notes.append("no well column; well named after the file")
    else:
        names = frame[wcol].astype("string").str.strip()
        blank = names.isna() | (names == "")
        if blank.any():
            row = int(blank.to_numpy().nonzero()[0][0]) + 1
            raise InputError("blank well name", file=src, row=row, curve=wcol)
        frame = frame.assign(**{wcol: names})
        groups = [(str(k), g) for k, g in frame.groupby(wcol, sort=False)]
    out = []
    for name, g in groups:
        curves = [RawCurve(mnemonic=c, unit=units.get(c.upper(), ""), values=g[c].to_numpy())
                  for c in curve_cols]
        out.append(RawWell(name=name, source=src, depth=g[dcol].to_numpy(), depth_unit=unit,
                           curves=curves, header={"depth_column": dcol, "depth_unit": unit},
                           notes=list(notes), depth_mnemonic=str(dcol), depth_unit_text=unit))
    return out
