"""Champion/challenger: may a retrained model (the challenger) replace the serving one?

Both models are scored on the same wells, each well by a model that never saw it:

* a well the champion was trained on: the champion's held-out (leave-one-well-out) fold score,
  as recorded in its manifest, against the challenger's fold for the same well;
* a new cored well: the champion applied directly against the challenger's fold for that well.

Per well three metrics are compared (:data:`METRICS`): lithofacies macro-F1, systems-tract
accuracy (after the sequence model) and the share of the true SB and MFS surfaces picked within
``evaluation.surface_close_tolerance`` (5 ft by default). Wells differ far more from each other
than two models differ on one well, so the comparison is *paired*: for each metric the
per-well differences d_i = challenger_i - champion_i are resampled over wells (a percentile
bootstrap of their mean; Efron & Tibshirani 1993, from memory; computed with
``scipy.stats.bootstrap``), giving the mean difference and its interval.

The rule (:class:`PromotionRule`, settings ``evaluation.promotion``) promotes only when

1. at least ``min_wells`` wells are paired on the primary metric (and on every other metric
   that any well can score);
2. *not worse*, on every metric: the lower end of the interval is at or above
   ``-tolerance[metric]``. With ``confidence`` 0.90 the lower end is a one-sided 95 % bound,
   so the challenger must show, beyond the per-well noise, that it loses at most the tolerance
   (a non-inferiority test; the burden of proof is on the challenger);
3. *better* on the primary metric: its mean per-well gain exceeds ``primary_min_gain``;
4. no new cored well is flagged by the core-label check.

Core-label check (:func:`core_label_check`, settings ``evaluation.core_check``): a well's
agreement with the models is the best score any model reached on it (lithofacies accuracy,
and systems-tract accuracy where the core has tracts). A new well is flagged — "check the
core file for well X" — when that best agreement lies more than ``robust_z`` robust spreads
below the median of the other wells (spread = 1.4826 x median absolute deviation, floored at
``min_spread``; the modified z-score of Iglewicz & Hoaglin 1993, from memory). Scrambled or
mis-assigned core labels disagree with every model; a genuinely unusual well usually agrees
with at least one of them far better than that.

All scores are fractions in 0..1; depths do not enter here.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from scipy.stats import bootstrap, median_abs_deviation

from facies_ml.settings import CoreCheckSettings, PromotionSettings

METRICS = ("lithofacies_f1_macro", "systems_tract_accuracy", "surfaces_within_close")
"""Compared metrics, each a per-well fraction (higher is better)."""

SHORT = {"lithofacies_f1_macro": "facies_F1", "systems_tract_accuracy": "tract_acc",
         "surfaces_within_close": "surf_close"}

AGREEMENT = {"lithofacies_accuracy": "lithofacies", "systems_tract_accuracy": "systems-tract"}
"""Per-well agreement scores of the core-label check and the labels they judge."""

BASIS_OLD = "same held-out fold (well left out of both)"
BASIS_NEW = "new well, champion never saw it"


def well_scores(metrics: Mapping[str, Any] | None) -> dict[str, float | None]:
    """The compared metrics (and agreement scores) from one well's :func:`score_well` output.

    ``surfaces_within_close`` = (MFS + SB picked within the close tolerance) / (true MFS + SB);
    None when the well has no systems-tract labels or no true surface.
    """
    m = metrics or {}
    n_true = (m.get("mfs_true_count") or 0) + (m.get("sb_true_count") or 0)
    close = (m.get("mfs_within_close") or 0) + (m.get("sb_within_close") or 0)
    out: dict[str, float | None] = {
        "lithofacies_f1_macro": m.get("lithofacies_f1_macro"),
        "systems_tract_accuracy": m.get("systems_tract_accuracy"),
        "surfaces_within_close": close / n_true if n_true else None,
        "lithofacies_accuracy": m.get("lithofacies_accuracy"),
    }
    return {k: (None if v is None else float(v)) for k, v in out.items()}


def has_recorded_scores(metrics: Mapping[str, Any] | None) -> bool:
    """Whether a manifest's per-well fold record holds every score the comparison needs."""
    if not metrics or metrics.get("lithofacies_f1_macro") is None:
        return False
    if "lithofacies_accuracy" not in metrics or "systems_tract_accuracy" not in metrics:
        return False
    return metrics.get("systems_tract_accuracy") is None or "mfs_true_count" in metrics


@dataclass(frozen=True)
class PairedDifference:
    """Mean per-well difference challenger - champion of one metric, with its interval."""

    metric: str
    n_wells: int
    champion_mean: float | None = None
    challenger_mean: float | None = None
    mean_difference: float | None = None
    low: float | None = None
    high: float | None = None
    verdict: str = ""
    blocks: bool = False


