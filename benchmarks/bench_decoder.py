"""Decoder timing: the explicit-duration (semi-Markov) decoder vs its plain-loop reference and
hmmlearn, on the same emissions.

Prints figures only (no assertions). Run: .venv/bin/python benchmarks/bench_decoder.py
Emissions: a blocky synthetic truth over 4 tracts plus Gaussian noise, seed 0. The decoder of
facies_ml.sequence.semimarkov runs on 4 tracts with log-normal thicknesses (median ``--median``
samples, log sd 0.3, minimum 8; D from the duration model's support, as
SequenceParameters.tables builds it): Viterbi and forward-backward throughput per sample and in
the blocks predictions use, the plain-loop reference (facies_ml.sequence.reference) timed on
``--ref-samples`` samples and extrapolated per sample, and hmmlearn on the equivalent
geometric-duration HMM (self-loop p = 1 - 1 / mean thickness, same switch probabilities).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from hmmlearn.base import BaseHMM

from facies_ml.config import load_config
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
    ap.add_argument("--repeat", type=int, default=3)
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

    stay = np.full(n, 0.95)
    A = np.zeros((n, n))
    for i, j in allowed:
        A[i, j] = 1.0
    A = A / A.sum(axis=1, keepdims=True) * (1 - stay)[:, None] + np.diag(stay)
    start = np.full(n, 1 / n)

    # (c) explicit-duration semi-Markov model
    semi_markov(T, emit, A, start, args.median, args.ref_samples, rep)


def semi_markov(T: int, emit: np.ndarray, A: np.ndarray, start: np.ndarray, median: float,
                ref_samples: int, rep: int) -> None:
    """The semi-Markov kernels vs the plain-loop reference and hmmlearn."""
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
    print(f"semi-Markov, {n} tracts, explicit log-normal durations (median {median:g} "
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
