"""Log conditioning on plain arrays: nulls, spikes, resampling, bad hole, ranges.

All depth arrays are increasing downward (top of the log first). None of these operations is
stratigraphic, so none has an up-section direction; they are symmetric in depth.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

MAD_TO_SIGMA = 1.4826  # MAD of a normal distribution times this is its standard deviation


def parse_numbers(values: Iterable[object]) -> tuple[np.ndarray, np.ndarray]:
    """Float array of ``values`` and a mask of the non-blank cells that were not numbers.

    Text such as ``abc``, ``1,5``, ``NaN`` or a cell holding undecodable bytes becomes NaN and
    is marked in the mask; blank cells become NaN unmarked (an ordinary missing value). ``inf``
    text is read as infinity (see :func:`infinite_mask`).
    """
    s = pd.Series(list(values) if not isinstance(values, pd.Series | np.ndarray) else values)
    if s.dtype.kind in "fiub":
        return s.to_numpy(dtype=float), np.zeros(len(s), dtype=bool)
    as_text = s.astype("string").str.strip()
    blank = (s.isna() | (as_text == "") | as_text.isna()).to_numpy(dtype=bool)
    out = pd.to_numeric(as_text.where(~blank), errors="coerce").to_numpy(dtype=float)
    return out, np.isnan(out) & ~blank      # "NaN" text is marked too: not blank, no number


def to_numeric(values: Iterable[object]) -> tuple[np.ndarray, int]:
    """Float array of ``values``; returns (array, number of non-blank cells that were not numbers)."""
    out, bad = parse_numbers(values)
    return out, int(bad.sum())


def null_mask(values: np.ndarray, nulls: Iterable[float]) -> np.ndarray:
    """True where ``values`` equals one of the sentinel ``nulls`` (e.g. LAS NULL -999.25)."""
    values = np.asarray(values, dtype=float)
    mask = np.zeros(values.shape, dtype=bool)
    for null in nulls:
        null = float(null)
        mask |= np.isclose(values, null, rtol=0.0, atol=1e-6 * max(1.0, abs(null)))
    return mask


def replace_nulls(values: np.ndarray, nulls: Iterable[float]) -> tuple[np.ndarray, int]:
    """Set sentinel null values (and +/-inf) to NaN; returns (copy, count of sentinels replaced)."""
    out = np.array(values, dtype=float, copy=True)
    mask = np.isinf(out) | null_mask(out, nulls)
    out[mask] = np.nan
    return out, int(mask.sum())


def despike(values: np.ndarray, window: int, threshold: float,
            log_scale: bool = False) -> tuple[np.ndarray, int]:
    """Set spikes to NaN: |x - centred rolling median| > threshold * sigma.

    ``window`` is in samples. sigma is the robust noise level 1.4826 * MAD(first differences)
    / sqrt(2) (the residuals from a rolling median are exactly zero along any monotonic run, so
    their own MAD is no measure of noise). Steps between beds thicker than half the window are
    kept; isolated excursions are removed. ``log_scale`` works on log10(x) (resistivity).
    Returns (copy, number of spikes removed). Curves with zero noise level are left alone, and
    so are the first and last ``window // 2`` samples and samples whose window has a gap.
    """
    out = np.array(values, dtype=float, copy=True)
    work = out.copy()
    if log_scale:
        with np.errstate(divide="ignore", invalid="ignore"):
            work = np.where(work > 0, np.log10(work), np.nan)
    finite = np.isfinite(work)
    if finite.sum() < max(3, window):
        return out, 0
    # full windows only: at the ends of a trending curve a truncated window's median is biased
    med = pd.Series(work).rolling(window, center=True, min_periods=window).median().to_numpy()
    diffs = np.diff(work[finite])
    sigma = MAD_TO_SIGMA * float(np.median(np.abs(diffs - np.median(diffs)))) / np.sqrt(2.0)
    scale = float(np.nanmax(np.abs(work[finite])))
    if not np.isfinite(sigma) or sigma <= 1e-9 * max(1.0, scale):   # noise-free or quantized
        return out, 0
    with np.errstate(invalid="ignore"):
        spikes = finite & (np.abs(work - med) > threshold * sigma)
    out[spikes] = np.nan
    return out, int(spikes.sum())


def nearest_samples(grid: np.ndarray, depth: np.ndarray, half_step: float) -> np.ndarray:
    """Index into the increasing ``grid`` of the sample nearest each ``depth`` (same unit);
    -1 where none lies within ``half_step``."""
    grid = np.asarray(grid, dtype=float)
    depth = np.asarray(depth, dtype=float)
    if len(grid) == 0:
        return np.full(len(depth), -1)
    if len(grid) == 1:
        j = np.zeros(len(depth), dtype=int)
    else:
        j = np.clip(np.searchsorted(grid, depth), 1, len(grid) - 1)
        j = np.where(np.abs(depth - grid[j - 1]) <= np.abs(grid[j] - depth), j - 1, j)
    return np.where(np.abs(grid[j] - depth) <= half_step * (1 + 1e-6) + 1e-9, j, -1)


def regular_grid(top: float, bottom: float, step: float) -> np.ndarray:
    """Depths k*step (k integer) from the first multiple >= ``top`` to the last <= ``bottom``."""
    k0 = int(np.ceil(top / step - 1e-6))
    k1 = int(np.floor(bottom / step + 1e-6))
    if k1 < k0:
        return np.empty(0)
    return np.round(np.arange(k0, k1 + 1) * step, 10)


def resample(depth: np.ndarray, values: np.ndarray, grid: np.ndarray,
             max_gap: float) -> np.ndarray:
    """Linear interpolation of finite samples onto ``grid`` (same unit, increasing downward).

    A grid point between two finite samples further apart than ``max_gap`` stays NaN, and so
    does any point outside the curve's finite depth range. Exact depth hits keep their value.
    """
    ok = np.isfinite(values) & np.isfinite(depth)
    d, v = depth[ok], values[ok]
    out = np.full(grid.shape, np.nan)
    if d.size == 0:
        return out
    if d.size == 1:
        hit = np.isclose(grid, d[0], rtol=0.0, atol=1e-9)
        out[hit] = v[0]
        return out
    tol = 1e-6  # unit-conversion rounding at the ends (e.g. 1530.096 m / 0.3048)
    out = np.interp(grid, d, v)
    out[(grid < d[0] - tol) | (grid > d[-1] + tol)] = np.nan
    right = np.clip(np.searchsorted(d, grid, side="left"), 0, d.size - 1)
    left = np.clip(right - 1, 0, d.size - 1)
    exact = np.isclose(d[right], grid, rtol=0.0, atol=tol) | np.isclose(d[left], grid, rtol=0.0,
                                                                        atol=tol)
    gap = (d[right] - d[left]) > max_gap + 1e-9
    out[gap & ~exact] = np.nan
    return out


def bad_hole_mask(cali_in: np.ndarray, bs_in: np.ndarray | None,
                  excess_in: float) -> tuple[np.ndarray, str]:
    """True where the caliper exceeds gauge by more than ``excess_in`` inches.

    Gauge is the bit size where it is known, else the well's median caliper.
    Returns (mask, description of the reference used).
    """
    cali = np.asarray(cali_in, dtype=float)
    if bs_in is not None and np.isfinite(bs_in).any():
        gauge = np.asarray(bs_in, dtype=float)
        if not np.isfinite(gauge).all():  # fill bit size gaps from neighbours (it is piecewise constant)
            gauge = pd.Series(gauge).ffill().bfill().to_numpy()
        ref = "caliper - bit size"
    else:
        gauge = np.full(cali.shape, np.nanmedian(cali) if np.isfinite(cali).any() else np.nan)
        ref = "caliper - median caliper"
    with np.errstate(invalid="ignore"):
        mask = (cali - gauge) > excess_in
    return np.asarray(mask & np.isfinite(cali), dtype=bool), ref


def out_of_range(values: np.ndarray, low: float, high: float) -> tuple[np.ndarray, int]:
    """Set values outside [low, high] to NaN; returns (copy, count)."""
    out = np.array(values, dtype=float, copy=True)
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(out) & ((out < low) | (out > high))
    out[mask] = np.nan
    return out, int(mask.sum())
