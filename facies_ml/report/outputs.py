"""Files a user acts on: per-well prediction tables (CSV, LAS 2.0), the tops table, metrics.

Every file is written to a hidden temporary name (``.<name>.<random>.partial``) and renamed
into place, so an interrupted write never leaves a partially written output; a failed write
removes its temporary file. Commands write into a staging folder that is moved onto ``--out``
only when the whole run succeeded (:mod:`facies_ml.report.run_folder`). Every file carries
the caution that predictions are probabilistic and must be reviewed by a qualified
geoscientist.
"""

from __future__ import annotations

import json
import os
import tempfile
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import lasio
import numpy as np
import pandas as pd

from facies_ml import CAUTION, __version__
from facies_ml.pipeline import WellPrediction
from facies_ml.report.run_folder import PARTIAL_SUFFIX
from facies_ml.wells.clean import nearest_samples

_UMASK = os.umask(0)
os.umask(_UMASK)


def atomic_write(path: str | Path, write: Callable[[Path], None]) -> Path:
    """Call ``write(tmp_path)`` then rename the temporary file onto ``path``.

    The temporary file (``.<name>.<random>.partial`` beside ``path``) is removed if ``write``
    fails or is interrupted, so no hidden file is left behind."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=PARTIAL_SUFFIX, dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp creates 0600; outputs get the usual mode
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def write_json(path: str | Path, data: Any) -> Path:
    def _w(tmp: Path) -> None:
        tmp.write_text(json.dumps(data, indent=2, sort_keys=False, default=_json_default) + "\n")

    return atomic_write(path, _w)


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return None if np.isnan(obj) else float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, np.bool_):
        return bool(obj)
    return str(obj)


def prediction_frame(pred: WellPrediction) -> pd.DataFrame:
    """Conditioned input curves plus predictions, with depth in working and original units."""
    well = pred.well
    frame = pd.concat([well.curves, pred.table], axis=1)
    frame.insert(0, f"depth_{well.original_depth_unit}_original",
                 np.round(well.to_original_depth(frame.index.to_numpy(float)), 4))
    frame.index.name = f"depth_{well.depth_unit}"
    return frame


def tops_frame(rows: Iterable[tuple[str, str, list[Any]]]) -> pd.DataFrame:
    """One row per surface from ``(well, depth_unit, surfaces)`` triples:
    well, surface, sequence (basin-wide name), depth, depth_p10, depth_p90, confidence,
    gr_check, flags ("; "-joined reasons to review the pick, empty when none), depth_unit."""
    out = []
    for well, unit, surfaces in rows:
        for s in surfaces:
            out.append({
                "well": well, "surface": s.kind, "sequence": getattr(s, "sequence", ""),
                "depth": round(float(s.depth), 3),
                "depth_p10": round(float(s.depth_p10), 3), "depth_p90": round(float(s.depth_p90), 3),
                "confidence": round(float(s.confidence), 3), "gr_check": s.gr_check,
                "flags": "; ".join(getattr(s, "flags", ())), "depth_unit": unit,
            })
    cols = ["well", "surface", "sequence", "depth", "depth_p10", "depth_p90", "confidence",
            "gr_check", "flags", "depth_unit"]
    return pd.DataFrame(out, columns=cols)


def write_table(frame: pd.DataFrame, path: str | Path, comment: str | None = None) -> Path:
    """CSV with an optional leading ``# comment`` line (the caution), written atomically."""

    def _w(tmp: Path) -> None:
        with open(tmp, "w") as fh:
            if comment:
                fh.write(f"# {comment}\n")
            frame.to_csv(fh, index=False)

    return atomic_write(path, _w)


def prediction_arrow(pred: WellPrediction) -> Any:
    """:func:`prediction_frame` as a pyarrow Table (depth as the first column)."""
    import pyarrow as pa

    return pa.Table.from_pandas(prediction_frame(pred).reset_index(), preserve_index=False)


def write_prediction_csv(pred: WellPrediction, path: str | Path, table: Any = None) -> Path:
    """CSV of :func:`prediction_frame` (floats rounded to 5 decimals), caution on line 1.
    ``table``: the :func:`prediction_arrow` of ``pred`` if already built."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    table = prediction_arrow(pred) if table is None else table
    # numpy's rounding (as pandas'), exact at 5 decimals; NaN stays an empty cell
    columns = [pa.array(np.round(col.to_numpy(), 5), type=col.type, from_pandas=True)
               if pa.types.is_floating(col.type) else col for col in table.columns]
    rounded = pa.table(columns, names=table.column_names)

    def _w(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            fh.write(f"# facies_ml {__version__} prediction for well {pred.well.name}. "
                     f"{CAUTION}\n".encode())
            pacsv.write_csv(rounded, fh, pacsv.WriteOptions(quoting_style="needed"))

    return atomic_write(path, _w)


def write_prediction_parquet(pred: WellPrediction, path: str | Path, table: Any = None) -> Path:
    """Parquet copy of the prediction table; the caution is stored in the file metadata.
    Dictionary encoding only for the label and code columns (not for continuous values)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = prediction_arrow(pred) if table is None else table
    meta = dict(table.schema.metadata or {})
    meta[b"facies_ml.caution"] = CAUTION.encode()
    meta[b"facies_ml.well"] = pred.well.name.encode()
    table = table.replace_schema_metadata(meta)
    categorical = [f.name for f in table.schema if not pa.types.is_floating(f.type)]
    return atomic_write(path, lambda tmp: pq.write_table(table, tmp, use_dictionary=categorical))


