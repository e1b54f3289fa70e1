"""Held-out per-well evaluation: leave-one-well-out of the whole pipeline, and its metrics.

A well is never in its own training set: for each cored well the complete
:class:`~facies_ml.pipeline.FaciesPipeline` (normalization, features reference, both
classifiers, transition and thickness statistics) is refitted on the other cored wells.
Depths are in the project working unit; surfaces are compared within
``evaluation.surface_match_tolerance``.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

import numpy as np
import pandas as pd
from sklearn.metrics import (
    accuracy_score,
    confusion_matrix,
    f1_score,
    precision_recall_fscore_support,
)

from facies_ml.config import Config
from facies_ml.lithofacies import reliability_table
from facies_ml.pipeline import FaciesPipeline, WellPrediction
from facies_ml.sequence import pick_surfaces
from facies_ml.sequence.runs import split_runs
from facies_ml.sequence.surfaces import match_nearest
from facies_ml.wells import Well
from facies_ml.wells.model import FT_PER_M

PER_WELL_KEYS = (
    "lithofacies_accuracy",
    "lithofacies_f1_macro",
    "systems_tract_accuracy",
    "systems_tract_accuracy_raw",
    "mfs_depth_error",
    "sb_depth_error",
    "rule_violations",
    "rule_violations_raw",
)


def brier_score(y_true: np.ndarray, proba: np.ndarray) -> float:
    """Multi-class Brier score: mean over samples of sum_k (p_k - 1[y = k])^2 (Brier, 1950)."""
    onehot = np.zeros_like(proba)
    onehot[np.arange(len(y_true)), y_true] = 1.0
    return float(np.mean(np.sum((proba - onehot) ** 2, axis=1)))


def adjacent_accuracy(y_true: np.ndarray, y_pred: np.ndarray, adjacency: np.ndarray) -> float:
    """Share of samples predicted as the true class or a class the scheme lists as adjacent."""
    if len(y_true) == 0:
        return float("nan")
    return float(np.mean(adjacency[y_true, y_pred]))


def classification_metrics(y_true: np.ndarray, y_pred: np.ndarray, proba: np.ndarray | None,
                           labels: list[str], adjacency: np.ndarray | None = None) -> dict[str, Any]:
    """Accuracy, macro-F1, per-class precision/recall, confusion matrix, adjacent accuracy, Brier.

    Macro-F1 averages over the classes present in ``y_true`` or ``y_pred`` (scikit-learn's
    default label set), so a class absent from a well does not count as a zero.
    """
    out: dict[str, Any] = {"n_samples": int(len(y_true))}
    if len(y_true) == 0:
        return out | {"accuracy": None, "f1_macro": None}
    k = np.arange(len(labels))
    out["accuracy"] = float(accuracy_score(y_true, y_pred))
    out["f1_macro"] = float(f1_score(y_true, y_pred, average="macro", zero_division=0))
    prec, rec, f1, support = precision_recall_fscore_support(
        y_true, y_pred, labels=k, zero_division=0)
    out["per_class"] = {
        labels[i]: {"precision": float(prec[i]), "recall": float(rec[i]), "f1": float(f1[i]),
                    "support": int(support[i])}
        for i in k
    }
    out["confusion_matrix"] = confusion_matrix(y_true, y_pred, labels=k).tolist()
    if adjacency is not None:
        out["adjacent_accuracy"] = adjacent_accuracy(y_true, y_pred, adjacency)
    if proba is not None:
        out["brier"] = brier_score(y_true, proba)
    return out


def labelled_runs(labels: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) index pairs of contiguous runs with label >= 0."""
    starts, lengths, labelled = split_runs(np.asarray(labels) >= 0)
    return [(int(a), int(a + n)) for a, n, ok in zip(starts, lengths, labelled, strict=True) if ok]