def paired_bootstrap(champion: Sequence[float], challenger: Sequence[float], resamples: int,
                     confidence: float, seed: int) -> tuple[float, float, float]:
    """Mean of d_i = challenger_i - champion_i over wells and its two-sided percentile interval.

    The wells (pairs) are resampled with replacement ``resamples`` times (seeded by ``seed``),
    so the interval reflects how much the difference varies from well to well. With identical
    differences the interval collapses onto them. Needs at least 2 wells.
    """
    d = np.asarray(challenger, dtype=float) - np.asarray(champion, dtype=float)
    if d.size < 2:
        raise ValueError("a paired bootstrap needs at least 2 wells")
    mean = float(d.mean())
    if np.ptp(d) == 0:                       # every resample has the same mean
        return mean, mean, mean
    res = bootstrap((d,), np.mean, n_resamples=resamples, confidence_level=confidence,
                    method="percentile", rng=np.random.default_rng(seed))
    ci = res.confidence_interval
    return mean, float(ci.low), float(ci.high)


@dataclass(frozen=True)
class PromotionRule:
    """The promotion rule of the module docstring, from ``evaluation.promotion``."""

    primary_metric: str
    primary_min_gain: float
    tolerance: Mapping[str, float]
    resamples: int
    confidence: float
    min_wells: int
    seed: int

    @classmethod
    def from_settings(cls, s: PromotionSettings, seed: int) -> PromotionRule:
        return cls(primary_metric=s.primary_metric, primary_min_gain=s.primary_min_gain,
                   tolerance=asdict(s.tolerance), resamples=s.bootstrap_resamples,
                   confidence=s.confidence, min_wells=s.min_wells, seed=seed)

    def difference(self, metric: str, pairs: list[tuple[float, float]]) -> PairedDifference:
        """Judge one metric from its (champion, challenger) per-well pairs."""
        n = len(pairs)
        primary = metric == self.primary_metric
        if n == 0:
            return PairedDifference(metric, 0, verdict="not scored (no well has these labels)",
                                    blocks=primary)
        champ = [p[0] for p in pairs]
        chal = [p[1] for p in pairs]
        base = {"champion_mean": float(np.mean(champ)), "challenger_mean": float(np.mean(chal))}
        if n < self.min_wells:
            return PairedDifference(metric, n, **base, mean_difference=base["challenger_mean"]
                                    - base["champion_mean"],
                                    verdict=f"too few wells ({n} < {self.min_wells})", blocks=True)
        mean, low, high = paired_bootstrap(champ, chal, self.resamples, self.confidence,
                                           self.seed)
        tol = float(self.tolerance[metric])
        if low < -tol - 1e-12:
            verdict, blocks = f"may be worse: lower end {low:+.3f} < -{tol:g}", True
        elif primary and mean <= self.primary_min_gain:
            verdict, blocks = f"not better: mean gain {mean:+.3f} <= {self.primary_min_gain:g}", True
        elif primary:
            verdict, blocks = f"better (gain > {self.primary_min_gain:g}), not worse", False
        else:
            verdict, blocks = f"not worse (lower end >= -{tol:g})", False
        return PairedDifference(metric, n, **base, mean_difference=mean, low=low, high=high,
                                verdict=verdict, blocks=blocks)


def core_label_check(agreement: Mapping[str, Mapping[str, float | None]], wells: Sequence[str],
                     check: CoreCheckSettings) -> tuple[list[dict[str, Any]], list[str]]:
    """Flag each well of ``wells`` whose best agreement with any model is far below the others.

    ``agreement``: well -> {score name of :data:`AGREEMENT` -> best score over the models that
    did not train on that well}. The other wells are every well of ``agreement`` but the one
    checked. Returns (flags, notes); a flag names the well, the labels, its agreement, the
    others' median and spread and the robust z-score.
    """
    flags: list[dict[str, Any]] = []
    notes: list[str] = []
    for well in wells:
        for score, what in AGREEMENT.items():
            mine = (agreement.get(well) or {}).get(score)
            if mine is None:
                continue
            others = np.array([a[score] for w, a in agreement.items()
                               if w != well and a.get(score) is not None], dtype=float)
            if len(others) < check.min_other_wells:
                notes.append(f"core check of {well} ({what} labels) skipped: {len(others)} other "
                             f"wells scored, needs {check.min_other_wells}")
                continue
            median = float(np.median(others))
            spread = max(float(median_abs_deviation(others, scale="normal")), check.min_spread)
            z = (mine - median) / spread
            if z < -check.robust_z:
                flags.append({
                    "well": well, "labels": what, "score": score, "agreement": mine,
                    "others_median": median, "spread": spread, "robust_z": z,
                    "message": (f"check the core file for well {well}: its {what} labels agree "
                                f"with the best model on {mine:.2f} of the samples, the other "
                                f"wells on {median:.2f} (robust z {z:.1f} < -{check.robust_z:g})"),
                })
    return flags, notes


@dataclass
class Comparison:
    """Everything ``retrain`` decided and why (JSON-ready with :meth:`to_dict`)."""

    rows: list[dict[str, Any]]
    differences: list[PairedDifference]
    flags: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)
    promote: bool = False
    reason: str = ""
    primary_metric: str = METRICS[0]
    confidence: float = 0.9

    def to_dict(self) -> dict[str, Any]:
        return {"rows": self.rows, "differences": [asdict(d) for d in self.differences],
                "flags": self.flags, "notes": self.notes, "promote": self.promote,
                "reason": self.reason, "primary_metric": self.primary_metric,
                "confidence": self.confidence}


