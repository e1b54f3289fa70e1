"""Sequence-stratigraphic surfaces (SB, MFS) picked from a decoded up-section tract path.

Inputs run UP-SECTION: index 0 is the deepest sample and depth decreases along the arrays.
A surface sits between the last sample of one run and the first sample of the next; which
transitions are SBs and which is the MFS turnaround comes from the rule table.

Uncertainty. For a surface between tract ``a`` (below) and tract ``c`` (above), take the
samples from the middle of the run below to the middle of the run above. At each sample the
probability of lying above the surface is ``q = P(c) / (P(a) + P(c))`` from the posterior;
``q`` is made non-decreasing up-section by isotonic regression (pool-adjacent-violators) and
read as ``F(d) = P(surface is deeper than d)``. ``depth_p10`` / ``depth_p90`` are the 10th and
90th percentiles of the surface depth (``F = 0.9`` and ``F = 0.1``, linear interpolation between
samples, clamped to the window and widened to contain the decoded boundary), so
``depth_p10 <= depth <= depth_p90``. ``confidence`` is the mean posterior of the decoded tract
over the same window (``P(a)`` below, ``P(c)`` above).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from facies_ml.errors import InputError
from facies_ml.sequence.rules import TractRules


@dataclass(frozen=True)
class Surface:
    """A picked surface. Depths in the working unit of ``depth`` (increasing downward)."""

    kind: str                  # 'SB' | 'MFS'
    depth: float               # the boundary: midway between the two samples it separates
    depth_p10: float           # shallower percentile of the surface depth
    depth_p90: float           # deeper percentile of the surface depth
    confidence: float          # 0..1
    gr_check: bool | None      # MFS within mfs_gr_window of its sequence's GR maximum
    note: str
    index: int = -1            # first sample above the surface (up-section array index)
    lower: str = ""            # tract below
    upper: str = ""            # tract above


def _isotonic(y: np.ndarray) -> np.ndarray:
    """Least-squares non-decreasing fit (pool adjacent violators)."""
    vals: list[float] = []
    counts: list[int] = []
    for v in y.tolist():
        vals.append(v)
        counts.append(1)
        while len(vals) > 1 and vals[-2] > vals[-1]:
            c = counts[-2] + counts[-1]
            vals[-2] = (vals[-2] * counts[-2] + vals[-1] * counts[-1]) / c
            counts[-2] = c
            vals.pop()
            counts.pop()
    return np.repeat(vals, counts)


def _crossing(F: np.ndarray, d: np.ndarray, level: float) -> float:
    """Depth where the non-decreasing F first reaches ``level`` (clamped to the window)."""
    above = np.flatnonzero(F >= level)
    if above.size == 0:
        return float(d[-1])
    j = int(above[0])
    if j == 0:
        return float(d[0])
    f0, f1 = F[j - 1], F[j]
    w = (level - f0) / (f1 - f0) if f1 > f0 else 1.0
    return float(d[j - 1] + w * (d[j] - d[j - 1]))


def _check(depth: np.ndarray, path: np.ndarray, posterior: np.ndarray, n: int,
           gr: np.ndarray | None) -> None:
    T = depth.shape[0]
    if depth.ndim != 1 or path.shape != (T,) or posterior.shape != (T, n):
        raise InputError(f"depth {depth.shape}, path {path.shape} and posterior "
                         f"{posterior.shape} must describe the same {T} samples and {n} tracts")
    if gr is not None and gr.shape != (T,):
        raise InputError(f"GR has {gr.shape[0] if gr.ndim else 0} samples, expected {T}",
                         curve="gr_api")
    if not np.isfinite(depth).all():
        raise InputError("depth is not finite", row=int(np.flatnonzero(~np.isfinite(depth))[0]))
    if T > 1:
        bad = np.flatnonzero(np.diff(depth) >= 0)
        if bad.size:
            raise InputError("depth must decrease along the arrays (up-section order)",
                             row=int(bad[0]) + 1, depth=float(depth[bad[0] + 1]))
    if T and ((path < 0) | (path >= n)).any():
        r = int(np.flatnonzero((path < 0) | (path >= n))[0])
        raise InputError(f"tract index {int(path[r])} is outside 0..{n - 1}", row=r)


def pick_surfaces(depth: np.ndarray, path: np.ndarray, posterior: np.ndarray, rules: TractRules,
                  gr: np.ndarray | None = None, mfs_gr_window: float = 20.0) -> list[Surface]:
    """Surfaces of an up-section decoded path, deepest first (see module docstring).

    SB: every transition the rules mark SB (base of an LST, or a TST resting on an HST).
    MFS: every transition marked MFS (TST -> EHST). ``gr`` (API, same samples) enables the
    common-practice check that the MFS lies within ``mfs_gr_window`` (depth unit) of the highest
    GR between the bounding SBs (or the ends of the interval).
    """
    depth = np.asarray(depth, dtype=float)
    path = np.asarray(path)
    posterior = np.asarray(posterior, dtype=float)
    grv = None if gr is None else np.asarray(gr, dtype=float)
    n = rules.n_states
    _check(depth, path, posterior, n, grv)
    if path.size < 2:
        return []
    change = np.flatnonzero(np.diff(path)) + 1
    starts = np.r_[0, change]
    lengths = np.diff(np.r_[starts, path.size])
    picks: list[tuple[int, int, str]] = []                 # (run index above, boundary, kind)
    for r in range(1, starts.size):
        kind = rules.surface_kind(int(path[starts[r - 1]]), int(path[starts[r]]))
        if kind is not None:
            picks.append((r, int(starts[r]), kind))
    sb_idx = [b for _, b, k in picks if k == "SB"]
    out = []
    for r, b, kind in picks:
        lo_t, hi_t = int(path[b - 1]), int(path[b])
        lo = int(starts[r - 1] + lengths[r - 1] // 2)
        hi = int(starts[r] + (lengths[r] - 1) // 2)
        w = np.arange(lo, hi + 1)
        pa, pc = posterior[w, lo_t], posterior[w, hi_t]
        tot = pa + pc
        q = np.where(tot > 0, pc / np.where(tot > 0, tot, 1.0), 0.5)
        F = _isotonic(q)
        d = depth[w]
        z = 0.5 * (depth[b - 1] + depth[b])
        p10 = min(_crossing(F, d, 0.9), z)
        p90 = max(_crossing(F, d, 0.1), z)
        conf = float(np.mean(np.where(w < b, pa, pc)))
        gr_check: bool | None = None
        note = f"{rules.states[lo_t]} -> {rules.states[hi_t]} up-section"
        if kind == "MFS" and grv is not None:
            below = max([s for s in sb_idx if s <= b], default=0)
            above = min([s for s in sb_idx if s > b], default=path.size)
            seg = grv[below:above]
            if np.isfinite(seg).any():
                j = below + int(np.nanargmax(seg))
                gr_check = bool(abs(z - depth[j]) <= mfs_gr_window * (1 + 1e-9))
                note += f"; sequence GR maximum {abs(j - b)} samples from the surface"
            else:
                note += "; no GR in this sequence"
        out.append(Surface(kind=kind, depth=float(z), depth_p10=float(p10), depth_p90=float(p90),
                           confidence=conf, gr_check=gr_check, note=note, index=b,
                           lower=rules.states[lo_t], upper=rules.states[hi_t]))
    return out