def true_surfaces(depth: np.ndarray, tracts: np.ndarray, rules: Any,
                  names: np.ndarray | None = None) -> list[Any]:
    """Surfaces implied by interpreted tract labels (top-down arrays), per labelled run, each
    named after the core file's sequence name of the sample above it (``names``, top-down)."""
    from dataclasses import replace

    out = []
    for start, stop in labelled_runs(tracts):
        for s in pick_surfaces(depth[start:stop][::-1], tracts[start:stop][::-1], rules):
            name = ""
            if names is not None:
                k = start + int(np.searchsorted(depth[start:stop], s.depth))
                name = str(names[max(k - 1, start)])
            out.append(replace(s, sequence=name))
    return out


def match_surfaces(true: Iterable[Any], pred: Iterable[Any], kind: str, tolerance: float,
                   close: float, depth_range: tuple[float, float] | None = None
                   ) -> dict[str, Any]:
    """One-to-one matching of predicted to true surfaces of one kind, nearest pairs first,
    within ``tolerance`` (the rule of ``../shared/tools/score_picks.py``).

    Returns signed depth errors (predicted - true) of matched pairs, how many true surfaces
    have a match closer than ``close``, missed (true without a match) and extra (predicted
    inside ``depth_range`` without a match) counts, how many matched picks have the true depth
    inside their p10-p90 range, and how many carry the true sequence name (when named).
    """
    t = [s for s in true if s.kind == kind]
    p = [s for s in pred if s.kind == kind]
    if depth_range is not None:
        p = [s for s in p if depth_range[0] - tolerance <= s.depth <= depth_range[1] + tolerance]
    pairs = match_nearest([a.depth for a in t], [b.depth for b in p], tolerance)
    errors, covered, named, name_checked, n_close = [], 0, 0, 0, 0
    for i, j in pairs:
        dist = abs(p[j].depth - t[i].depth)
        errors.append(float(p[j].depth - t[i].depth))
        n_close += dist <= close
        covered += int(min(p[j].depth_p10, p[j].depth_p90) <= t[i].depth
                       <= max(p[j].depth_p10, p[j].depth_p90))
        if t[i].sequence:
            name_checked += 1
            named += int(p[j].sequence == t[i].sequence)
    return {"errors": errors, "missed": len(t) - len(pairs), "extra": len(p) - len(pairs),
            "n_true": len(t), "within_close": n_close, "covered": covered,
            "named_right": named, "name_checked": name_checked,
            "pairs": [(t[i].sequence, p[j].sequence) for i, j in pairs]}


def _share(num: Any, den: Any) -> float | None:
    return float(num) / float(den) if den else None


def _median(values: list[float]) -> float | None:
    return float(np.median(values)) if values else None


