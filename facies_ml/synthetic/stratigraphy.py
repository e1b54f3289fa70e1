"""Relative sea level, systems tracts, thickness and lithofacies beds of the demo basin.

Every column is built UP-SECTION: index 0 is the deepest sample (base of the formation) and
heights increase upward. Callers flip the arrays to get top-down (increasing depth) logs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

TRACTS: tuple[str, ...] = ("LST", "TST", "EHST", "LHST")


@dataclass(frozen=True)
class BasinHistory:
    """Basin-wide (shared by all wells) sea-level history on stratigraphic time t in [0, 1]."""

    t_bounds: np.ndarray          # n_sequences + 1 cycle boundaries, base (0) to top (1)
    thickness_factor: np.ndarray  # per sequence


@dataclass(frozen=True)
class Segment:
    """One deposited systems tract in one well (up-section order)."""

    sequence: int                 # 1 = deepest
    tract: str
    phase0: float                 # third-order phase at the base of the tract
    phase1: float                 # phase at the top (after any erosional truncation)
    thickness_ft: float


def make_history(sea: dict[str, Any], thick: dict[str, Any], rng: np.random.Generator
                 ) -> BasinHistory:
    """Cycle durations and thickness factors drawn once per basin."""
    n = int(sea["n_sequences"])
    dur = 1.0 + float(sea["duration_jitter"]) * rng.uniform(-1.0, 1.0, n)
    bounds = np.concatenate([[0.0], np.cumsum(dur / dur.sum())])
    fac = np.clip(1.0 + float(thick["sequence_jitter"]) * rng.standard_normal(n), 0.6, 1.4)
    return BasinHistory(t_bounds=bounds, thickness_factor=fac)


def tract_phases(sea: dict[str, Any]) -> dict[str, tuple[float, float]]:
    """Third-order phase span of each tract: SB at 0, MFS at 0.5, next SB at 1."""
    a, e = float(sea["phase_lst_end"]), float(sea["phase_ehst_end"])
    return {"LST": (0.0, a), "TST": (a, 0.5), "EHST": (0.5, e), "LHST": (e, 1.0)}


def well_segments(position: float, history: BasinHistory, sea: dict[str, Any],
                  thick: dict[str, Any], rng: np.random.Generator,
                  eroded: tuple[int, float] | None = None) -> list[Segment]:
    """Deposited tracts of one well, up-section, with lateral thickness change, LST only in
    basinward wells and erosional truncation of the LHST below each SB in proximal wells.

    ``eroded`` = (sequence, unused): that whole sequence was removed by erosion below the next
    SB, so the next sequence's LST or TST rests on the late highstand of the one below (an
    allowed SB transition) and the eroded sequence has neither SB nor MFS in the well. The
    random draws are the same with or without erosion, so the other wells do not change.
    """
    phases = tract_phases(sea)
    n = len(history.thickness_factor)
    lst = position >= float(sea["lst_min_position"])
    cut_pos = float(thick["truncation_below_position"])
    trunc = float(thick["truncation_max"]) * max(0.0, (cut_pos - position) / cut_pos)
    segs: list[Segment] = []
    for k in range(n):
        duration = (history.t_bounds[k + 1] - history.t_bounds[k]) * n
        for tract in TRACTS:
            p0, p1 = phases[tract]
            if tract == "LST" and not lst:
                continue
            if tract == "LHST" and k < n - 1:       # an SB lies above: erode part of the LHST
                p1 = p1 - trunc * (p1 - p0)
            rate = float(thick["base_rate_ft"][tract])
            rate *= 1.0 + float(thick["lateral_slope"][tract]) * (position - 0.5)
            rate *= 1.0 + float(thick["well_jitter"]) * rng.standard_normal()
            gone = eroded is not None and eroded[0] == k + 1
            h = rate * (p1 - p0) * duration * history.thickness_factor[k]
            if gone:
                continue
            segs.append(Segment(k + 1, tract, p0, p1, max(h, 0.0)))
    return segs


@dataclass
class Column:
    """Per-sample stratigraphy of one well, index 0 = deepest sample (up-section order)."""

    height_ft: np.ndarray         # height above the base of the formation, sample centres
    sequence: np.ndarray          # int, 1 = deepest
    tract: np.ndarray             # index into TRACTS
    rel_in_tract: np.ndarray      # 0 at tract base .. 1 at tract top
    phase: np.ndarray             # third-order phase 0 (SB) .. 0.5 (MFS) .. 1
    sea_level: np.ndarray         # relative sea level (2nd + 3rd order), arbitrary units
    water_depth: np.ndarray       # 0..1 proxy driving TOC and composition
    mfs_height_ft: np.ndarray     # per sequence, height of the MFS (NaN when not deposited)
    sb_height_ft: np.ndarray      # per sequence, height of its basal SB
    dist_to_mfs_ft: np.ndarray    # per sample, distance to its own sequence's MFS


def build_column(segs: list[Segment], n_samples: int, step_ft: float, position: float,
                 history: BasinHistory, sea: dict[str, Any]) -> Column:
    """Sample the deposited segments on a regular up-section grid of ``n_samples``."""
    total = sum(s.thickness_ft for s in segs)
    scale = n_samples * step_ft / total
    tops = np.cumsum([s.thickness_ft * scale for s in segs])
    bases = tops - np.array([s.thickness_ft * scale for s in segs])
    h = (np.arange(n_samples) + 0.5) * step_ft
    idx = np.clip(np.searchsorted(tops, h, side="right"), 0, len(segs) - 1)
    rel = np.clip((h - bases[idx]) / np.maximum(tops[idx] - bases[idx], 1e-9), 0.0, 1.0)
    p0 = np.array([s.phase0 for s in segs])[idx]
    p1 = np.array([s.phase1 for s in segs])[idx]
    phase = p0 + rel * (p1 - p0)
    seq = np.array([s.sequence for s in segs])[idx]
    tract = np.array([TRACTS.index(s.tract) for s in segs])[idx]
    t = history.t_bounds[seq - 1] + phase * (history.t_bounds[seq] - history.t_bounds[seq - 1])
    a3, a2 = float(sea["third_order_amplitude"]), float(sea["second_order_amplitude"])
    sl = -a3 * np.cos(2.0 * np.pi * phase) + a2 * np.sin(
        2.0 * np.pi * float(sea["second_order_periods"]) * t + float(sea["second_order_phase"]))
    w = (sl + a3 + a2) / (2.0 * (a3 + a2))
    w = np.clip(w + float(sea["water_depth_position_weight"]) * (position - 0.5), 0.0, 1.0)
    n_seq = len(history.thickness_factor)
    mfs = np.full(n_seq, np.nan)
    sb = np.full(n_seq, np.nan)
    for s, base in zip(segs, bases, strict=True):
        if s.tract == "EHST":
            mfs[s.sequence - 1] = base
        if np.isnan(sb[s.sequence - 1]):
            sb[s.sequence - 1] = base
    dist = np.abs(h - mfs[seq - 1])
    dist = np.where(np.isnan(dist), np.inf, dist)
    return Column(h, seq, tract, rel, phase, sl, w, mfs, sb, dist)


def facies_probabilities(tract: int, rel: float, dist_mfs_ft: float, position: float,
                         fac: dict[str, Any]) -> np.ndarray:
    """Lithofacies mix at one level: tract base/top mix interpolated by relative position,
    extra CARB and ORSM near the MFS, more silt/sand in proximal wells."""
    mix = fac["mix"][TRACTS[tract]]
    p = (1.0 - rel) * np.asarray(mix["base"], float) + rel * np.asarray(mix["top"], float)
    labels = list(fac["labels"])
    if dist_mfs_ft <= float(fac["carb_near_mfs_ft"]):
        p[labels.index("CARB")] += float(fac["carb_near_mfs_weight"])
        p[labels.index("ORSM")] += float(fac["orsm_near_mfs_weight"])
    boost = 1.0 + float(fac["proximal_silt_boost"]) * (1.0 - position)
    for name in ("SILM", "SSTB"):
        p[labels.index(name)] *= boost
    return p / p.sum()


def lay_beds(col: Column, step_ft: float, position: float, fac: dict[str, Any],
             rng: np.random.Generator) -> np.ndarray:
    """Lithofacies class index per sample, laid bed by bed up-section (beds stop at tract
    boundaries). Bed thickness is lognormal around a per-class median (ft)."""
    n = len(col.height_ft)
    out = np.empty(n, dtype=int)
    medians = np.asarray(fac["bed_median_ft"], float) / step_ft
    sigma = float(fac["bed_sigma"])
    boundary = np.flatnonzero(np.diff(col.tract) != 0) + 1
    boundary = np.concatenate([boundary, np.flatnonzero(np.diff(col.sequence) != 0) + 1, [n]])
    stops = np.unique(boundary)
    j = 0
    while j < n:
        stop = int(stops[np.searchsorted(stops, j, side="right")])
        p = facies_probabilities(int(col.tract[j]), float(col.rel_in_tract[j]),
                                 float(col.dist_to_mfs_ft[j]), position, fac)
        f = int(rng.choice(len(p), p=p))
        size = max(1, int(round(medians[f] * np.exp(sigma * rng.standard_normal()))))
        end = min(j + size, stop)
        out[j:end] = f
        j = end
    return out
