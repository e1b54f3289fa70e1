"""Log-space Viterbi and forward-backward decoders, including a minimum-duration (chain) model.

All arrays are in decoding order: index 0 is the first sample of the sequence. For systems
tracts the caller passes samples UP-SECTION (index 0 = deepest sample), so "start" means the
base of the logged interval.

Explicit-duration model ("chain expansion"). Tract k is expanded into ``m_k`` sub-states
0..m_k-1: a path enters tract k at sub-state 0, steps through every sub-state (probability 1
each), and only the last sub-state self-loops (``log_stay[k]``) or leaves for another tract j
(``log_switch[k, j]``, already including the leaving probability). A sequence starts in the last
sub-state of its first tract, so the lowest run may be thinner than ``m_k`` (it was cut by the
log window); the path may end in any sub-state, so the highest run may be thinner too.

Speed. The Viterbi recursion is written on the collapsed chain: the ``m_k - 1`` pass-through
sub-states are a pure delay line, so each time step needs only a few vector operations over the
tracts (not over all sub-states) once scores are kept relative to the cumulative emission.
The time axis is cut into blocks that are decoded side by side (one numpy operation serves all
blocks); blocks after the first start from a guessed score vector and are re-run until their
start vector is parallel (equal up to a constant) to the end of the block below, after which
every max/argmax decision is exact. This is the rank-convergence scheme of Maleki, Musuvathi
& Mytkowicz (2014, "Parallelizing dynamic programming through rank convergence").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from facies_ml.errors import InputError

_DEFAULT_BLOCK = 256


@dataclass(frozen=True, eq=False)
class ExpandedModel:
    """Explicit expanded chain model: ``S = sum(min_samples)`` sub-states, tract-major order.

    ``state_tract[s]`` is the tract of sub-state s; ``first[k]`` / ``last[k]`` index the entry
    and the last (self-looping) sub-state of tract k.
    """

    log_start: np.ndarray
    log_trans: np.ndarray
    state_tract: np.ndarray
    first: np.ndarray
    last: np.ndarray


def _as_emit(log_emit: np.ndarray, n: int) -> np.ndarray:
    e = np.asarray(log_emit, dtype=float)
    if e.ndim != 2 or e.shape[1] != n:
        raise InputError(f"emission log-likelihoods must have shape (T, {n}), got {e.shape}")
    if e.shape[0] == 0:
        raise InputError("cannot decode an empty sequence (0 samples)")
    bad = ~np.isfinite(e)
    if bad.any():
        r = int(np.flatnonzero(bad.any(axis=1))[0])
        raise InputError("emission log-likelihood is not finite (NaN or infinite)", row=r)
    return e


def _check_model(log_start: np.ndarray, log_trans: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    ls = np.asarray(log_start, dtype=float)
    lt = np.asarray(log_trans, dtype=float)
    n = ls.shape[0] if ls.ndim == 1 else -1
    if ls.ndim != 1 or lt.shape != (n, n):
        raise InputError(f"log_start must be (n,) and log_trans (n, n); got {ls.shape}, "
                         f"{lt.shape}")
    if np.isnan(ls).any() or np.isnan(lt).any() or (ls == np.inf).any() or (lt == np.inf).any():
        raise InputError("start/transition log-probabilities contain NaN or +inf")
    return ls, lt


def expand_durations(log_start: np.ndarray, log_stay: np.ndarray, log_switch: np.ndarray,
                     min_samples: np.ndarray) -> ExpandedModel:
    """Build the explicit expanded model (dense ``(S, S)`` log transition matrix)."""
    m = np.asarray(min_samples, dtype=int)
    n = m.shape[0]
    if (m < 1).any():
        raise InputError("minimum durations must be at least 1 sample")
    first = np.concatenate([[0], np.cumsum(m)[:-1]]).astype(int)
    last = first + m - 1
    S = int(m.sum())
    lt = np.full((S, S), -np.inf)
    for k in range(n):
        for j in range(m[k] - 1):
            lt[first[k] + j, first[k] + j + 1] = 0.0
        lt[last[k], last[k]] = log_stay[k]
        for i in range(n):
            if i != k:
                lt[last[k], first[i]] = log_switch[k, i]
    ls = np.full(S, -np.inf)
    ls[last] = log_start
    return ExpandedModel(log_start=ls, log_trans=lt, state_tract=np.repeat(np.arange(n), m),
                         first=first, last=last)


def _predecessors(log_switch: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Padded predecessor lists: ``pred[k]`` are the i != k with finite ``log_switch[i, k]``."""
    n = log_switch.shape[0]
    fin = np.isfinite(log_switch) & ~np.eye(n, dtype=bool)
    K = max(1, int(fin.sum(axis=0).max()))
    pred = np.repeat(np.arange(n)[:, None], K, axis=1)
    pw = np.full((n, K), -np.inf)
    for k in range(n):
        idx = np.flatnonzero(fin[:, k])
        pred[k, :idx.size] = idx
        pw[k, :idx.size] = log_switch[idx, k]
    return pred, pw