LAS_NULL = -999.25
WELL_ITEMS = ("UWI", "COMP", "FLD", "LOC", "DATE")  # ~Well items carried over from the input


def _las_input_columns(pred: WellPrediction, frame: pd.DataFrame
                       ) -> tuple[list[tuple[str, str, str, np.ndarray]], np.ndarray]:
    """(depth + input curves as LAS columns, index of the prediction row for each LAS row).

    With the file's curves kept at intake (``Well.original``) the LAS rows are the file's own
    depths and curves, untouched; each row takes the prediction at the nearest working-grid
    sample within half a step, else NULL. Without them (a well built in code) the rows are the
    working grid and the curves the conditioned ones."""
    well = pred.well
    orig = well.original
    if orig is None or orig.empty:
        columns = [("DEPT", well.original_depth_unit.upper(), "depth",
                    frame.iloc[:, 0].to_numpy(float))]
        columns += [(role.upper()[:16], "", f"conditioned {role}", frame[role].to_numpy(float))
                    for role in well.roles]
        return columns, np.arange(len(frame))
    depth = orig.index.to_numpy(float)
    grid = np.asarray(well.to_original_depth(frame.index.to_numpy(float)), dtype=float)
    half = 0.5 * abs(float(well.to_original_depth(well.step)))
    rows = nearest_samples(grid, depth, half)
    name = str(orig.index.name or "DEPT")
    columns = [(name.replace(":", "_"), well.original_units.get(name, "")
                or well.original_depth_unit.upper(), "depth (as in the input file)", depth)]
    columns += [(str(c).replace(":", "_"), well.original_units.get(c, ""),
                 well.original_descr.get(c, "") or "from the input file",
                 orig[c].to_numpy(float)) for c in orig.columns]
    return columns, rows


def write_prediction_las(pred: WellPrediction, path: str | Path, facies_codes: list[int],
                         facies_labels: list[str], tract_names: list[str]) -> Path:
    """LAS 2.0: the input file's curves (mnemonics, units, depths and values as read; NULL
    -999.25) followed by the predicted codes, probabilities and out-of-range flag; depth in
    the file's unit, increasing downward.

    The code-to-label mapping is written as ~Parameter entries and in ~Other with the caution.
    """
    frame = prediction_frame(pred)
    well = pred.well
    las = lasio.LASFile()
    las.well["WELL"].value = well.name
    las.well["NULL"].value = LAS_NULL
    for key in WELL_ITEMS:
        if well.header.get(key):
            las.well[key].value = str(well.header[key])
    las.other = (f"Written by facies_ml {__version__}. {CAUTION} "
                 "Lithofacies codes: " + ", ".join(f"{c}={lab}" for c, lab in
                                                   zip(facies_codes, facies_labels, strict=True))
                 + ". Systems tract codes: " + ", ".join(f"{i + 1}={t}" for i, t in
                                                         enumerate(tract_names)) + ".")
    inputs, rows = _las_input_columns(pred, frame)
    hit = rows >= 0

    def at_rows(values: np.ndarray) -> np.ndarray:
        return np.where(hit, np.asarray(values, dtype=float)[np.clip(rows, 0, None)], np.nan)

    added: list[tuple[str, str, str, np.ndarray]] = [
        ("LITHO_CODE", "", "predicted lithofacies code (see ~Parameter)",
         at_rows(frame["lithofacies_code"].to_numpy(float)))]
    added += [(f"P_{lab}"[:16], "", f"probability of {lab}", at_rows(frame[f"p_{lab}"]))
              for lab in facies_labels]
    if "systems_tract" in frame:
        added.append(("TRACT_CODE", "", "predicted systems tract code (see ~Parameter)",
                      at_rows(frame["systems_tract"].to_numpy(float) + 1)))
        added += [(f"P_{name}"[:16], "", f"posterior probability of {name}",
                   at_rows(frame[f"p_{name}"])) for name in tract_names]
    added.append(("OUT_OF_RANGE", "", "1 = features outside the training envelope",
                  at_rows(frame["out_of_range"].to_numpy(float))))
    taken = {c[0].upper() for c in added}
    renamed = []
    for mnemonic, unit, descr, values in inputs:  # an input curve never hides a predicted one
        while mnemonic.upper() in taken:
            mnemonic += "_IN"
        taken.add(mnemonic.upper())
        renamed.append((mnemonic, unit, descr, values))
    columns = renamed + added
    for mnemonic, unit, descr, _ in columns:
        las.append_curve(mnemonic, np.empty(0), unit=unit, descr=descr)
    data = np.column_stack([c[3] for c in columns])
    data = np.where(np.isfinite(data), data, LAS_NULL)
    depth = data[:, 0]
    diffs = np.diff(depth)
    step = float(np.median(diffs)) if len(diffs) else 0.0
    if len(diffs) and not np.allclose(diffs, step, rtol=1e-3, atol=1e-6):
        step = 0.0  # LAS 2.0: STEP 0 when the increment is not constant
    for code, lab in zip(facies_codes, facies_labels, strict=True):
        las.params.append(lasio.HeaderItem(f"LITH{code}", "", lab, "lithofacies code"))
    for i, name in enumerate(tract_names):
        las.params.append(lasio.HeaderItem(f"TRACT{i + 1}", "", name, "systems tract code"))

    def _w(tmp: Path) -> None:
        # lasio writes the header sections and the ~A line; the data block (one depth step
        # per line, NULL for missing, aligned columns) is formatted by numpy, much faster.
        with open(tmp, "w") as fh:
            las.write(fh, version=2.0, wrap=False, STRT=float(depth[0]), STOP=float(depth[-1]),
                      STEP=round(step, 6))
        with open(tmp, "ab") as fh:
            fh.write(fixed_decimal_rows(data, 5))

    return atomic_write(path, _w)


