"""Basin-wide sequence names: correlate each well's sequences to the basin's ordered list.

Cored key wells carry the geologist's sequence names; offset wells only have a decoded
systems-tract path. :func:`split_sequences` cuts a well's tract path into sequence units
(one sequence boundary, SB, up to the next), and :class:`SequenceCorrelator` learns the basin's
ordered list of sequence names from the cored wells and aligns every other well's units to it,
so each SB and MFS gets a basin-wide name, the same in every well.

Conventions. Depth increases downward. Input arrays of :func:`split_sequences` are top-down
(as the well's table); everything stratigraphic it returns runs BOTTOM-UP (up-section):
units are listed deepest first and the basin's name list runs from the oldest (deepest)
sequence to the youngest. A surface sits midway between the two samples it separates (as in
:mod:`facies_ml.sequence.surfaces`); a unit cut by the logged interval ends at the depth of
the first or last sample and its thickness is then only a lower bound.

Method. The alignment is an order-preserving alignment by dynamic programming as in
Needleman & Wunsch (1970, J. Mol. Biol. 48) and its use for stratigraphic correlation by
Smith & Waterman (1980), "New stratigraphic correlation techniques", Journal of Geology 88
(citation from memory). Matching a unit to a basin sequence costs a standardised squared
fingerprint distance; leaving a unit unmatched ("extra" sequence, e.g. a spurious pick) costs
``extra_cost``; skipping a basin sequence costs nothing outside the matched range (outside the
logged interval) and ``skip_cost_interior`` inside it (eroded or not picked).

Fingerprints use only quantities comparable between wells: thickness (compared in log, after
removing the well's robust median thickness ratio to the basin, so lateral thickening of the
whole section does not shift names), levels of log10 resistivity, bulk density and neutron
porosity, and a GR contrast normalised within the well (robust to GR gain and offset).
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from facies_ml.errors import InputError
from facies_ml.sequence.runs import split_runs

# Fingerprint keys (see SequenceUnit.fingerprint).
THICKNESS_FEATURES = ("thickness", "flood_thickness")
LEVEL_FEATURES = ("log10_rt", "log10_rt_flood", "rhob", "rhob_flood", "nphi", "nphi_flood",
                  "flood_fraction", "gr_flood_contrast")
# MFS-to-MFS spacing below a unit (depth units): bounded by the two best-picked surfaces, so it
# is complete even in a unit cut by the log edge; compared in log after the well's ratio.
SPACING_FEATURES = ("mfs_spacing",)
LOG_FEATURES = THICKNESS_FEATURES + SPACING_FEATURES
FEATURES = THICKNESS_FEATURES + SPACING_FEATURES + LEVEL_FEATURES
# Features that stay meaningful for a unit cut by a log edge (levels of the flooding part);
# whole-unit means, the flooding fraction and the GR contrast depend on the missing part.
EDGE_SAFE_FEATURES = ("log10_rt_flood", "rhob_flood", "nphi_flood")


@dataclass(frozen=True)
class SequenceUnit:
    """One sequence in one well: from an SB (or the log base) up to the next SB (or log top).

    Depths are in the well's working unit, increasing downward, so ``base_depth >=
    top_depth``. ``base_is_log_edge`` / ``top_is_log_edge`` are True when the logged interval
    cuts the unit (its thickness is then a lower bound). ``mfs_depth`` is the first (deepest)
    maximum flooding surface inside the unit, or None. ``tract_thickness`` maps every tract
    name to its summed thickness in the unit (0.0 when absent). ``fingerprint`` holds floats
    (NaN when not computable):

    - ``thickness``: base minus top depth;
    - ``flood_thickness``: thickness of the tracts on either side of the MFS transition
      (TST + EHST with the usual rule table);
    - ``flood_fraction``: flood_thickness / thickness;
    - ``log10_rt`` / ``log10_rt_flood``: mean log10 of resistivity over the unit / its
      flooding part; ``rhob``, ``rhob_flood``, ``nphi``, ``nphi_flood`` likewise;
    - ``gr_flood_contrast``: (mean GR of the flooding part - median GR of the unit) / the
      well's GR interquartile range; a ratio of GR differences, so per-well GR gain and offset
      cancel;
    - ``<level>_se`` for the six rt / rhob / nphi levels: standard error of that mean (the
      well's pooled sample scatter about tract-run means / sqrt(number of samples)).

    ``first_sample`` / ``n_samples`` locate the unit in the well's up-section sample order
    (index 0 = deepest sample).
    """

    base_depth: float
    top_depth: float
    base_is_log_edge: bool
    top_is_log_edge: bool
    mfs_depth: float | None
    tract_thickness: dict[str, float]
    fingerprint: dict[str, float]
    first_sample: int = 0
    n_samples: int = 0
    flood_complete: bool = True   # the whole TST + EHST is inside the log (a cut unit whose
                                  # log edge falls inside it has a partial, biased flood part)

    @property
    def thickness(self) -> float:
        return self.base_depth - self.top_depth

    @property
    def is_cut(self) -> bool:
        """True when either end of the unit is the edge of the logged interval."""
        return self.base_is_log_edge or self.top_is_log_edge


def _mean(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    return float(finite.mean()) if finite.size else math.nan


def _column(curves: pd.DataFrame, name: str, n: int) -> np.ndarray:
    if name not in curves.columns:
        return np.full(n, np.nan)
    return pd.to_numeric(curves[name], errors="coerce").to_numpy(dtype=float)


def _check_pairs(pairs: Iterable[tuple[str, str]], tract_names: Sequence[str], what: str,
                 well: str | None) -> set[tuple[str, str]]:
    out = set()
    for pair in pairs:
        if len(pair) != 2 or any(p not in tract_names for p in pair):
            raise InputError(f"{what} pair {pair!r} names a tract not in {list(tract_names)}",
                             well=well)
        out.add((str(pair[0]), str(pair[1])))
    return out


def split_sequences(depth: np.ndarray, tracts: np.ndarray, curves: pd.DataFrame,
                    tract_names: Sequence[str], sb_transitions: Iterable[tuple[str, str]],
                    *, mfs_transitions: Iterable[tuple[str, str]] = (("TST", "EHST"),),
                    well: str | None = None) -> list[SequenceUnit]:
    """Cut a well's decoded tract path into sequence units, returned BOTTOM-UP (deepest first).

    ``depth`` (T,) increases downward and ``tracts`` (T,) holds indices into ``tract_names``,
    both top-down as in the well's table; ``curves`` is a DataFrame of T rows (same order)
    with any of ``gr_api``, ``rt_ohmm``, ``rhob_g_cc``, ``nphi_v_v`` (missing columns and NaN
    are allowed). ``sb_transitions`` / ``mfs_transitions`` are ``(lower, upper)`` tract-name
    pairs read UP-SECTION that make a sequence boundary / the maximum flooding surface (the
    caller passes them from the rule table; the MFS default is the usual TST -> EHST
    turnaround). A unit runs from one SB up to the next SB; the deepest and shallowest units
    are bounded by the log edges.
    """
    depth = np.asarray(depth, dtype=float)
    tracts = np.asarray(tracts)
    names = [str(t) for t in tract_names]
    if depth.ndim != 1 or tracts.shape != depth.shape:
        raise InputError(f"depth {depth.shape} and tracts {tracts.shape} must be 1-D and of the "
                         "same length", well=well)
    if depth.size == 0:
        raise InputError("no samples to split into sequences", well=well)
    if not np.all(np.isfinite(depth)) or np.any(np.diff(depth) <= 0):
        raise InputError("depth must be finite and strictly increasing downward", well=well)
    if not np.issubdtype(tracts.dtype, np.integer):
        raise InputError("tracts must be integer indices into tract_names", well=well)
    if tracts.min() < 0 or tracts.max() >= len(names):
        raise InputError(f"tract index outside 0..{len(names) - 1}", well=well)
    if not isinstance(curves, pd.DataFrame) or len(curves) != depth.size:
        raise InputError(f"curves must be a DataFrame with {depth.size} rows", well=well)
    sb = _check_pairs(sb_transitions, names, "sb_transitions", well)
    mfs = _check_pairs(mfs_transitions, names, "mfs_transitions", well)
    flood_tracts = {t for pair in mfs for t in pair}

    # Up-section order: index 0 = deepest sample.
    d = depth[::-1]
    path = tracts[::-1].astype(int)
    gr = _column(curves, "gr_api", d.size)[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        rt = _column(curves, "rt_ohmm", d.size)[::-1]
        lrt = np.where(rt > 0, np.log10(np.where(rt > 0, rt, 1.0)), np.nan)
    rhob = _column(curves, "rhob_g_cc", d.size)[::-1]
    nphi = _column(curves, "nphi_v_v", d.size)[::-1]
    finite_gr = gr[np.isfinite(gr)]
    gr_iqr = (float(np.subtract(*np.percentile(finite_gr, [75, 25])))
              if finite_gr.size else math.nan)

    starts, lengths, _ = split_runs(path)
    unit_of_run = np.zeros(len(starts), int)

    # Boundary below run r (up-section): midway between its first sample and the one below.
    lower_b = np.array([d[s] if s == 0 else 0.5 * (d[s] + d[s - 1]) for s in starts])
    upper_b = np.array([d[s + n - 1] if s + n == d.size else 0.5 * (d[s + n - 1] + d[s + n])
                        for s, n in zip(starts, lengths, strict=True)])
    run_tract = [names[path[s]] for s in starts]
    # Group runs into units at SB transitions.
    groups: list[list[int]] = [[0]]
    for r in range(1, len(starts)):
        if (run_tract[r - 1], run_tract[r]) in sb:
            groups.append([r])
        else:
            groups[-1].append(r)
        unit_of_run[r] = len(groups) - 1
    # Sample scatter of each curve about its tract-run mean, pooled over the well: gives the
    # standard error of a unit's level (large for a level read from a few samples).
    run_id = np.repeat(np.arange(len(starts)), lengths)
    scatter = {}
    for key, v in (("log10_rt", lrt), ("rhob", rhob), ("nphi", nphi)):
        ok = np.isfinite(v)
        if ok.sum() > len(starts):
            run_mean = pd.Series(v[ok]).groupby(run_id[ok]).transform("mean").to_numpy()
            scatter[key] = float(np.sqrt(np.sum((v[ok] - run_mean) ** 2)
                                         / (ok.sum() - len(np.unique(run_id[ok])))))
        else:
            scatter[key] = math.nan

    def se(key: str, v: np.ndarray) -> float:
        n_ok = int(np.isfinite(v).sum())
        return scatter[key] / math.sqrt(n_ok) if n_ok else math.nan

    units = []
    for g_i, runs in enumerate(groups):
        first, last = runs[0], runs[-1]
        base, top = float(lower_b[first]), float(upper_b[last])
        thick = {t: 0.0 for t in names}
        flood_mask = np.zeros(d.size, bool)
        mfs_depth = None
        for r in runs:
            thick[run_tract[r]] += float(lower_b[r] - upper_b[r])
            if run_tract[r] in flood_tracts:
                flood_mask[starts[r]:starts[r] + lengths[r]] = True
            if r > first and mfs_depth is None and (run_tract[r - 1], run_tract[r]) in mfs:
                mfs_depth = float(lower_b[r])
        s0 = int(starts[first])
        s1 = int(starts[last] + lengths[last])
        sl = slice(s0, s1)
        fl = flood_mask[sl]
        thickness = base - top
        flood_thk = sum(thick[t] for t in flood_tracts)
        gr_u = gr[sl]
        gr_fin = gr_u[np.isfinite(gr_u)]
        gr_flood = _mean(gr_u[fl])
        if gr_fin.size and np.isfinite(gr_flood) and np.isfinite(gr_iqr) and gr_iqr > 0:
            contrast = (gr_flood - float(np.median(gr_fin))) / gr_iqr
        else:
            contrast = math.nan
        fp = {
            "thickness": thickness,
            "flood_thickness": flood_thk,
            "flood_fraction": flood_thk / thickness if thickness > 0 else math.nan,
            "log10_rt": _mean(lrt[sl]),
            "log10_rt_flood": _mean(lrt[sl][fl]),
            "rhob": _mean(rhob[sl]),
            "rhob_flood": _mean(rhob[sl][fl]),
            "nphi": _mean(nphi[sl]),
            "nphi_flood": _mean(nphi[sl][fl]),
            "gr_flood_contrast": contrast,
            "log10_rt_se": se("log10_rt", lrt[sl]),
            "log10_rt_flood_se": se("log10_rt", lrt[sl][fl]),
            "rhob_se": se("rhob", rhob[sl]),
            "rhob_flood_se": se("rhob", rhob[sl][fl]),
            "nphi_se": se("nphi", nphi[sl]),
            "nphi_flood_se": se("nphi", nphi[sl][fl]),
        }
        base_edge, top_edge = g_i == 0, g_i == len(groups) - 1
        complete = mfs_depth is not None and not (
            (base_edge and run_tract[first] in flood_tracts)
            or (top_edge and run_tract[last] in flood_tracts))
        units.append(SequenceUnit(base_depth=base, top_depth=top, base_is_log_edge=base_edge,
                                  top_is_log_edge=top_edge, mfs_depth=mfs_depth,
                                  tract_thickness=thick, fingerprint=fp, first_sample=s0,
                                  n_samples=s1 - s0,
                                  flood_complete=complete or not (base_edge or top_edge)))
    for below, unit in zip(units[:-1], units[1:], strict=True):
        if below.mfs_depth is not None and unit.mfs_depth is not None:
            unit.fingerprint["mfs_spacing"] = below.mfs_depth - unit.mfs_depth
    for unit in units:
        unit.fingerprint.setdefault("mfs_spacing", math.nan)
    return units


def unit_names_from_samples(units: Sequence[SequenceUnit], sample_names: Sequence[str],
                            ) -> list[str]:
    """Majority geologist's name per unit, from per-sample names given TOP-DOWN (table order).

    Empty strings (unnamed samples) are ignored; a unit with no named sample gets "". Ties go
    to the name met first going up-section.
    """
    up = list(sample_names)[::-1]
    out = []
    for u in units:
        counts: dict[str, int] = {}
        for name in up[u.first_sample:u.first_sample + u.n_samples]:
            if name:
                counts[name] = counts.get(name, 0) + 1
        out.append(max(counts, key=lambda k: counts[k]) if counts else "")
    return out


@dataclass
class CorrelationResult:
    """Basin-wide names of one well's units (BOTTOM-UP, as the units).

    ``names[i]`` is the basin name of unit i or "" for an extra (unmatched) unit;
    ``skipped_interior`` lists basin names skipped between the first and last matched unit
    (eroded or not picked); ``extra_units`` are unit indices left unmatched; ``cost`` is the
    total alignment cost, ``unit_costs`` the match cost per unit (NaN for extras);
    ``thickness_ratio`` the well's thickness relative to the basin mean (median ratio over
    matched units); ``flags`` human-readable notes.
    """

    names: list[str]
    skipped_interior: list[str]
    extra_units: list[int]
    cost: float
    flags: list[str]
    unit_costs: list[float] = field(default_factory=list)
    thickness_ratio: float = 1.0


def surface_names(units: Sequence[SequenceUnit], result: CorrelationResult,
                  ) -> list[tuple[str, float, str]]:
    """Basin-wide surface names ``(kind, depth, label)`` bottom-up for a correlated well.

    Each unit's base SB (unless it is the log edge) is labelled ``"SB <name>"`` (the SB at the
    base of sequence <name>) and its MFS ``"MFS <name>"``; an extra unit's surfaces are
    labelled ``"SB (extra)"`` / ``"MFS (extra)"``.
    """
    out = []
    for u, name in zip(units, result.names, strict=True):
        label = name or "(extra)"
        if not u.base_is_log_edge:
            out.append(("SB", u.base_depth, f"SB {label}"))
        if u.mfs_depth is not None:
            out.append(("MFS", u.mfs_depth, f"MFS {label}"))
    return out


def _natural_key(name: str) -> list[object]:
    return [int(p) if p.isdigit() else p for p in re.split(r"(\d+)", name)]


def _merge_orders(orders: Mapping[str, list[str]]) -> tuple[list[str], list[str]]:
    """Merge per-well bottom-up name orders into one; raise on conflicts naming the wells.

    Returns the order and notes on pairs whose relative order no well shows (broken by
    natural name order, e.g. "S2" before "S10").
    """
    seen: dict[tuple[str, str], list[str]] = {}
    for well, order in orders.items():
        for i, a in enumerate(order):
            for b in order[i + 1:]:
                seen.setdefault((a, b), []).append(well)
    for (a, b), wells in sorted(seen.items()):
        if (b, a) in seen and a < b:
            other = seen[(b, a)]
            raise InputError(
                f"sequence order conflict: {a} lies below {b} in well(s) {', '.join(wells)} "
                f"but above it in well(s) {', '.join(other)}", well=wells[0])
    all_names = sorted({n for o in orders.values() for n in o}, key=_natural_key)
    preds: dict[str, set[str]] = {n: set() for n in all_names}
    for a, b in seen:
        preds[b].add(a)
    out: list[str] = []
    notes: list[str] = []
    remaining = list(all_names)
    while remaining:
        ready = [n for n in remaining if not (preds[n] - set(out))]
        if not ready:
            wells = sorted({w for (a, b), ws in seen.items() if a in remaining and b in remaining
                            for w in ws})
            raise InputError(f"sequence order conflict (cycle) among {', '.join(remaining)} in "
                             f"wells {', '.join(wells)}", well=wells[0] if wells else None)
        if len(ready) > 1:
            notes.append(f"order of {', '.join(ready)} not seen in one well; natural name order")
        out.append(ready[0])
        remaining.remove(ready[0])
    return out, notes


class SequenceCorrelator:
    """Learn the basin's ordered sequence names from cored wells; name other wells' units.

    Parameters (keyword-only, no defaults: the caller passes them from the project config;
    stored verbatim, validated in :meth:`fit`):

    - ``skip_cost_interior``: cost of skipping a basin sequence between the first and last
      matched unit (erosion or a missed pick). Skips outside that range are free.
    - ``extra_cost``: cost of leaving a unit unmatched (an extra sequence, e.g. a spurious SB).
    - ``edge_fragment_cost``: the same for a unit cut by a log edge that holds no MFS: a
      fragment of a sequence whose flooding surface lies outside the log (or a sliver decoded
      at the edge); it carries too little to be named, and naming it would push its neighbour
      off its name.
    - ``feature_weights``: weight per fingerprint key (missing keys weigh 0 when a dict is
      given); None weighs every key in :data:`FEATURES` by 1.
    - ``spread_prior_count``: pseudo-count of the pooled within-name spread mixed into each
      name's own spread (so a name seen in one cored well gets the pooled spread).
    - ``spread_floor_fraction``: floor on every spread, as a fraction of the spread of the
      name means of that feature (keeps the cost finite when all wells agree exactly).
    - ``scale_iterations``: re-alignments after re-estimating the well's thickness ratio.
    - ``max_thickness_ratio``: largest thickness ratio (>= 1) of a well to the basin mean (and
      its inverse the smallest) considered when searching the well's ratio.

    The match cost of unit i to name k is the weighted mean over available features of
    ``z**2``, ``z = (x_i - mean_k) / sqrt(spread_k**2 + se_i**2)`` (``se_i`` the unit's
    standard error of a level, 0 for other features). A name with no cored value of a feature
    (e.g. every cored occurrence cut by a log edge) gets the basin-wide prior for it: the mean
    of the name means and the root sum of squares of the pooled and between-name spreads.
    Thickness features are compared as natural
    logs after subtracting the well's log thickness ratio (median of ``log x_i - mean_k`` over
    matched, uncut units; 0 before the first alignment); for a unit cut by a log edge they
    are one-sided (only a unit thicker than the name's mean costs), and only the
    :data:`EDGE_SAFE_FEATURES` levels are used besides.

    Fitted attributes: ``sequence_names_`` (bottom-up), ``means_`` / ``spreads_`` (name ->
    feature -> value; thickness features in natural log), ``order_notes_``, and
    ``well_names_`` (cored well -> per-unit names, filled by the unnamed fallback too).
    """

    def __init__(self, *, skip_cost_interior: float, extra_cost: float, edge_fragment_cost: float,
                 feature_weights: dict[str, float] | None, spread_prior_count: float,
                 spread_floor_fraction: float, scale_iterations: int,
                 max_thickness_ratio: float) -> None:
        self.skip_cost_interior = skip_cost_interior
        self.extra_cost = extra_cost
        self.edge_fragment_cost = edge_fragment_cost
        self.feature_weights = feature_weights
        self.spread_prior_count = spread_prior_count
        self.spread_floor_fraction = spread_floor_fraction
        self.scale_iterations = scale_iterations
        self.max_thickness_ratio = max_thickness_ratio

    # ---------------------------------------------------------------- validation
    def _validate(self) -> dict[str, float]:
        for name in ("skip_cost_interior", "extra_cost", "edge_fragment_cost",
                     "spread_prior_count"):
            v = getattr(self, name)
            if not isinstance(v, int | float) or isinstance(v, bool) or not math.isfinite(v) \
                    or v < 0:
                raise InputError(f"{name} must be a finite number >= 0, got {v!r}")
        f = self.spread_floor_fraction
        if not isinstance(f, int | float) or isinstance(f, bool) or not math.isfinite(f) or f <= 0:
            raise InputError(f"spread_floor_fraction must be a finite number > 0, got {f!r}")
        r = self.max_thickness_ratio
        if not isinstance(r, int | float) or isinstance(r, bool) or not math.isfinite(r) or r < 1:
            raise InputError(f"max_thickness_ratio must be a finite number >= 1, got {r!r}")
        it = self.scale_iterations
        if not isinstance(it, int) or isinstance(it, bool) or it < 0:
            raise InputError(f"scale_iterations must be an integer >= 0, got {it!r}")
        if self.feature_weights is None:
            return {k: 1.0 for k in FEATURES}
        weights = {}
        for k, w in self.feature_weights.items():
            if k not in FEATURES:
                raise InputError(f"feature_weights: unknown feature {k!r}; known: "
                                 f"{', '.join(FEATURES)}")
            if not isinstance(w, int | float) or isinstance(w, bool) or not math.isfinite(w) \
                    or w < 0:
                raise InputError(f"feature_weights[{k!r}] must be a finite number >= 0")
            weights[k] = float(w)
        if not any(w > 0 for w in weights.values()):
            raise InputError("feature_weights: at least one weight must be > 0")
        return {k: weights.get(k, 0.0) for k in FEATURES}

    # ---------------------------------------------------------------- features
    @staticmethod
    def _features(unit: SequenceUnit) -> dict[str, float]:
        """Unit features: thickness keys as natural log (NaN for <= 0), others as is."""
        out = {}
        for k in FEATURES:
            v = float(unit.fingerprint.get(k, math.nan))
            if k in LOG_FEATURES:
                v = math.log(v) if v > 0 else math.nan
            out[k] = v
        return out

    @staticmethod
    def _usable(unit: SequenceUnit, key: str, for_stats: bool = False) -> bool:
        """May ``key`` of ``unit`` be compared? A unit cut by the log edge keeps only its
        flooding-part levels, and when the basin statistics are learned (``for_stats``) only if
        its whole flooding part was logged, so a partial one does not bias the name's mean."""
        if not unit.is_cut or key in LOG_FEATURES:
            return True
        return key in EDGE_SAFE_FEATURES and (unit.flood_complete or not for_stats)

    # ---------------------------------------------------------------- fit
    def fit(self, named_wells: Mapping[str, list[SequenceUnit]],
            names: Mapping[str, list[str]] | None = None) -> SequenceCorrelator:
        """Learn the basin's ordered names (bottom-up) and fingerprint statistics per name.

        ``named_wells`` maps cored well -> its units (bottom-up, from :func:`split_sequences`);
        ``names`` maps the same wells -> one name per unit ("" = unnamed). A name order that
        conflicts between cored wells raises :class:`InputError` naming the wells. A name
        repeated in adjacent units (a sequence split by an extra SB) keeps its place in the
        order but those units are left out of the statistics.

        With ``names=None`` (cored wells without names) the correlator numbers the sequences
        itself: the well with the most units (first by well name on a tie) is the reference,
        its units are named "SQ1", "SQ2", ... from the deepest; every other cored well is
        aligned to it with the same dynamic programme, the statistics are refitted from all
        aligned wells and the wells aligned once more. Units matching no reference unit stay
        unnamed (""). The result is in ``well_names_``.
        """
        self.weights_ = self._validate()
        if not named_wells:
            raise InputError("no cored wells to learn sequence names from")
        if names is None:
            return self._fit_unnamed(named_wells)
        for well in named_wells:
            if well not in names:
                raise InputError("no sequence names given for this cored well", well=well)
            if len(names[well]) != len(named_wells[well]):
                raise InputError(f"{len(names[well])} names for {len(named_wells[well])} "
                                 "sequence units", well=well)
        self._fit_named(named_wells, names)
        self.well_names_ = {w: list(names[w]) for w in named_wells}
        return self

    def _fit_named(self, wells: Mapping[str, list[SequenceUnit]],
                   names: Mapping[str, list[str]]) -> None:
        orders: dict[str, list[str]] = {}
        use: dict[str, list[bool]] = {}
        for well, wnames in names.items():
            if well not in wells:
                continue
            order: list[str] = []
            keep = []
            for i, n in enumerate(wnames):
                if not n:
                    keep.append(False)
                    continue
                adjacent_dup = (i > 0 and wnames[i - 1] == n) or \
                    (i + 1 < len(wnames) and wnames[i + 1] == n)
                if n in order and order[-1] != n:
                    raise InputError(f"sequence name {n!r} used by non-adjacent units",
                                     well=well)
                if not order or order[-1] != n:
                    order.append(n)
                keep.append(not adjacent_dup)
            orders[well] = order
            use[well] = keep
        seq, notes = _merge_orders(orders)
        if not seq:
            raise InputError("the cored wells carry no sequence names")
        self.sequence_names_ = seq
        self.order_notes_ = notes
        self._estimate_stats(wells, names, use)

    def _estimate_stats(self, wells: Mapping[str, list[SequenceUnit]],
                        names: Mapping[str, list[str]], use: Mapping[str, list[bool]]) -> None:
        # samples[name][feature] -> list of (well, value)
        feats = {w: [self._features(u) for u in units] for w, units in wells.items()}
        offsets = {w: 0.0 for w in wells}
        for _ in range(2):      # means, then per-well log thickness ratio, then means again
            means: dict[str, dict[str, float]] = {}
            values: dict[str, dict[str, list[float]]] = {n: {k: [] for k in FEATURES}
                                                         for n in self.sequence_names_}
            for w, units in wells.items():
                for u, f, n, keep in zip(units, feats[w], names[w], use[w], strict=True):
                    if not keep:
                        continue
                    for k in FEATURES:
                        if k in THICKNESS_FEATURES and u.is_cut:
                            continue                    # lower bound only
                        if not self._usable(u, k, for_stats=True) or not math.isfinite(f[k]):
                            continue
                        v = f[k] - offsets[w] if k in LOG_FEATURES else f[k]
                        values[n][k].append(v)
            for n in self.sequence_names_:
                means[n] = {k: float(np.mean(v)) if v else math.nan for k, v in values[n].items()}
            for w, units in wells.items():
                d = [f["thickness"] - means[n]["thickness"]
                     for u, f, n, keep in zip(units, feats[w], names[w], use[w], strict=True)
                     if keep and not u.is_cut and math.isfinite(f["thickness"])
                     and math.isfinite(means[n]["thickness"])]
                offsets[w] = float(np.median(d)) if d else 0.0
        self.means_ = means
        self.well_log_ratio_ = offsets
        spreads: dict[str, dict[str, float]] = {n: {} for n in self.sequence_names_}
        for k in FEATURES:
            ss, dof = 0.0, 0
            for n in self.sequence_names_:
                v = values[n][k]
                if len(v) > 1:
                    ss += float(np.sum((np.asarray(v) - np.mean(v)) ** 2))
                    dof += len(v) - 1
            pooled = math.sqrt(ss / dof) if dof else math.nan
            mu = [means[n][k] for n in self.sequence_names_ if math.isfinite(means[n][k])]
            between = float(np.std(mu)) if len(mu) > 1 else math.nan
            floor = self.spread_floor_fraction * between if math.isfinite(between) else math.nan
            if not math.isfinite(floor) or floor <= 0:
                floor = pooled if math.isfinite(pooled) and pooled > 0 else math.nan
            prior_mu = float(np.mean(mu)) if mu else math.nan
            prior_sd = math.sqrt(np.nansum([between ** 2 if math.isfinite(between) else 0.0,
                                            pooled ** 2 if math.isfinite(pooled) else 0.0]))
            for n in self.sequence_names_:
                v = values[n][k]
                if not v:
                    means[n][k] = prior_mu
                    spreads[n][k] = prior_sd if prior_sd > 0 else math.nan
                    continue
                own_ss = float(np.sum((np.asarray(v) - np.mean(v)) ** 2)) if len(v) > 1 else 0.0
                own_dof = max(len(v) - 1, 0)
                p0 = self.spread_prior_count if math.isfinite(pooled) else 0.0
                denom = own_dof + p0
                s = math.sqrt((own_ss + p0 * pooled ** 2) / denom) if denom > 0 else math.nan
                if math.isfinite(floor):
                    s = max(s, floor) if math.isfinite(s) else floor
                spreads[n][k] = s
        self.spreads_ = spreads

    def _fit_unnamed(self, wells: Mapping[str, list[SequenceUnit]]) -> SequenceCorrelator:
        ref = max(sorted(wells), key=lambda w: len(wells[w]))
        ref_names = [f"SQ{i + 1}" for i in range(len(wells[ref]))]
        all_names: dict[str, list[str]] = {ref: ref_names}
        self._fit_named({ref: wells[ref]}, {ref: ref_names})
        for _ in range(2):          # align to the reference, refit from all wells, align again
            for w in sorted(wells):
                if w != ref:
                    all_names[w] = self.assign(wells[w], w).names
            self._fit_named(wells, all_names)
            # keep the reference order even where another well's names were unordered
            self.sequence_names_ = ref_names
        self.well_names_ = {w: all_names[w] for w in wells}
        return self

    # ---------------------------------------------------------------- assign
    def _check_fitted(self) -> None:
        if not hasattr(self, "sequence_names_"):
            raise InputError("SequenceCorrelator is not fitted; call fit() first")

    def _cost_matrix(self, units: Sequence[SequenceUnit], log_ratio: float) -> np.ndarray:
        """(n_units, n_names) match costs: weighted mean of squared standardised distances."""
        seq = self.sequence_names_
        n, m, nf = len(units), len(seq), len(FEATURES)
        if n == 0:
            return np.zeros((0, m))
        x = np.array([[self._features(u)[k] for k in FEATURES] for u in units])
        usable = np.array([[self._usable(u, k) for k in FEATURES] for u in units])
        cut = np.array([u.is_cut for u in units])
        mu = np.array([[self.means_[q][k] for k in FEATURES] for q in seq])
        sd = np.array([[self.spreads_[q][k] for k in FEATURES] for q in seq])
        w = np.array([self.weights_[k] for k in FEATURES])
        thick = np.array([k in THICKNESS_FEATURES for k in FEATURES])
        logged = np.array([k in LOG_FEATURES for k in FEATURES])
        se = np.array([[u.fingerprint.get(f"{k}_se", 0.0) for k in FEATURES] for u in units])
        se = np.where(np.isfinite(se), se, 0.0)
        x = np.where(logged[None, :], x - log_ratio, x)
        scale = np.sqrt(sd[None, :, :] ** 2 + se[:, None, :] ** 2)
        with np.errstate(invalid="ignore", divide="ignore"):
            z = (x[:, None, :] - mu[None, :, :]) / scale                     # (n, m, nf)
        one_sided = cut[:, None, None] & thick[None, None, :]
        z = np.where(one_sided, np.maximum(z, 0.0), z)       # cut unit: thickness >= observed
        ok = (usable[:, None, :] & np.isfinite(z) & (sd[None] > 0) & (w[None, None, :] > 0))
        num = np.where(ok, w * np.where(ok, z, 0.0) ** 2, 0.0).sum(axis=2)
        den = np.where(ok, np.broadcast_to(w, (n, m, nf)), 0.0).sum(axis=2)
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)

    def _log_ratio(self, units: Sequence[SequenceUnit], assigned: list[int]) -> float | None:
        """Median of log(thickness) - name mean over matched uncut units, or None."""
        d = []
        for u, k in zip(units, assigned, strict=True):
            if k < 0 or u.is_cut:
                continue
            x = self._features(u)["thickness"]
            mu = self.means_[self.sequence_names_[k]]["thickness"]
            if math.isfinite(x) and math.isfinite(mu):
                d.append(x - mu)
        return float(np.median(d)) if d else None

    def _align(self, cost: np.ndarray, extra_costs: np.ndarray
               ) -> tuple[float, list[int]]:
        """Order-preserving DP. Returns total cost and per-unit name index (-1 = extra).
        ``extra_costs[i]``: the cost of leaving unit i unmatched."""
        n, m = cost.shape
        skip = float(self.skip_cost_interior)
        inf = math.inf
        before = np.concatenate([[0.0], np.cumsum(extra_costs)])   # extras before a unit
        # A: no match yet (units so far are extras, names skipped free).
        # B[i, k]: i units and k names consumed, at least one match.
        B = np.full((n + 1, m + 1), inf)
        move = np.zeros((n + 1, m + 1), dtype=np.int8)   # 1 match from B, 2 match from A,
        for i in range(1, n + 1):                        # 3 extra, 4 skip
            for k in range(1, m + 1):
                best, mv = B[i - 1, k - 1] + cost[i - 1, k - 1], 1
                c = before[i - 1] + cost[i - 1, k - 1]
                if c < best:
                    best, mv = c, 2
                c = B[i - 1, k] + extra_costs[i - 1]
                if c < best:
                    best, mv = c, 3
                c = B[i, k - 1] + skip
                if c < best:
                    best, mv = c, 4
                B[i, k], move[i, k] = best, mv
        k_end = int(np.argmin(B[n])) if n else 0
        total = float(B[n, k_end]) if n else 0.0
        assigned = [-1] * n
        if n == 0 or total >= before[n]:     # nothing matched is at least as good
            return float(before[n]), assigned
        i, k = n, k_end
        while i > 0:
            mv = move[i, k]
            if mv in (1, 2):
                assigned[i - 1] = k - 1
                i, k = i - 1, k - 1
                if mv == 2:
                    break
            elif mv == 3:
                i -= 1
            else:
                k -= 1
        return total, assigned

    def assign(self, units: Sequence[SequenceUnit], well: str) -> CorrelationResult:
        """Name a well's units (BOTTOM-UP, as from :func:`split_sequences`) with basin names.

        The well's thickness ratio to the basin is not known in advance: the alignment starts
        from ratio 1 and from every ratio that pairs an uncut unit with a basin name within
        ``[1 / max_thickness_ratio, max_thickness_ratio]``; from each start the ratio is
        re-estimated from the matched, uncut units (median) ``scale_iterations`` times,
        re-aligning each time, and the lowest-cost alignment wins (ties: ratio nearest 1).
        """
        self._check_fitted()
        if any(not isinstance(u, SequenceUnit) for u in units):
            raise InputError("assign() expects SequenceUnit objects", well=well)
        for a, b in zip(units, units[1:], strict=False):
            if b.base_depth > a.base_depth:
                raise InputError("units must be ordered bottom-up (deepest first)", well=well,
                                 depth=b.base_depth)
        seq = self.sequence_names_
        bound = math.log(self.max_thickness_ratio)
        # Starting log thickness ratios: 0 and every (uncut unit, name) pairing within bounds.
        starts = {0.0}
        for u in units:
            x = self._features(u)["thickness"]
            if u.is_cut or not math.isfinite(x):
                continue
            for q in seq:
                c = x - self.means_[q]["thickness"]
                if math.isfinite(c) and abs(c) <= bound:
                    starts.add(round(c, 9))
        best: tuple[float, float, float, list[int]] | None = None
        tried: dict[float, tuple[float, list[int]]] = {}
        extra_costs = np.array([float(self.edge_fragment_cost)
                                if u.is_cut and u.mfs_depth is None else float(self.extra_cost)
                                for u in units])
        for c0 in sorted(starts, key=lambda c: (abs(c), c)):
            log_ratio = c0
            for it in range(self.scale_iterations + 1):
                if log_ratio not in tried:
                    tried[log_ratio] = self._align(self._cost_matrix(units, log_ratio),
                                                   extra_costs)
                total, assigned = tried[log_ratio]
                if it == self.scale_iterations:
                    break
                new = self._log_ratio(units, assigned)
                if new is None or new == log_ratio:
                    break
                log_ratio = min(max(new, -bound), bound)
            key = (total, abs(log_ratio), log_ratio)
            if best is None or key < best[:3]:
                best = (total, abs(log_ratio), log_ratio, assigned)
        assert best is not None
        total, _, log_ratio, assigned = best
        cost = self._cost_matrix(units, log_ratio)
        matched = [k for k in assigned if k >= 0]
        skipped = [seq[k] for k in range(min(matched), max(matched) + 1)
                   if k not in matched] if matched else []
        extras = [i for i, k in enumerate(assigned) if k < 0]
        flags = []
        for k in range(min(matched), max(matched) + 1) if matched else []:
            if k not in matched:
                below = max((j for j in matched if j < k), default=None)
                above = min((j for j in matched if j > k), default=None)
                flags.append(f"sequence {seq[k]} missing between {seq[below]} and {seq[above]} "
                             "(eroded or not picked)")
        for i in extras:
            below = next((seq[assigned[j]] for j in range(i - 1, -1, -1) if assigned[j] >= 0),
                         None)
            above = next((seq[assigned[j]] for j in range(i + 1, len(units))
                          if assigned[j] >= 0), None)
            where = (f"between {below} and {above}" if below and above else
                     f"above {below}" if below else f"below {above}" if above else "in the well")
            flags.append(f"an extra sequence {where} (unit {i}, depth "
                         f"{units[i].top_depth:g}-{units[i].base_depth:g})")
        for i, (u, k) in enumerate(zip(units, assigned, strict=True)):
            f = self._features(u)
            informative = [q for q in FEATURES if q not in THICKNESS_FEATURES
                           and self.weights_[q] > 0 and self._usable(u, q) and math.isfinite(f[q])]
            if k >= 0 and u.is_cut and not informative:
                flags.append(f"unit {i} (cut by the log edge) named {seq[k]} from its thickness "
                             "only: uncertain")
        if not matched and units:
            flags.append("no unit could be matched to a basin sequence")
        names = [seq[k] if k >= 0 else "" for k in assigned]
        # Sequences beyond the basin's list: a unit holding an MFS below a match to the oldest
        # name, or above a match to the youngest, lies outside what the cored wells saw; it is
        # named relative to it (S1-1, S8+1, ...), the same way in every well.
        if matched:
            i0 = assigned.index(min(matched))
            i1 = len(assigned) - 1 - assigned[::-1].index(max(matched))
            if min(matched) == 0:
                for j, i in enumerate(range(i0 - 1, -1, -1), start=1):
                    if names[i] or units[i].mfs_depth is None:
                        break
                    names[i] = f"{seq[0]}-{j}"
                    flags.append(f"unit {i} lies below the oldest cored sequence {seq[0]}: "
                                 f"named {names[i]}")
            if max(matched) == len(seq) - 1:
                for j, i in enumerate(range(i1 + 1, len(units)), start=1):
                    if names[i] or units[i].mfs_depth is None:
                        break
                    names[i] = f"{seq[-1]}+{j}"
                    flags.append(f"unit {i} lies above the youngest cored sequence {seq[-1]}: "
                                 f"named {names[i]}")
        return CorrelationResult(
            names=names, skipped_interior=skipped,
            extra_units=extras, cost=total, flags=flags,
            unit_costs=[float(cost[i, k]) if k >= 0 else math.nan
                        for i, k in enumerate(assigned)],
            thickness_ratio=math.exp(log_ratio))
