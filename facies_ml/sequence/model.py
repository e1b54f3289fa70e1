"""Systems-tract sequence model: learned transitions and thicknesses, decoded under the rules.

Every sequence handled here is in UP-SECTION order (index 0 = deepest sample). The model is
the chain-expanded hidden Markov model of :mod:`facies_ml.sequence.decode`: a tract entered
from another tract must last at least its minimum thickness (``rules.min_samples``). Two
runs are exempt by design: the lowest run (the log starts inside it, so it starts in the
self-looping last sub-state) and the highest run (the log ends inside it). Every other run in
a decoded path is at least ``min_samples`` thick and every transition is allowed by the rules.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from facies_ml.errors import InputError
from facies_ml.sequence.decode import (
    ExpandedModel,
    expand_durations,
    forward_backward_durations,
    viterbi_durations,
)
from facies_ml.sequence.rules import TractRules


@dataclass(frozen=True, eq=False)
class DecodeResult:
    """Decoded tracts in UP-SECTION order: ``path`` (T,) tract indices (order of
    ``rules.states``), ``posterior`` (T, n_tracts) summed over sub-states, ``log_prob`` of the
    Viterbi path (scaled-likelihood units)."""

    path: np.ndarray
    posterior: np.ndarray
    log_prob: float


def _labelled_pieces(seq: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """Split at -1 entries: (offset, piece) for each contiguous labelled stretch."""
    labelled = seq >= 0
    edges = np.flatnonzero(np.diff(np.r_[0, labelled.astype(int), 0]))
    return [(int(s), seq[s:e]) for s, e in zip(edges[::2], edges[1::2], strict=True)]


class TractSequenceModel:
    """Learn start/transition/thickness statistics from labelled up-section tract sequences.

    ``prior_count``: pseudo-count added to every allowed transition and start (forbidden ones
    stay exactly 0) and the weight of the thickness prior (``prior_count`` pseudo-runs of
    ``min_samples`` extra samples). ``emission_weight``: exponent on the scaled likelihoods.
    """

    def __init__(self, rules: TractRules, prior_count: float = 1.0,
                 emission_weight: float = 1.0) -> None:
        self.rules = rules
        self.prior_count = prior_count
        self.emission_weight = emission_weight

    # ------------------------------------------------------------------ training
    def fit(self, sequences: list[np.ndarray], step: float, depth_unit: str) -> TractSequenceModel:
        """Fit from int tract sequences (UP-SECTION, -1 = unlabelled) sampled every ``step``."""
        rules = self.rules
        n = rules.n_states
        if not (np.isfinite(self.prior_count) and self.prior_count > 0):
            raise InputError(f"prior_count must be > 0, not {self.prior_count!r}")
        ms = rules.min_samples(step, depth_unit)
        m = np.array([ms[s] for s in rules.states], dtype=int)
        off = rules.allowed & ~np.eye(n, dtype=bool)
        start_c = np.zeros(n)
        trans_c = np.zeros((n, n))
        excess: list[list[int]] = [[] for _ in range(n)]
        excess_cut: list[list[int]] = [[] for _ in range(n)]
        for q, raw in enumerate(sequences):
            seq = np.asarray(raw)
            if seq.ndim != 1 or (seq.size and not np.issubdtype(seq.dtype, np.integer)):
                raise InputError(f"training sequence #{q}: expected a 1-D integer array")
            bad = np.flatnonzero((seq < -1) | (seq >= n))
            if bad.size:
                raise InputError(f"training sequence #{q}: tract index {int(seq[bad[0]])} "
                                 f"is outside -1..{n - 1}", row=int(bad[0]))
            for offset, piece in _labelled_pieces(seq):
                a, b = piece[:-1], piece[1:]
                wrong = np.flatnonzero(~rules.allowed[a, b])
                if wrong.size:
                    j = int(wrong[0])
                    raise InputError(
                        f"training sequence #{q}: forbidden up-section transition "
                        f"{rules.states[a[j]]} -> {rules.states[b[j]]} between index "
                        f"{offset + j} and {offset + j + 1}", row=offset + j + 1)
                change = np.flatnonzero(a != b)
                start_c[piece[0]] += 1
                np.add.at(trans_c, (a[change], b[change]), 1)
                starts = np.r_[0, change + 1]
                lengths = np.diff(np.r_[starts, piece.size])
                for r, (s0, ln) in enumerate(zip(starts, lengths, strict=True)):
                    k = int(piece[s0])
                    cut = r == 0 or r == len(starts) - 1          # touches the piece ends
                    (excess_cut if cut else excess)[k].append(max(int(ln) - int(m[k]), 0))
        pc = float(self.prior_count)
        start = start_c + pc
        self.startprob_ = start / start.sum()
        counts = np.where(off, trans_c + pc, 0.0)
        switch = counts / counts.sum(axis=1, keepdims=True)
        mean_excess = np.empty(n)
        for k in range(n):
            runs = excess[k] if excess[k] else excess_cut[k]     # prefer complete runs
            mean_excess[k] = (sum(runs) + pc * m[k]) / (len(runs) + pc)
        p_stay = mean_excess / (1.0 + mean_excess)                # geometric tail mean
        self.min_samples_ = m
        self.mean_thickness_samples_ = mean_excess
        self.stay_prob_ = p_stay
        self.switch_prob_ = switch
        self.transition_counts_ = trans_c
        self.transmat_ = switch * (1.0 - p_stay)[:, None] + np.diag(p_stay)
        self.step_ = float(step)
        self.depth_unit_ = depth_unit
        return self

    # ------------------------------------------------------------------ decoding
    def _check_fitted(self) -> None:
        if not hasattr(self, "transmat_"):
            raise InputError("the sequence model is not fitted; call fit() first")

    def _log_params(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        with np.errstate(divide="ignore"):
            ls = np.log(self.startprob_)
            stay = np.log(self.stay_prob_)
            sw = np.log(self.switch_prob_ * (1.0 - self.stay_prob_)[:, None])
        np.fill_diagonal(sw, -np.inf)
        return ls, stay, sw

    def expanded(self) -> ExpandedModel:
        """The explicit expanded model (sub-states) this model decodes with."""
        self._check_fitted()
        ls, stay, sw = self._log_params()
        return expand_durations(ls, stay, sw, self.min_samples_)

    def decode(self, log_likelihood: np.ndarray) -> DecodeResult:
        """Decode (T, n_tracts) scaled log-likelihoods given in UP-SECTION order."""
        self._check_fitted()
        ll = np.asarray(log_likelihood, dtype=float)
        n = self.rules.n_states
        if ll.ndim != 2 or ll.shape[1] != n:
            raise InputError(f"log-likelihoods must have shape (T, {n}) for tracts "
                             f"{', '.join(self.rules.states)}; got {ll.shape}")
        e = self.emission_weight * ll
        ls, stay, sw = self._log_params()
        path, log_prob = viterbi_durations(ls, stay, sw, self.min_samples_, e)
        post, _ = forward_backward_durations(ls, stay, sw, self.min_samples_, e)
        return DecodeResult(path=path, posterior=post, log_prob=log_prob)
