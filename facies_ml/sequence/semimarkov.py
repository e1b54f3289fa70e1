"""Explicit-duration (semi-Markov) decoding of a tract sequence: Viterbi and forward-backward.

All arrays are in decoding order: index 0 is the first sample. For systems tracts the caller
passes samples UP-SECTION (index 0 = deepest sample), so the "first run" is the tract the log
starts in at its base and the "last run" the one it ends in at its top.

The model (Ferguson 1980; Yu 2010, "Hidden semi-Markov models", Artificial Intelligence 174; from memory):
a path is a series of runs (tract ``j``, duration ``d`` samples). Its log-probability is

    log_start[j1] + log_first[j1, d1] + sum_r (log_switch[j(r-1), j(r)] + log_pmf[j(r), d(r)])
    + log_switch[j(R-1), j(R)] + log_surv[j(R), d(R)] + sum_t log_emit[t, path[t]]

for ``R >= 2`` runs, where the middle runs use the complete-run duration ``log_pmf``, the last
run (cut by the top of the log) the survival ``log_surv[j, d] = log P(D_j >= d)`` and the first
run (cut by the base of the log) ``log_first``; a path of one run scores
``log_start[j] + log_first_surv[j, T] + emissions``. Duration tables are indexed ``[j, d - 1]``
for ``d = 1..D``; longer runs are impossible. ``log_switch`` has ``-inf`` on the diagonal and
on every transition the rule table forbids.

Cost: O(T * D * n) per pass, written as one numpy operation over (duration, tract) per sample.
:mod:`facies_ml.sequence.reference` holds the plain-loop version the tests compare against.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from facies_ml.errors import InputError


@dataclass(frozen=True, eq=False)
class SemiMarkovTables:
    """Log-probability tables of an explicit-duration model (see the module docstring).

    Shapes: ``log_start (n,)``, ``log_switch (n, n)``, the four duration tables ``(n, D)``.
    """

    log_start: np.ndarray
    log_switch: np.ndarray
    log_pmf: np.ndarray
    log_surv: np.ndarray
    log_first: np.ndarray
    log_first_surv: np.ndarray

    def __post_init__(self) -> None:
        n = np.asarray(self.log_start).shape[0]
        shapes = {"log_switch": (n, n)}
        D = np.asarray(self.log_pmf).shape[-1]
        for name in ("log_pmf", "log_surv", "log_first", "log_first_surv"):
            shapes[name] = (n, D)
        for name, shape in shapes.items():
            arr = np.asarray(getattr(self, name), dtype=float)
            if arr.shape != shape:
                raise InputError(f"semi-Markov table {name} has shape {arr.shape}, expected "
                                 f"{shape}")
            if np.isnan(arr).any() or (arr == np.inf).any():
                raise InputError(f"semi-Markov table {name} holds NaN or +inf")
            object.__setattr__(self, name, arr)
        if np.isfinite(np.diag(self.log_switch)).any():
            raise InputError("semi-Markov log_switch must be -inf on the diagonal (a run ends "
                             "by changing tract)")

    @property
    def n_states(self) -> int:
        return int(self.log_start.shape[0])

    @property
    def max_duration(self) -> int:
        return int(self.log_pmf.shape[1])


@dataclass(frozen=True, eq=False)
class SemiMarkovPosterior:
    """Forward-backward result in decoding order.

    ``occupancy (T, n)``: P(sample t is in tract j); ``entry (T, n, n)``: P(a run of tract j
    starts at sample t right after a run of tract i), ``[t, i, j]``, zero at t = 0;
    ``log_likelihood``: log of the summed probability of all paths.
    """

    occupancy: np.ndarray
    entry: np.ndarray
    log_likelihood: float


def check_emissions(log_emit: np.ndarray, n: int) -> np.ndarray:
    """(T, n) float emissions, refusing a wrong shape, an empty log and non-finite values."""
    e = np.asarray(log_emit, dtype=float)
    if e.ndim != 2 or e.shape[1] != n:
        raise InputError(f"emission log-likelihoods must have shape (T, {n}), got {e.shape}")
    if e.shape[0] == 0:
        raise InputError("cannot decode an empty sequence (0 samples)")
    bad = ~np.isfinite(e)
    if bad.any():
        raise InputError("emission log-likelihood is not finite (NaN or infinite)",
                         row=int(np.flatnonzero(bad.any(axis=1))[0]))
    return e


def _lse(a: np.ndarray, axis: int) -> np.ndarray:
    """log-sum-exp along ``axis`` that returns -inf (not NaN) for all -inf input."""
    m = np.max(a, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    with np.errstate(divide="ignore"):
        return np.log(np.sum(np.exp(a - m), axis=axis)) + np.squeeze(m, axis=axis)


def _cumulative(e: np.ndarray) -> np.ndarray:
    C = np.zeros((e.shape[0] + 1, e.shape[1]))
    np.cumsum(e, axis=0, out=C[1:])
    return C


def _shortest_run(tables: SemiMarkovTables) -> int:
    """The thinnest complete run any tract may have (samples): runs ending within that many
    samples of each other cannot depend on each other, so they are computed together."""
    finite = np.isfinite(tables.log_pmf)
    if not finite.any():
        return 1
    return max(1, int(np.argmax(finite.any(axis=0))) + 1)


def viterbi_semimarkov(tables: SemiMarkovTables, log_emit: np.ndarray
                       ) -> tuple[np.ndarray, float]:
    """Most likely tract path (T,) and its log-probability (emissions included).

    Runs ending at samples ``t .. t + c - 1`` (``c`` = the thinnest allowed complete run) only
    read runs that started before ``t``, so they are scored in one numpy operation."""
    n, D = tables.n_states, tables.max_duration
    e = check_emissions(log_emit, n)
    T = e.shape[0]
    C = _cumulative(e)
    pmf_t = tables.log_pmf.T                          # (D, n), row d - 1
    sw = tables.log_switch
    Gp = np.full((D + T + 1, n), -np.inf)             # Gp[D + s]: best score of a run starting
    best_d = np.zeros((T + 1, n), dtype=np.int64)     # at s, minus C[s]; run ending at t: its
    best_i = np.zeros((T + 1, n), dtype=np.int64)     # duration (0 = first run); run starting
    dd = np.arange(1, D + 1)                          # at s: the previous tract
    c = _shortest_run(tables)
    for t0 in range(1, T, c):
        ts = np.arange(t0, min(t0 + c, T))
        w = Gp[D + ts[:, None] - dd[None, :]] + pmf_t[None]          # (c, D, n)
        k = np.argmax(w, axis=1)
        score = np.take_along_axis(w, k[:, None, :], axis=1)[:, 0, :]
        bd = k + 1
        inside = ts <= D
        if inside.any():
            first = tables.log_start[None, :] + tables.log_first[:, ts[inside] - 1].T
            take = first > score[inside]
            score[inside] = np.where(take, first, score[inside])
            bd[inside] = np.where(take, 0, bd[inside])
        best_d[ts] = bd
        cand = (score + C[ts])[:, :, None] + sw[None, :, :]           # (c, i, j)
        i = np.argmax(cand, axis=1)
        best_i[ts] = i
        Gp[D + ts] = np.take_along_axis(cand, i[:, None, :], axis=1)[:, 0, :] - C[ts]
    G = Gp[D:]
    cols = np.arange(n)
    # the last run (cut by the top of the log), or one run over the whole log
    dmax = min(D, T - 1)
    final = np.full(n, -np.inf)
    final_d = np.zeros(n, dtype=np.int64)
    if dmax > 0:
        w = G[T - 1:T - dmax - 1:-1] + tables.log_surv.T[:dmax]
        k = np.argmax(w, axis=0)
        final = w[k, cols]
        final_d = k + 1
    if T <= D:
        single = tables.log_start + tables.log_first_surv[:, T - 1]
        take = single > final
        final = np.where(take, single, final)
        final_d = np.where(take, 0, final_d)
    final = final + C[T]
    j = int(np.argmax(final))
    log_prob = float(final[j])
    if not np.isfinite(log_prob):
        raise InputError("no tract path satisfies the rules and thicknesses for this sequence")
    path = np.empty(T, dtype=np.int64)
    t, d = T, int(final_d[j])
    while True:
        if d == 0:                                    # the first run: down to sample 0
            path[:t] = j
            break
        s = t - d
        path[s:t] = j
        j = int(best_i[s, j])
        t = s
        d = int(best_d[t, j])
    return path, log_prob


def forward_backward_semimarkov(tables: SemiMarkovTables, log_emit: np.ndarray
                                ) -> SemiMarkovPosterior:
    """Per-sample tract posteriors, run-entry posteriors and the log-likelihood."""
    n, D = tables.n_states, tables.max_duration
    e = check_emissions(log_emit, n)
    T = e.shape[0]
    C = _cumulative(e)
    pmf_t = tables.log_pmf.T
    sw = tables.log_switch
    # ---- forward: E[t] run ends at t (exclusive end), B[s] a new run starts at s (s >= 1);
    # runs ending at t .. t + c - 1 only read runs starting before t (c = thinnest run)
    E = np.full((T + 1, n), -np.inf)
    B = np.full((T + 1, n), -np.inf)
    Gp = np.full((D + T + 1, n), -np.inf)             # Gp[D + s] = B[s] - C[s]
    dd = np.arange(1, D + 1)
    c = _shortest_run(tables)
    for t0 in range(1, T, c):
        ts = np.arange(t0, min(t0 + c, T))
        acc = _lse(Gp[D + ts[:, None] - dd[None, :]] + pmf_t[None], axis=1)   # (c, n)
        inside = ts <= D
        if inside.any():
            first = tables.log_start[None, :] + tables.log_first[:, ts[inside] - 1].T
            acc[inside] = np.logaddexp(acc[inside], first)
        E[ts] = acc + C[ts]
        B[ts] = _lse(E[ts][:, :, None] + sw[None, :, :], axis=1)
        Gp[D + ts] = B[ts] - C[ts]
    G = Gp[D:]
    dmax = min(D, T - 1)
    parts = []
    if dmax > 0:
        parts.append(_lse(G[T - 1:T - dmax - 1:-1] + tables.log_surv.T[:dmax], axis=0))
    if T <= D:
        parts.append(tables.log_start + tables.log_first_surv[:, T - 1])
    if not parts:
        raise InputError("no tract path satisfies the rules and thicknesses for this sequence")
    fin = parts[0] if len(parts) == 1 else np.logaddexp(parts[0], parts[1])
    log_z = float(_lse(fin + C[T], axis=0))
    if not np.isfinite(log_z):
        raise InputError("no tract path satisfies the rules and thicknesses for this sequence")
    # ---- backward: R[s] given a run starts at s (s >= 1); X[t] given a run ended at t;
    # runs starting at s - c + 1 .. s only read runs starting after s
    R = np.full((T + 1, n), -np.inf)
    X = np.full((T + 1, n), -np.inf)
    Hp = np.full((T + 1 + D, n), -np.inf)             # Hp[t] = X[t] + C[t] (t <= T - 1)
    surv_t = tables.log_surv.T
    for s0 in range(T - 1, 0, -c):
        ss = np.arange(s0, max(s0 - c, 0), -1)
        acc = _lse(Hp[ss[:, None] + dd[None, :]] + pmf_t[None], axis=1)     # (c, n)
        last = T - ss <= D
        if last.any():
            acc[last] = np.logaddexp(acc[last], surv_t[T - ss[last] - 1] + C[T])
        R[ss] = acc - C[ss]
        X[ss] = _lse(sw[None, :, :] + R[ss][:, None, :], axis=2)
        Hp[ss] = X[ss] + C[ss]
    H = Hp[:T + 1]
    # ---- posteriors
    with np.errstate(invalid="ignore"):
        entry = np.exp(E[:T, :, None] + sw[None, :, :] + R[:T, None, :] - log_z)
        entry = np.nan_to_num(entry, nan=0.0)
        ends = np.nan_to_num(np.exp(E[:T] + X[:T] - log_z), nan=0.0)   # run ends at t
    entry[0] = 0.0
    ends[0] = 0.0
    # first run: starts at 0 with prob P(log starts in j)
    first_parts = []
    dmax = min(D, T - 1)
    if dmax > 0:
        first_parts.append(_lse(tables.log_first.T[:dmax] + H[1:dmax + 1], axis=0))
    if T <= D:
        first_parts.append(tables.log_first_surv[:, T - 1] + C[T])
    f0 = first_parts[0] if len(first_parts) == 1 else np.logaddexp(*first_parts)
    start0 = np.exp(tables.log_start + f0 - log_z)
    starts = entry.sum(axis=1)
    starts[0] = start0
    occ = np.cumsum(starts, axis=0) - np.cumsum(ends, axis=0)
    occ = np.clip(occ, 0.0, None)
    tot = occ.sum(axis=1, keepdims=True)
    occ = occ / np.where(tot > 0, tot, 1.0)
    return SemiMarkovPosterior(occupancy=occ, entry=entry, log_likelihood=log_z)
