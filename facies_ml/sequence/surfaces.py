"""Sequence-stratigraphic surfaces (SB, MFS) picked from a decoded up-section tract path.

Inputs run UP-SECTION: index 0 is the deepest sample and depth decreases along the arrays.
A surface sits between the last sample of one run and the first sample of the next; which
transitions are SBs and which is the MFS turnaround comes from the rule table.

Uncertainty comes from the semi-Markov forward-backward ``entry`` posterior: ``entry[t, i, j]``
is the probability that a run of tract j starts at sample t on top of a run of tract i. For a
picked surface of kind K between the middle of the run below and the middle of the run above,
the probability mass of every K transition at each candidate boundary is a distribution of the
surface depth: ``depth_p10`` / ``depth_p90`` are its 10th / 90th depth percentiles (shallower /
deeper, widened to hold the decoded boundary) and ``confidence`` is its mass within
``confidence_tolerance`` of the pick: the probability that a surface of that kind lies within
that distance of the reported depth (a pick whose depth is uncertain reports a low confidence,
even where a surface surely exists somewhere nearby).

Checks (common practice): an MFS lies at the highest GR of its own sequence (between the
bounding SBs), and at an SB the GR stacking turns from decreasing upward (highstand,
shallowing) to increasing upward or flat (lowstand / transgressive). GR is smoothed over
``gr_smoothing`` depth units first so thin hot beds do not pass for the flooding surface. A pick
that fails a check or whose confidence is below ``low_confidence`` is flagged, and a failed
pick's confidence is capped at ``failed_check_confidence``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from facies_ml.errors import InputError
from facies_ml.sequence.rules import TractRules
from facies_ml.sequence.runs import split_runs


@dataclass(frozen=True)
class SurfaceChecks:
    """Settings of the pick checks (depth units of the well; from ``sequence:`` in the config)."""

    mfs_gr_window: float             # MFS must lie within this of the sequence's GR maximum
    gr_smoothing: float              # GR moving-average window before the checks
    sb_trend_window: float           # GR trend windows below / above an SB
    confidence_tolerance: float      # confidence = probability the surface is this close
    low_confidence: float            # picks below this confidence are flagged
    failed_check_confidence: float   # a pick failing a check never reports more
    depth_from: str                  # reported depth: "viterbi" boundary | "posterior_median"
    edge_run_min: float              # a surface whose run below / above is cut by the log edge
                                     # and thinner than this is not verifiable: marked at_edge

    def __post_init__(self) -> None:
        for name in ("mfs_gr_window", "gr_smoothing", "sb_trend_window", "confidence_tolerance",
                     "edge_run_min"):
            if not float(getattr(self, name)) > 0:
                raise InputError(f"sequence.checks.{name} must be > 0")
        if self.depth_from not in ("viterbi", "posterior_median"):
            raise InputError("sequence.checks.depth_from must be viterbi or posterior_median, "
                             f"not {self.depth_from!r}")
        for name in ("low_confidence", "failed_check_confidence"):
            if not 0.0 <= float(getattr(self, name)) <= 1.0:
                raise InputError(f"sequence.checks.{name} must lie in 0..1")


@dataclass(frozen=True)
class Surface:
    """A picked surface. Depths in the working unit of ``depth`` (increasing downward)."""

    kind: str                  # 'SB' | 'MFS'
    depth: float               # the boundary: midway between the two samples it separates
    depth_p10: float           # shallower percentile of the surface depth
    depth_p90: float           # deeper percentile of the surface depth
    confidence: float          # 0..1: probability that such a surface lies in its window
    gr_check: bool | None      # MFS: at the sequence's GR maximum; SB: stacking turns upward
    note: str
    index: int = -1            # first sample above the surface (up-section array index)
    lower: str = ""            # tract below
    upper: str = ""            # tract above
    sequence: str = ""         # basin-wide sequence name (filled by the correlation step)
    flags: tuple[str, ...] = field(default_factory=tuple)
    at_edge: bool = False      # the run below/above is cut by the log edge and too thin to verify


def _smooth(gr: np.ndarray, n: int) -> np.ndarray:
    """NaN-aware centred moving average over ``n`` samples."""
    if n <= 1:
        return gr.copy()
    ok = np.isfinite(gr)
    k = np.ones(n)
    num = np.convolve(np.where(ok, gr, 0.0), k, mode="same")
    den = np.convolve(ok.astype(float), k, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def _slope(y: np.ndarray, x: np.ndarray) -> float:
    ok = np.isfinite(y)
    if ok.sum() < 3:
        return float("nan")
    return float(np.polyfit(x[ok], y[ok], 1)[0])


def _weighted_quantile(z: np.ndarray, w: np.ndarray, q: float) -> float:
    order = np.argsort(z)
    z, w = z[order], w[order]
    c = np.cumsum(w)
    c = c / c[-1]
    return float(np.interp(q, c, z))


def _check(depth: np.ndarray, path: np.ndarray, n: int, gr: np.ndarray | None,
           entry: np.ndarray | None) -> None:
    T = depth.shape[0]
    if depth.ndim != 1 or path.shape != (T,):
        raise InputError(f"depth {depth.shape} and path {path.shape} must describe the same "
                         f"{T} samples")
    if entry is not None and entry.shape != (T, n, n):
        raise InputError(f"entry posterior has shape {entry.shape}, expected {(T, n, n)}")
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


def match_nearest(true_depths: list[float], pred_depths: list[float], tolerance: float
                  ) -> list[tuple[int, int]]:
    """One-to-one pairs ``(i_true, j_pred)`` matched nearest first within ``tolerance`` (the
    rule of the product owner's scorer ``../shared/tools/score_picks.py``); used by the
    evaluation and by the evidence-weight calibration."""
    order = sorted((abs(a - b), i, j) for i, a in enumerate(true_depths)
                   for j, b in enumerate(pred_depths))
    ti: set[int] = set()
    pj: set[int] = set()
    pairs = []
    for dist, i, j in order:
        if dist > tolerance or i in ti or j in pj:
            continue
        ti.add(i)
        pj.add(j)
        pairs.append((i, j))
    return pairs


def pick_surfaces(depth: np.ndarray, path: np.ndarray, rules: TractRules,
                  entry: np.ndarray | None = None, gr: np.ndarray | None = None,
                  checks: SurfaceChecks | None = None) -> list[Surface]:
    """Surfaces of an up-section decoded path, deepest first (see module docstring).

    ``entry (T, n, n)``: run-entry posterior of the same samples (None: the path is taken as
    certain, e.g. interpreted core labels: ranges collapse to the pick, confidence 1).
    ``gr`` (API, same samples) with ``checks`` enables the checks and flags.
    """
    depth = np.asarray(depth, dtype=float)
    path = np.asarray(path)
    grv = None if gr is None else np.asarray(gr, dtype=float)
    n = rules.n_states
    ent = None if entry is None else np.asarray(entry, dtype=float)
    _check(depth, path, n, grv, ent)
    if path.size < 2:
        return []
    starts, lengths, tracts = split_runs(path)
    kind_of = np.full((n, n), "", dtype=object)
    for i in range(n):
        for j in range(n):
            kind_of[i, j] = rules.surface_kind(i, j) or ""
    picks = [(r, int(starts[r]), str(kind_of[tracts[r - 1], tracts[r]]))
             for r in range(1, starts.size) if kind_of[tracts[r - 1], tracts[r]]]
    sb_idx = [b for _, b, k in picks if k == "SB"]
    step = float(abs(np.median(np.diff(depth)))) if depth.size > 1 else 1.0
    smooth = None
    chk = checks
    if grv is not None and chk is not None:
        smooth = _smooth(grv, max(1, int(round(chk.gr_smoothing / step))))
    out = []
    for r, b, kind in picks:
        lo_t, hi_t = int(tracts[r - 1]), int(tracts[r])
        z = 0.5 * (depth[b - 1] + depth[b])
        note = f"{rules.states[lo_t]} -> {rules.states[hi_t]} up-section"
        flags: list[str] = []
        if ent is None:
            p10 = p90 = z
            conf = 1.0
        else:
            lo = int(starts[r - 1] + lengths[r - 1] // 2) + 1
            hi = int(starts[r] + (lengths[r] - 1) // 2)
            w = np.arange(max(lo, 1), hi + 1)
            mass = ent[w][:, kind_of == kind].sum(axis=1)
            zs = 0.5 * (depth[w - 1] + depth[w])
            tol = chk.confidence_tolerance * (1 + 1e-9) if chk is not None else np.inf
            if mass.sum() > 0 and chk is not None and chk.depth_from == "posterior_median":
                z = _weighted_quantile(zs, mass, 0.5)
                note += "; depth = posterior median"
            if mass.sum() > 0:
                p10 = min(_weighted_quantile(zs, mass, 0.1), z)
                p90 = max(_weighted_quantile(zs, mass, 0.9), z)
            else:
                p10 = p90 = z
            near = np.abs(zs - z) <= tol          # 1e-9: a boundary exactly at the tolerance
            conf = float(min(mass[near].sum(), 1.0))  # counts in any unit (ft -> m float error)
        gr_check: bool | None = None
        if smooth is not None and chk is not None:
            if kind == "MFS":
                below = max([s for s in sb_idx if s <= b], default=0)
                above = min([s for s in sb_idx if s > b], default=path.size)
                seg = smooth[below:above]
                if np.isfinite(seg).any():
                    j = below + int(np.nanargmax(seg))
                    gr_check = bool(abs(z - depth[j]) <= chk.mfs_gr_window * (1 + 1e-9))
                    note += (f"; sequence GR maximum {abs(z - depth[j]):.1f} from the surface "
                             f"({seg[j - below]:.0f} API smoothed)")
                    if not gr_check:
                        flags.append("MFS not at its sequence's highest GR")
                else:
                    note += "; no GR in this sequence"
            else:
                nwin = max(3, int(round(chk.sb_trend_window / step)))
                lo_w = np.arange(max(b - nwin, 0), b)
                hi_w = np.arange(b, min(b + nwin, path.size))
                # slopes against height (up-section), so positive = GR increasing upward
                s_below = _slope(smooth[lo_w], -depth[lo_w])
                s_above = _slope(smooth[hi_w], -depth[hi_w])
                if np.isfinite(s_below) and np.isfinite(s_above):
                    gr_check = bool(s_above >= s_below)
                    note += (f"; GR trend upward {s_below:+.2f} below, {s_above:+.2f} above "
                             "(API per depth unit)")
                    if not gr_check:
                        flags.append("no upward turn of the GR stacking at this SB")
        at_edge = False
        if chk is not None:
            edge_runs = [r - 1] if r - 1 == 0 else []
            if r == starts.size - 1:
                edge_runs.append(r)
            for e_r in edge_runs:
                thick = lengths[e_r] * step
                if thick < chk.edge_run_min * (1 - 1e-9):
                    at_edge = True
                    flags.append(f"only {int(lengths[e_r])} samples of "
                                 f"{rules.states[int(tracts[e_r])]} between the surface and the "
                                 "log edge: not verifiable")
        if chk is not None and gr_check is False:
            conf = min(conf, chk.failed_check_confidence)
        if chk is not None and conf < chk.low_confidence:
            flags.append(f"low confidence {conf:.2f}")
        out.append(Surface(kind=kind, depth=float(z), depth_p10=float(p10), depth_p90=float(p90),
                           confidence=float(conf), gr_check=gr_check, note=note, index=b,
                           lower=rules.states[lo_t], upper=rules.states[hi_t],
                           flags=tuple(flags), at_edge=at_edge))
    return out
