"""Tract evidence: what the sequence stage reads from the lithofacies stage and the logs.

The systems-tract classifier sees, per sample, the log features (up-section GR / resistivity
trends, height above the local GR maximum, multi-scale statistics) together with the
lithofacies probabilities of the lithofacies stage and their stacking: the mean probability of
each facies over windows ABOVE and BELOW the sample and the difference between the two
(positive = that facies becomes more common upward). A TST shows organic-rich facies becoming
more common upward, an HST the reverse (common practice).

Depth convention: inputs are TOP-DOWN (depth increasing), on a regular ``step``; "above" means
shallower samples. Window lengths are in the working depth unit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from facies_ml.errors import InputError


def _window_means(p: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean of each column over the ``n`` samples above (shallower, excluding the sample) and
    the ``n`` samples below; NaN where the window leaves the log."""
    T = p.shape[0]
    C = np.vstack([np.zeros((1, p.shape[1])), np.cumsum(p, axis=0)])
    idx = np.arange(T)
    above = np.full(p.shape, np.nan)
    below = np.full(p.shape, np.nan)
    ok_a = idx - n >= 0
    above[ok_a] = (C[idx[ok_a]] - C[idx[ok_a] - n]) / n
    ok_b = idx + 1 + n <= T
    below[ok_b] = (C[idx[ok_b] + 1 + n] - C[idx[ok_b] + 1]) / n
    return above, below


def facies_stacking_features(facies_proba: np.ndarray, labels: list[str], step: float,
                             windows: list[float], index: pd.Index) -> pd.DataFrame:
    """Lithofacies probabilities and their stacking above/below each sample.

    ``facies_proba (T, K)`` TOP-DOWN on ``index``; columns ``pf_<label>`` and, per window W,
    ``pf_<label>_above_w<W>``, ``pf_<label>_below_w<W>``, ``pf_<label>_upward_w<W>`` (above minus
    below).
    """
    p = np.asarray(facies_proba, dtype=float)
    if p.ndim != 2 or p.shape[1] != len(labels) or p.shape[0] != len(index):
        raise InputError(f"facies probabilities {p.shape} do not match {len(index)} samples and "
                         f"{len(labels)} facies")
    if not step > 0:
        raise InputError(f"sample step must be > 0, not {step}")
    cols: dict[str, np.ndarray] = {}
    for k, lab in enumerate(labels):
        cols[f"pf_{lab}"] = p[:, k]
    for w in windows:
        n = max(1, int(round(float(w) / step)))
        above, below = _window_means(p, n)
        tag = f"{float(w):g}"
        for k, lab in enumerate(labels):
            cols[f"pf_{lab}_above_w{tag}"] = above[:, k]
            cols[f"pf_{lab}_below_w{tag}"] = below[:, k]
            cols[f"pf_{lab}_upward_w{tag}"] = above[:, k] - below[:, k]
    return pd.DataFrame(cols, index=index)


def _nan_window_means(x: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Like :func:`_window_means` for one curve with NaN gaps (mean of the finite values)."""
    ok = np.isfinite(x)
    v = np.where(ok, x, 0.0)[:, None]
    c = ok.astype(float)[:, None]
    sa, sb = _window_means(v, n)
    ca, cb = _window_means(c, n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (np.where(ca > 0.5, sa / ca, np.nan)[:, 0], np.where(cb > 0.5, sb / cb, np.nan)[:, 0])


def _extreme_height(x: np.ndarray, n: int, step: float, highest: bool) -> np.ndarray:
    """Height (depth units, positive = the sample lies above it) of the sample above the
    highest (or lowest) value within ``n`` samples either side."""
    T = x.size
    filled = np.where(np.isfinite(x), x, -np.inf if highest else np.inf)
    pad = np.concatenate([np.full(n, filled[0]), filled, np.full(n, filled[-1])])
    win = np.lib.stride_tricks.sliding_window_view(pad, 2 * n + 1)
    k = np.argmax(win, axis=1) if highest else np.argmin(win, axis=1)
    out = (k - n) * step                  # top-down index offset: positive = extreme is deeper
    return np.where(np.isfinite(x), out, np.nan)[:T]


def curve_stacking_features(X: pd.DataFrame, curves: list[str], step: float,
                            windows: list[float]) -> pd.DataFrame:
    """Stacking of whole log curves: per window W the mean of each curve over W above and
    below the sample and their difference (``<curve>_upward_w<W>``, positive = increasing
    upward), and the height of the sample above the highest and the lowest value within W
    (``<curve>_above_max_w<W>`` / ``<curve>_above_min_w<W>``). Common practice: GR increases
    upward in a TST, decreases in an HST; the MFS sits at the GR maximum, the SB near the
    most regressive (lowest GR) level."""
    cols: dict[str, np.ndarray] = {}
    for name in curves:
        if name not in X:
            continue
        x = X[name].to_numpy(float)
        for w in windows:
            n = max(1, int(round(float(w) / step)))
            above, below = _nan_window_means(x, n)
            tag = f"{float(w):g}"
            cols[f"{name}_upward_w{tag}"] = above - below
            cols[f"{name}_above_max_w{tag}"] = _extreme_height(x, n, step, True)
            cols[f"{name}_above_min_w{tag}"] = _extreme_height(x, n, step, False)
    return pd.DataFrame(cols, index=X.index)


def tract_evidence_matrix(X: pd.DataFrame, facies_proba: np.ndarray, labels: list[str],
                          step: float, windows: list[float], curves: list[str],
                          curve_windows: list[float]) -> pd.DataFrame:
    """Log features ``X`` (TOP-DOWN) joined with :func:`facies_stacking_features` and
    :func:`curve_stacking_features`."""
    return pd.concat([X, facies_stacking_features(facies_proba, labels, step, windows, X.index),
                      curve_stacking_features(X, curves, step, curve_windows)], axis=1)
