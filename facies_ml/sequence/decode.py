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
from facies_ml.sequence.runs import split_runs
from facies_ml.sequence.semimarkov import check_emissions

_DEFAULT_BLOCK = 256
_FB_BLOCK = 128                 # forward-backward time block (grows as sqrt(T) for long input)
_FB_BURN = 1.0                  # burn-in before each block, as a share of the block length


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
    e = check_emissions(log_emit, n)
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


def _duration_path_score(path: np.ndarray, log_start: np.ndarray, log_stay: np.ndarray,
                         log_switch: np.ndarray, m: np.ndarray, e: np.ndarray) -> float:
    """Log-probability of a tract path under the chain-expanded model (with emissions)."""
    starts, lengths, tracts = split_runs(path)
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
    e = check_emissions(log_emit, n)
    sw = lt.copy()
    np.fill_diagonal(sw, -np.inf)
    path, _ = viterbi_durations(ls, np.diag(lt).copy(), sw, np.ones(n, dtype=int), e,
                                block_size=block_size)
    score = ls[path[0]] + lt[path[:-1], path[1:]].sum() + e[np.arange(path.size), path].sum()
    return path, float(score)


def _forward_backward(log_start: np.ndarray, log_trans: np.ndarray, log_emit: np.ndarray,
                      state_map: np.ndarray, n_out: int) -> tuple[np.ndarray, float]:
    """Dense scaled forward-backward, one Python step per sample (reference, slow).

    Emissions per output group, posteriors summed per group. Kept as the plain textbook
    recursion (Rabiner 1989, scaled form) for the benchmark's before/after comparison.
    """
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


# ---------------------------------------------------------------- chain forward-backward
#
# Log-space sum-product on the collapsed chain. Notation (decoding order, t = 0..T-1):
# ``e`` emissions shifted by their row maximum, ``la[t, k]`` log forward of the last sub-state
# of tract k, ``I[t, k]`` log of the mass entering tract k at t (before the emission of t),
# ``lb[t, k]`` log backward of the last sub-state. Pass-through sub-states are delay lines:
# mass entering k at u reaches the last sub-state at v = u + m_k - 1 multiplied by the
# emissions of u..v-1, so only the n last sub-states need a recursion. Every value is kept
# relative to the cumulative emission of its own tract (the delay line is then constant), and
# the cumulative sums restart at every time block, so magnitudes stay block-sized.
#
# Blocks of time are swept side by side (one numpy operation per step serves every block).
# The forward (and backward) recursion is linear, so a block started from any vector parallel
# to its true start (equal up to a constant in log space) gives the true values up to that
# constant. Blocks after the first start from a short burn-in over the samples before them,
# are checked against the end of the block below and re-swept until parallel to a tolerance
# (Hilbert projective distance: spread of the log ratios), as in the rank-convergence scheme
# of the Viterbi decoder above.


@dataclass(frozen=True)
class _Chain:
    """Recursion tables of one direction: mixing lists and delay-line read offsets."""

    log_stay: np.ndarray     # (n,)
    mix: np.ndarray          # (n, K) source tract of each mixing term
    mix_w: np.ndarray        # (n, K) log weight of each mixing term (-inf = unused)
    delay: np.ndarray        # (n,) rows back from the current row that a tract reads
    hist: int                # history rows kept before a block


def _lse_mix(x: np.ndarray, ch: _Chain) -> np.ndarray:
    """``out[..., k] = logsumexp_j(x[..., mix[k, j]] + mix_w[k, j])``."""
    K = ch.mix.shape[1]
    if K == 1:
        return x[..., ch.mix[:, 0]] + ch.mix_w[:, 0]
    if K == 2:
        return np.logaddexp(x[..., ch.mix[:, 0]] + ch.mix_w[:, 0],
                            x[..., ch.mix[:, 1]] + ch.mix_w[:, 1])
    return np.logaddexp.reduce(x[..., ch.mix] + ch.mix_w, axis=-1)


