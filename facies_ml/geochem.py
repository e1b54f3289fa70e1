"""Core-plug geochemistry: reading plug files, published log-TOC relations, an uncalibrated
Passey proxy for wells without core TOC, and TOC / mineral models calibrated to core plugs.

Depth: plug depths are CORE depth in each well's original depth unit (as in its log file),
exactly like core intervals (:mod:`facies_ml.core`); a shift in the working unit is ADDED to
core depth to get log depth. Depth increases downward; nothing here is stratigraphic.

Units: TOC in wt % of the bulk rock; minerals (``<name>_wt_pct``) in wt % of the crystalline
fraction as XRD reports them (common practice); resistivity ohm.m, bulk density g/cm3, sonic
slowness us/ft.

Published relations used (cited beside each function):

- Passey, Creaney, Kulla, Moretti & Stroud (1990), "A practical model for organic richness
  from porosity and resistivity logs", AAPG Bulletin 74(12), 1777-1794: Delta log R and
  TOC = Delta log R * 10**(2.297 - 0.1688 LOM). The sonic (0.02 per us/ft) and density
  (-2.50 per g/cm3) scaling factors are quoted from memory. The formulas themselves live in
  :mod:`facies_ml.features` (``delta_log_r``, ``toc_passey``) and are reused here.
- Schmoker & Hester (1983), "Organic carbon in Bakken Formation, United States portion of
  Williston Basin", AAPG Bulletin 67(12), 2165-2174: TOC = 154.497 / rho_b - 57.261 (wt %)
  for the Bakken shales (from memory).
- Jarvie, Hill, Ruble & Pollastro (2007), AAPG Bulletin 91(4), 475-499: brittleness
  BI = quartz / (quartz + carbonate + clay) (from memory).
- Wang & Gale (2009), GCAGS Transactions 59, 779-793: BI = (quartz + dolomite) /
  (quartz + dolomite + calcite + clay + TOC) (from memory).

Predictions are probabilistic and must be reviewed by a qualified geoscientist before they
inform any drilling or investment decision; they defer to local regulations and licensed
practice.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.linear_model import Ridge

from facies_ml.core import _blank, _number, _read_csv, _row_well
from facies_ml.errors import InputError
from facies_ml.features import delta_log_r, toc_passey
from facies_ml.settings import GeochemSettings
from facies_ml.wells.clean import nearest_samples
from facies_ml.wells.model import Well, depth_factor

TOC_COLUMN = "toc_wt_pct"
WT_SUFFIX = "_wt_pct"
#: Models a :class:`PlugRegressor` can choose from; the first three only make sense for TOC.
TOC_FORMULAS = ("passey_density", "passey_sonic", "schmoker_density")
LEARNED = ("linear", "lightgbm")
UNCALIBRATED_LABEL = "uncalibrated (Passey Delta log R, no core TOC)"
STATE_FORMAT = "facies_ml.plug_regressor/1"


# ============================================================================ reading plugs
def _check_utf8(path: Path) -> None:
    """A CSV must be UTF-8 text: say where it is not, instead of a decoder traceback."""
    if path.suffix.lower() != ".csv" or not path.is_file():
        return
    raw = path.read_bytes()
    try:
        raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise InputError(f"not UTF-8 text (byte 0x{raw[exc.start]:02x} on line {line}); save "
                         "the file as UTF-8 CSV", file=str(path)) from None


def read_geochem(path: str | Path, settings: GeochemSettings,
                 known_wells: Iterable[str] | None = None) -> pd.DataFrame:
    """Read a core-plug geochemistry CSV (or Parquet) file.

    Columns: ``well, depth, toc_wt_pct`` and optionally any minerals as ``<name>_wt_pct``
    (e.g. ``quartz_wt_pct, carbonate_wt_pct, clay_wt_pct``); other columns are not used and
    are listed in ``frame.attrs["ignored_columns"]``. ``depth`` is core depth in the well's
    original depth unit (like the core interval file). A blank cell is "not measured"; a row
    must hold at least one measurement.

    Refused with one :class:`InputError` naming file, row (data rows from 1), well, column and
    value: missing columns, blank well, non-numeric cells, TOC outside 0..``toc_max_wt_pct``,
    a mineral outside 0..``mineral_max_wt_pct``, minerals of a plug summing above 100 +
    ``mineral_sum_tolerance_wt_pct``, a well not among ``known_wells``, the same well and depth
    twice, no rows, a CSV that is not UTF-8.

    Returns well, depth, toc_wt_pct, the mineral columns (float, NaN = not measured) and row,
    sorted by well and depth (downward).
    """
    path = Path(path)
    src = str(path)
    _check_utf8(path)
    frame = _read_csv(path)
    frame.columns = [str(c).replace("\ufeff", "").strip() for c in frame.columns]
    missing = [c for c in ("well", "depth", TOC_COLUMN) if c not in frame.columns]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)} (have: "
                         f"{', '.join(frame.columns)})", file=src)
    minerals = [c for c in frame.columns if c.endswith(WT_SUFFIX) and c != TOC_COLUMN]
    ignored = [c for c in frame.columns if c not in ("well", "depth", TOC_COLUMN, *minerals)]
    known = None if known_wells is None else {str(w) for w in known_wells}
    tol = float(settings.mineral_sum_tolerance_wt_pct)
    rows: list[dict[str, Any]] = []
    for i, rec in enumerate(frame.to_dict("records"), start=1):
        well = _row_well(rec, src, i, known)
        out: dict[str, Any] = {"well": well, "depth": _number(rec["depth"], src, i, "depth")}
        for col in (TOC_COLUMN, *minerals):
            value = rec[col]
            if _blank(value):
                out[col] = float("nan")
                continue
            try:
                v = _number(value, src, i, col)
            except InputError:
                raise InputError(f"{col} {value!r} is not a number", file=src, row=i,
                                 well=well, curve=col) from None
            high = settings.toc_max_wt_pct if col == TOC_COLUMN else settings.mineral_max_wt_pct
            if not 0.0 <= v <= high:
                raise InputError(f"{col} {v:g} is outside the physical range 0-{high:g} wt %",
                                 file=src, row=i, well=well, curve=col)
            out[col] = v
        measured = [c for c in (TOC_COLUMN, *minerals) if np.isfinite(out[c])]
        if not measured:
            raise InputError("row holds no measurement (TOC and minerals all blank)", file=src,
                             row=i, well=well)
        total = float(sum(out[c] for c in minerals if np.isfinite(out[c])))
        if minerals and total > 100.0 + tol:
            raise InputError(f"minerals sum to {total:g} wt %, more than 100 + {tol:g}",
                             file=src, row=i, well=well)
        out["row"] = i
        rows.append(out)
    cols = ["well", "depth", TOC_COLUMN, *minerals, "row"]
    table = pd.DataFrame(rows, columns=cols)
    if table.empty:
        raise InputError("no core-plug rows", file=src)
    table = table.sort_values(["well", "depth"], kind="mergesort").reset_index(drop=True)
    dup = table.duplicated(["well", "depth"], keep=False)
    if dup.any():
        first = table[dup].iloc[:2]
        raise InputError(f"depth {first['depth'].iloc[0]:g} is given twice (rows "
                         f"{int(first['row'].iloc[0])} and {int(first['row'].iloc[1])}); "
                         "average replicate measurements before loading", file=src,
                         row=int(first["row"].iloc[1]), well=str(first["well"].iloc[0]))
    table.attrs["ignored_columns"] = ignored
    table.attrs["minerals"] = minerals
    return table


def plugs_on_well(well: Well, plugs: pd.DataFrame, shift: float = 0.0,
                  max_steps: float = 0.5) -> tuple[pd.DataFrame, list[str]]:
    """Place the plugs of ``well`` on its log samples.

    Plug depth (core depth, original unit) is converted to the working unit and ``shift``
    (working unit, as :func:`facies_ml.core.estimate_depth_shift` reports) is added; each plug
    takes the nearest sample within ``max_steps`` * ``well.step``. Returns (placed plugs,
    warnings): placed plugs have columns well, row, core_depth (original unit), log_depth
    (working unit), sample (position in ``well.curves``), sample_depth (working unit) and the
    measured values; each warning is one line naming the well and the depths of plugs that
    fall outside the logged depths (they are left out, never silently).
    """
    mine = plugs[plugs["well"].astype(str) == well.name]
    values = [c for c in plugs.columns if c not in ("well", "depth", "row")]
    cols = ["well", "row", "core_depth", "log_depth", "sample", "sample_depth", *values]
    if mine.empty:
        return pd.DataFrame(columns=cols), []
    f = depth_factor(well.original_depth_unit, well.depth_unit)
    core = mine["depth"].to_numpy(float)
    log_depth = core * f + float(shift)
    idx = nearest_samples(well.depth, log_depth, float(max_steps) * well.step)
    ok = idx >= 0
    rows = (mine["row"].to_numpy(int) if "row" in mine
            else np.flatnonzero(plugs["well"].astype(str) == well.name) + 1)
    placed = pd.DataFrame({
        "well": well.name, "row": rows[ok], "core_depth": core[ok],
        "log_depth": log_depth[ok], "sample": idx[ok],
        "sample_depth": well.depth[idx[ok]] if ok.any() else np.empty(0)})
    for c in values:
        placed[c] = mine[c].to_numpy(float)[ok]
    warnings: list[str] = []
    if (~ok).any():
        off = core[~ok]
        shown = ", ".join(f"{d:g}" for d in off[:5]) + (", ..." if off.size > 5 else "")
        warnings.append(
            f"well {well.name!r}: {int((~ok).sum())} core plug(s) at core depth {shown} "
            f"{well.original_depth_unit} (shift {float(shift):+g} {well.depth_unit}) lie "
            f"outside the logged depths {well.depth[0]:g}-{well.depth[-1]:g} "
            f"{well.depth_unit}; not used")
    return placed.reindex(columns=cols), warnings


# ===================================================================== published relations
def passey_factor(lom: float) -> float:
    """Passey et al. (1990) maturity factor 10**(2.297 - 0.1688 * LOM) (wt % per log cycle);
    LOM = level of organic metamorphism."""
    return float(10.0 ** (2.297 - 0.1688 * float(lom)))


def lom_from_factor(factor: float) -> float:
    """The LOM whose Passey factor is ``factor`` (inverse of :func:`passey_factor`); NaN when
    ``factor`` is not positive."""
    if not factor > 0:
        return float("nan")
    return float((2.297 - np.log10(factor)) / 0.1688)


def toc_schmoker_bakken(rhob_g_cc: np.ndarray) -> np.ndarray:
    """Schmoker & Hester (1983) Bakken shale TOC (wt %) = 154.497 / rho_b - 57.261, rho_b in
    g/cm3 (from memory). Negative results are returned as they are."""
    return 154.497 / np.asarray(rhob_g_cc, dtype=float) - 57.261


def brittleness_jarvie(quartz: np.ndarray, carbonate: np.ndarray, clay: np.ndarray
                       ) -> np.ndarray:
    """Jarvie et al. (2007) brittleness BI = Q / (Q + C + Cl) (0..1), any common unit
    (wt %); from memory. NaN where the denominator is not positive."""
    q = np.asarray(quartz, dtype=float)
    den = q + np.asarray(carbonate, dtype=float) + np.asarray(clay, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, q / np.where(den > 0, den, 1.0), np.nan)


def brittleness_wang_gale(quartz: np.ndarray, dolomite: np.ndarray, calcite: np.ndarray,
                          clay: np.ndarray, toc: np.ndarray) -> np.ndarray:
    """Wang & Gale (2009) brittleness BI = (Q + Dol) / (Q + Dol + Cal + Cl + TOC) (0..1),
    wt %; from memory. Needs dolomite and calcite apart. NaN where the denominator is not
    positive."""
    num = np.asarray(quartz, dtype=float) + np.asarray(dolomite, dtype=float)
    den = num + np.asarray(calcite, dtype=float) + np.asarray(clay, dtype=float) + \
        np.asarray(toc, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def brittleness(table: pd.DataFrame, settings: GeochemSettings) -> pd.Series | None:
    """The brittleness index ``settings.brittleness`` from a table with mineral columns
    (``quartz_wt_pct``, ``carbonate_wt_pct``, ``clay_wt_pct``; Wang & Gale also
    ``dolomite_wt_pct``, ``calcite_wt_pct``, ``toc_wt_pct``); ``None`` when a needed column is
    missing (the caller says so)."""
    need = {"jarvie_2007": ("quartz", "carbonate", "clay"),
            "wang_gale_2009": ("quartz", "dolomite", "calcite", "clay", "toc")}
    cols = [f"{m}{WT_SUFFIX}" for m in need[settings.brittleness]]
    if any(c not in table for c in cols):
        return None
    arrays = [table[c].to_numpy(float) for c in cols]
    bi = (brittleness_jarvie(*arrays) if settings.brittleness == "jarvie_2007"
          else brittleness_wang_gale(*arrays))
    return pd.Series(bi, index=table.index, name=f"brittleness_{settings.brittleness}")


# ================================================================ uncalibrated Passey proxy
def pick_passey_baseline(features: pd.DataFrame, settings: GeochemSettings,
                         well: str | None = None) -> dict[str, Any]:
    """Delta log R baseline picked in organic-LEAN, clay-rich shale of one well.

    ``features``: a feature table of one well (:func:`facies_ml.features.build_features`, depth
    index in the working unit, downward) with ``log10_rt`` and ``rhob_g_cc`` and/or
    ``dtc_us_ft``, plus a clay indicator: ``nphi_minus_dphi`` (neutron minus density porosity,
    v/v) when present, else ``igr``.

    Why not the highest-GR shale: in a shale play the highest gamma ray is uranium carried by
    organic matter, so the richest rock would read as baseline and the proxy would be ~0 where
    TOC is highest. Clay raises the neutron porosity but hardly moves the density, while
    kerogen (~1.2-1.4 g/cm3) raises the density porosity, so the neutron-density separation
    grows with clay and shrinks with kerogen (common practice). The baseline samples are the
    ``baseline_clay_fraction`` share of samples with the largest clay indicator and, of those,
    the ``baseline_lean_fraction`` share with the LOWEST resistivity (organic-lean shale reads
    low Rt). Rbase, rho_base and dt_base are the medians over those samples (robust to
    outliers).

    Returns rt_baseline_ohmm, rhob_baseline_g_cc, dt_baseline_us_ft (None when absent),
    n_samples, clay_indicator and, when fewer than ``baseline_min_samples`` samples qualify,
    ``ok`` False with a ``reason``.
    """
    def col(name: str) -> np.ndarray | None:
        if name not in features:
            return None
        v = pd.to_numeric(features[name], errors="coerce").to_numpy(float)
        return v if np.isfinite(v).any() else None

    out: dict[str, Any] = {"ok": False, "reason": "", "rt_baseline_ohmm": None,
                           "rhob_baseline_g_cc": None, "dt_baseline_us_ft": None,
                           "n_samples": 0, "clay_indicator": None, "well": well}
    lrt = col("log10_rt")
    if lrt is None:
        out["reason"] = "no deep resistivity"
        return out
    porosity = {"rhob_g_cc": col("rhob_g_cc"), "dtc_us_ft": col("dtc_us_ft")}
    if all(v is None for v in porosity.values()):
        out["reason"] = "no density or sonic"
        return out
    for name in ("nphi_minus_dphi", "igr"):
        clay = col(name)
        if clay is not None:
            out["clay_indicator"] = name
            break
    else:
        out["reason"] = "no clay indicator (neutron-density separation or gamma-ray index)"
        return out
    ok = np.isfinite(lrt) & np.isfinite(clay)
    ok &= np.any([np.isfinite(v) for v in porosity.values() if v is not None], axis=0)
    if ok.sum() < settings.baseline_min_samples:
        out["reason"] = f"only {int(ok.sum())} samples with resistivity and a clay indicator"
        return out
    clay_rich = ok & (clay >= np.quantile(clay[ok], 1.0 - settings.baseline_clay_fraction))
    lean = clay_rich & (lrt <= np.quantile(lrt[clay_rich], settings.baseline_lean_fraction))
    n = int(lean.sum())
    out["n_samples"] = n
    if n < settings.baseline_min_samples:
        out["reason"] = (f"only {n} organic-lean shale samples (need "
                         f"{settings.baseline_min_samples})")
        return out
    out["rt_baseline_ohmm"] = float(10.0 ** np.median(lrt[lean]))
    for name, key in (("rhob_g_cc", "rhob_baseline_g_cc"), ("dtc_us_ft", "dt_baseline_us_ft")):
        v = porosity[name]
        if v is not None and np.isfinite(v[lean]).sum() >= settings.baseline_min_samples:
            out[key] = float(np.nanmedian(v[lean]))
    out["ok"] = True
    out["reason"] = (f"{n} samples: top {settings.baseline_clay_fraction:g} of {out['clay_indicator']}"
                     f", lowest {settings.baseline_lean_fraction:g} of those by resistivity")
    return out


def uncalibrated_toc(features: pd.DataFrame, settings: GeochemSettings,
                     well: str | None = None) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Passey Delta log R TOC (wt %) for a well WITHOUT core TOC: baseline from
    :func:`pick_passey_baseline`, maturity ``settings.passey_lom``. Uncalibrated: label it so
    wherever it is shown.

    ``features``: one well's feature table (depth index, working unit, downward). Returns a
    table on the same index with ``delta_log_r`` and ``toc_uncalibrated_wt_pct`` (density form
    when the baseline has a density, else sonic; NaN where curves are missing) and an info
    mapping: label, form, lom, baseline, negative_share (share of finite values below 0: they
    are KEPT, not floored, so a mean over an interval stays honest) and mean_wt_pct.
    """
    base = pick_passey_baseline(features, settings, well)
    table = pd.DataFrame(index=features.index)
    info: dict[str, Any] = {"label": UNCALIBRATED_LABEL, "lom": float(settings.passey_lom),
                            "baseline": base, "form": None, "negative_share": None,
                            "mean_wt_pct": None, "well": well}
    table["delta_log_r"] = np.nan
    table["toc_uncalibrated_wt_pct"] = np.nan
    if not base["ok"]:
        return table, info
    rt = 10.0 ** features["log10_rt"].to_numpy(float)
    if base["rhob_baseline_g_cc"] is not None:
        dlr = delta_log_r(rt, rhob=features["rhob_g_cc"].to_numpy(float),
                          rt_baseline=base["rt_baseline_ohmm"],
                          rhob_baseline=base["rhob_baseline_g_cc"])
        info["form"] = "density"
    elif base["dt_baseline_us_ft"] is not None:
        dlr = delta_log_r(rt, dt=features["dtc_us_ft"].to_numpy(float),
                          rt_baseline=base["rt_baseline_ohmm"],
                          dt_baseline=base["dt_baseline_us_ft"])
        info["form"] = "sonic"
    else:
        base["ok"] = False
        base["reason"] = "too few baseline samples with density or sonic"
        return table, info
    toc = toc_passey(dlr, settings.passey_lom)
    table["delta_log_r"] = dlr
    table["toc_uncalibrated_wt_pct"] = toc
    fin = np.isfinite(toc)
    if fin.any():
        info["negative_share"] = float((toc[fin] < 0).mean())
        info["mean_wt_pct"] = float(toc[fin].mean())
    return table, info