def compare(champion: Mapping[str, Mapping[str, float | None]],
            challenger: Mapping[str, Mapping[str, float | None]], new_wells: Sequence[str],
            rule: PromotionRule, check: CoreCheckSettings) -> Comparison:
    """Paired comparison of per-well scores (well -> :func:`well_scores`) and the decision.

    A well in ``challenger`` missing from ``champion`` is listed but not paired. ``new_wells``
    are the cored wells the champion never saw (the ones the core-label check examines).
    """
    new = set(new_wells)
    rows = []
    for well, chal in challenger.items():
        champ = champion.get(well)
        rows.append({"well": well,
                     "basis": BASIS_NEW if well in new else (
                         BASIS_OLD if champ is not None else "no champion score (not paired)"),
                     "champion": dict(champ) if champ is not None else None,
                     "challenger": dict(chal)})
    diffs = []
    for metric in METRICS:
        pairs = [(r["champion"][metric], r["challenger"][metric]) for r in rows
                 if r["champion"] is not None and r["champion"].get(metric) is not None
                 and r["challenger"].get(metric) is not None]
        diffs.append(rule.difference(metric, pairs))
    agreement: dict[str, dict[str, float | None]] = {}
    for r in rows:
        scores = [s for s in (r["champion"], r["challenger"]) if s is not None]
        agreement[r["well"]] = {
            k: max((s[k] for s in scores if s.get(k) is not None), default=None)
            for k in AGREEMENT}
    flags, notes = core_label_check(agreement, [r["well"] for r in rows if r["well"] in new],
                                    check)
    blocking = [d for d in diffs if d.blocks]
    if flags or blocking:
        why = [f"{d.metric} {d.verdict}" for d in blocking]
        if flags:
            wells = sorted({f["well"] for f in flags})
            why.insert(0, "the core labels of " + ", ".join(wells) + " disagree with every "
                       "model far more than the other wells do (check the core file)")
        reason = "; ".join(why)
    else:
        p = next(d for d in diffs if d.metric == rule.primary_metric)
        reason = (f"{p.metric} mean gain {p.mean_difference:+.3f} over {p.n_wells} wells "
                  f"(interval {p.low:+.3f}..{p.high:+.3f}); no metric worse beyond its tolerance")
    return Comparison(rows=rows, differences=diffs, flags=flags, notes=notes,
                      promote=not flags and not blocking, reason=reason,
                      primary_metric=rule.primary_metric, confidence=rule.confidence)


def format_comparison(result: Mapping[str, Any]) -> str:
    """Plain-text table of a ``retrain`` result: one row per well (champion / challenger per
    metric and the basis), then per metric the mean difference with its interval and verdict,
    the flagged wells, notes, and the decision line (PROMOTED / KEPT CHAMPION)."""
    comp = result["comparison"]
    head = f"{'well':<12}" + "".join(f"{SHORT[m] + ' ch/new':>22}" for m in METRICS) + "  basis"
    lines = [f"champion {result['champion_before']} vs challenger {result['challenger']} "
             f"(per well, each scored by a model that did not train on it)", head,
             "-" * (len(head) + 30)]

    def num(v: Any) -> str:
        return "-" if v is None else f"{v:.3f}"

    for r in comp["rows"]:
        cells = ""
        for m in METRICS:
            champ = None if r["champion"] is None else r["champion"].get(m)
            cells += f"{num(champ) + ' / ' + num(r['challenger'].get(m)):>22}"
        lines.append(f"{r['well']:<12}{cells}  {r['basis']}")
    conf = float(comp["confidence"])
    lines += ["", f"{'metric':<24}{'wells':>6}{'champion':>10}{'challenger':>11}{'diff':>9}"
                  f"{f'{conf:.0%} interval':>20}  verdict"]
    for d in comp["differences"]:
        interval = ("-" if d["low"] is None else f"{d['low']:+.3f} .. {d['high']:+.3f}")
        diff = "-" if d["mean_difference"] is None else f"{d['mean_difference']:+.3f}"
        star = "*" if d["metric"] == comp["primary_metric"] else " "
        lines.append(f"{d['metric'] + star:<24}{d['n_wells']:>6}{num(d['champion_mean']):>10}"
                     f"{num(d['challenger_mean']):>11}{diff:>9}{interval:>20}  {d['verdict']}")
    lines.append("* primary metric; diff = mean over wells of challenger - champion, interval by "
                 "a paired bootstrap over wells; surf_close = share of true SB + MFS picked "
                 "within the close tolerance")
    for f in comp["flags"]:
        lines.append(f"FLAG: {f['message']}")
    for n in comp["notes"]:
        lines.append(f"note: {n}")
    verdict = "PROMOTED" if result["promoted"] else "KEPT CHAMPION"
    lines.append(f"{verdict}: {result['reason']}; serving {result['champion_after']}")
    return "\n".join(lines)
