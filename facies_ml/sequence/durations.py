"""Tract thickness (duration) models for the semi-Markov sequence model.

A duration is the thickness of one run of a tract, counted in samples of the working grid.
Each model gives, for ``d = 1..D`` samples, the four tables the decoder needs
(:class:`facies_ml.sequence.semimarkov.SemiMarkovTables`):

- ``pmf(d)``: a complete run (both bounding surfaces inside the log) is ``d`` samples thick;
- ``surv(d) = P(thickness >= d)``: a run cut by the top of the log is at least ``d`` thick;
- ``first(d) = surv(d) / E[thickness]``: the run the log starts in (cut by its base), the
  residual thickness of a renewal process (Cox 1962, "Renewal Theory", from memory);
- ``first_surv(d)``: its survival, for a log lying wholly inside one run.

Two implementations: :class:`ExplicitDuration`, a discretized log-normal thickness fitted to the
cored wells' runs with a prior (tracts rarely seen lean on the prior), and
:class:`MinimumGeometricDuration`, a hard minimum plus a geometric tail (the earlier model).
Both refuse runs thinner than the rule table's minimum thickness.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

from facies_ml.errors import InputError


class DurationModel(ABC):
    """Thickness distribution of one tract, in samples (``min_samples`` is a hard floor)."""

    min_samples: int

    @abstractmethod
    def pmf(self, D: int) -> np.ndarray:
        """P(thickness = d) for d = 1..D (shape (D,)); zero below ``min_samples``."""

    @abstractmethod
    def support(self) -> int:
        """A thickness (samples) above which the probability is negligible (< 1e-6)."""

    @abstractmethod
    def describe(self, step: float) -> dict[str, float]:
        """Plain summary in depth units (for manifests and notes)."""

    def tables(self, D: int, block: int = 1
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """log pmf, log surv, log first, log first_surv over d = 1..D, in units of ``block``
        samples (``D`` blocks; the pmf of ``m`` blocks sums thicknesses (m-1)*block+1 ..
        m*block samples)."""
        p = self.pmf(D * block).reshape(D, block).sum(axis=1)
        surv = np.cumsum(p[::-1])[::-1]
        mean = float(surv.sum())
        first = surv / mean if mean > 0 else surv
        first_surv = np.cumsum(first[::-1])[::-1]
        with np.errstate(divide="ignore"):
            return np.log(p), np.log(surv), np.log(first), np.log(first_surv)


@dataclass(frozen=True)
class ExplicitDuration(DurationModel):
    """Discretized log-normal thickness: ln(thickness in samples) ~ N(log_median, log_sigma),
    probability mass on integer d from the normal CDF over [ln(d - 0.5), ln(d + 0.5)],
    zero below ``min_samples``, renormalised on ``min_samples..D``."""

    log_median: float
    log_sigma: float
    min_samples: int
    n_runs: int = 0                      # complete runs the fit saw (0 = prior only)

    def pmf(self, D: int) -> np.ndarray:
        d = np.arange(1, D + 1, dtype=float)
        hi = ndtr((np.log(d + 0.5) - self.log_median) / self.log_sigma)
        lo = ndtr((np.log(np.maximum(d - 0.5, 1e-12)) - self.log_median) / self.log_sigma)
        p = np.where(d >= self.min_samples, hi - lo, 0.0)
        tot = p.sum()
        if not tot > 0:
            p = np.where(d == min(self.min_samples, D), 1.0, 0.0)
            tot = 1.0
        return p / tot

    def support(self) -> int:
        return int(np.ceil(np.exp(self.log_median + 4.75 * self.log_sigma))) + 1

    def describe(self, step: float) -> dict[str, float]:
        return {"median": round(float(np.exp(self.log_median)) * step, 2),
                "p10": round(float(np.exp(self.log_median - 1.2816 * self.log_sigma)) * step, 2),
                "p90": round(float(np.exp(self.log_median + 1.2816 * self.log_sigma)) * step, 2),
                "minimum": round(self.min_samples * step, 2), "log_sigma": round(self.log_sigma, 3),
                "runs": self.n_runs}

    @classmethod
    def fit(cls, runs: list[int], min_samples: int, prior_log_median: float, prior_runs: float,
            prior_log_sigma: float, log_sigma_floor: float) -> ExplicitDuration:
        """Posterior-mean style estimate: the prior counts as ``prior_runs`` runs with median
        ``exp(prior_log_median)`` samples and spread ``prior_log_sigma``."""
        x = np.log(np.maximum(np.asarray(runs, dtype=float), 1.0))
        k = float(prior_runs)
        mu = (k * prior_log_median + x.sum()) / (k + x.size)
        var = (k * prior_log_sigma ** 2 + ((x - mu) ** 2).sum()) / (k + x.size)
        sigma = max(float(np.sqrt(var)), float(log_sigma_floor))
        return cls(log_median=float(mu), log_sigma=sigma, min_samples=int(min_samples),
                   n_runs=int(x.size))


@dataclass(frozen=True)
class MinimumGeometricDuration(DurationModel):
    """``min_samples`` plus a geometric tail with mean ``mean_excess`` samples."""

    mean_excess: float
    min_samples: int
    n_runs: int = 0

    def pmf(self, D: int) -> np.ndarray:
        d = np.arange(1, D + 1)
        stay = self.mean_excess / (1.0 + self.mean_excess)
        p = np.where(d >= self.min_samples,
                     (1.0 - stay) * stay ** np.maximum(d - self.min_samples, 0), 0.0)
        tot = p.sum()
        return p / tot if tot > 0 else np.where(d == min(self.min_samples, D), 1.0, 0.0)

    def support(self) -> int:
        stay = self.mean_excess / (1.0 + self.mean_excess)
        tail = np.log(1e-6) / np.log(stay) if 0 < stay < 1 else 1.0
        return int(self.min_samples + np.ceil(tail)) + 1

    def describe(self, step: float) -> dict[str, float]:
        return {"minimum": round(self.min_samples * step, 2),
                "mean": round((self.min_samples + self.mean_excess) * step, 2),
                "runs": self.n_runs}

    @classmethod
    def fit(cls, runs: list[int], min_samples: int, prior_runs: float) -> MinimumGeometricDuration:
        excess = [max(int(r) - int(min_samples), 0) for r in runs]
        mean = (sum(excess) + prior_runs * min_samples) / (len(excess) + prior_runs)
        return cls(mean_excess=float(mean), min_samples=int(min_samples), n_runs=len(excess))


DURATION_MODELS = ("explicit", "minimum_geometric")


def fit_durations(kind: str, complete: list[list[int]], cut: list[list[int]],
                  min_samples: np.ndarray, prior_runs: float, prior_log_sigma: float,
                  log_sigma_floor: float) -> list[DurationModel]:
    """One duration model per tract from run lengths (samples). ``complete[k]``: runs of tract
    k with both surfaces observed; ``cut[k]``: runs touching a log or core end (used only
    when a tract has no complete run). The explicit model's prior median is the median of
    all complete runs of all tracts (a tract seen rarely borrows the others' thickness)."""
    if kind not in DURATION_MODELS:
        raise InputError(f"sequence.duration.model must be one of {', '.join(DURATION_MODELS)}, "
                         f"not {kind!r}")
    pooled = [r for runs in complete for r in runs] or [r for runs in cut for r in runs]
    prior_median = float(np.log(np.median(pooled))) if pooled else float(np.log(4 * max(
        int(np.max(min_samples)), 1)))
    out: list[DurationModel] = []
    for k, m in enumerate(np.asarray(min_samples, dtype=int)):
        runs = complete[k] if complete[k] else cut[k]
        if kind == "explicit":
            out.append(ExplicitDuration.fit(runs, int(m), prior_median, prior_runs,
                                            prior_log_sigma, log_sigma_floor))
        else:
            out.append(MinimumGeometricDuration.fit(runs, int(m), prior_runs))
    return out
