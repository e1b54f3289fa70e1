"""LAS files (CWLS LAS 2.0; 1.2 and 3.0 where lasio reads them) -> :class:`RawWell`."""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.wells import clean
from facies_ml.wells.build import RawCurve, RawWell, alias_table, where_text


def one_line(exc: BaseException) -> str:
    """``ClassName: first line of the message`` (never multi-line)."""
    text = str(exc).strip().splitlines()
    first = text[0].strip() if text else ""
    return f"{exc.__class__.__name__}: {first[:200]}" if first else exc.__class__.__name__


def _item(section: Any, key: str) -> Any:
    try:
        return section[key]
    except (KeyError, IndexError, TypeError):
        return None


def _value(section: Any, key: str) -> Any:
    item = _item(section, key)
    return None if item is None else item.value


def _decode(raw: bytes) -> tuple[str, int | None]:
    """Header text as UTF-8, else Latin-1 (which decodes any byte); the position of the first
    byte that is not UTF-8 (``None`` when the text is UTF-8)."""
    try:
        return raw.decode("utf-8"), None
    except UnicodeDecodeError as exc:
        return raw.decode("latin-1"), int(exc.start)


def _rows(body: bytes, first_line: int, n_curves: int, src: str) -> np.ndarray:
    """The ``~A`` block (WRAP NO) as an object array of cell texts, one row per data line.

    A line with more or fewer values than there are curves raises :class:`InputError` naming
    the file line and the depth in its first value. Undecodable bytes stay in the cell text
    (shown as U+FFFD), so that cell is reported as not a number with its depth.
    """
    rows: list[list[str]] = []
    for k, line in enumerate(body.split(b"\n")):
        text = line.split(b"#", 1)[0].strip()
        if not text:
            continue
        cells = text.decode("utf-8", errors="replace").split()
        if len(cells) != n_curves:
            try:
                depth: float | None = float(cells[0])
            except ValueError:
                depth = None
            where = f"depth {depth:g}" if depth is not None else f"first value {cells[0]!r}"
            raise InputError(f"line {first_line + k} (~A data, {where}) has {len(cells)} values "
                             f"for {n_curves} curves (a missing or extra value)", file=src)
        rows.append(cells)
    return np.array(rows, dtype=object).reshape(len(rows), n_curves)


def _read_fast(src: str) -> tuple[Any, list[Any], list[str]] | None:
    """Header by lasio, data block by numpy, for the common case (LAS 1.2/2.0, WRAP NO, space
    delimited). The file is read once; lasio parses only the text above the ``~A`` line.
    Returns (header-only lasio object, one value array per curve, warnings), or ``None``
    whenever that case does not hold, so the caller falls back to lasio's full reader (which
    also produces its error messages). Data lines with a missing or extra value raise
    :class:`InputError` naming the line; cells that are not numbers are kept as text for the
    conditioning step to report with their depth."""
    import io
    import re

    import lasio

    with open(src, "rb") as fh:
        raw = fh.read()
    match = re.search(rb"^[ \t]*~A[^\n]*\n", raw, flags=re.MULTILINE)
    if match is None or re.search(rb"^[ \t]*~", raw[match.end():], flags=re.MULTILINE):
        return None
    header, bad_at = _decode(raw[:match.start()])
    try:
        las = lasio.read(io.StringIO(header), ignore_data=True, null_policy="none",
                         ignore_header_errors=False)
    except Exception:  # noqa: BLE001 - the full reader will report it
        return None
    version = str(_value(las.version, "VERS") or "").strip()
    wrap = str(_value(las.version, "WRAP") or "").strip().upper()
    dlm = str(_value(las.version, "DLM") or "SPACE").strip().upper()
    if (not version.startswith(("1", "2")) or wrap != "NO" or dlm not in ("", "SPACE")
            or not las.curves):
        return None
    warnings = []
    if bad_at is not None:
        warnings.append(f"file {Path(src).name}: header is not UTF-8 (first bad byte at "
                        f"position {bad_at}); read as Latin-1")
    body = raw[match.end():]
    if not body.strip():
        return None
    n = len(las.curves)
    try:
        data: Any = np.loadtxt(io.BytesIO(body), dtype=float, comments="#", ndmin=2)
    except ValueError:
        data = None
    if data is None or data.shape[1] != n or np.isnan(data).any():   # NaN: "nan" text cells
        first_line = raw[:match.end()].count(b"\n") + 1
        data = _rows(body, first_line, n, src)
    if data.shape[0] == 0:
        return None
    return las, [data[:, j] for j in range(n)], warnings


