"""Reference semi-Markov decoders: plain loops, slow and obviously right.

Same model and conventions as :mod:`facies_ml.sequence.semimarkov` (decoding order, index 0 =
first sample; for tracts UP-SECTION). Each quantity is the textbook recursion written out
sample by sample, tract by tract, duration by duration (Yu 2010, "Hidden semi-Markov
models", Artificial Intelligence 174, section 2; from memory), in plain Python floats. Used
only by the tests and the decoder benchmark to check the vectorized kernels; never in a
prediction.
"""

from __future__ import annotations

import math

import numpy as np

from facies_ml.sequence.semimarkov import SemiMarkovTables

NEG = -math.inf


def _lse(values: list[float]) -> float:
    finite = [v for v in values if v > NEG]
    if not finite:
        return NEG
    m = max(finite)
    return m + math.log(sum(math.exp(v - m) for v in finite))


def _seg(e: np.ndarray, j: int, s: int, t: int) -> float:
    return float(sum(e[u, j] for u in range(s, t)))


def _end_score(tb: SemiMarkovTables, e: np.ndarray, combine) -> tuple[list[list[float]], list]:
    """Forward: score[t][j] of a complete run of j ending at t (exclusive), combined over
    durations and predecessors with ``combine`` (max or log-sum-exp)."""
    T, n = e.shape
    D = tb.max_duration
    end = [[NEG] * n for _ in range(T + 1)]
    begin = [[NEG] * n for _ in range(T + 1)]
    for t in range(1, T):
        for j in range(n):
            vals = []
            if t <= D:
                vals.append(tb.log_start[j] + tb.log_first[j, t - 1] + _seg(e, j, 0, t))
            for d in range(1, min(D, t - 1) + 1):
                vals.append(begin[t - d][j] + tb.log_pmf[j, d - 1] + _seg(e, j, t - d, t))
            end[t][j] = combine(vals)
        for j in range(n):
            begin[t][j] = combine([end[t][i] + tb.log_switch[i, j] for i in range(n)])
    return end, begin


def _final(tb: SemiMarkovTables, e: np.ndarray, begin: list, j: int) -> list[float]:
    T = e.shape[0]
    vals = []
    if T <= tb.max_duration:
        vals.append(tb.log_start[j] + tb.log_first_surv[j, T - 1] + _seg(e, j, 0, T))
    for d in range(1, min(tb.max_duration, T - 1) + 1):
        vals.append(begin[T - d][j] + tb.log_surv[j, d - 1] + _seg(e, j, T - d, T))
    return vals


def reference_log_likelihood(tb: SemiMarkovTables, log_emit: np.ndarray) -> float:
    """log of the summed probability of every path (forward recursion)."""
    e = np.asarray(log_emit, dtype=float)
    _, begin = _end_score(tb, e, _lse)
    return _lse([v for j in range(tb.n_states) for v in _final(tb, e, begin, j)])


def reference_viterbi(tb: SemiMarkovTables, log_emit: np.ndarray) -> tuple[np.ndarray, float]:
    """Best path by exhaustive dynamic programming with explicit back-pointers."""
    e = np.asarray(log_emit, dtype=float)
    T, n = e.shape
    D = tb.max_duration
    end = [[NEG] * n for _ in range(T + 1)]
    end_from: list[list[tuple[int, int]]] = [[(0, 0)] * n for _ in range(T + 1)]  # (d, prev)
    begin = [[NEG] * n for _ in range(T + 1)]
    begin_from = [[0] * n for _ in range(T + 1)]
    for t in range(1, T):
        for j in range(n):
            best, arg = NEG, (0, -1)
            if t <= D:
                best = tb.log_start[j] + tb.log_first[j, t - 1] + _seg(e, j, 0, t)
            for d in range(1, min(D, t - 1) + 1):
                v = begin[t - d][j] + tb.log_pmf[j, d - 1] + _seg(e, j, t - d, t)
                if v > best:
                    best, arg = v, (d, -1)
            end[t][j], end_from[t][j] = best, arg
        for j in range(n):
            vals = [end[t][i] + tb.log_switch[i, j] for i in range(n)]
            i = int(np.argmax(vals))
            begin[t][j], begin_from[t][j] = vals[i], i
    best, best_j, best_d = NEG, 0, 0
    for j in range(n):
        if T <= D:
            v = tb.log_start[j] + tb.log_first_surv[j, T - 1] + _seg(e, j, 0, T)
            if v > best:
                best, best_j, best_d = v, j, 0
        for d in range(1, min(D, T - 1) + 1):
            v = begin[T - d][j] + tb.log_surv[j, d - 1] + _seg(e, j, T - d, T)
            if v > best:
                best, best_j, best_d = v, j, d
    path = np.empty(T, dtype=np.int64)
    t, j, d = T, best_j, best_d
    while True:
        if d == 0:
            path[:t] = j
            break
        path[t - d:t] = j
        s = t - d
        j = begin_from[s][j]
        t = s
        d = end_from[t][j][0]
    return path, best


def reference_occupancy(tb: SemiMarkovTables, log_emit: np.ndarray) -> np.ndarray:
    """P(sample t is in tract j) by summing, for every run (start, end, tract), the forward
    mass before it, its own duration and emission terms and the backward mass after it."""
    e = np.asarray(log_emit, dtype=float)
    T, n = e.shape
    D = tb.max_duration
    end, begin = _end_score(tb, e, _lse)
    log_z = reference_log_likelihood(tb, e)
    # backward: after[t][j] = log P(data[t:] | a run of j ended at t)
    start_here = [[NEG] * n for _ in range(T + 1)]     # log P(data[s:] | run of j starts at s)
    after = [[NEG] * n for _ in range(T + 1)]
    for s in range(T - 1, 0, -1):
        for j in range(n):
            vals = []
            if T - s <= D:
                vals.append(tb.log_surv[j, T - s - 1] + _seg(e, j, s, T))
            for d in range(1, min(D, T - s - 1) + 1):
                vals.append(tb.log_pmf[j, d - 1] + _seg(e, j, s, s + d) + after[s + d][j])
            start_here[s][j] = _lse(vals)
        for i in range(n):
            after[s][i] = _lse([tb.log_switch[i, j] + start_here[s][j] for j in range(n)])
    occ = np.zeros((T, n))
    for j in range(n):
        for s in range(T):
            for t in range(s + 1, T + 1):
                d = t - s
                if d > D:
                    break
                if s == 0 and t == T:
                    lp = tb.log_start[j] + tb.log_first_surv[j, d - 1]
                elif s == 0:
                    lp = tb.log_start[j] + tb.log_first[j, d - 1] + after[t][j]
                elif t == T:
                    lp = begin[s][j] + tb.log_surv[j, d - 1]
                else:
                    lp = begin[s][j] + tb.log_pmf[j, d - 1] + after[t][j]
                lp += _seg(e, j, s, t) - log_z
                if lp > NEG:
                    occ[s:t, j] += math.exp(lp)
    del end
    return occ