def score_well(pred: WellPrediction, labels: pd.DataFrame, pipeline: FaciesPipeline) -> dict[str, Any]:
    """All per-well metrics of one held-out prediction against its core labels."""
    cfg = pipeline.config
    table = pred.table
    lab = labels.reindex(table.index)
    yf = lab["lithofacies"].fillna(-1).to_numpy(int)
    has_f = yf >= 0
    facies_labels = cfg.facies.labels
    proba = table[[f"p_{x}" for x in facies_labels]].to_numpy()
    adjacency = np.asarray(cfg.facies.adjacency_matrix(), dtype=bool)
    lith = classification_metrics(yf[has_f], table["lithofacies"].to_numpy(int)[has_f],
                                  proba[has_f], facies_labels, adjacency)
    out: dict[str, Any] = {
        "lithofacies_accuracy": lith.get("accuracy"),
        "lithofacies_f1_macro": lith.get("f1_macro"),
        "lithofacies": lith,
        "model_used": pred.model_used,
        "out_of_range_fraction": pred.out_of_range_fraction,
        "rule_violations": pred.rule_violations,
        "rule_violations_raw": pred.rule_violations_raw,
    }
    if "systems_tract" in table and pipeline.tract_model_ is not None:
        yt = pipeline.tract_states(lab["systems_tract"].fillna(-1).to_numpy(int))
        has_t = yt >= 0
        smoothed = table["systems_tract"].to_numpy(int)
        raw = table["systems_tract_raw"].to_numpy(int)
        if has_t.any():
            out["systems_tract_accuracy"] = float(accuracy_score(yt[has_t], smoothed[has_t]))
            out["systems_tract_accuracy_raw"] = float(accuracy_score(yt[has_t], raw[has_t]))
            depth = table.index.to_numpy(float)
            names = (lab["sequence"].fillna("").astype(str).to_numpy()
                     if "sequence" in lab else None)
            truth = true_surfaces(depth, yt, pipeline.rules_, names)
            drange = (float(depth[has_t].min()), float(depth[has_t].max()))
            ev = cfg.section("evaluation")
            tol = float(ev["surface_match_tolerance"])
            close = float(ev["surface_close_tolerance"])
            for kind in ("MFS", "SB"):
                m = match_surfaces(truth, pred.surfaces, kind, tol, close, drange)
                key = kind.lower()
                out[f"{key}_depth_error"] = _median([abs(e) for e in m["errors"]])
                out[f"{key}_errors"] = m["errors"]
                for field in ("missed", "extra", "within_close", "covered", "named_right",
                              "name_checked"):
                    out[f"{key}_{field}"] = m[field]
                out[f"{key}_true_count"] = m["n_true"]
                out[f"{key}_within_close_share"] = _share(m["within_close"], m["n_true"])
            matched = len(out["mfs_errors"]) + len(out["sb_errors"])
            out["p10_p90_coverage"] = _share(out["mfs_covered"] + out["sb_covered"], matched)
            out["names_right_share"] = _share(out["mfs_named_right"] + out["sb_named_right"],
                                              out["mfs_name_checked"] + out["sb_name_checked"])
            target = [pipeline.tract_names_.index(t) for t in ("TST", "EHST")
                      if t in pipeline.tract_names_]
            step = float(np.median(np.diff(depth))) if len(depth) > 1 else cfg.step
            thick_true = float(np.isin(yt[has_t], target).sum() * step)
            thick_pred = float(np.isin(smoothed[has_t], target).sum() * step)
            out["tst_ehst_thickness_true"] = thick_true
            out["tst_ehst_thickness_error"] = thick_pred - thick_true
    for key in PER_WELL_KEYS:
        out.setdefault(key, None)
    return out


def overall_metrics(per_well: dict[str, dict[str, Any]], pooled: dict[str, Any]) -> dict[str, Any]:
    """Pooled sample metrics plus medians/sums of surface errors and violations over wells."""
    out = dict(pooled)

    def total(key: str) -> int:
        return int(sum(m.get(key) or 0 for m in per_well.values()))

    for kind in ("mfs", "sb"):
        errs = [abs(e) for m in per_well.values() for e in m.get(f"{kind}_errors", [])]
        out[f"{kind}_depth_error"] = _median(errs)
        for field in ("missed", "extra", "within_close", "covered", "named_right",
                      "name_checked", "true_count"):
            out[f"{kind}_{field}"] = total(f"{kind}_{field}")
        n = out[f"{kind}_true_count"]
        out[f"{kind}_within_close_share"] = _share(out[f"{kind}_within_close"], n)
    matched = sum(len(m.get(f"{k}_errors", [])) for m in per_well.values() for k in ("mfs", "sb"))
    covered = out["mfs_covered"] + out["sb_covered"]
    checked = out["mfs_name_checked"] + out["sb_name_checked"]
    out["p10_p90_coverage"] = _share(covered, matched)
    out["names_right_share"] = _share(out["mfs_named_right"] + out["sb_named_right"], checked)
    for key in ("rule_violations", "rule_violations_raw"):
        out[key] = int(sum(m.get(key) or 0 for m in per_well.values()))
    thick = [m["tst_ehst_thickness_error"] for m in per_well.values()
             if m.get("tst_ehst_thickness_error") is not None]
    out["tst_ehst_thickness_error_mean_abs"] = float(np.mean(np.abs(thick))) if thick else None
    out["n_wells"] = len(per_well)
    return out