def fixed_decimal_rows(data: np.ndarray, decimals: int = 5) -> bytes:
    """Rows of a 2-D float array as text: each value fixed-point with ``decimals`` places (as
    ``'%.{decimals}f'``, rounded half to even on value x 10^decimals), right-aligned in a column
    as wide as its longest value plus one space; one line per row. Vectorised (the LAS data
    block of a 10,000-sample well in milliseconds). Values must be finite; with any |x| >= 1e12
    Python's formatting is used instead (same text, unaligned, slower)."""
    data = np.asarray(data, dtype=float)
    if data.ndim != 2:
        raise ValueError("fixed_decimal_rows needs a 2-D array")
    n, k = data.shape
    if n == 0 or k == 0:
        return b""
    if not np.all(np.isfinite(data)):
        raise ValueError("fixed_decimal_rows needs finite values (write NULL for missing)")
    if np.abs(data).max() >= 1e12:  # rare: Python's own formatting, row by row
        return "".join(" " + " ".join(f"{v:.{int(decimals)}f}" for v in row) + "\n"
                       for row in data).encode()
    decimals = int(decimals)
    cols = np.ascontiguousarray(data.T)  # columns x rows: each column contiguous
    q = np.rint(np.abs(cols) * 10.0 ** decimals).astype(np.int64)
    negative = (cols < 0) & (q > 0)
    whole, frac = np.divmod(q, 10 ** decimals)
    small = np.int32 if whole.max() < 2**31 else np.int64  # int32 division is much faster
    whole, frac = whole.astype(small), frac.astype(np.int32)
    n_digits = np.maximum(1, np.searchsorted(10 ** np.arange(13, dtype=np.int64), whole,
                                             side="right"))
    int_width = (n_digits + negative).max(axis=1)
    point = 1 + decimals if decimals > 0 else 0
    widths = 1 + int_width + point
    ends = np.cumsum(widths) - point  # one past each column's integer part
    # Characters x rows (one contiguous row per character position); digits are peeled off
    # from the right of every column at once.
    out = np.full((int(widths.sum()) + 1, n), ord(" "), dtype=np.uint8)
    out[-1] = ord("\n")
    zero = ord("0")
    rest = whole
    for p in range(int(int_width.max())):
        rest, digit = np.divmod(rest, 10)
        for j in np.flatnonzero(int_width > p):
            row = out[ends[j] - 1 - p]
            np.copyto(row, digit[j] + zero, where=n_digits[j] > p, casting="unsafe")
            row[negative[j] & (n_digits[j] == p)] = ord("-")
    if decimals > 0:
        out[ends] = ord(".")
        rest = frac
        for p in range(decimals - 1, -1, -1):
            rest, digit = np.divmod(rest, 10)
            out[ends + 1 + p] = digit + zero
    return np.ascontiguousarray(out.T).tobytes()


def write_tops(rows: Iterable[tuple[str, str, list[Any]]], path: str | Path) -> Path:
    return write_table(tops_frame(rows), path, f"facies_ml predicted surfaces. {CAUTION}")
