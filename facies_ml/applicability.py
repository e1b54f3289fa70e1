"""Out-of-range detection: is an offset-well sample inside the feature range seen in training?

Row order (depth direction) does not matter here; each sample is judged on its own.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from facies_ml.errors import InputError


class FeatureEnvelope:
    """Per-feature quantile envelope fitted on TRAINING features.

    For each feature, the ``lower``..``upper`` quantiles (default 0.5 %..99.5 %, NaN ignored)
    bound the training range. A sample is flagged out of range when it lies outside the envelope
    in at least ``min_features`` features (default 1). Missing values (NaN) and features absent
    from the table never count as outside. Features constant or all-NaN in training are skipped.
    """

    def __init__(self, lower: float = 0.005, upper: float = 0.995, min_features: int = 1) -> None:
        if not 0.0 <= lower < upper <= 1.0:
            raise InputError(f"envelope quantiles must satisfy 0 <= lower < upper <= 1, got "
                             f"{lower:g}, {upper:g}")
        if int(min_features) < 1:
            raise InputError(f"min_features must be >= 1, not {min_features}")
        self.lower = float(lower)
        self.upper = float(upper)
        self.min_features = int(min_features)

    def fit(self, X: pd.DataFrame) -> FeatureEnvelope:
        """Learn the per-feature quantile bounds from the training feature table ``X``."""
        if not isinstance(X, pd.DataFrame) or X.shape[1] == 0:
            raise InputError("the applicability envelope needs a non-empty feature table")
        lo: dict[str, float] = {}
        hi: dict[str, float] = {}
        for col in X.columns:
            v = pd.to_numeric(X[col], errors="coerce").to_numpy(dtype=float)
            v = v[np.isfinite(v)]
            if len(v) == 0:
                continue
            a, b = np.quantile(v, [self.lower, self.upper])
            if b > a:
                lo[str(col)], hi[str(col)] = float(a), float(b)
        self.low_ = pd.Series(lo, dtype=float)
        self.high_ = pd.Series(hi, dtype=float)
        return self

    def _outside(self, X: pd.DataFrame) -> tuple[list[str], np.ndarray]:
        """(envelope features present in ``X``, boolean matrix samples x features: outside)."""
        if not hasattr(self, "low_"):
            raise InputError("the applicability envelope is not fitted")
        cols = [c for c in self.low_.index if c in X.columns]
        if not cols:
            return cols, np.zeros((len(X), 0), dtype=bool)
        sub = X[cols]
        if not all(pd.api.types.is_numeric_dtype(t) for t in sub.dtypes):
            sub = sub.apply(pd.to_numeric, errors="coerce")
        v = sub.to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            out = (v < self.low_[cols].to_numpy()) | (v > self.high_[cols].to_numpy())
        return cols, out  # NaN compares False -> not outside

    def outside_counts(self, X: pd.DataFrame) -> np.ndarray:
        """Number of features in which each sample lies outside the envelope."""
        return self._outside(X)[1].sum(axis=1)

    def flag(self, X: pd.DataFrame) -> np.ndarray:
        """Boolean per sample: outside the envelope in >= ``min_features`` features."""
        return self.outside_counts(X) >= self.min_features

    def fraction(self, X: pd.DataFrame) -> float:
        """Share of samples flagged (0..1); 0 for an empty table."""
        f = self.flag(X)
        return float(f.mean()) if len(f) else 0.0

    def assess(self, X: pd.DataFrame) -> tuple[np.ndarray, dict[str, Any]]:
        """(:meth:`flag`, share of samples outside the envelope per feature — only features with
        any sample outside) from one pass over ``X``."""
        cols, out = self._outside(X)
        share = out.mean(axis=0) if len(out) else np.zeros(len(cols))
        return (out.sum(axis=1) >= self.min_features,
                {c: float(v) for c, v in zip(cols, share, strict=True) if v > 0})