def leave_one_well_out(
    wells: list[Well],
    labels: dict[str, pd.DataFrame],
    config: Config,
    progress: Callable[[str], None] | None = None,
) -> tuple[dict[str, Any], dict[str, WellPrediction]]:
    """Refit the whole pipeline without each cored well and score it on that well.

    Returns ``(metrics, predictions)`` where metrics is
    ``{"wells": {name: {...}}, "overall": {...}}``.
    """
    cored = [w for w in wells if w.name in labels]
    if len(cored) < 2:
        from facies_ml.errors import InputError

        raise InputError(f"leave-one-well-out needs at least 2 cored wells, found {len(cored)}")
    per_well: dict[str, dict[str, Any]] = {}
    predictions: dict[str, WellPrediction] = {}
    pooled_f_true, pooled_f_pred, pooled_t_true, pooled_t_pred, pooled_t_raw = [], [], [], [], []
    pooled_f_proba = []
    proba_cols = [f"p_{lab}" for lab in config.facies.labels]
    for held in cored:
        if progress:
            progress(f"fold: holding out {held.name}")
        train = [w for w in cored if w.name != held.name]
        pipe = FaciesPipeline(config).fit(train, {w.name: labels[w.name] for w in train})
        pred = pipe.predict_well(held)
        m = score_well(pred, labels[held.name], pipe)
        per_well[held.name] = m
        predictions[held.name] = pred
        lab = labels[held.name].reindex(pred.table.index)
        yf = lab["lithofacies"].fillna(-1).to_numpy(int)
        pooled_f_true.append(yf[yf >= 0])
        pooled_f_pred.append(pred.table["lithofacies"].to_numpy(int)[yf >= 0])
        pooled_f_proba.append(pred.table[proba_cols].to_numpy(float)[yf >= 0])
        if "systems_tract" in pred.table:
            yt = pipe.tract_states(lab["systems_tract"].fillna(-1).to_numpy(int))
            ok = yt >= 0
            pooled_t_true.append(yt[ok])
            pooled_t_pred.append(pred.table["systems_tract"].to_numpy(int)[ok])
            pooled_t_raw.append(pred.table["systems_tract_raw"].to_numpy(int)[ok])
    yf_t, yf_p = np.concatenate(pooled_f_true), np.concatenate(pooled_f_pred)
    pooled: dict[str, Any] = {
        "lithofacies_accuracy": float(accuracy_score(yf_t, yf_p)),
        "lithofacies_f1_macro": float(f1_score(yf_t, yf_p, average="macro", zero_division=0)),
    }
    if pooled_t_true:
        tt = np.concatenate(pooled_t_true)
        pooled["systems_tract_accuracy"] = float(accuracy_score(tt, np.concatenate(pooled_t_pred)))
        pooled["systems_tract_accuracy_raw"] = float(
            accuracy_score(tt, np.concatenate(pooled_t_raw)))
    n_bins = int(config.section("evaluation").get("reliability_bins", 10))
    reliability = reliability_table(yf_t, np.concatenate(pooled_f_proba), n_bins)
    metrics = {"wells": per_well, "overall": overall_metrics(per_well, pooled),
               "reliability": reliability.to_dict("records")}
    return metrics, predictions


def format_table(metrics: dict[str, Any]) -> str:
    """Plain-text per-well table of the held-out scores: lithofacies, systems tracts before
    and after the sequence model, SB and MFS picked within the close tolerance (share of the
    true surfaces), missed / extra picks, median depth error, p10-p90 coverage of matched
    picks and the share of matched surfaces given the right sequence name."""
    cols = [("facies_acc", "lithofacies_accuracy"), ("facies_F1", "lithofacies_f1_macro"),
            ("tract_raw", "systems_tract_accuracy_raw"), ("tract_hmm", "systems_tract_accuracy"),
            ("MFS_5ft", "mfs_within_close_share"), ("MFS_miss", "mfs_missed"),
            ("MFS_extra", "mfs_extra"), ("MFS_err", "mfs_depth_error"),
            ("SB_5ft", "sb_within_close_share"), ("SB_miss", "sb_missed"),
            ("SB_extra", "sb_extra"), ("SB_err", "sb_depth_error"),
            ("p10_p90", "p10_p90_coverage"), ("names", "names_right_share"),
            ("viol", "rule_violations")]
    head = f"{'well':<12}" + "".join(f"{short:>10}" for short, _ in cols)
    lines = [head, "-" * len(head)]

    def fmt(v: Any) -> str:
        if v is None:
            return f"{'-':>10}"
        if isinstance(v, (int, np.integer)):
            return f"{v:>10d}"
        return f"{v:>10.3f}"

    rows = list(metrics["wells"].items()) + [("OVERALL", metrics["overall"])]
    for name, m in rows:
        lines.append(f"{name:<12}" + "".join(fmt(m.get(key)) for _, key in cols))
    lines.append("5ft: share of true surfaces picked within the close tolerance; err: median "
                 "|depth error| of matched picks; p10_p90: share of matched picks whose range "
                 "holds the true depth; names: matched surfaces with the right sequence name.")
    return "\n".join(lines)


