"""Core descriptions -> per-sample labels, and the bulk core-to-log depth shift.

Core interval and core gamma depths are in the well's ORIGINAL depth unit (as in its log file)
and in core (driller's) depth. A depth ``shift`` in the working unit is ADDED to core depth to
get log depth. Depth increases downward; nothing here is stratigraphic (no up-section pass).
Row numbers in messages count data rows from 1 (the header line is not counted).
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from facies_ml.config import Config, FaciesScheme
from facies_ml.errors import InputError
from facies_ml.wells.model import Well, depth_factor

MIN_CORE_GAMMA_SAMPLES = 10


def _read_csv(path: str | Path) -> pd.DataFrame:
    """The CSV as text cells, lower-case column names. A file that is not UTF-8 is read as
    Windows-1252 / Latin-1 with a console warning naming the byte position."""
    from facies_ml.wells.build import emit_warnings
    from facies_ml.wells.table import read_frame

    warnings: list[str] = []
    frame = read_frame(path, warnings=warnings)
    emit_warnings(warnings)
    frame.columns = [c.strip().lower() for c in frame.columns]
    return frame


def _blank(value: object) -> bool:
    return value is None or (isinstance(value, float) and np.isnan(value)) or str(value).strip() in (
        "", "nan", "<NA>")


def _row_well(rec: dict[str, Any], src: str, row: int, known: set[str] | None) -> str:
    """The well name of one core-file row (1-based ``row``); blank or unknown is an error."""
    well = "" if _blank(rec["well"]) else str(rec["well"]).strip()
    if not well:
        raise InputError("blank well name", file=src, row=row)
    if known is not None and well not in known:
        raise InputError("well is not among the wells read", file=src, row=row, well=well)
    return well


def _number(value: object, src: str, row: int, column: str) -> float:
    try:
        out = float(str(value).strip())
    except ValueError:
        out = float("nan")
    if not np.isfinite(out):
        raise InputError(f"{column} {value!r} is not a number", file=src, row=row, curve=column)
    return out


def read_core_intervals(path: str | Path, scheme: FaciesScheme,
                        known_wells: Iterable[str] | None = None) -> pd.DataFrame:
    """Read a core interval CSV: columns ``well, top, base, lithofacies[, systems_tract]
    [, sequence]``.

    ``lithofacies`` is a scheme label or code; ``systems_tract`` one of the scheme's tracts
    (either may be blank in a row, not both). Returns well, top, base, lithofacies (class index,
    -1 = none), systems_tract (index into ``scheme.systems_tracts``, -1 = none),
    lithofacies_label, sequence (the geologist's basin-wide sequence name, "" = none), row.
    Depths in the well's original unit, top < base (downward).
    """
    src = str(path)
    frame = _read_csv(path)
    need = ["well", "top", "base", "lithofacies"]
    missing = [c for c in need if c not in frame.columns]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)} (have: "
                         f"{', '.join(frame.columns)})", file=src)
    known = None if known_wells is None else {str(w) for w in known_wells}
    tracts_upper = [t.upper() for t in scheme.systems_tracts]
    rows: list[dict[str, Any]] = []
    for i, rec in enumerate(frame.to_dict("records"), start=1):
        well = _row_well(rec, src, i, known)
        top = _number(rec["top"], src, i, "top")
        base = _number(rec["base"], src, i, "base")
        if top >= base:
            raise InputError(f"top {top:g} is not above base {base:g} (depth increases "
                             "downward)", file=src, row=i, well=well)
        lab = rec["lithofacies"]
        tract = rec.get("systems_tract")
        if _blank(lab) and _blank(tract):
            raise InputError("neither a lithofacies nor a systems tract", file=src, row=i,
                             well=well)
        litho = -1
        if not _blank(lab):
            idx = scheme.index_of(lab)
            if idx is None:
                raise InputError(f"lithofacies {str(lab).strip()!r} is not in scheme "
                                 f"{scheme.name} ({', '.join(scheme.labels)})", file=src, row=i,
                                 well=well)
            litho = idx
        st = -1
        if not _blank(tract):
            t = str(tract).strip().upper()
            if t not in tracts_upper:
                raise InputError(f"systems tract {str(tract).strip()!r} is not one of "
                                 f"{', '.join(scheme.systems_tracts)}", file=src, row=i, well=well)
            st = tracts_upper.index(t)
        seq = rec.get("sequence")
        rows.append({"well": well, "top": top, "base": base, "lithofacies": litho,
                     "systems_tract": st, "sequence": "" if _blank(seq) else str(seq).strip(),
                     "lithofacies_label": scheme.labels[litho] if litho >= 0 else "", "row": i})
    out = pd.DataFrame(rows, columns=["well", "top", "base", "lithofacies", "systems_tract",
                                      "lithofacies_label", "sequence", "row"])
    if out.empty:
        raise InputError("no core intervals", file=src)
    for well, g in out.sort_values(["well", "top", "base"], kind="mergesort").groupby("well"):
        tops, bases, rws = g["top"].to_numpy(), g["base"].to_numpy(), g["row"].to_numpy()
        clash = np.flatnonzero(tops[1:] < bases[:-1])
        if clash.size:
            k = int(clash[0])
            raise InputError(f"interval {tops[k + 1]:g}-{bases[k + 1]:g} overlaps row "
                             f"{rws[k]} ({tops[k]:g}-{bases[k]:g})", file=src,
                             row=int(rws[k + 1]), well=str(well))
    return out.astype({"lithofacies": int, "systems_tract": int})


def intervals_to_labels(well: Well, intervals: pd.DataFrame, shift: float = 0.0) -> pd.DataFrame:
    """Per-sample labels on ``well.curves.index``: lithofacies and systems_tract (int, -1 = none)
    and sequence (the core file's sequence name, "" = none).

    Interval depths (original unit, core depth) are converted to the working unit and ``shift``
    (working unit) is added. A sample at depth d is labelled when top <= d < base.
    """
    depth = well.depth
    litho = np.full(depth.size, -1, dtype=int)
    tract = np.full(depth.size, -1, dtype=int)
    seq_name = np.full(depth.size, "", dtype=object)
    mine = intervals[intervals["well"].astype(str) == well.name]
    f = depth_factor(well.original_depth_unit, well.depth_unit)
    for rec in mine.itertuples(index=False):
        top, base = rec.top * f + shift, rec.base * f + shift
        inside = (depth >= top - 1e-9) & (depth < base - 1e-9)
        if rec.lithofacies >= 0:
            litho[inside] = rec.lithofacies
        if rec.systems_tract >= 0:
            tract[inside] = rec.systems_tract
        name = getattr(rec, "sequence", "")
        if isinstance(name, str) and name:
            seq_name[inside] = name
    return pd.DataFrame({"lithofacies": litho, "systems_tract": tract, "sequence": seq_name},
                        index=well.curves.index)


def read_core_gamma(path: str | Path) -> pd.DataFrame:
    """Core gamma CSV with columns ``well, depth, core_gr_api`` (depth in the well's original
    unit, core depth). Rows are returned sorted by well and depth (downward)."""
    src = str(path)
    frame = _read_csv(path)
    missing = [c for c in ("well", "depth", "core_gr_api") if c not in frame.columns]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}", file=src)
    rows = []
    for i, rec in enumerate(frame.to_dict("records"), start=1):
        if _blank(rec["well"]):
            raise InputError("blank well name", file=src, row=i)
        rows.append({"well": str(rec["well"]).strip(),
                     "depth": _number(rec["depth"], src, i, "depth"),
                     "core_gr_api": _number(rec["core_gr_api"], src, i, "core_gr_api")})
    if not rows:
        raise InputError("no core gamma rows", file=src)
    return pd.DataFrame(rows).sort_values(["well", "depth"], kind="mergesort").reset_index(
        drop=True)


def _corr(a: np.ndarray, b: np.ndarray) -> float:
    ok = np.isfinite(a) & np.isfinite(b)
    if ok.sum() < MIN_CORE_GAMMA_SAMPLES:
        return float("nan")
    a, b = a[ok] - a[ok].mean(), b[ok] - b[ok].mean()
    den = np.sqrt((a * a).sum() * (b * b).sum())
    return float((a * b).sum() / den) if den > 0 else float("nan")


def estimate_depth_shift(well: Well, core_gamma: pd.DataFrame, max_shift: float,
                         min_correlation: float) -> dict[str, Any]:
    """Bulk core-to-log shift (working unit, added to core depth) maximising the Pearson
    correlation of core gamma with log GR, searched every ``well.step`` within +/- max_shift
    and refined by a parabola through the best three. ``applied`` is False (shift reported, not
    used) when the correlation is below ``min_correlation``, the best is at the window edge, or
    there is too little overlap."""
    def result(shift: float, corr: float, applied: bool, reason: str) -> dict[str, Any]:
        return {"shift": float(shift), "correlation": float(corr) if np.isfinite(corr) else None,
                "applied": bool(applied), "reason": reason, "unit": well.depth_unit}

    g = core_gamma[core_gamma["well"].astype(str) == well.name]
    if g.empty:
        return result(0.0, float("nan"), False, "no core gamma for this well")
    if "gr_api" not in well.curves:
        return result(0.0, float("nan"), False, "well has no gamma-ray log")
    gr = well.curves["gr_api"].to_numpy(dtype=float)
    ok = np.isfinite(gr)
    if ok.sum() < MIN_CORE_GAMMA_SAMPLES:
        return result(0.0, float("nan"), False, "too few gamma-ray log samples")
    d_log, gr = well.depth[ok], gr[ok]
    core_d = g["depth"].to_numpy(dtype=float) * depth_factor(well.original_depth_unit,
                                                               well.depth_unit)
    core_gr = g["core_gr_api"].to_numpy(dtype=float)
    n = int(np.floor(max_shift / well.step + 1e-9))
    shifts = np.arange(-n, n + 1) * well.step
    corrs = np.array([_corr(core_gr, np.interp(core_d + s, d_log, gr, left=np.nan,
                                               right=np.nan)) for s in shifts])
    if not np.isfinite(corrs).any():
        return result(0.0, float("nan"), False, "core gamma does not overlap the log")
    k = int(np.nanargmax(corrs))
    best, corr = float(shifts[k]), float(corrs[k])
    if 0 < k < len(shifts) - 1 and np.isfinite(corrs[k - 1]) and np.isfinite(corrs[k + 1]):
        y0, y1, y2 = corrs[k - 1], corrs[k], corrs[k + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            best += float(np.clip(0.5 * (y0 - y2) / den, -0.5, 0.5)) * well.step
    if k in (0, len(shifts) - 1) and n > 0:
        return result(best, corr, False, f"best shift is at the edge of the +/-{max_shift:g} "
                                         f"{well.depth_unit} search window; not applied")
    if corr < min_correlation:
        return result(best, corr, False, f"correlation {corr:.3f} below {min_correlation:g}; "
                                         "not applied")
    return result(best, corr, True, f"correlation {corr:.3f} at shift {best:+g} {well.depth_unit}")


def align_core_labels(wells: list[Well], intervals: pd.DataFrame | str | Path,
                      core_gamma: pd.DataFrame | None, config: Config) -> dict[str, pd.DataFrame]:
    """Labels per cored well (those of ``wells`` named in ``intervals``) after the depth shift.

    The shift (or the reason none was applied) is recorded in ``well.intake["depth_shift"]``.
    """
    if not isinstance(intervals, pd.DataFrame):
        intervals = read_core_intervals(intervals, config.facies)
    ds = dict(config.section("intake").get("depth_shift") or {})
    enabled = bool(ds.get("enabled", True))
    names = set(intervals["well"].astype(str))
    out: dict[str, pd.DataFrame] = {}
    for w in wells:
        if w.name not in names:
            continue
        if not enabled:
            info = {"shift": 0.0, "correlation": None, "applied": False,
                    "reason": "intake.depth_shift.enabled is false", "unit": w.depth_unit}
        elif core_gamma is None:
            info = {"shift": 0.0, "correlation": None, "applied": False,
                    "reason": "no core gamma file", "unit": w.depth_unit}
        else:
            info = estimate_depth_shift(w, core_gamma, float(ds.get("max_shift", 6.0)),
                                        float(ds.get("min_correlation", 0.5)))
        w.intake["depth_shift"] = info
        shift = info["shift"] if info["applied"] else 0.0
        check_core_overlap(w, intervals, shift)
        labels = intervals_to_labels(w, intervals, shift)
        if (labels["lithofacies"] < 0).all() and (labels["systems_tract"] < 0).all():
            w.intake.setdefault("notes", []).append("no core interval labels a log sample")
        out[w.name] = labels
    return out


def _interval_text(rec: Any) -> str:
    row = getattr(rec, "row", None)
    return f"{rec.top:g}-{rec.base:g}" + (f" (row {int(row)})" if row is not None else "")


def check_core_overlap(well: Well, intervals: pd.DataFrame, shift: float = 0.0) -> None:
    """Compare the core intervals of ``well`` with its logged depths (``shift`` in the working
    unit added to core depth).

    Intervals lying wholly outside the log are a warning naming the well, the count and the
    first intervals (in ``well.intake["warnings"]`` and on the console). When none overlaps,
    :class:`InputError`: a cored well that labels nothing must not pass as a training well.
    If the core would overlap once the log depths were read in the other unit (a log in metres
    labelled ft, or the reverse), the message says so with the labelled unit, the file step,
    the log and core ranges, and the fix.
    """
    from facies_ml.wells.build import SHOWN, emit_warnings, where_text

    mine = intervals[intervals["well"].astype(str) == well.name]
    if mine.empty or len(well.depth) == 0:
        return
    u = well.original_depth_unit
    f = depth_factor(u, well.depth_unit)
    half = 0.5 * well.step
    log_top, log_base = float(well.depth[0]) - half, float(well.depth[-1]) + half
    tops = mine["top"].to_numpy(float) * f + shift
    bases = mine["base"].to_numpy(float) * f + shift
    outside = (bases <= log_top) | (tops >= log_base)
    lo, hi = float(well.depth[0]) / f, float(well.depth[-1]) / f   # log range, original unit
    core_lo, core_hi = float(mine["top"].min()), float(mine["base"].max())
    if outside.all():
        other = "m" if u == "ft" else "ft"
        k = depth_factor(other, u)                         # log numbers read as ``other``
        alt = (mine["base"].to_numpy(float) > lo * k) & (mine["top"].to_numpy(float) < hi * k)
        label = well.intake.get("depth_unit_label") or u
        step = well.intake.get("file_step")
        step_text = f", file step {step:g}" if isinstance(step, int | float) else ""
        base = (f"no core interval overlaps the log: core {core_lo:g}-{core_hi:g} {u} "
                f"({len(mine)} interval(s)), log {lo:g}-{hi:g} {u} (depth labelled "
                f"{label!r}{step_text})")
        if alt.any():
            name = "metres" if other == "m" else "feet"
            raise InputError(f"{base}; the core would overlap if the log depths were {name}: "
                             f"if they are, label the log's depth {other.upper()} (LAS ~Curve "
                             f"depth and ~Well STRT/STOP/STEP; table: --depth-unit {other}) and "
                             f"give this well's core depths in {other} (core depths are in the "
                             "log file's depth unit)", file=well.source or None, well=well.name)
        raise InputError(f"{base}; check the core file's well names and depths (core depths "
                         "are in the log file's depth unit)", file=well.source or None,
                         well=well.name)
    if outside.any():
        recs = list(mine[outside].itertuples(index=False))
        shown = ", ".join(_interval_text(r) for r in recs[:SHOWN])
        more = "" if len(recs) <= SHOWN else f" (+{len(recs) - SHOWN} more)"
        msg = (f"{where_text(well.name, well.source)}: {len(recs)} of {len(mine)} core "
               f"interval(s) lie outside the logged depths {lo:g}-{hi:g} {u} and label "
               f"nothing: {shown}{more} {u}")
        well.intake.setdefault("warnings", []).append(msg)
        emit_warnings([msg])
