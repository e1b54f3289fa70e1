"""CSV / Parquet tables of one or many wells -> :class:`RawWell` objects.

A table has one row per depth sample (depth increasing downward within a well is not
required; rows are sorted during conditioning), a depth column, optionally a well column,
and curve columns named by mnemonic. Tables carry no unit row: curve units come from
``intake.table.units`` ({mnemonic: unit}) and default to each role's own unit. The depth unit
is never guessed: it comes from the depth column's name (``depth_ft``, ``DEPT_M``,
``depth (m)``), a ``depth_unit`` column, or ``intake.table.depth_unit`` (``--depth-unit``).
A CSV file that is not UTF-8 is read as Windows-1252 (else Latin-1) with a warning naming the
position of the first byte that is not UTF-8.
"""

from __future__ import annotations

import copy
import io
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.wells.build import RawCurve, RawWell, alias_table, where_text
from facies_ml.wells.las import one_line

TABLE_SUFFIXES = (".csv", ".parquet")
UNIT_WORDS = {"ft": "ft", "feet": "ft", "foot": "ft", "f": "ft", "m": "m", "metres": "m",
              "meters": "m", "metre": "m", "meter": "m"}
UNIT_COLUMN = "depth_unit"
_UNIT_SUFFIX = (r"(?:[_ .]+[(\[]?|[(\[])\s*("
                + "|".join(sorted(UNIT_WORDS, key=len, reverse=True)) + r")\s*[)\]]?")
HEAD_BYTES = 1 << 20   # bytes read to look at a CSV's header row


def with_table_depth_unit(config: Config, unit: str | None) -> Config:
    """A copy of ``config`` with ``intake.table.depth_unit`` set to ``unit`` (ft or m; ``None``
    returns ``config`` itself). This is how ``--depth-unit`` reaches the table reader."""
    if unit is None:
        return config
    if unit not in ("ft", "m"):
        raise InputError(f"depth unit must be ft or m, not {unit!r}")
    raw = copy.deepcopy(config.raw)
    raw.setdefault("intake", {}).setdefault("table", {})["depth_unit"] = unit
    return Config(raw=raw, base_dir=config.base_dir)


def decode_text(raw: bytes, src: str) -> tuple[str, str | None]:
    """Text of a CSV file: UTF-8 (a byte-order mark is dropped), else Windows-1252, else
    Latin-1 (which decodes any byte). Returns (text, warning or ``None``)."""
    try:
        return raw.decode("utf-8-sig"), None
    except UnicodeDecodeError as exc:
        pos = int(exc.start)
    for enc, label in (("cp1252", "Windows-1252"), ("latin-1", "Latin-1")):
        try:
            text = raw.decode(enc)
        except UnicodeDecodeError:
            continue
        return text, (f"file {Path(src).name} is not UTF-8 (first byte that is not, 0x"
                      f"{raw[pos]:02x}, at byte {pos}); read as {label}: check its names")
    raise AssertionError("latin-1 decodes every byte")  # pragma: no cover


def table_settings(config: Config) -> dict[str, Any]:
    t = dict(config.section("intake").get("table") or {})
    t.setdefault("well_columns", ["well", "WELL", "well_name", "WELL_NAME"])
    t.setdefault("depth_columns", ["depth", "DEPT", "DEPTH", "DEPTH_MD", "MD"])
    t.setdefault("depth_unit", None)
    t.setdefault("units", {})
    return t


def _find(columns: list[str], wanted: list[str]) -> str | None:
    lower = {str(c).strip().lower(): c for c in reversed(columns)}
    for w in wanted:
        if str(w).strip().lower() in lower:
            return lower[str(w).strip().lower()]
    return None


def read_frame(path: str | Path, nrows: int | None = None,
               warnings: list[str] | None = None, literal: bool = False) -> pd.DataFrame:
    """Read a CSV (all cells as text) or Parquet file; problems become :class:`InputError`.

    A CSV that is not UTF-8 is decoded as Windows-1252 / Latin-1 and a warning naming the file
    and byte position is appended to ``warnings`` (when given). With ``literal`` only an empty
    CSV cell is missing: text such as ``NaN``, ``NA`` or ``null`` stays text, so the well
    reader reports it as a cell that is not a number.
    """
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
            with open(path, "rb") as fh:
                raw = fh.read(HEAD_BYTES) if nrows is not None else fh.read()
            if nrows is not None and len(raw) == HEAD_BYTES and b"\n" in raw:
                raw = raw[:raw.rindex(b"\n") + 1]
            text, warning = decode_text(raw, src)
            if warning and warnings is not None:
                warnings.append(warning)
            extra: dict[str, Any] = {"keep_default_na": False, "na_values": [""]} if literal else {}
            frame = pd.read_csv(io.StringIO(text), dtype=str, nrows=nrows,
                                skipinitialspace=True, **extra)
            if literal:
                _check_short_lines(text, frame.shape[1], src)
    except InputError:
        raise
    except pd.errors.EmptyDataError:
        raise InputError("table is empty", file=src) from None
    except Exception as exc:  # parser errors, bad encodings, bad parquet
        raise InputError(f"cannot read table ({one_line(exc)})", file=src) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _check_short_lines(text: str, n_columns: int, src: str) -> None:
    """A CSV line with fewer values than the header has columns (pandas would fill the rest
    as blank) is an :class:`InputError` naming the line; a line with more values is already
    refused by the CSV parser. Files with quoted cells are left to the parser."""
    if n_columns < 2 or '"' in text:
        return
    for k, line in enumerate(text.splitlines()[1:], start=2):
        if line.strip() and line.count(",") < n_columns - 1:
            raise InputError(f"line {k} has {line.count(',') + 1} values for {n_columns} "
                             f"columns (a missing value): {line[:60]!r}", file=src)


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
    """Depth column: a configured name, or one with a unit suffix (``DEPTH_M``, ``depth_ft``,
    ``MD (m)``)."""
    found = _find(columns, wanted)
    if found is None:
        for w in wanted:
            pattern = re.escape(str(w).strip().lower()) + _UNIT_SUFFIX
            hit = [c for c in columns if re.fullmatch(pattern, str(c).strip().lower())]
            if hit:
                return hit[0]
    return found