def _parallel(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise: do ``a`` and ``b`` differ by a constant (same -inf pattern)?"""
    fa, fb = np.isfinite(a), np.isfinite(b)
    same = (fa == fb).all(axis=1)
    both = fa & fb
    d = np.where(both, a - b, np.nan)
    with np.errstate(invalid="ignore"):
        spread = np.fmax.reduce(d, axis=1) - np.fmin.reduce(d, axis=1)
    scale = 1.0 + np.max(np.where(both, np.abs(a), 0.0), axis=1, initial=0.0)
    return same & ~(spread > 1e-9 * scale)


def viterbi_durations(log_start: np.ndarray, log_stay: np.ndarray, log_switch: np.ndarray,
                      min_samples: np.ndarray, log_emit: np.ndarray, *,
                      block_size: int | None = None) -> tuple[np.ndarray, float]:
    """Most likely tract path of the chain-expanded model (see module docstring).

    ``log_start (n,)``: start in the last sub-state of each tract; ``log_stay (n,)``: self-loop
    of the last sub-state; ``log_switch (n, n)``: last sub-state of i -> entry of j (diagonal
    ignored); ``min_samples (n,)``: chain lengths m_k >= 1; ``log_emit (T, n)``: per-tract
    emission log-likelihoods in decoding order. Returns (tract path (T,), log-probability of
    that path including emissions). ``block_size`` sets the time-block length (None = auto).
    """
    m = np.asarray(min_samples, dtype=int)
    n = m.shape[0]
    a = np.asarray(log_stay, dtype=float)
    ls = np.asarray(log_start, dtype=float)
    sw = np.asarray(log_switch, dtype=float)
    if ls.shape != (n,) or a.shape != (n,) or sw.shape != (n, n):
        raise InputError("duration model arrays do not agree on the number of tracts")
    if (m < 1).any():
        raise InputError("minimum durations must be at least 1 sample")
    e = _as_emit(log_emit, n)
    T = e.shape[0]
    M = int(m.max()) - 1                     # history rows of pass-through (in-flight) scores
    pred, pw = _predecessors(sw)
    K = pred.shape[1]

    B = int(block_size) if block_size else _DEFAULT_BLOCK
    B = max(B, M + 1, 2)
    if T <= 2 * B:
        B = max(T, M + 1)
    P = -(-T // B)
    Tp = P * B
    E = np.zeros((Tp, n))
    E[:T] = e
    C = np.zeros((Tp + 1, n))
    np.cumsum(E, axis=0, out=C[1:])
    Cm1 = C[:-1].reshape(P, B, n)            # C(g-1): cumulative emission before sample g
    ar = np.arange(n)
    arrive_row = M - (m - 1)                 # row offset of the score arriving at the last state
    rel_mask = np.arange(M)[:, None] >= (M - (m - 1))[None, :]   # (M, n) in-flight rows used

    Ibuf = np.zeros((P, B + M, n))           # entry scores (relative), first M rows = start
    Lend = np.zeros((P, n))
    stay = np.zeros((P, B, n), dtype=bool)
    parg = np.zeros((P, B, n), dtype=np.int16)
    used_L = np.zeros((P, n))
    used_I = np.zeros((P, M, n))
    used_L[0] = -np.inf
    used_I[0] = -np.inf
    last_blk, last_tau = P - 1, (T - 1) - (P - 1) * B
    L_final = np.zeros(n)

    def run(blocks: np.ndarray) -> None:
        nonlocal L_final
        Q = blocks.size
        L = used_L[blocks].copy()
        Ib = np.empty((B + M, Q, n))                       # time-major for cheap row access
        Ib[:M] = used_I[blocks].transpose(1, 0, 2)
        cm_all = np.ascontiguousarray(Cm1[blocks].transpose(1, 0, 2))
        st = np.empty((B, Q, n), dtype=bool)
        pa = np.zeros((B, Q, n), dtype=np.int16)
        flat = Ib.reshape(-1)
        arr_idx = (arrive_row[None, :] * Q + np.arange(Q)[:, None]) * n + ar[None, :]
        row_step = Q * n
        q0 = np.flatnonzero(blocks == 0)
        ql = np.flatnonzero(blocks == last_blk)
        for tau in range(B):
            cm = cm_all[tau]
            Lc = L + cm
            if K == 1:
                best = Lc[:, pred[:, 0]] + pw[:, 0]
            elif K == 2:
                c0 = Lc[:, pred[:, 0]] + pw[:, 0]
                c1 = Lc[:, pred[:, 1]] + pw[:, 1]
                pick = c1 > c0
                best = np.where(pick, c1, c0)
                pa[tau] = pick
            else:
                cand = Lc[:, pred] + pw                   # (Q, n, K)
                best = cand.max(axis=-1)
                pa[tau] = cand.argmax(axis=-1)
            np.subtract(best, cm, out=Ib[M + tau])
            arrival = flat.take(arr_idx + tau * row_step)
            stayv = L + a
            s = stayv >= arrival
            L = np.where(s, stayv, arrival)
            if tau == 0 and q0.size:
                L[q0] = ls
                s[q0] = True
            st[tau] = s
            if tau == last_tau and ql.size:
                L_final = L[ql[0]].copy()
        Ibuf[blocks] = Ib.transpose(1, 0, 2)
        Lend[blocks] = L
        stay[blocks] = st.transpose(1, 0, 2)
        parg[blocks] = pa.transpose(1, 0, 2)

    run(np.arange(P))
    for _ in range(P + 1):
        if P == 1:
            break
        newL, newI = Lend[:-1], Ibuf[:-1, B:]
        fa = np.concatenate([newL, newI[:, rel_mask]], axis=1)
        fb = np.concatenate([used_L[1:], used_I[1:][:, rel_mask]], axis=1)
        redo = np.flatnonzero(~_parallel(fa, fb)) + 1
        if redo.size == 0:
            break
        used_L[redo] = Lend[redo - 1]
        used_I[redo] = Ibuf[redo - 1, B:]
        run(redo)

    # ---- choose the final sub-state at T-1 (scores of the last block share one offset)
    best_val, best_k, best_s = -np.inf, 0, -1       # best_s = -1: last sub-state
    c_end = C[T]                                     # cumulative emission up to T-1
    for k in range(n):
        if L_final[k] + c_end[k] > best_val:
            best_val, best_k, best_s = L_final[k] + c_end[k], k, -1
        for j in range(m[k] - 1):                    # in chain sub-state j, entered at T-1-j
            s_glob = T - 1 - j
            v = Ibuf[last_blk, M + last_tau - j, k] + c_end[k]
            if s_glob >= 1 and v > best_val:
                best_val, best_k, best_s = v, k, s_glob
    if not np.isfinite(best_val):
        raise InputError("no tract path satisfies the rules and minimum thicknesses for this "
                         "sequence")

    # ---- backtrack run by run
    stay_f = stay.reshape(Tp, n)
    parg_f = parg.reshape(Tp, n)
    arrival_t = np.where(~stay_f, np.arange(Tp)[:, None], -1)
    runstart = np.maximum.accumulate(arrival_t, axis=0)
    path = np.empty(T, dtype=np.int64)
    t, k, s = T - 1, best_k, best_s
    while True:
        if s < 0:
            u = int(runstart[t, k])
            if u < 0:
                path[: t + 1] = k
                break
            s = u - int(m[k]) + 1
        path[s: t + 1] = k
        i = int(pred[k, parg_f[s, k]])
        t, k, s = s - 1, i, -1
    return path, _duration_path_score(path, ls, a, sw, m, e)


def _runs(path: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start index and length of each run of equal values."""
    change = np.flatnonzero(np.diff(path)) + 1
    starts = np.concatenate([[0], change])
    lengths = np.diff(np.concatenate([starts, [path.size]]))
    return starts, lengths


def _duration_path_score(path: np.ndarray, log_start: np.ndarray, log_stay: np.ndarray,
                         log_switch: np.ndarray, m: np.ndarray, e: np.ndarray) -> float:
    """Log-probability of a tract path under the chain-expanded model (with emissions)."""
    starts, lengths = _runs(path)
    tracts = path[starts]
    n_stay = lengths - m[tracts]
    n_stay[0] = lengths[0] - 1                      # first run starts in the last sub-state
    n_stay = np.maximum(n_stay, 0)
    with np.errstate(invalid="ignore"):
        stay_lp = np.where(n_stay > 0, n_stay * log_stay[tracts], 0.0)
    score = log_start[tracts[0]] + stay_lp.sum()
    if tracts.size > 1:
        score += log_switch[tracts[:-1], tracts[1:]].sum()
    return float(score + e[np.arange(path.size), path].sum())


def viterbi(log_start: np.ndarray, log_trans: np.ndarray, log_emit: np.ndarray, *,
            block_size: int | None = None) -> tuple[np.ndarray, float]:
    """Most likely state path of a plain HMM in log space.

    ``log_start (n,)``, ``log_trans (n, n)`` ``[from, to]``, ``log_emit (T, n)`` in decoding
    order (up-section for tracts). -inf entries are forbidden transitions and are skipped
    (each state only looks at its finite predecessors). Returns (path (T,), log-probability).
    """
    ls, lt = _check_model(log_start, log_trans)
    n = ls.shape[0]
    e = _as_emit(log_emit, n)
    sw = lt.copy()
    np.fill_diagonal(sw, -np.inf)
    path, _ = viterbi_durations(ls, np.diag(lt).copy(), sw, np.ones(n, dtype=int), e,
                                block_size=block_size)
    score = ls[path[0]] + lt[path[:-1], path[1:]].sum() + e[np.arange(path.size), path].sum()
    return path, float(score)


def _forward_backward(log_start: np.ndarray, log_trans: np.ndarray, log_emit: np.ndarray,
                      state_map: np.ndarray, n_out: int) -> tuple[np.ndarray, float]:
    """Scaled forward-backward; emissions per output group, posteriors summed per group."""
    T = log_emit.shape[0]
    S = log_start.shape[0]
    shift = log_emit.max(axis=1)
    E = np.exp(log_emit - shift[:, None])[:, state_map]          # (T, S), values in (0, 1]
    A = np.exp(log_trans)
    groups = np.flatnonzero(np.r_[True, np.diff(state_map) != 0])
    contiguous = np.array_equal(np.unique(state_map[groups]), state_map[groups])
    ind = None if contiguous else (state_map[:, None] == np.arange(n_out)[None, :]).astype(float)
    alpha = np.empty((T, S))
    c = np.empty(T)
    x = np.exp(log_start) * E[0]
    for t in range(T):
        if t:
            x = (x @ A) * E[t]
        ct = x.sum()
        if not ct > 0:
            raise InputError("no state path is possible under the rules at this sample "
                             "(forward probability is zero)", row=t)
        x = x / ct
        alpha[t] = x
        c[t] = ct
    post = np.empty((T, n_out))
    b = np.ones(S)
    for t in range(T - 1, -1, -1):
        if t < T - 1:
            b = (A @ (E[t + 1] * b)) / c[t + 1]
        g = alpha[t] * b
        post[t] = np.add.reduceat(g, groups) if contiguous else g @ ind
    post /= post.sum(axis=1, keepdims=True)
    return post, float(np.log(c).sum() + shift.sum())


def forward_backward(log_start: np.ndarray, log_trans: np.ndarray,
                     log_emit: np.ndarray) -> tuple[np.ndarray, float]:
    """Posterior state probabilities (T, n) and the sequence log-likelihood of a plain HMM."""
    ls, lt = _check_model(log_start, log_trans)
    n = ls.shape[0]
    e = _as_emit(log_emit, n)
    return _forward_backward(ls, lt, e, np.arange(n), n)


def forward_backward_durations(log_start: np.ndarray, log_stay: np.ndarray,
                               log_switch: np.ndarray, min_samples: np.ndarray,
                               log_emit: np.ndarray) -> tuple[np.ndarray, float]:
    """Tract posteriors (T, n) of the chain-expanded model, summed over sub-states."""
    n = np.asarray(min_samples).shape[0]
    e = _as_emit(log_emit, n)
    x = expand_durations(log_start, log_stay, log_switch, min_samples)
    return _forward_backward(x.log_start, x.log_trans, e, x.state_tract, n)