def learning_curve(
    wells: list[Well],
    labels: dict[str, pd.DataFrame],
    config: Config,
    repeats: int | None = None,
    sizes: list[int] | None = None,
    progress: Callable[[str], None] | None = None,
) -> pd.DataFrame:
    """Held-out scores against the number of training wells (how many cores do we need?).

    For each size n, ``repeats`` random subsets of n cored wells (seeded by the project seed)
    are trained on and scored on every cored well outside the subset. Returns one row per
    (size, repeat) with mean lithofacies macro-F1 and systems-tract accuracy over the
    held-out wells.
    """
    cored = [w for w in wells if w.name in labels]
    if len(cored) < 2:
        from facies_ml.errors import InputError

        raise InputError("a learning curve needs at least 2 cored wells")
    repeats = repeats or int(config.section("evaluation").get("learning_curve_repeats", 3))
    sizes = sizes or list(range(1, len(cored)))
    rng = np.random.default_rng(config.seed)
    rows = []
    for n in sizes:
        for r in range(repeats):
            pick = sorted(rng.choice(len(cored), size=n, replace=False).tolist())
            train = [cored[i] for i in pick]
            test = [w for i, w in enumerate(cored) if i not in pick]
            if progress:
                progress(f"learning curve: {n} training wells, repeat {r + 1}")
            pipe = FaciesPipeline(config).fit(train, {w.name: labels[w.name] for w in train})
            scores = [score_well(pipe.predict_well(w), labels[w.name], pipe) for w in test]
            f1 = [s["lithofacies_f1_macro"] for s in scores if s["lithofacies_f1_macro"] is not None]
            ta = [s["systems_tract_accuracy"] for s in scores
                  if s["systems_tract_accuracy"] is not None]
            rows.append({"n_training_wells": n, "repeat": r + 1,
                         "training_wells": ",".join(w.name for w in train),
                         "lithofacies_f1_macro": float(np.mean(f1)) if f1 else None,
                         "systems_tract_accuracy": float(np.mean(ta)) if ta else None,
                         "n_test_wells": len(test)})
    return pd.DataFrame(rows)


def rank_core_candidates(predictions: list[WellPrediction], facies_labels: list[str],
                         target_tracts: tuple[str, ...] = ("TST", "EHST")) -> pd.DataFrame:
    """Rank uncored wells by how much a core there would teach the model.

    Score = mean normalized predictive entropy of the lithofacies probabilities over the
    predicted target interval (TST + EHST; whole well if none is predicted) + the share of
    samples outside the training envelope. Entropy is divided by log(K) so it lies in 0..1.
    """
    rows = []
    for p in predictions:
        t = p.table
        proba = t[[f"p_{lab}" for lab in facies_labels]].to_numpy(float)
        k = proba.shape[1]
        ent = -np.sum(np.where(proba > 0, proba * np.log(np.clip(proba, 1e-12, 1)), 0), axis=1)
        ent = ent / np.log(k)
        target = np.ones(len(t), dtype=bool)
        if "systems_tract_label" in t:
            in_target = np.isin(t["systems_tract_label"].to_numpy(), list(target_tracts))
            if in_target.any():
                target = in_target
        oor = float(np.mean(t["out_of_range"].to_numpy(bool)[target]))
        mean_ent = float(np.mean(ent[target]))
        reasons = [f"mean facies entropy {mean_ent:.2f} over {int(target.sum())} target samples",
                   f"{oor:.1%} of target samples outside the training envelope"]
        top = p.info.get("out_of_range_top_features") or {}
        if top and oor > 0:
            reasons.append("mostly in " + ", ".join(f"{k} ({v:.0%})" for k, v in top.items()))
        if p.model_used != "full":
            reasons.append(f"served by a reduced-curve model ({p.model_used})")
        rows.append({"well": p.well.name, "score": mean_ent + oor, "mean_entropy": mean_ent,
                     "out_of_range_fraction": oor, "model_used": p.model_used,
                     "reasons": "; ".join(reasons)})
    frame = pd.DataFrame(rows, columns=["well", "score", "mean_entropy", "out_of_range_fraction",
                                        "model_used", "reasons"])
    frame = frame.sort_values("score", ascending=False, kind="stable").reset_index(drop=True)
    frame.insert(0, "rank", np.arange(1, len(frame) + 1))
    return frame