def _depth_unit_from_name(column: str) -> str | None:
    m = re.search(_UNIT_SUFFIX + "$", column.strip().lower())
    return UNIT_WORDS[m.group(1)] if m else None


def _unit_column_value(g: pd.DataFrame, ucol: str, src: str, name: str) -> str | None:
    """The one depth unit a well's rows give in the ``depth_unit`` column (None if blank)."""
    values = {str(v).strip().lower() for v in g[ucol].dropna() if str(v).strip()}
    if not values:
        return None
    units = {UNIT_WORDS.get(v) for v in values}
    if None in units or len(units) > 1:
        raise InputError(f"column {ucol!r} must hold one depth unit (ft or m) per well, found "
                         f"{', '.join(sorted(values))}", file=src, well=name, curve=ucol)
    return units.pop()


def _blocks(positions: np.ndarray) -> list[tuple[int, int]]:
    """Runs of consecutive row positions as (first, last) data-row numbers (1-based)."""
    breaks = np.flatnonzero(np.diff(positions) != 1)
    starts = np.r_[positions[0], positions[breaks + 1]]
    ends = np.r_[positions[breaks], positions[-1]]
    return [(int(a) + 1, int(b) + 1) for a, b in zip(starts, ends, strict=True)]


def table_raw_wells(path: str | Path, config: Config, well_column: str | None = None,
                    depth_column: str | None = None,
                    depth_unit: str | None = None) -> list[RawWell]:
    """Split a table into raw wells (file row order kept within each well)."""
    src = str(path)
    file_warnings: list[str] = []
    frame = read_frame(path, warnings=file_warnings, literal=True)
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
    given = depth_unit or _depth_unit_from_name(dcol)
    ucol = _find(cols, [UNIT_COLUMN]) if given is None else None
    default = t["depth_unit"]
    if given is None and ucol is None and default is None:
        raise InputError(f"the depth column {dcol!r} does not say its unit: give --depth-unit "
                         "ft or m (setting intake.table.depth_unit in a --config file), or name "
                         f"the column {dcol}_ft / {dcol}_m, or add a {UNIT_COLUMN} column",
                         file=src, curve=dcol)
    for u in (given, default):
        if u is not None and aliases.depth_unit(str(u)) is None and u not in ("ft", "m"):
            raise InputError(f"depth unit {u!r} not recognised (ft or m)", file=src, curve=dcol)
    units = {str(k).upper(): str(v) for k, v in (t["units"] or {}).items()}
    curve_cols = [c for c in cols if c not in (wcol, dcol, ucol)]
    if wcol is None:
        groups = [(Path(path).stem, frame)]
    else:
        names = frame[wcol].astype("string").str.strip()
        blank = names.isna() | (names == "")
        if blank.any():
            row = int(blank.to_numpy().nonzero()[0][0]) + 1
            raise InputError("blank well name", file=src, row=row, curve=wcol)
        frame = frame.assign(**{wcol: names}).reset_index(drop=True)
        groups = [(str(k), g) for k, g in frame.groupby(wcol, sort=False)]
    out = []
    for name, g in groups:
        source_of_unit = ("the depth_unit argument" if depth_unit else
                          "the column name" if given else None)
        unit_text = given
        if unit_text is None and ucol is not None:
            unit_text = _unit_column_value(g, ucol, src, name)
            source_of_unit = f"the {ucol} column" if unit_text else None
        if unit_text is None:
            if default is None:
                raise InputError(f"no depth unit in column {ucol!r} for this well: fill it, or "
                                 "give --depth-unit ft or m (intake.table.depth_unit)",
                                 file=src, well=name, curve=dcol)
            unit_text, source_of_unit = default, "intake.table.depth_unit"
        unit = aliases.depth_unit(str(unit_text)) or str(unit_text)
        notes = [f"table: depth column {dcol!r} in {unit} (from {source_of_unit}); curve "
                 "units " + ("from intake.table.units" if units else
                             "assumed to be the role units")]
        warnings = [f"{where_text(name, src)}: {w}" for w in file_warnings]
        if wcol is None:
            notes.append("no well column; well named after the file")
        else:
            blocks = _blocks(np.asarray(g.index, dtype=np.int64)) if len(groups) > 1 else []
            if len(blocks) > 1:
                shown = ", ".join(f"{a}-{b}" for a, b in blocks[:3])
                warnings.append(f"{where_text(name, src)}: the well's rows are in {len(blocks)} "
                                f"separate blocks of the table (data rows {shown}"
                                f"{', ...' if len(blocks) > 3 else ''}); read as one well: "
                                "check that two wells do not share this name")
        curves = [RawCurve(mnemonic=c, unit=units.get(c.upper(), ""), values=g[c].to_numpy())
                  for c in curve_cols]
        out.append(RawWell(name=name, source=src, depth=g[dcol].to_numpy(), depth_unit=unit,
                           curves=curves, header={"depth_column": dcol, "depth_unit": unit},
                           notes=notes, depth_mnemonic=str(dcol), depth_unit_text=unit,
                           warnings=warnings))
    return out
