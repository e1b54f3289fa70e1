"""Systems-tract sequence model: learned transitions and tract thicknesses, decoded under the
rule table with an explicit-duration (semi-Markov) model.

Wells arrive TOP-DOWN (depth increasing, as logged); this module reverses them so that every
recursion runs UP-SECTION (index 0 = deepest sample) and returns top-down arrays again.

Evidence to emission: the tract evidence model gives per-sample tract posteriors ``p(k | x)``;
divided by the training share of each tract they are scaled likelihoods (Bourlard & Morgan
1994, "Connectionist speech recognition"), raised to ``evidence_weight`` (< 1: the samples along
a hole are strongly correlated, so multiplying them as if independent would make every
posterior far too sharp; the weight is calibrated on held-out wells, see
:meth:`TractSequenceModel.calibrate_weight`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from facies_ml.errors import InputError
from facies_ml.sequence.durations import DurationModel, fit_durations
from facies_ml.sequence.rules import TractRules
from facies_ml.sequence.runs import split_runs
from facies_ml.sequence.semimarkov import (
    SemiMarkovTables,
    check_emissions,
    forward_backward_semimarkov,
    viterbi_semimarkov,
)
from facies_ml.sequence.surfaces import Surface, SurfaceChecks, match_nearest, pick_surfaces
from facies_ml.settings import SequenceSettings


@dataclass(frozen=True, eq=False)
class SequenceParameters:
    """Everything the decoder needs, checked once. Probabilities, not logs.

    ``start (n,)``: tract the log starts in (at its base); ``switch (n, n)``: next tract up-section
    given a change, zero where the rules forbid it; ``durations``: one thickness model per
    tract (samples of ``step`` ``depth_unit``); ``tract_prior (n,)``: training share of each
    tract; ``evidence_weight``: exponent on the scaled likelihoods for the posteriors (ranges,
    confidence); ``path_weight``: the exponent for the decoded path (Viterbi).
    """

    states: tuple[str, ...]
    start: np.ndarray
    switch: np.ndarray
    durations: tuple[DurationModel, ...]
    tract_prior: np.ndarray
    evidence_weight: float
    path_weight: float
    block: int
    step: float
    depth_unit: str

    def __post_init__(self) -> None:
        n = len(self.states)
        if np.asarray(self.start).shape != (n,) or np.asarray(self.switch).shape != (n, n):
            raise InputError("sequence parameters: start must be (n,) and switch (n, n)")
        if len(self.durations) != n or np.asarray(self.tract_prior).shape != (n,):
            raise InputError("sequence parameters need one duration model and prior per tract")
        for name in ("start", "switch", "tract_prior"):
            a = np.asarray(getattr(self, name), dtype=float)
            if not np.isfinite(a).all() or (a < 0).any():
                raise InputError(f"sequence parameters: {name} must be finite and >= 0")
        if np.diag(self.switch).any():
            raise InputError("sequence parameters: switch must be zero on the diagonal")
        for name in ("evidence_weight", "path_weight"):
            v = float(getattr(self, name))
            if not (np.isfinite(v) and v > 0):
                raise InputError(f"sequence {name} must be > 0, not {v}")
        if int(self.block) < 1:
            raise InputError(f"sequence parameters: block must be >= 1, not {self.block}")
        if not self.step > 0:
            raise InputError(f"sequence parameters: step must be > 0, not {self.step}")

    def tables(self, n_steps: int, block: int = 1) -> SemiMarkovTables:
        """Semi-Markov log tables for a log of ``n_steps`` decoding steps of ``block``
        samples each."""
        D_full = max(-(-max(d.support() for d in self.durations) // block), 2)
        parts = [d.tables(D_full, block) for d in self.durations]
        D = max(1, min(D_full, int(n_steps)))
        stack = [np.vstack([p[k][:D] for p in parts]) for k in range(4)]
        with np.errstate(divide="ignore"):
            ls = np.log(self.start)
            sw = np.log(self.switch)
        return SemiMarkovTables(ls, sw, *stack)


@dataclass(frozen=True, eq=False)
class DecodeResult:
    """A decoded well in the order of the input arrays: ``path (T,)`` tract indices (order of
    ``rules.states``), ``posterior (T, n)``, ``entry (T, n, n)`` run-entry posterior
    (UP-SECTION order only, see :mod:`facies_ml.sequence.semimarkov`), ``log_prob`` of the
    Viterbi path and ``log_likelihood`` of all paths (emission units)."""

    path: np.ndarray
    posterior: np.ndarray
    entry: np.ndarray | None
    log_prob: float
    log_likelihood: float


@dataclass(frozen=True, eq=False)
class WellSequence:
    """A well's decoded tracts TOP-DOWN (``path``, ``posterior``) and its surfaces (deepest
    first), with the rule violations of the raw per-sample argmax for comparison.
    ``edge_surfaces``: transitions of the path so close to a log edge that the tract beyond
    them is not verifiable; they are not reported as picks (see ``SurfaceChecks``)."""

    path: np.ndarray
    posterior: np.ndarray
    surfaces: list[Surface]
    violations_raw: int
    violations: int
    edge_surfaces: list[Surface]


class TractSequenceModel:
    """Learn start/transition/thickness statistics from labelled wells and decode new ones.

    Parameters (stored as given, checked in :meth:`fit`): ``rules`` (the rule table, the one
    source of allowed transitions and minimum thicknesses), ``duration_model`` ('explicit' or
    'minimum_geometric'), ``prior_count`` (pseudo-count on every allowed transition and start),
    ``duration_prior_runs`` / ``duration_prior_log_sigma`` / ``duration_log_sigma_floor`` (the
    thickness prior, see :func:`facies_ml.sequence.durations.fit_durations`),
    ``evidence_weight`` (exponent on the scaled likelihoods until :meth:`calibrate_weight`),
    ``decode_resolution`` (depth units per decoding step; boundaries are then refined to the
    sample, see :meth:`decode`).
    """

    def __init__(self, rules: TractRules, duration_model: str, prior_count: float,
                 duration_prior_runs: float, duration_prior_log_sigma: float,
                 duration_log_sigma_floor: float, evidence_weight: float,
                 decode_resolution: float) -> None:
        self.rules = rules
        self.duration_model = duration_model
        self.prior_count = prior_count
        self.duration_prior_runs = duration_prior_runs
        self.duration_prior_log_sigma = duration_prior_log_sigma
        self.duration_log_sigma_floor = duration_log_sigma_floor
        self.evidence_weight = evidence_weight
        self.decode_resolution = decode_resolution

    @classmethod
    def from_settings(cls, rules: TractRules, settings: SequenceSettings) -> TractSequenceModel:
        """A model with the parameters of the checked ``sequence`` settings
        (``config.settings.sequence``)."""
        dur = settings.duration
        return cls(rules, duration_model=dur.model, prior_count=settings.prior_count,
                   duration_prior_runs=dur.prior_runs,
                   duration_prior_log_sigma=dur.prior_log_sigma,
                   duration_log_sigma_floor=dur.log_sigma_floor,
                   evidence_weight=settings.evidence_weight,
                   decode_resolution=settings.decode_resolution)

    # ------------------------------------------------------------------ training
    def fit(self, labels_topdown: list[np.ndarray], step: float,
            depth_unit: str) -> TractSequenceModel:
        """Fit from per-well tract index arrays (TOP-DOWN, -1 = unlabelled) sampled every
        ``step`` ``depth_unit``; each is read up-section here."""
        rules = self.rules
        n = rules.n_states
        for name in ("prior_count", "duration_prior_runs", "duration_prior_log_sigma",
                     "duration_log_sigma_floor", "evidence_weight", "decode_resolution"):
            v = float(getattr(self, name))
            if not (np.isfinite(v) and v > 0):
                raise InputError(f"sequence.{name} must be > 0, not {getattr(self, name)!r}")
        ms = rules.min_samples(step, depth_unit)
        m = np.array([ms[s] for s in rules.states], dtype=int)
        start_c = np.zeros(n)
        trans_c = np.zeros((n, n))
        share = np.zeros(n)
        complete: list[list[int]] = [[] for _ in range(n)]
        cut: list[list[int]] = [[] for _ in range(n)]
        for q, raw in enumerate(labels_topdown):
            seq = np.asarray(raw)[::-1]
            if seq.ndim != 1 or (seq.size and not np.issubdtype(seq.dtype, np.integer)):
                raise InputError(f"training sequence #{q}: expected a 1-D integer array")
            bad = np.flatnonzero((seq < -1) | (seq >= n))
            if bad.size:
                raise InputError(f"training sequence #{q}: tract index {int(seq[bad[0]])} "
                                 f"is outside -1..{n - 1}", row=int(bad[0]))
            share += np.bincount(seq[seq >= 0], minlength=n)
            starts, lengths, values = split_runs(seq >= 0)
            for s0, ln, ok in zip(starts, lengths, values, strict=True):
                if not ok:
                    continue
                piece = seq[s0:s0 + ln]
                a, b = piece[:-1], piece[1:]
                wrong = np.flatnonzero(~rules.allowed[a, b])
                if wrong.size:
                    j = int(wrong[0])
                    raise InputError(
                        f"training sequence #{q}: forbidden up-section transition "
                        f"{rules.states[a[j]]} -> {rules.states[b[j]]} (up-section index "
                        f"{s0 + j})", row=int(s0 + j + 1))
                rs, rl, rv = split_runs(piece)
                start_c[rv[0]] += 1
                np.add.at(trans_c, (rv[:-1], rv[1:]), 1)
                for r, (ln_r, k) in enumerate(zip(rl, rv, strict=True)):
                    (cut if r == 0 or r == len(rv) - 1 else complete)[int(k)].append(int(ln_r))
        pc = float(self.prior_count)
        off = rules.allowed & ~np.eye(n, dtype=bool)
        counts = np.where(off, trans_c + pc, 0.0)
        durations = fit_durations(str(self.duration_model), complete, cut, m,
                                  float(self.duration_prior_runs),
                                  float(self.duration_prior_log_sigma),
                                  float(self.duration_log_sigma_floor))
        self.params_ = SequenceParameters(
            states=tuple(rules.states), start=(start_c + pc) / (start_c + pc).sum(),
            switch=counts / counts.sum(axis=1, keepdims=True), durations=tuple(durations),
            tract_prior=(share + 1.0) / (share + 1.0).sum(),
            evidence_weight=float(self.evidence_weight),
            path_weight=float(self.evidence_weight),
            block=max(1, int(round(float(self.decode_resolution) / float(step)))),
            step=float(step),
            depth_unit=str(depth_unit))
        return self

    def _check_fitted(self) -> SequenceParameters:
        if not hasattr(self, "params_"):
            raise InputError("the sequence model is not fitted; call fit() first")
        return self.params_

    # ------------------------------------------------------------------ evidence
    def emission(self, tract_posterior: np.ndarray, weight: float | None = None) -> np.ndarray:
        """Scaled log-likelihoods ``weight * (log p(k|x) - log prior_k)``, shape (T, n)."""
        p = self._check_fitted()
        post = np.asarray(tract_posterior, dtype=float)
        if post.ndim != 2 or post.shape[1] != len(p.states):
            raise InputError(f"tract posteriors must have shape (T, {len(p.states)}) for tracts "
                             f"{', '.join(p.states)}; got {post.shape}")
        w = p.evidence_weight if weight is None else float(weight)
        return w * (np.log(np.clip(post, 1e-9, 1.0)) - np.log(p.tract_prior)[None, :])

    # ------------------------------------------------------------------ decoding
    def decode(self, log_emit_upsection: np.ndarray, posteriors: bool = True,
               path_scale: float = 1.0, block: int | None = None) -> DecodeResult:
        """Decode (T, n) emission log-likelihoods given UP-SECTION; result up-section, one row
        per sample. The Viterbi path uses the emissions times ``path_scale``, the posteriors
        the emissions.

        ``block`` (default: the fitted ``params_.block``) samples are summed per decoding step
        (thicknesses in whole blocks), which cuts the cost by about ``block**2``; each decoded
        boundary is then moved, within one block either side and never making a run thinner
        than its minimum, to the sample where the emissions of the tracts below and above
        change best (the exact path score given the neighbouring boundaries). Posteriors are
        per block (repeated on its samples); run entries sit on block edges."""
        p = self._check_fitted()
        e = np.asarray(log_emit_upsection, dtype=float)
        n = len(p.states)
        if e.ndim != 2 or e.shape[1] != n:
            raise InputError(f"log-likelihoods must have shape (T, {n}) for tracts "
                             f"{', '.join(p.states)}; got {e.shape}")
        k = int(p.block if block is None else block)
        if k < 1:
            raise InputError(f"decoding block must be >= 1 sample, not {k}")
        e = check_emissions(e, n)            # rows named on the samples, before blocking
        T = e.shape[0]
        ec = e
        if k > 1:
            Tc = -(-T // k)
            pad = np.zeros((Tc * k, n))
            pad[:T] = e
            ec = pad.reshape(Tc, k, n).sum(axis=1)
        tables = p.tables(ec.shape[0], k)
        path_c, log_prob = viterbi_semimarkov(tables, ec * path_scale)
        path = path_c if k == 1 else self._refine(np.repeat(path_c, k)[:T], e * path_scale, k)
        if not posteriors:
            return DecodeResult(path, np.eye(n)[path], None, log_prob, float("nan"))
        fb = forward_backward_semimarkov(tables, ec)
        if k == 1:
            return DecodeResult(path, fb.occupancy, fb.entry, log_prob, fb.log_likelihood)
        occ = np.repeat(fb.occupancy, k, axis=0)[:T]
        entry = np.zeros((T, n, n))
        entry[::k] = fb.entry[:entry[::k].shape[0]]
        return DecodeResult(path, occ, entry, log_prob, fb.log_likelihood)

    def _refine(self, path: np.ndarray, e: np.ndarray, k: int) -> np.ndarray:
        """Move each run boundary of a block-decoded path (up-section) by up to ``k`` samples
        to where ``sum(e[:, below]) + sum(e[:, above])`` is largest, bottom-up, keeping
        every inner run at least its minimum thickness (see :meth:`decode`)."""
        starts, lengths, tracts = split_runs(path)
        if starts.size < 2:
            return path
        m = np.array([d.min_samples for d in self._check_fitted().durations])
        C = np.vstack([np.zeros((1, e.shape[1])), np.cumsum(e, axis=0)])
        bounds = list(starts[1:]) + [path.size]
        out = path.copy()
        prev = 0
        for r in range(1, starts.size):
            b = int(bounds[r - 1])
            lo_t, hi_t = int(tracts[r - 1]), int(tracts[r])
            nxt = int(bounds[r])
            lo = max(b - k, prev + (m[lo_t] if r - 1 > 0 else 1))
            hi = min(b + k, nxt - (m[hi_t] if r < starts.size - 1 else 1))
            if lo <= hi:
                cand = np.arange(lo, hi + 1)
                gain = C[cand, lo_t] - C[cand, hi_t]
                b = int(cand[np.argmax(gain)])
            out[prev:b] = lo_t
            out[b:nxt] = hi_t
            prev = b
        return out

    def decode_well(self, tract_posterior_topdown: np.ndarray, depth_topdown: np.ndarray,
                    gr_topdown: np.ndarray | None, checks: SurfaceChecks | None
                    ) -> WellSequence:
        """Decode one well given TOP-DOWN tract posteriors and depths; pick its surfaces."""
        post = np.asarray(tract_posterior_topdown, dtype=float)
        up = slice(None, None, -1)
        p = self._check_fitted()
        res = self.decode(self.emission(post)[up], path_scale=p.path_weight / p.evidence_weight)
        gr = None if gr_topdown is None else np.asarray(gr_topdown, dtype=float)[up]
        surfaces = pick_surfaces(np.asarray(depth_topdown, dtype=float)[up], res.path,
                                 self.rules, entry=res.entry, gr=gr, checks=checks)
        raw = post.argmax(axis=1)
        return WellSequence(path=res.path[up], posterior=res.posterior[up],
                            surfaces=[x for x in surfaces if not x.at_edge],
                            violations_raw=int(self.rules.count_violations(raw[up])),
                            violations=int(self.rules.count_violations(res.path)),
                            edge_surfaces=[x for x in surfaces if x.at_edge])

    # ------------------------------------------------------------------ calibration
    def calibrate_weight(self, posteriors_topdown: list[np.ndarray],
                         labels_topdown: list[np.ndarray], depths_topdown: list[np.ndarray],
                         grid: list[float], target_coverage: float, match_tolerance: float
                         ) -> list[dict[str, float]]:
        """Choose both evidence weights from ``grid`` on held-out tract posteriors (wells the
        evidence model did not see), with the interpreted tracts ``labels_topdown`` and their
        depths (working unit, top-down):

        - ``path_weight``: the best held-out balanced accuracy of the decoded path (the mean
          over tracts of the share of each tract's samples decoded right, so a tract present
          in few wells, such as a lowstand, is not traded away for the common ones);
        - ``evidence_weight`` (posteriors, surface ranges, confidence): the share of held-out
          true surfaces matched within ``match_tolerance`` whose p10-p90 range holds the true
          depth comes closest to ``target_coverage`` (ties: the better mean log posterior of
          the true tract, a proper score, Gneiting & Raftery 2007, from memory).

        Sets both in ``params_`` and returns the scores per weight."""
        p = self._check_fitted()
        if not grid:
            raise InputError("sequence.evidence_weight_grid is empty")
        if not 0.0 < float(target_coverage) < 1.0:
            raise InputError(f"sequence.target_coverage must lie in (0, 1), not {target_coverage}")
        wells = []
        for post, lab, dep in zip(posteriors_topdown, labels_topdown, depths_topdown,
                                  strict=True):
            lab = np.asarray(lab)
            ok = lab >= 0
            if ok.sum() >= 2:
                up = slice(None, None, -1)
                truth = lab[ok][up]
                depth = np.asarray(dep, dtype=float)[ok][up]
                wells.append((np.asarray(post)[ok], truth, depth,
                              pick_surfaces(depth, truth, self.rules)))
        if not wells:
            return []
        rows = []
        n = len(p.states)
        for w in grid:
            hits = np.zeros(n)
            seen = np.zeros(n)
            for post, truth, _, _ in wells:
                path = self.decode(self.emission(post, weight=w)[::-1], posteriors=False).path
                seen += np.bincount(truth, minlength=n)
                hits += np.bincount(truth[path == truth], minlength=n)
            present = seen > 0
            rows.append({"evidence_weight": float(w),
                         "path_accuracy": float((hits[present] / seen[present]).mean())})
        best_path = max(rows, key=lambda r: r["path_accuracy"])["evidence_weight"]
        for row in rows:
            w = row["evidence_weight"]
            log_score = 0.0
            covered = matched = 0
            for post, truth, depth, true_surf in wells:
                e = self.emission(post, weight=w)[::-1]
                res = self.decode(e, path_scale=best_path / w)
                log_score += float(np.log(np.clip(
                    res.posterior[np.arange(truth.size), truth], 1e-6, 1.0)).sum())
                picked = pick_surfaces(depth, res.path, self.rules, entry=res.entry)
                for kind in ("MFS", "SB"):
                    t = [x for x in true_surf if x.kind == kind]
                    q = [x for x in picked if x.kind == kind]
                    for i, j in match_nearest([x.depth for x in t], [x.depth for x in q],
                                              match_tolerance):
                        matched += 1
                        covered += int(q[j].depth_p10 <= t[i].depth <= q[j].depth_p90)
            row["mean_log_score"] = log_score / sum(x[1].size for x in wells)
            row["coverage"] = covered / matched if matched else float("nan")
        scored = [r for r in rows if np.isfinite(r["coverage"])] or rows
        best = min(scored, key=lambda r: (abs(r["coverage"] - target_coverage)
                                          if np.isfinite(r["coverage"]) else 1.0,
                                          -r["mean_log_score"]))["evidence_weight"]
        self.params_ = replace(p, evidence_weight=best, path_weight=best_path)
        return rows