def score_tops(tops: pd.DataFrame, truth: pd.DataFrame, tolerance: float, close: float
               ) -> dict[str, Any]:
    """Score a tops table against known surfaces (synthetic truth or a geologist's picks).

    ``tops``: well, surface, depth, depth_p10, depth_p90, sequence, depth_unit; ``truth``:
    well, surface, depth, sequence[, depth_unit]. Depths in metres are converted to feet.
    Matching as :func:`match_surfaces` (one to one, nearest first, within ``tolerance`` ft);
    names are scored under the best one-to-one mapping of predicted to true names (the
    Hungarian method, scipy ``linear_sum_assignment``), since a tool numbering sequences
    itself may use other labels than the truth. Returns per kind ``true``, ``within_close``
    (share of true surfaces), ``missed``, ``extra`` (per true surface), ``median_error_ft``,
    and overall ``coverage`` and ``names``.
    """
    from types import SimpleNamespace

    from scipy.optimize import linear_sum_assignment

    def as_ft(frame: pd.DataFrame, cols: list[str]) -> pd.DataFrame:
        f = frame.copy()
        unit = (f["depth_unit"].astype(str).str.lower() if "depth_unit" in f
                else pd.Series("ft", index=f.index))
        factor = np.where(unit.str.startswith("m"), FT_PER_M, 1.0)
        for c in cols:
            f[c] = pd.to_numeric(f[c], errors="coerce") * factor
        return f

    tp = as_ft(tops, ["depth", "depth_p10", "depth_p90"])
    tt = as_ft(truth, ["depth"])
    res: dict[str, Any] = {}
    names: list[str] = []
    trues: list[str] = []
    cover = matched = 0
    for kind in ("MFS", "SB"):
        close_n = total = extra = missed = 0
        errs: list[float] = []
        for well in sorted(tt["well"].astype(str).unique()):
            t = [SimpleNamespace(kind=kind, depth=r.depth, sequence=str(r.sequence))
                 for r in tt[(tt["well"].astype(str) == well) & (tt["surface"] == kind)]
                 .itertuples()]
            p = [SimpleNamespace(kind=kind, depth=r.depth, depth_p10=r.depth_p10,
                                 depth_p90=r.depth_p90, sequence=str(getattr(r, "sequence", "")))
                 for r in tp[(tp["well"].astype(str) == well) & (tp["surface"] == kind)]
                 .itertuples()]
            m = match_surfaces(t, p, kind, tolerance, close)
            close_n += m["within_close"]
            total += m["n_true"]
            extra += m["extra"]
            missed += m["missed"]
            errs += [abs(e) for e in m["errors"]]
            cover += m["covered"]
            matched += len(m["errors"])
            trues += [a for a, _ in m["pairs"]]
            names += [b for _, b in m["pairs"]]
        res[kind] = {"true": total, "within_close": close_n / total if total else None,
                     "missed": missed, "extra": extra / total if total else None,
                     "median_error_ft": float(np.median(errs)) if errs else None}
    res["coverage"] = cover / matched if matched else None
    if names:
        un, ut = sorted(set(names)), sorted(set(trues))
        c = np.zeros((len(un), len(ut)))
        for a, b in zip(names, trues, strict=True):
            c[un.index(a), ut.index(b)] += 1
        r, k = linear_sum_assignment(-c)
        res["names"] = float(c[r, k].sum() / len(names))
    else:
        res["names"] = None
    return res
