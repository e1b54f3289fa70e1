"""Decoder timing: our Viterbi / forward-backward vs hmmlearn on the same models.

Prints figures only (no assertions). Run: .venv/bin/python benchmarks/bench_decoder.py
Models: (a) 4 plain tract states; (b) 4 tracts x 20 sub-states (minimum-duration chains,
80 states), decoded by our chain decoder and by hmmlearn's dense decoder of the same
expanded model. Emissions: a blocky synthetic truth plus Gaussian noise, seed 0. Forward-backward is also
timed with the previous per-sample dense recursion (``_forward_backward``, "before") on the
first ``--old-samples`` samples, so before/after and ours/hmmlearn ratios come from one run.
(c) the explicit-duration (semi-Markov) decoder of facies_ml.sequence.semimarkov on 4 tracts with
log-normal thicknesses (median ``--median`` samples, log sd 0.3, minimum 8; D from the duration
model's support, as SequenceParameters.tables builds it): Viterbi and forward-backward
throughput, the plain-loop reference (facies_ml.sequence.reference) timed on ``--ref-samples``
samples and extrapolated per sample, and hmmlearn on the equivalent geometric-duration HMM
(self-loop p = 1 - 1 / mean thickness, same switch probabilities).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from hmmlearn.base import BaseHMM

from facies_ml.config import load_config
from facies_ml.sequence.decode import (
    _forward_backward,
    expand_durations,
    forward_backward,
    forward_backward_durations,
    viterbi,
    viterbi_durations,
)
from facies_ml.sequence.durations import ExplicitDuration
from facies_ml.sequence.model import SequenceParameters
from facies_ml.sequence.reference import reference_log_likelihood, reference_viterbi
from facies_ml.sequence.semimarkov import forward_backward_semimarkov, viterbi_semimarkov


class ReferenceHMM(BaseHMM):
    """hmmlearn model taking per-state emission log-likelihoods directly as its input."""

    def __init__(self, n_components: int) -> None:
        super().__init__(n_components=n_components, algorithm="viterbi", random_state=0,
                         n_iter=1, tol=0.0, verbose=False, params="", init_params="",
                         implementation="log")

    def _check(self) -> None:
        pass

    def _compute_log_likelihood(self, X: np.ndarray) -> np.ndarray:
        return X


def timed(fn, repeat: int):  # noqa: ANN001, ANN201
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=100_000)
    ap.add_argument("--substates", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--old-samples", type=int, default=20_000)
    ap.add_argument("--median", type=float, default=100.0)
    ap.add_argument("--ref-samples", type=int, default=300)
    args = ap.parse_args()
    T, rep = args.samples, args.repeat
    rng = np.random.default_rng(0)
    n = 4
    allowed = [(0, 1), (1, 2), (2, 3), (3, 0), (3, 1)]       # LST TST EHST LHST, up-section
    truth = np.repeat(rng.integers(0, n, T // 60 + 1), 60)[:T]
    emit = rng.normal(size=(T, n))
    emit[np.arange(T), truth] += 1.0

    # (a) plain 4-state model
    stay = np.full(n, 0.95)
    A = np.zeros((n, n))
    for i, j in allowed:
        A[i, j] = 1.0
    A = A / A.sum(axis=1, keepdims=True) * (1 - stay)[:, None] + np.diag(stay)
    start = np.full(n, 1 / n)
    with np.errstate(divide="ignore"):
        lA, ls = np.log(A), np.log(start)
    ref = ReferenceHMM(n)
    ref.startprob_, ref.transmat_ = start, A
    t_ours, (p_ours, lp_ours) = timed(lambda: viterbi(ls, lA, emit), rep)
    t_ref, (lp_ref, p_ref) = timed(lambda: ref.decode(emit, algorithm="viterbi"), rep)
    print(f"(a) plain {n} states, T={T}")
    print(f"    viterbi ours     {T / t_ours:12,.0f} samples/s  ({t_ours * 1e3:.1f} ms)")
    print(f"    viterbi hmmlearn {T / t_ref:12,.0f} samples/s  ({t_ref * 1e3:.1f} ms)")
    print(f"    speed ratio ours/hmmlearn {t_ref / t_ours:.2f}; paths equal: "
          f"{np.array_equal(p_ours, p_ref)}; log-prob diff {lp_ours - lp_ref:.2e}")
    To = min(T, args.old_samples)
    t_fb, (post, ll) = timed(lambda: forward_backward(ls, lA, emit), rep)
    t_fbr, post_r = timed(lambda: ref.predict_proba(emit), rep)
    t_old, _ = timed(lambda: _forward_backward(ls, lA, emit[:To], np.arange(n), n), 1)
    print(f"    fwd-bwd ours          {T / t_fb:12,.0f} samples/s  ({t_fb * 1e3:.1f} ms)")
    print(f"    fwd-bwd hmmlearn      {T / t_fbr:12,.0f} samples/s  (predict_proba)")
    print(f"    fwd-bwd before (dense per-sample loop) {To / t_old:,.0f} samples/s on {To}")
    print(f"    ratios: ours/hmmlearn {t_fbr / t_fb:.2f}; ours/before "
          f"{(T / t_fb) / (To / t_old):.1f}; max |dP| vs hmmlearn "
          f"{np.abs(post - post_r).max():.1e}")

    # (b) expanded 4 tracts x m sub-states
    m = np.full(n, args.substates)
    st_last = np.full(n, 0.9)
    sw = np.where(A > 0, A, 0.0)
    np.fill_diagonal(sw, 0.0)
    sw = sw / sw.sum(axis=1, keepdims=True) * (1 - st_last)[:, None]
    with np.errstate(divide="ignore"):
        lsw, lst = np.log(sw), np.log(st_last)
    x = expand_durations(ls, lst, lsw, m)
    S = x.log_start.size
    E_exp = emit[:, x.state_tract]
    ref_x = ReferenceHMM(S)
    ref_x.startprob_, ref_x.transmat_ = np.exp(x.log_start), np.exp(x.log_trans)
    t_d, (p_d, lp_d) = timed(lambda: viterbi_durations(ls, lst, lsw, m, emit), rep)
    t_dr, (lp_dr, p_dr) = timed(lambda: ref_x.decode(E_exp, algorithm="viterbi"), 1)
    print(f"(b) expanded {n} tracts x {args.substates} sub-states = {S} states, T={T}")
    print(f"    viterbi ours (chain)    {T / t_d:12,.0f} samples/s  ({t_d * 1e3:.1f} ms)")
    print(f"    viterbi hmmlearn dense  {T / t_dr:12,.0f} samples/s  ({t_dr * 1e3:.1f} ms)")
    print(f"    speed ratio ours/hmmlearn {t_dr / t_d:.2f}; tract paths equal: "
          f"{np.array_equal(p_d, x.state_tract[p_dr])}; log-prob diff {lp_d - lp_dr:.2e}")
    t_g, (p_g, _) = timed(lambda: viterbi(x.log_start, x.log_trans, E_exp), 1)
    print(f"    viterbi ours (generic sparse on the {S}x{S} matrix) {T / t_g:,.0f} samples/s; "
          f"equal: {np.array_equal(p_g, p_dr)}")
    t_fd, (post_d, ll_d) = timed(lambda: forward_backward_durations(ls, lst, lsw, m, emit), rep)
    t_fdr, post_dr = timed(lambda: ref_x.predict_proba(E_exp), 1)
    t_fdo, _ = timed(lambda: _forward_backward(x.log_start, x.log_trans, emit[:To],
                                               x.state_tract, n), 1)
    summed = np.stack([post_dr[:, x.state_tract == k].sum(axis=1) for k in range(n)], axis=1)
    print(f"    fwd-bwd ours (chain)    {T / t_fd:12,.0f} samples/s  ({t_fd * 1e3:.1f} ms)")
    print(f"    fwd-bwd hmmlearn dense  {T / t_fdr:12,.0f} samples/s  (predict_proba, "
          f"{t_fdr:.2f} s)")
    print(f"    fwd-bwd before (dense per-sample loop) {To / t_fdo:,.0f} samples/s on {To}")
    print(f"    ratios: ours/hmmlearn {t_fdr / t_fd:.2f}; ours/before "
          f"{(T / t_fd) / (To / t_fdo):.1f}; max |dP| vs hmmlearn "
          f"{np.abs(post_d - summed).max():.1e}")
    print(f"    decode = viterbi + posteriors (chain): {T / (t_d + t_fd):,.0f} samples/s")

    # (c) explicit-duration semi-Markov model
    semi_markov(T, emit, A, start, args.median, args.ref_samples, rep)


def semi_markov(T: int, emit: np.ndarray, A: np.ndarray, start: np.ndarray, median: float,
                ref_samples: int, rep: int) -> None:
    """Section (c): the semi-Markov kernels vs the plain-loop reference and hmmlearn."""
    n = A.shape[0]
    sw = A.copy()
    np.fill_diagonal(sw, 0.0)
    sw = sw / sw.sum(axis=1, keepdims=True)
    durs = tuple(ExplicitDuration(log_median=float(np.log(median)), log_sigma=0.3, min_samples=8)
                 for _ in range(n))
    params = SequenceParameters(states=("LST", "TST", "EHST", "LHST"), start=start, switch=sw,
                                durations=durs, tract_prior=np.full(n, 1 / n),
                                evidence_weight=1.0, path_weight=1.0, block=1, step=0.5,
                                depth_unit="ft")
    tb = params.tables(T)
    D = tb.max_duration
    print(f"(c) semi-Markov, {n} tracts, explicit log-normal durations (median {median:g} "
          f"samples, log sd 0.3, min 8), D={D}, T={T}")
    t_v, (p_v, lp_v) = timed(lambda: viterbi_semimarkov(tb, emit), rep)
    t_f, fb = timed(lambda: forward_backward_semimarkov(tb, emit), rep)
    print(f"    viterbi  ours {T / t_v:12,.0f} samples/s  ({t_v:.2f} s)")
    print(f"    fwd-bwd  ours {T / t_f:12,.0f} samples/s  ({t_f:.2f} s)")
    print(f"    decode = viterbi + posteriors: {T / (t_v + t_f):,.0f} samples/s")
    # what predictions run: blocks of sequence.decode_resolution (configs/default.yaml) at the
    # 0.5 ft step, emissions summed per block, thicknesses in whole blocks (the boundary
    # refinement to the sample is not timed)
    k = max(1, round(float(load_config().section("sequence")["decode_resolution"]) / 0.5))
    Tc = T // k
    e_c = emit[:Tc * k].reshape(Tc, k, n).sum(axis=1)
    tb_c = params.tables(Tc, k)
    t_cv, _ = timed(lambda: viterbi_semimarkov(tb_c, e_c), rep)
    t_cf, _ = timed(lambda: forward_backward_semimarkov(tb_c, e_c), rep)
    print(f"    in {k}-sample blocks (as predictions run): viterbi {T / t_cv:,.0f}, fwd-bwd "
          f"{T / t_cf:,.0f}, decode {T / (t_cv + t_cf):,.0f} samples/s (D={tb_c.max_duration} "
          "blocks)")
    Tr = min(T, ref_samples)
    e_r = emit[:Tr]
    tb_r = params.tables(Tr)
    t_rv, (p_rv, lp_rv) = timed(lambda: reference_viterbi(tb_r, e_r), 1)
    t_rf, ll_r = timed(lambda: reference_log_likelihood(tb_r, e_r), 1)
    p_fv, lp_fv = viterbi_semimarkov(tb_r, e_r)
    ll_f = forward_backward_semimarkov(tb_r, e_r).log_likelihood
    print(f"    reference (plain loops) on T={Tr}, D={tb_r.max_duration}: viterbi "
          f"{Tr / t_rv:,.0f} samples/s, forward {Tr / t_rf:,.0f} samples/s "
          f"(per-sample cost grows with D, so the extrapolation flatters the reference)")
    print(f"    ratios ours/reference per sample: viterbi {(T / t_v) / (Tr / t_rv):,.0f}x, "
          f"forward-backward vs reference forward {(T / t_f) / (Tr / t_rf):,.0f}x; on T={Tr}: "
          f"paths equal {np.array_equal(p_fv, p_rv)}, log-prob diff {lp_fv - lp_rv:.1e}, "
          f"log-lik diff {ll_f - ll_r:.1e}")
    # equivalent geometric-duration HMM: mean thickness = the explicit model's mean
    mean = float((np.arange(1, D + 1) * durs[0].pmf(D)).sum())
    p = 1.0 - 1.0 / mean
    trans = np.diag(np.full(n, p)) + (1 - p) * sw
    ref = ReferenceHMM(n)
    ref.startprob_, ref.transmat_ = start, trans
    t_hv, _ = timed(lambda: ref.decode(emit, algorithm="viterbi"), rep)
    t_hf, _ = timed(lambda: ref.predict_proba(emit), rep)
    print(f"    hmmlearn geometric HMM (self-loop {p:.4f}): viterbi {T / t_hv:12,.0f} samples/s, "
          f"predict_proba {T / t_hf:12,.0f} samples/s")
    print(f"    ratios ours(semi-Markov)/hmmlearn(HMM): viterbi {t_hv / t_v:.3f}, "
          f"fwd-bwd {t_hf / t_f:.3f} (the semi-Markov pass does ~D={D} times the work)")
    del p_v, lp_v, fb


if __name__ == "__main__":
    main()