def read_las_raw(path: str | Path, config: Config) -> RawWell:
    """Read one LAS file without conditioning. The first curve must be a depth index.

    Depth unit comes from the index curve's unit, else the ~Well STRT unit (FT/F/FEET -> ft,
    M/METER/METRES -> m); if both are given they must agree.
    """
    import lasio

    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("LAS file not found", file=src)
    aliases = alias_table(config)
    lasio_log = logging.getLogger("lasio")
    level = lasio_log.level
    lasio_log.setLevel(logging.ERROR)  # its per-curve warnings are summarised in our intake
    try:
        fast = _read_fast(src)
        if fast is None:
            las = lasio.read(src, null_policy="none", ignore_header_errors=False, engine="normal")
            columns = [c.data for c in las.curves]
            read_warnings: list[str] = []
        else:
            las, columns, read_warnings = fast
    except InputError:
        raise
    except Exception as exc:  # lasio raises many types on garbled text; report one line
        raise InputError(f"cannot read as LAS ({one_line(exc)})", file=src) from None
    finally:
        lasio_log.setLevel(level)

    name = str(_value(las.well, "WELL") or "").strip()
    notes: list[str] = []
    if not name:
        name = path.stem
        notes.append("~Well WELL is blank; well named after the file")
    where = {"file": src, "well": name}
    if len(las.curves) == 0:
        raise InputError("no curves in the ~Curve section", **where)
    index = las.curves[0]
    if not aliases.is_depth(index.original_mnemonic or index.mnemonic):
        raise InputError(f"first curve {index.mnemonic!r} is not a depth index "
                         f"(expected one of {', '.join(aliases.depth_mnemonics)})", **where)
    if len(las.curves) < 2:
        raise InputError("no log curves besides the depth index", **where)
    depth_values = columns[0]
    try:
        n_rows = len(depth_values)
    except TypeError:
        n_rows = 0
    if n_rows == 0:
        raise InputError("no data rows in the ~ASCII section", **where)

    idx_unit = str(index.unit or "").strip()
    strt = _item(las.well, "STRT")
    strt_unit = str(strt.unit or "").strip() if strt is not None else ""
    u_idx, u_strt = aliases.depth_unit(idx_unit), aliases.depth_unit(strt_unit)
    if u_idx and u_strt and u_idx != u_strt:
        raise InputError(f"depth curve unit {idx_unit!r} disagrees with STRT unit {strt_unit!r}",
                         curve=index.mnemonic, **where)
    unit = u_idx or u_strt
    if unit is None:
        raise InputError(f"depth unit not recognised (curve unit {idx_unit!r}, STRT unit "
                         f"{strt_unit!r})", curve=index.mnemonic, **where)

    nulls: list[float] = []
    null = _value(las.well, "NULL")
    try:
        if null is not None and str(null).strip() != "":
            nulls.append(float(null))
    except (TypeError, ValueError):
        raise InputError(f"NULL value {null!r} is not a number", **where) from None

    header: dict[str, Any] = {"version": _value(las.version, "VERS"),
                              "wrap": str(_value(las.version, "WRAP") or "")}
    for key in ("STRT", "STOP", "STEP", "NULL"):
        v = _value(las.well, key)
        try:
            header[key] = float(v)
        except (TypeError, ValueError):
            header[key] = None
    for key in ("WELL", "UWI", "FLD", "COMP", "LOC", "DATE"):
        v = _value(las.well, key)
        if v not in (None, ""):
            header[key] = str(v)
    header["depth_unit"] = unit
    notes += _header_checks(header, depth_values, unit)

    curves = []
    for c, data in zip(las.curves[1:], columns[1:], strict=True):
        if data is None or len(data) != n_rows:
            raise InputError("curve length differs from the depth index", curve=c.mnemonic,
                             **where)
        curves.append(RawCurve(mnemonic=str(c.mnemonic), unit=str(c.unit or "").strip(),
                               values=data, descr=str(c.descr or "").strip()))
    return RawWell(name=name, source=src, depth=depth_values, depth_unit=unit, curves=curves,
                   null_values=nulls, header=header, notes=notes,
                   depth_mnemonic=str(index.mnemonic), depth_unit_text=idx_unit or strt_unit,
                   warnings=[f"{where_text(name, src)}: {w}" for w in read_warnings])


def _header_checks(header: dict[str, Any], depth: Any, unit: str) -> list[str]:
    """Compare ~Well STRT/STOP/STEP with the data (LAS 2.0: STRT = first depth, STOP = last
    depth, STEP = constant increment, 0 when the increment varies). Mismatches are notes."""
    d, _ = clean.to_numeric(depth)
    d = d[~clean.np.isnan(d)]
    notes: list[str] = []
    if d.size == 0:
        return notes
    for key, actual in (("STRT", d[0]), ("STOP", d[-1])):
        v = header.get(key)
        if v is not None and abs(v - actual) > 1e-4 * max(1.0, abs(actual)):
            notes.append(f"~Well {key} {v:g} {unit} differs from the data ({actual:g} {unit})")
    step = header.get("STEP")
    if step not in (None, 0.0) and d.size > 1:
        diffs = clean.np.diff(d)
        if not clean.np.allclose(diffs, step, rtol=1e-3, atol=1e-6):
            notes.append(f"~Well STEP {step:g} {unit} but the data are not evenly spaced by it")
    return notes