def _sweep(ch: _Chain, backward: bool, E: np.ndarray, L0: np.ndarray, H0: np.ndarray,
           first: np.ndarray, first_value: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Run one direction over time-major segments ``E (R, Q, n)`` from starts ``L0 (Q, n)``,
    ``H0 (hist, Q, n)``; returns (``L`` per step (R, Q, n), history ``H`` (hist + R, Q, n)),
    relative to the segment's cumulative emission. Segments whose flag in ``first`` is set
    take ``first_value`` as their state after step 0 (the true sequence start).

    Forward: ``H`` holds entry masses; L_t = logaddexp(L_{t-1} + stay, H[t - (m - 1)]).
    Backward (``E`` reversed in time): ``H`` holds past L; L_r = logaddexp(L_{r-1} + stay,
    mix(H[r - m])).
    """
    R, Q, n = E.shape
    M = ch.hist
    cum = np.zeros((R + 1, Q, n))
    np.cumsum(E, axis=0, out=cum[1:])
    H = np.empty((M + R, Q, n))
    H[:M] = H0
    Lout = np.empty((R, Q, n))
    flat = H.reshape(-1)
    ar = np.arange(n)
    read = ((M - ch.delay)[None, :] * Q + np.arange(Q)[:, None]) * n + ar[None, :]
    row = Q * n
    q0 = np.flatnonzero(first)
    L = L0
    a = ch.log_stay
    for tau in range(R):
        cm = cum[tau]
        if backward:
            y = flat.take(read + tau * row)
            y += cm
            x = _lse_mix(y, ch)
            x -= cm
            L = np.logaddexp(L + a, x)
            if tau == 0 and q0.size:
                L[q0] = first_value
            H[M + tau] = L
        else:
            x = _lse_mix(L + cm, ch)
            np.subtract(x, cm, out=H[M + tau])
            L = np.logaddexp(L + a, flat.take(read + tau * row))
            if tau == 0 and q0.size:
                L[q0] = first_value
        Lout[tau] = L
    return Lout, H


def _spread(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise Hilbert distance of log vectors: max - min of a - b over finite entries
    (+inf when the -inf patterns differ; 0 when both are all -inf)."""
    fa, fb = np.isfinite(a), np.isfinite(b)
    same = (fa == fb).all(axis=1)
    with np.errstate(invalid="ignore"):
        d = np.where(fa & fb, a - b, np.nan)
        s = np.fmax.reduce(d, axis=1) - np.fmin.reduce(d, axis=1)
    s = np.where(np.isnan(s), 0.0, s)
    return np.where(same, s, np.inf)


def _offset(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise mean of a - b over entries finite in both (0 when there are none)."""
    both = np.isfinite(a) & np.isfinite(b)
    with np.errstate(invalid="ignore"):
        d = np.where(both, a - b, 0.0)
    return d.sum(axis=1) / np.maximum(both.sum(axis=1), 1)


def _blocked(ch: _Chain, backward: bool, e: np.ndarray, first_value: np.ndarray,
             H_first: np.ndarray, block: int) -> tuple[np.ndarray, np.ndarray]:
    """Sweep ``e (T, n)`` (already in sweep order) in blocks from the exact start
    (``first_value`` after step 0, history ``H_first``); returns ``L (T, n)`` and ``H (T, n)``
    on one common scale (block 0's, so the values are exact log probabilities). Forward: L + e
    is the log forward of the last sub-states and H the log entry mass; backward: L is the
    log backward."""
    T, n = e.shape
    M = ch.hist
    B = max(int(block), 2 * M + 2, 8, int(np.sqrt(T)))
    if T <= 2 * B:
        B = T
    P = -(-T // B)
    Tp = P * B
    E = np.zeros((Tp, n))
    E[:T] = e
    Eb = E.reshape(P, B, n)
    tot = Eb.sum(axis=1)                                   # (P, n) emission of each block
    mask = (np.arange(M)[:, None] >= (M - ch.delay)[None, :])  # history rows a block reads
    scale = float(np.abs(np.cumsum(Eb, axis=1)).max(initial=0.0))
    tol = 1e-10 + 1e-14 * scale

    def carry(Lend: np.ndarray, Hend: np.ndarray, tot_: np.ndarray) -> tuple[np.ndarray, ...]:
        # state at the end of a segment, re-expressed relative to the next segment's start
        return Lend + tot_, Hend + tot_[:, None, :]

    def flat_state(L: np.ndarray, H: np.ndarray) -> np.ndarray:
        return np.concatenate([L, H[:, mask]], axis=1)

    def normalise(L: np.ndarray, H: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        mx = np.max(flat_state(L, H), axis=1, initial=-np.inf)
        mx = np.where(np.isfinite(mx), mx, 0.0)
        return L - mx[:, None], H - mx[:, None, None]

    L_used = np.zeros((P, n))
    H_used = np.zeros((P, M, n))
    L_used[0] = -np.inf
    H_used[0] = H_first
    first = np.zeros(P, dtype=bool)
    first[0] = True
    if P > 1:                                  # burn-in: the W samples below each block
        W = min(B, max(2 * M + 2, int(B * _FB_BURN)))
        seg = np.ascontiguousarray(Eb[:-1, B - W:].transpose(1, 0, 2))
        Lb, Hb = _sweep(ch, backward, seg, np.zeros((P - 1, n)), np.zeros((M, P - 1, n)),
                        np.zeros(P - 1, dtype=bool), first_value)
        Lc, Hc = carry(Lb[-1], Hb[W:].transpose(1, 0, 2), seg.sum(axis=0))
        L_used[1:], H_used[1:] = normalise(Lc, Hc)
    Lrel = np.empty((P, B, n))
    Hrel = np.empty((P, B, n))
    Lend = np.empty((P, n))
    Hend = np.empty((P, M, n))

    def run(blocks: np.ndarray) -> None:
        seg = np.ascontiguousarray(Eb[blocks].transpose(1, 0, 2))
        Ls, Hs = _sweep(ch, backward, seg, L_used[blocks], H_used[blocks].transpose(1, 0, 2),
                        first[blocks], first_value)
        Lrel[blocks] = Ls.transpose(1, 0, 2)
        Hrel[blocks] = Hs[M:].transpose(1, 0, 2)
        Lend[blocks] = Ls[-1]
        Hend[blocks] = Hs[B:].transpose(1, 0, 2)

    run(np.arange(P))
    for _ in range(P):
        if P == 1:
            break
        Lc, Hc = carry(Lend[:-1], Hend[:-1], tot[:-1])
        gap = _spread(flat_state(Lc, Hc), flat_state(L_used[1:], H_used[1:]))
        redo = np.flatnonzero(~(gap <= tol)) + 1
        if redo.size == 0:
            break
        L_used[redo], H_used[redo] = normalise(Lc[redo - 1], Hc[redo - 1])
        run(redo)
    # one common scale: block p's values are offset from block p-1's by the carry gap
    z = np.zeros(P)
    if P > 1:
        Lc, Hc = carry(Lend[:-1], Hend[:-1], tot[:-1])
        z[1:] = np.cumsum(_offset(flat_state(Lc, Hc), flat_state(L_used[1:], H_used[1:])))
    cum = np.zeros((P, B + 1, n))
    np.cumsum(Eb, axis=1, out=cum[:, 1:])
    cm = cum[:, :-1]
    off = cm + z[:, None, None]
    return (Lrel + off).reshape(Tp, n)[:T], (Hrel + off).reshape(Tp, n)[:T]


def _chain_tables(log_stay: np.ndarray, log_switch: np.ndarray,
                  m: np.ndarray) -> tuple[_Chain, _Chain]:
    """Forward tables (mix over predecessors, read entries m - 1 rows back) and backward
    tables (mix over successors of values m rows back)."""
    pred, pw = _predecessors(log_switch)
    succ, sw = _predecessors(log_switch.T)
    M = int(m.max())
    fwd = _Chain(log_stay=log_stay, mix=pred, mix_w=pw, delay=m - 1, hist=M - 1)
    bwd = _Chain(log_stay=log_stay, mix=succ, mix_w=sw, delay=m.copy(), hist=M)
    return fwd, bwd


def _chain_forward_backward(log_start: np.ndarray, log_stay: np.ndarray, log_switch: np.ndarray,
                            m: np.ndarray, e: np.ndarray, block: int = _FB_BLOCK
                            ) -> tuple[np.ndarray, float]:
    """Tract posteriors and log-likelihood of the chain model (see the section comment)."""
    T, n = e.shape
    shift = e.max(axis=1)
    es = e - shift[:, None]
    fwd, bwd = _chain_tables(log_stay, log_switch, m)
    Lf, ent = _blocked(fwd, False, es, log_start, np.full((fwd.hist, n), -np.inf), block)
    la = Lf + es                               # log forward of the last sub-states
    Lb, _ = _blocked(bwd, True, es[::-1], np.zeros(n), np.zeros((bwd.hist, n)), block)
    lb = Lb[::-1]                              # log backward of the last sub-states
    M = int(m.max())
    # W[u, k]: log P(emissions, tract k entered at u) = ent_u + sum e[u..v] + lb_v, v = u+m_k-1
    # (beyond the last sample the path ends inside the chain: lb = 0, sum cut at T-1).
    es_pad = np.vstack([es, np.zeros((M, n))])
    lb_pad = np.vstack([lb, np.zeros((M, n))])
    S = np.zeros((T, n))
    for j in range(M):
        sel = m > j
        S[:, sel] += es_pad[j:j + T, sel]
    W = ent + S + lb_pad[np.arange(T)[:, None] + (m - 1)[None, :], np.arange(n)[None, :]]
    chain = m > 1
    W[:, ~chain] = -np.inf
    tail_ok = np.arange(T)[:, None] >= (T - m + 1)[None, :]
    log_z = float(np.logaddexp.reduce(np.concatenate([la[-1], W[tail_ok]])))
    if not np.isfinite(log_z):
        alive = np.isfinite(la)
        fin = np.isfinite(ent) & chain[None, :]
        for j in range(min(M - 1, T)):
            sel = m - 1 > j
            alive[j:, sel] |= fin[:T - j, sel]
        r = int(np.flatnonzero(~alive.any(axis=1))[0]) if not alive.any(axis=1).all() else T - 1
        raise InputError("no state path is possible under the rules at this sample "
                         "(forward probability is zero)", row=r)
    post = np.exp(la + lb - log_z)
    pw = np.exp(W - log_z)
    for j in range(min(M - 1, T)):             # in sub-state j of a chain entered at t - j
        sel = m - 1 > j                        # (a log shorter than a chain: j < T only)
        post[j:, sel] += pw[:T - j, sel]
    post /= post.sum(axis=1, keepdims=True)
    return post, log_z + float(shift.sum())


def forward_backward(log_start: np.ndarray, log_trans: np.ndarray,
                     log_emit: np.ndarray) -> tuple[np.ndarray, float]:
    """Posterior state probabilities (T, n) and the sequence log-likelihood of a plain HMM.

    ``log_emit (T, n)`` in decoding order (up-section for tracts); -inf transitions are
    forbidden. Same recursion as :func:`forward_backward_durations` with chains of length 1.
    """
    ls, lt = _check_model(log_start, log_trans)
    n = ls.shape[0]
    e = check_emissions(log_emit, n)
    sw = lt.copy()
    np.fill_diagonal(sw, -np.inf)
    return _chain_forward_backward(ls, np.diag(lt).copy(), sw, np.ones(n, dtype=int), e)


def forward_backward_durations(log_start: np.ndarray, log_stay: np.ndarray,
                               log_switch: np.ndarray, min_samples: np.ndarray,
                               log_emit: np.ndarray) -> tuple[np.ndarray, float]:
    """Tract posteriors (T, n) of the chain-expanded model, summed over sub-states, and the
    sequence log-likelihood. Arguments as :func:`viterbi_durations` (decoding order)."""
    m = np.asarray(min_samples, dtype=int)
    n = m.shape[0]
    a = np.asarray(log_stay, dtype=float)
    ls = np.asarray(log_start, dtype=float)
    sw = np.array(log_switch, dtype=float)
    if ls.shape != (n,) or a.shape != (n,) or sw.shape != (n, n):
        raise InputError("duration model arrays do not agree on the number of tracts")
    if (m < 1).any():
        raise InputError("minimum durations must be at least 1 sample")
    e = check_emissions(log_emit, n)
    np.fill_diagonal(sw, -np.inf)
    return _chain_forward_backward(ls, a, sw, m, e)