# ===================================================================== calibrated models
def _metrics(y: np.ndarray, pred: np.ndarray) -> dict[str, Any]:
    """Held-out scores: r2 (1 - SSres/SStot), median absolute error, bias = mean(pred - y)
    (target unit), n; on the rows where ``pred`` is finite."""
    ok = np.isfinite(pred) & np.isfinite(y)
    n = int(ok.sum())
    if n == 0:
        return {"r2": None, "median_abs_error": None, "bias": None, "n": 0}
    e = pred[ok] - y[ok]
    ss_tot = float(((y[ok] - y[ok].mean()) ** 2).sum())
    r2 = 1.0 - float((e ** 2).sum()) / ss_tot if ss_tot > 0 else None
    return {"r2": r2, "median_abs_error": float(np.median(np.abs(e))), "bias": float(e.mean()),
            "n": n}


def _column(X: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in X:
        return None
    v = X[name].to_numpy(float)
    return v if np.isfinite(v).any() else None


def _formula_input(kind: str, X: pd.DataFrame) -> np.ndarray | None:
    """The single regressor of a formula candidate, or None when its curves are missing.

    passey_density: z = log10 Rt - 2.50 rho_b; passey_sonic: z = log10 Rt + 0.02 dt
    (Passey et al. 1990: TOC = F * (z + c), so TOC is linear in z with slope F = the maturity
    factor); schmoker_density: z = 1 / rho_b (Schmoker & Hester 1983 form)."""
    lrt = _column(X, "log10_rt")
    if kind == "passey_density":
        rho = _column(X, "rhob_g_cc")
        return None if lrt is None or rho is None else lrt - 2.50 * rho
    if kind == "passey_sonic":
        dt = _column(X, "dtc_us_ft")
        return None if lrt is None or dt is None else lrt + 0.02 * dt
    if kind == "schmoker_density":
        rho = _column(X, "rhob_g_cc")
        return None if rho is None else 1.0 / rho
    raise InputError(f"unknown geochem model {kind!r}")


class PlugRegressor(BaseEstimator, RegressorMixin):
    """A log-to-core regression (TOC or one mineral) chosen among candidates by held-out wells.

    Rows are core plugs: ``X`` (n_plugs, n_features) holds the log features at each plug's
    sample (:mod:`facies_ml.features` names, e.g. ``log10_rt``, ``rhob_g_cc``, ``dtc_us_ft``),
    ``y`` (n_plugs,) the core value in wt %, ``groups`` (n_plugs,) the well of each plug.

    Candidates (``candidates``):

    - ``passey_density`` / ``passey_sonic``: Passey et al. (1990) with the baseline and the
      maturity fitted to the core by least squares (TOC = a z + b, z from
      :func:`_formula_input`; LOM from a, the baseline from b / a);
    - ``schmoker_density``: TOC = a / rho_b + b, the Schmoker & Hester (1983) form refitted;
    - ``linear``: ridge regression (``linear_alpha``) on standardised features (those finite
      in >= 90 % of the training plugs; gaps filled with training medians);
    - ``lightgbm``: small deterministic LightGBM regression on all features (NaN allowed).

    ``fit`` runs leave-one-well-out for every candidate, keeps the one with the best pooled
    held-out ``selection_metric`` (compared on the plugs every candidate could predict), then
    refits it on all plugs. The p10-p90 band (``band_quantiles``) adds the held-out residual
    quantiles of the chosen candidate, binned by predicted value into ``band_bins`` bins of
    equal plug count: residuals of wells the model never saw are what an offset well meets,
    and their spread grows with the value (TOC errors are larger in rich rock). A band from
    in-sample quantile boosting would be too narrow on new wells.

    Fitted attributes (plain data; the LightGBM booster is kept as ``booster_`` and saved with
    ``model_to_string``): ``selected_``, ``params_`` (the chosen model's numbers),
    ``feature_names_in_``, ``scores_`` (per candidate: pooled and per-well held-out r2,
    median_abs_error, bias, n), ``held_out_`` (the chosen candidate's pooled scores and the
    share of held-out plugs inside the band; the band is built from those same residuals, so
    this share is near the nominal 80 % by construction: measure new wells for the real
    figure; the chosen candidate won on these same held-out plugs, so its scores lean slightly
    optimistic), ``band_edges_`` / ``band_low_`` / ``band_high_`` (bins and residual quantiles).
    """

    def __init__(self, target: str = TOC_COLUMN,
                 candidates: Sequence[str] = ("schmoker_density", "linear", "lightgbm"),
                 selection_metric: str = "median_abs_error",
                 band_quantiles: Sequence[float] = (0.1, 0.9), band_bins: int = 3,
                 linear_alpha: float = 1.0, n_estimators: int = 200,
                 learning_rate: float = 0.05, num_leaves: int = 7, min_child_samples: int = 20,
                 subsample: float = 0.8, colsample_bytree: float = 0.8, reg_lambda: float = 1.0,
                 max_bin: int = 63, n_jobs: int = 2, random_state: int = 0) -> None:
        self.target = target
        self.candidates = candidates
        self.selection_metric = selection_metric
        self.band_quantiles = band_quantiles
        self.band_bins = band_bins
        self.linear_alpha = linear_alpha
        self.n_estimators = n_estimators
        self.learning_rate = learning_rate
        self.num_leaves = num_leaves
        self.min_child_samples = min_child_samples
        self.subsample = subsample
        self.colsample_bytree = colsample_bytree
        self.reg_lambda = reg_lambda
        self.max_bin = max_bin
        self.n_jobs = n_jobs
        self.random_state = random_state

    @classmethod
    def from_settings(cls, target: str, settings: GeochemSettings, seed: int
                      ) -> PlugRegressor:
        """The regressor for ``target`` with the project's ``geochem:`` settings (TOC uses
        ``toc_candidates``, minerals ``mineral_candidates``)."""
        b = settings.lightgbm
        cands = settings.toc_candidates if target == TOC_COLUMN else settings.mineral_candidates
        return cls(target=target, candidates=tuple(cands),
                   selection_metric=settings.selection_metric,
                   band_quantiles=tuple(settings.band_quantiles), band_bins=settings.band_bins,
                   linear_alpha=settings.linear_alpha, n_estimators=b.n_estimators,
                   learning_rate=b.learning_rate, num_leaves=b.num_leaves,
                   min_child_samples=b.min_child_samples, subsample=b.subsample,
                   colsample_bytree=b.colsample_bytree, reg_lambda=b.reg_lambda,
                   max_bin=b.max_bin, n_jobs=b.n_jobs, random_state=int(seed))

    # ------------------------------------------------------------------ candidates
    def _lgb_params(self) -> dict[str, Any]:
        seed = int(self.random_state)
        return {"objective": "regression", "learning_rate": float(self.learning_rate),
                "num_leaves": int(self.num_leaves),
                "min_data_in_leaf": int(self.min_child_samples),
                "bagging_fraction": float(self.subsample),
                "bagging_freq": 1 if self.subsample < 1 else 0,
                "feature_fraction": float(self.colsample_bytree),
                "lambda_l2": float(self.reg_lambda), "max_bin": int(self.max_bin),
                "num_threads": int(self.n_jobs), "seed": seed, "bagging_seed": seed,
                "feature_fraction_seed": seed, "data_random_seed": seed, "deterministic": True,
                "force_row_wise": True, "verbosity": -1}

    def _fit_one(self, kind: str, X: pd.DataFrame, y: np.ndarray
                 ) -> tuple[dict[str, Any], lgb.Booster | None]:
        """Fit candidate ``kind``; returns (its numbers, booster or None)."""
        if kind in TOC_FORMULAS:
            z = _formula_input(kind, X)
            if z is None:
                raise InputError(f"{kind}: the logs it needs are missing")
            ok = np.isfinite(z) & np.isfinite(y)
            if ok.sum() < 3:
                raise InputError(f"{kind}: fewer than 3 plugs with the logs it needs")
            a, b = np.polyfit(z[ok], y[ok], 1)
            params: dict[str, Any] = {"slope": float(a), "intercept": float(b)}
            if kind.startswith("passey"):
                # TOC = F (z + c): F = slope -> LOM; c = intercept / F -> baseline. The baseline
                # pair is reported at the median porosity-log value of the plugs.
                params["lom"] = lom_from_factor(a)
                c = b / a if a != 0 else float("nan")
                if kind == "passey_density":
                    rho_b = float(np.nanmedian(X["rhob_g_cc"].to_numpy(float)[ok]))
                    params["rhob_baseline_g_cc"] = rho_b
                    params["rt_baseline_ohmm"] = float(10.0 ** (2.5 * rho_b - c))
                else:
                    dt_b = float(np.nanmedian(X["dtc_us_ft"].to_numpy(float)[ok]))
                    params["dt_baseline_us_ft"] = dt_b
                    params["rt_baseline_ohmm"] = float(10.0 ** (-0.02 * dt_b - c))
            return params, None
        if kind == "linear":
            A = X.to_numpy(float)
            frac = np.isfinite(A).mean(axis=0)
            keep = frac >= 0.9
            med = np.nanmedian(np.where(np.isfinite(A), A, np.nan)[:, keep], axis=0) \
                if keep.any() else np.empty(0)
            A = A[:, keep]
            A = np.where(np.isfinite(A), A, med)
            mean, scale = A.mean(axis=0), A.std(axis=0)
            use = scale > 0
            names = [n for n, k in zip(X.columns, keep, strict=True) if k]
            names = [n for n, u in zip(names, use, strict=True) if u]
            if not names:
                raise InputError("linear: no feature varies across the plugs")
            Z = (A[:, use] - mean[use]) / scale[use]
            model = Ridge(alpha=float(self.linear_alpha)).fit(Z, y)
            return {"features": names, "median": med[use], "mean": mean[use],
                    "scale": scale[use], "coef": np.asarray(model.coef_, float),
                    "intercept": float(model.intercept_)}, None
        if kind == "lightgbm":
            data = lgb.Dataset(X.to_numpy(float), label=y, feature_name=list(X.columns),
                               free_raw_data=True)
            booster = lgb.train(self._lgb_params(), data, num_boost_round=int(self.n_estimators))
            return {"features": list(X.columns)}, booster
        raise InputError(f"unknown geochem model {kind!r} (choose from "
                         f"{', '.join(TOC_FORMULAS + LEARNED)})")

    @staticmethod
    def _predict_one(kind: str, params: dict[str, Any], booster: lgb.Booster | None,
                     X: pd.DataFrame) -> np.ndarray:
        if kind in TOC_FORMULAS:
            z = _formula_input(kind, X)
            if z is None:
                return np.full(len(X), np.nan)
            return params["slope"] * z + params["intercept"]
        if kind == "linear":
            A = X.reindex(columns=params["features"]).to_numpy(float)
            A = np.where(np.isfinite(A), A, np.asarray(params["median"], float))
            Z = (A - np.asarray(params["mean"], float)) / np.asarray(params["scale"], float)
            return Z @ np.asarray(params["coef"], float) + float(params["intercept"])
        if booster is None:
            raise InputError("lightgbm model has no booster")
        A = X.reindex(columns=params["features"]).to_numpy(float)
        return booster.predict(A, num_threads=1)

    # ------------------------------------------------------------------ API
    def fit(self, X: pd.DataFrame, y: np.ndarray, groups: np.ndarray) -> PlugRegressor:
        """Fit on plugs: ``X`` (n_plugs, n_features) features, ``y`` (n_plugs,) core values in
        wt % (finite), ``groups`` (n_plugs,) well names (at least two wells)."""
        if not isinstance(X, pd.DataFrame):
            raise InputError("plug features must be a DataFrame with feature names")
        y = np.asarray(y, dtype=float)
        groups = np.asarray(groups).astype(str)
        if not (len(X) == len(y) == len(groups)):
            raise InputError(f"{len(X)} feature rows, {len(y)} values and {len(groups)} well "
                             "names: they must match")
        if not np.isfinite(y).all():
            raise InputError(f"{self.target}: drop plugs without a value before fitting "
                             f"(row {int(np.argmin(np.isfinite(y)))} is blank)")
        try:
            X = X.astype(float)
        except (TypeError, ValueError):
            raise InputError("plug features hold non-numeric values") from None
        wells = sorted(set(groups))
        if len(wells) < 2:
            raise InputError(f"{self.target}: plugs from at least two wells are needed to "
                             f"choose and score a model on held-out wells (have {wells})")
        q = tuple(float(v) for v in self.band_quantiles)
        if len(q) != 2 or not 0 < q[0] < q[1] < 1:
            raise InputError(f"band_quantiles must be two values 0 < low < high < 1, not {q}")
        if self.selection_metric not in ("r2", "median_abs_error"):
            raise InputError(f"selection_metric must be r2 or median_abs_error, not "
                             f"{self.selection_metric!r}")
        cands = list(dict.fromkeys(self.candidates))
        if not cands:
            raise InputError("no candidate models")
        for kind in cands:
            if kind not in TOC_FORMULAS + LEARNED:
                raise InputError(f"unknown geochem model {kind!r} (choose from "
                                 f"{', '.join(TOC_FORMULAS + LEARNED)})")
        self.feature_names_in_ = list(X.columns)
        oof: dict[str, np.ndarray] = {}
        self.scores_: dict[str, dict[str, Any]] = {}
        self.skipped_: dict[str, str] = {}
        for kind in cands:
            pred = np.full(len(y), np.nan)
            try:
                for well in wells:
                    test = groups == well
                    params, booster = self._fit_one(kind, X[~test], y[~test])
                    pred[test] = self._predict_one(kind, params, booster, X[test])
            except InputError as exc:
                self.skipped_[kind] = str(exc)
                continue
            oof[kind] = pred
            per_well = {w: _metrics(y[groups == w], pred[groups == w]) for w in wells}
            self.scores_[kind] = {**_metrics(y, pred), "coverage": float(np.isfinite(pred).mean()),
                                  "per_well": per_well}
        if not oof:
            raise InputError(f"{self.target}: no candidate model could be fitted ("
                             + "; ".join(self.skipped_.values()) + ")")
        common = np.all([np.isfinite(p) for p in oof.values()], axis=0)
        best, best_score = None, None
        for kind, pred in oof.items():
            m = _metrics(y[common], pred[common])
            self.scores_[kind]["selection_score"] = m[self.selection_metric]
            s = m[self.selection_metric]
            if s is None:
                continue
            better = (best_score is None or (s > best_score if self.selection_metric == "r2"
                                             else s < best_score))
            if better:
                best, best_score = kind, s
        if best is None:
            raise InputError(f"{self.target}: no candidate gave a held-out score")
        self.selected_ = best
        pred = oof[best]
        ok = np.isfinite(pred)
        resid = y[ok] - pred[ok]
        nb = max(1, min(int(self.band_bins), int(ok.sum()) // 30))
        edges = np.quantile(pred[ok], np.linspace(0, 1, nb + 1))[1:-1] if nb > 1 else np.empty(0)
        bins = np.searchsorted(edges, pred[ok], side="right")
        self.band_edges_ = np.asarray(edges, float)
        self.band_low_ = np.array([np.quantile(resid[bins == b], q[0]) for b in range(nb)])
        self.band_high_ = np.array([np.quantile(resid[bins == b], q[1]) for b in range(nb)])
        lo, hi = self._band(pred[ok])
        inside = (y[ok] >= lo) & (y[ok] <= hi)
        self.held_out_ = {**{k: v for k, v in self.scores_[best].items() if k != "per_well"},
                          "per_well": self.scores_[best]["per_well"],
                          "band_coverage": float(inside.mean()),
                          "band_quantiles": list(q)}
        self.params_, self.booster_ = self._fit_one(best, X, y)
        # kept for reduced models of wells that lack a log (:meth:`without`)
        self.train_X_ = X.to_numpy(float)
        self.train_y_ = y
        self.train_groups_ = [str(v) for v in groups]
        return self

    def inputs(self) -> list[str]:
        """The features the chosen model reads."""
        self._check_fitted()
        fixed = {"passey_density": ["log10_rt", "rhob_g_cc"],
                 "passey_sonic": ["log10_rt", "dtc_us_ft"], "schmoker_density": ["rhob_g_cc"]}
        return list(fixed.get(self.selected_) or self.params_["features"])

    def missing_inputs(self, X: pd.DataFrame) -> list[str]:
        """Inputs of the chosen model that ``X`` lacks entirely (absent or all NaN), e.g. a
        well logged without PE."""
        return [f for f in self.inputs()
                if f not in X or not np.isfinite(X[f].to_numpy(float)).any()]

    def without(self, drop: Sequence[str]) -> PlugRegressor:
        """The same regressor refitted on the training plugs without the features ``drop``
        (candidates chosen and scored again on held-out wells), cached per feature set. A well
        lacking a log gets this instead of a model filling the log's place with NaN."""
        self._check_fitted()
        key = ",".join(sorted(set(drop)))
        cache: dict[str, PlugRegressor] = self.__dict__.setdefault("reduced_", {})
        if key not in cache:
            cols = [c for c in self.feature_names_in_ if c not in set(drop)]
            if not cols:
                raise InputError(f"{self.target}: no feature left without {key}")
            X = pd.DataFrame(np.asarray(self.train_X_, float), columns=self.feature_names_in_)
            cache[key] = clone(self).fit(X[cols], np.asarray(self.train_y_, float),
                                         np.asarray(self.train_groups_))
        return cache[key]

    def _band(self, mean: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        b = np.searchsorted(self.band_edges_, np.where(np.isfinite(mean), mean, 0.0),
                            side="right")
        return mean + self.band_low_[b], mean + self.band_high_[b]

    def _check_fitted(self) -> None:
        if not hasattr(self, "selected_"):
            raise InputError(f"{self.target} model is not fitted")

    def predict(self, X: pd.DataFrame) -> np.ndarray:
        """Mean prediction (n_samples,) in wt %, from :meth:`without` the missing logs when
        ``X`` lacks an input entirely; NaN where the logs are missing in places. Values are not
        clipped (a negative TOC shows a model outside its range)."""
        return self._serving(X)._predict_raw(X)

    def _predict_raw(self, X: pd.DataFrame) -> np.ndarray:
        self._check_fitted()
        return np.asarray(self._predict_one(self.selected_, self.params_, self.booster_, X),
                          dtype=float)

    def _serving(self, X: pd.DataFrame) -> PlugRegressor:
        missing = self.missing_inputs(X)
        return self.without(missing) if missing else self

    def model_name(self, X: pd.DataFrame) -> str:
        """What serves ``X``: the chosen candidate, and the logs left out if any."""
        missing = self.missing_inputs(X)
        if not missing:
            return self.selected_
        return f"{self.without(missing).selected_} without {', '.join(sorted(missing))}"

    def predict_band(self, X: pd.DataFrame) -> pd.DataFrame:
        """``<target>`` (mean), ``<target>_p10`` and ``<target>_p90`` (the ``band_quantiles``;
        named p10/p90 for the defaults) per sample, on ``X``'s index."""
        model = self._serving(X)
        mean = model._predict_raw(X)
        lo, hi = model._band(mean)
        ql, qh = (round(100 * float(v)) for v in self.band_quantiles)
        return pd.DataFrame({self.target: mean, f"{self.target}_p{ql}": lo,
                             f"{self.target}_p{qh}": hi}, index=X.index)

    # ------------------------------------------------------------------ state as data
    def to_state(self) -> dict[str, Any]:
        """Everything needed to predict, as JSON-ready data (no pickle): parameters, fitted
        numbers and the LightGBM booster as its own text model (``model_to_string``)."""
        self._check_fitted()

        def plain(v: Any) -> Any:
            if isinstance(v, np.ndarray):
                return [plain(x) for x in v.tolist()]
            if isinstance(v, dict):
                return {str(k): plain(x) for k, x in v.items()}
            if isinstance(v, (list, tuple)):
                return [plain(x) for x in v]
            if isinstance(v, (np.floating, float)):
                return float(v) if np.isfinite(v) else None
            if isinstance(v, np.integer):
                return int(v)
            return v

        return {"format": STATE_FORMAT, "params": plain(self.get_params()),
                "selected": self.selected_, "fitted": plain(self.params_),
                "booster": None if self.booster_ is None else self.booster_.model_to_string(),
                "feature_names_in": list(self.feature_names_in_),
                "band_edges": plain(self.band_edges_), "band_low": plain(self.band_low_),
                "band_high": plain(self.band_high_), "scores": plain(self.scores_),
                "skipped": dict(self.skipped_), "held_out": plain(self.held_out_),
                "train_X": plain(np.where(np.isfinite(self.train_X_), self.train_X_, np.nan)),
                "train_y": plain(self.train_y_), "train_groups": list(self.train_groups_)}

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> PlugRegressor:
        """Rebuild from :meth:`to_state` output (refuses anything else)."""
        if not isinstance(state, dict) or state.get("format") != STATE_FORMAT:
            raise InputError("not a saved core-plug model state")
        params = dict(state["params"])
        for key in ("candidates", "band_quantiles"):
            params[key] = tuple(params[key])
        obj = cls(**params)
        obj.selected_ = str(state["selected"])
        fitted = dict(state["fitted"])
        for key in ("median", "mean", "scale", "coef"):
            if key in fitted:
                fitted[key] = np.asarray(fitted[key], dtype=float)
        obj.params_ = fitted
        obj.booster_ = None if state["booster"] is None else lgb.Booster(
            model_str=state["booster"])
        obj.feature_names_in_ = list(state["feature_names_in"])
        obj.band_edges_ = np.asarray(state["band_edges"], dtype=float)
        obj.band_low_ = np.asarray(state["band_low"], dtype=float)
        obj.band_high_ = np.asarray(state["band_high"], dtype=float)
        obj.scores_ = state["scores"]
        obj.skipped_ = dict(state["skipped"])
        obj.held_out_ = state["held_out"]
        obj.train_X_ = np.asarray(state["train_X"], dtype=float).reshape(
            -1, len(obj.feature_names_in_))
        obj.train_y_ = np.asarray(state["train_y"], dtype=float)
        obj.train_groups_ = [str(v) for v in state["train_groups"]]
        return obj


# ======================================================================= convenience
def fit_plug_models(X: pd.DataFrame, plugs: pd.DataFrame, settings: GeochemSettings, seed: int
                    ) -> dict[str, PlugRegressor]:
    """One :class:`PlugRegressor` per measured target (TOC and each mineral column).

    ``X`` (n_plugs, n_features): features at the placed plugs' samples, row-aligned with
    ``plugs`` (from :func:`plugs_on_well`, all cored wells concatenated). For each target the
    plugs without a value are left out; a target measured in fewer than two wells is skipped
    (not in the result; the caller reports it).
    """
    if len(X) != len(plugs):
        raise InputError(f"{len(X)} feature rows for {len(plugs)} plugs")
    targets = [c for c in plugs.columns if c.endswith(WT_SUFFIX)]
    out: dict[str, PlugRegressor] = {}
    for t in targets:
        have = np.isfinite(plugs[t].to_numpy(float))
        if plugs.loc[have, "well"].nunique() < 2:
            continue
        model = PlugRegressor.from_settings(t, settings, seed)
        out[t] = model.fit(X[have].reset_index(drop=True), plugs.loc[have, t].to_numpy(float),
                           plugs.loc[have, "well"].to_numpy())
    return out


def predict_geochem(models: dict[str, PlugRegressor], X: pd.DataFrame,
                    settings: GeochemSettings) -> pd.DataFrame:
    """Calibrated TOC and minerals for one well's feature table ``X`` (depth index, working
    unit, downward): each target's mean, p10 and p90 (wt %), and the brittleness index of
    ``settings.brittleness`` from the mean minerals when they were modelled."""
    parts = [m.predict_band(X) for m in models.values()]
    table = pd.concat(parts, axis=1) if parts else pd.DataFrame(index=X.index)
    bi = brittleness(table, settings)
    if bi is not None:
        table[bi.name] = bi
    return table


def dumps_models(models: dict[str, PlugRegressor]) -> str:
    """The fitted models as one JSON text (for a sidecar file; no pickle)."""
    return json.dumps({k: m.to_state() for k, m in models.items()}, allow_nan=False)


def loads_models(text: str) -> dict[str, PlugRegressor]:
    """Inverse of :func:`dumps_models`."""
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"core-plug model text is not JSON ({exc.msg})") from None
    if not isinstance(data, dict):
        raise InputError("core-plug model text is not a mapping")
    return {str(k): PlugRegressor.from_state(v) for k, v in data.items()}
