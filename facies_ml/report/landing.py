"""Landing-zone summary: per well and sequence, the TST + EHST target and its best window.

Sequences are the intervals between consecutive predicted SBs (the top and base of the log
bound the first and last). Depths in the working unit, increasing downward. Settings in the
``landing:`` section of the project configuration.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from facies_ml.pipeline import WellPrediction


def _window_mean(values: np.ndarray, n: int) -> np.ndarray:
    """Mean over each run of ``n`` consecutive samples (NaN counted as 0), length len-n+1."""
    v = np.nan_to_num(values, nan=0.0)
    c = np.concatenate([[0.0], np.cumsum(v)])
    return (c[n:] - c[:-n]) / n


def landing_summary(pred: WellPrediction, settings: dict[str, Any]) -> pd.DataFrame:
    """One row per sequence of one well, named by its basin-wide sequence name (the
    correlation step); a sequence matching no basin sequence is named "(extra)"."""
    table = pred.table
    depth = table.index.to_numpy(float)
    step = pred.well.step
    targets = list(settings.get("target_tracts", ["TST", "EHST"]))
    organic = [f"p_{f}" for f in settings.get("organic_facies", ["ORSM"]) if f"p_{f}" in table]
    weights = dict(settings.get("score_weights") or {})
    win = max(1, int(round(float(settings.get("window_length", 20.0)) / step)))
    in_target = (np.isin(table["systems_tract_label"].to_numpy(), targets)
                 if "systems_tract_label" in table else np.zeros(len(table), bool))
    p_org = table[organic].sum(axis=1).to_numpy(float) if organic else np.zeros(len(table))
    proxy = (table["organic_proxy_toc_wt_pct"].to_numpy(float)
             if "organic_proxy_toc_wt_pct" in table else np.full(len(table), np.nan))
    terms = {"organic_facies_probability": p_org, "in_target": in_target.astype(float),
             "organic_proxy_scaled": proxy / 10.0}
    score = sum(float(weights.get(k, 0.0)) * np.nan_to_num(v, nan=0.0) for k, v in terms.items())
    sbs = sorted(s.depth for s in pred.surfaces if s.kind == "SB")
    bounds = [depth.min() - step] + sbs + [depth.max() + step]
    rows = []
    n_seq = len(bounds) - 1
    for i in range(n_seq):
        top, base = bounds[i], bounds[i + 1]
        sel = (depth > top) & (depth <= base) if i else (depth >= top) & (depth <= base)
        idx = np.flatnonzero(sel)
        if len(idx) == 0:
            continue
        if "sequence" in table:
            names = pd.Series(table["sequence"].to_numpy()[idx]).replace("", np.nan).dropna()
            name = str(names.mode().iloc[0]) if len(names) else "(extra)"
        else:
            name = str(n_seq - i)
        row: dict[str, Any] = {
            "well": pred.well.name, "sequence": name,
            "top": float(depth[idx[0]]), "base": float(depth[idx[-1]]),
            "gross_target_thickness": float(in_target[idx].sum() * step),
            "mean_organic_proxy_toc_wt_pct": (float(np.nanmean(proxy[idx]))
                                              if np.isfinite(proxy[idx]).any() else None),
            "organic_facies_fraction": float(np.mean(p_org[idx])),
            "best_window_top": None, "best_window_base": None, "best_window_score": None,
            "depth_unit": pred.well.depth_unit,
        }
        if len(idx) >= win:
            means = _window_mean(score[idx], win)
            j = int(np.argmax(means))
            row.update(best_window_top=float(depth[idx[j]]),
                       best_window_base=float(depth[idx[j + win - 1]]),
                       best_window_score=float(means[j]))
        rows.append(row)
    return pd.DataFrame(rows)

