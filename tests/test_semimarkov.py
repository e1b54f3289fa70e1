"""Explicit-duration (semi-Markov) kernels checked against the plain-loop reference, brute-force
enumeration of every segmentation, hmmlearn 0.3.3 on the equivalent geometric-duration HMM, and
the duration models against their defining formulas."""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np
import pytest
from hmmlearn import _hmmc
from hmmlearn.base import BaseHMM

from facies_ml.config import CONFIG_DIR, load_config
from facies_ml.errors import InputError
from facies_ml.sequence.durations import ExplicitDuration, MinimumGeometricDuration, fit_durations
from facies_ml.sequence.model import TractSequenceModel
from facies_ml.sequence.reference import (
    reference_log_likelihood,
    reference_occupancy,
    reference_viterbi,
)
from facies_ml.sequence.rules import load_rules
from facies_ml.sequence.semimarkov import (
    SemiMarkovTables,
    forward_backward_semimarkov,
    viterbi_semimarkov,
)

NEG = -math.inf


def _log(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(x)


def _duration_tables(pmf: np.ndarray) -> tuple[np.ndarray, ...]:
    """(pmf, surv, first, first_surv) rows from pmf rows (n, D), per the durations module's
    definitions (surv = P(D >= d); first = surv / mean, the renewal residual, Cox 1962)."""
    surv = np.cumsum(pmf[:, ::-1], axis=1)[:, ::-1]
    mean = surv.sum(axis=1, keepdims=True)
    first = surv / mean
    first_surv = np.cumsum(first[:, ::-1], axis=1)[:, ::-1]
    return pmf, surv, first, first_surv


def random_tables(rng: np.random.Generator, n: int, D: int, forbid: float = 0.3,
                  arbitrary: bool = False) -> SemiMarkovTables:
    """A random explicit-duration model: some forbidden switches, a random minimum duration
    per tract, some impossible start tracts. ``arbitrary``: unrelated random duration tables
    (the kernels must reproduce the recursion for any tables, not only consistent ones)."""
    start = rng.dirichlet(np.ones(n))
    if n > 1 and rng.random() < 0.3:
        start[int(rng.integers(0, n))] = 0.0
        start /= start.sum()
    sw = rng.dirichlet(np.ones(n), size=n) if n > 1 else np.zeros((1, 1))
    np.fill_diagonal(sw, 0.0)
    if n > 2:
        mask = rng.random((n, n)) < forbid
        np.fill_diagonal(mask, False)
        for i in range(n):                  # keep one exit per tract
            if mask[i].sum() >= n - 1:
                mask[i, (i + 1) % n] = False
        sw = np.where(mask, 0.0, sw)
    if n > 1:
        sw /= sw.sum(axis=1, keepdims=True)
    if arbitrary:
        tabs = [rng.uniform(0.01, 1.0, size=(n, D)) for _ in range(4)]
    else:
        pmf = rng.dirichlet(np.ones(D), size=n)
        for j in range(n):
            m = int(rng.integers(1, max(1, D // 2) + 1))
            pmf[j, :m - 1] = 0.0
        pmf /= pmf.sum(axis=1, keepdims=True)
        tabs = list(_duration_tables(pmf))
    return SemiMarkovTables(_log(start), _log(sw), *(_log(t) for t in tabs))


# ------------------------------------------------------------------ (a) fast == reference
CASES = [(seed, n, D, T) for seed, (n, D, T) in enumerate(
    [(1, 3, 1), (2, 2, 1), (3, 4, 2), (3, 2, 3), (4, 3, 3), (2, 5, 4), (3, 4, 12), (4, 3, 20),
     (2, 6, 17), (4, 8, 30), (3, 12, 25), (1, 5, 9), (4, 5, 5), (3, 7, 6), (4, 2, 15),
     (5, 6, 40)])]


def assert_equal_reference(tb, e: np.ndarray, ref_ll: float) -> None:  # noqa: ANN001
    """Fast Viterbi path / log-prob, log-likelihood and occupancy equal the reference."""
    path, lp = viterbi_semimarkov(tb, e)
    ref_path, ref_lp = reference_viterbi(tb, e)
    np.testing.assert_array_equal(path, ref_path)
    assert lp == pytest.approx(ref_lp, rel=1e-10, abs=1e-10)
    fb = forward_backward_semimarkov(tb, e)
    assert fb.log_likelihood == pytest.approx(ref_ll, rel=1e-10, abs=1e-10)
    np.testing.assert_allclose(fb.occupancy, reference_occupancy(tb, e), atol=1e-9)


@pytest.mark.parametrize("seed,n,D,T", CASES)
@pytest.mark.parametrize("arbitrary", [False, True])
def test_fast_kernels_equal_reference(seed: int, n: int, D: int, T: int, arbitrary: bool) -> None:
    # Reference: facies_ml.sequence.reference (plain-loop recursions of Yu 2010, section 2).
    rng = np.random.default_rng(100 + seed + 1000 * arbitrary)
    tb = random_tables(rng, n, D, arbitrary=arbitrary)
    e = rng.normal(size=(T, n)) * 2.0
    ref_ll = reference_log_likelihood(tb, e)
    if not np.isfinite(ref_ll):            # no path at all: both fast kernels must refuse
        with pytest.raises(InputError, match="no tract path"):
            viterbi_semimarkov(tb, e)
        with pytest.raises(InputError, match="no tract path"):
            forward_backward_semimarkov(tb, e)
        return
    assert_equal_reference(tb, e, ref_ll)


def test_many_random_models_equal_reference() -> None:
    # Reference: facies_ml.sequence.reference; 60 random models, T from 1 to 3 D.
    rng = np.random.default_rng(7)
    checked = 0
    for _ in range(60):
        n, D = int(rng.integers(1, 5)), int(rng.integers(1, 9))
        T = int(rng.integers(1, 3 * D + 2))
        tb = random_tables(rng, n, D, arbitrary=bool(rng.random() < 0.3))
        e = rng.normal(size=(T, n)) * 3.0
        ref_ll = reference_log_likelihood(tb, e)
        if not np.isfinite(ref_ll):
            continue
        assert_equal_reference(tb, e, ref_ll)
        checked += 1
    assert checked >= 40


# ------------------------------------------------------------------ (b) brute force
def _enumerate(tb: SemiMarkovTables, e: np.ndarray):
    """Every tract path of T samples scored by the model definition (semimarkov module
    docstring), runs found independently with itertools.groupby."""
    T, n = e.shape
    D = tb.max_duration
    paths, scores, changes = [], [], []
    for path in itertools.product(range(n), repeat=T):
        runs = [(k, len(list(g))) for k, g in itertools.groupby(path)]
        if any(d > D for _, d in runs):
            score = NEG
        elif len(runs) == 1:
            j = runs[0][0]
            score = tb.log_start[j] + tb.log_first_surv[j, T - 1]
        else:
            j, d = runs[0]
            score = tb.log_start[j] + tb.log_first[j, d - 1]
            for r in range(1, len(runs)):
                k, d = runs[r]
                dur = tb.log_surv if r == len(runs) - 1 else tb.log_pmf
                score += tb.log_switch[runs[r - 1][0], k] + dur[k, d - 1]
        score += float(e[np.arange(T), list(path)].sum())
        paths.append(path)
        scores.append(score)
        changes.append([(sum(d for _, d in runs[:r]), runs[r - 1][0], runs[r][0])
                        for r in range(1, len(runs))])
    return np.array(paths), np.array(scores), changes


def test_tiny_cases_equal_brute_force_enumeration() -> None:
    # Reference: the definitions of the MAP path, the likelihood, the occupancy and the
    # run-entry marginals, by enumerating every path (hence every segmentation), T <= 7.
    rng = np.random.default_rng(21)
    done = 0
    for trial in range(40):
        n = int(rng.integers(1, 4))
        T = int(rng.integers(1, 8))
        D = int(rng.integers(1, 8))
        tb = random_tables(rng, n, D, arbitrary=trial % 3 == 0)
        e = rng.normal(size=(T, n)) * 2.0
        paths, scores, changes = _enumerate(tb, e)
        if not np.isfinite(scores).any():
            with pytest.raises(InputError):
                viterbi_semimarkov(tb, e)
            continue
        best = int(np.argmax(scores))
        path, lp = viterbi_semimarkov(tb, e)
        np.testing.assert_array_equal(path, paths[best], err_msg=f"trial {trial}")
        assert lp == pytest.approx(scores[best], abs=1e-9)
        m = scores.max()
        w = np.exp(scores - m)
        fb = forward_backward_semimarkov(tb, e)
        assert fb.log_likelihood == pytest.approx(m + np.log(w.sum()), abs=1e-9)
        w /= w.sum()
        occ = np.stack([np.bincount(paths[:, t], weights=w, minlength=n) for t in range(T)])
        np.testing.assert_allclose(fb.occupancy, occ, atol=1e-10)
        entry = np.zeros((T, n, n))
        for wk, ch in zip(w, changes, strict=True):
            for s, i, j in ch:
                entry[s, i, j] += wk
        np.testing.assert_allclose(fb.entry, entry, atol=1e-10)
        done += 1
    assert done >= 30


# ------------------------------------------------------------------ (c) geometric == HMM
class ReferenceHMM(BaseHMM):
    """hmmlearn 0.3.3 HMM whose per-state emission log-likelihoods are the input rows."""

    def __init__(self, start: np.ndarray, trans: np.ndarray) -> None:
        super().__init__(n_components=start.shape[0], algorithm="viterbi", random_state=0,
                         n_iter=1, tol=0.0, verbose=False, params="", init_params="",
                         implementation="log")
        self.startprob_, self.transmat_ = start, trans

    def _compute_log_likelihood(self, X: np.ndarray) -> np.ndarray:
        return X


def geometric_model(rng: np.random.Generator, n: int, D: int
                    ) -> tuple[SemiMarkovTables, np.ndarray, np.ndarray]:
    """Semi-Markov tables with geometric durations (self-loop p_j) and the equivalent HMM
    (start, transition matrix diag(p) + (1 - p) * switch)."""
    p = rng.uniform(0.6, 0.97, size=n)
    start = rng.dirichlet(np.ones(n))
    sw = rng.dirichlet(np.ones(n), size=n)
    np.fill_diagonal(sw, 0.0)
    if n > 2:
        sw[0, n - 1] = 0.0                 # a forbidden switch
    sw /= sw.sum(axis=1, keepdims=True)
    d = np.arange(1, D + 1)
    pmf = (1 - p)[:, None] * p[:, None] ** (d - 1)
    surv = p[:, None] ** (d - 1)
    tb = SemiMarkovTables(_log(start), _log(sw), _log(pmf), _log(surv), _log(pmf), _log(surv))
    trans = np.diag(p) + (1 - p)[:, None] * sw
    return tb, start, trans


@pytest.mark.parametrize("seed,n,T,scale", [(0, 4, 400, 1.5), (1, 3, 250, 4.0), (2, 4, 3, 2.0),
                                            (3, 2, 1, 1.0), (4, 4, 600, 0.7)])
def test_geometric_durations_equal_hmmlearn(seed: int, n: int, T: int, scale: float) -> None:
    # Reference: hmmlearn 0.3.3 BaseHMM decode (Viterbi), predict_proba, score and the
    # expected transition counts (_hmmc.compute_log_xi_sum) of the equivalent HMM.
    rng = np.random.default_rng(seed)
    tb, start, trans = geometric_model(rng, n, D=max(T, 1))
    e = rng.normal(size=(T, n)) * scale
    ref = ReferenceHMM(start, trans)
    ref_lp, ref_path = ref.decode(e, algorithm="viterbi")
    path, lp = viterbi_semimarkov(tb, e)
    np.testing.assert_array_equal(path, ref_path)
    assert lp == pytest.approx(ref_lp, rel=1e-9, abs=1e-9)
    fb = forward_backward_semimarkov(tb, e)
    np.testing.assert_allclose(fb.occupancy, ref.predict_proba(e), atol=1e-9)
    assert fb.log_likelihood == pytest.approx(ref.score(e), rel=1e-10, abs=1e-10)
    if T > 1:
        fwd = _hmmc.forward_log(start, trans, e)[1]
        bwd = _hmmc.backward_log(start, trans, e)
        xi = np.exp(_hmmc.compute_log_xi_sum(fwd, trans, bwd, e))
        off = ~np.eye(n, dtype=bool)
        np.testing.assert_allclose(fb.entry.sum(axis=0)[off], xi[off], atol=1e-8)


# ------------------------------------------------------------------ (d) duration models
@pytest.mark.parametrize("log_median,log_sigma,m", [(np.log(100.0), 0.3, 8), (np.log(40.0), 0.5, 8),
                                                    (np.log(12.0), 0.8, 3)])
def test_explicit_duration_pmf(log_median: float, log_sigma: float, m: int) -> None:
    # Reference: definition of a discretized log-normal (median exp(mu)); common practice.
    dur = ExplicitDuration(log_median=log_median, log_sigma=log_sigma, min_samples=m)
    D = dur.support()
    p = dur.pmf(D)
    assert p.shape == (D,)
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    assert (p[:m - 1] == 0).all() and p[m - 1] > 0
    # mass beyond the support is negligible: support = exp(mu + 4.75 sigma), and the normal
    # tail beyond 4.75 sigma is 1.02e-6 (scipy.special.ndtr(-4.75)), renormalised after the
    # cut below min_samples; so "about 1e-6" (the docstring's "< 1e-6" is slightly optimistic)
    assert 1.0 - dur.pmf(4 * D)[:D].sum() < 1.1e-6
    median_d = int(np.searchsorted(np.cumsum(p), 0.5)) + 1
    assert abs(median_d - np.exp(log_median)) <= 1.0
    logs = dur.tables(D)
    np.testing.assert_allclose(np.exp(logs[1][0]), 1.0)          # surv(1) = P(D >= 1) = 1
    np.testing.assert_allclose(np.exp(logs[2]).sum(), 1.0)       # first run pmf sums to 1
    # renewal residual (Cox 1962, from memory): first(d) = P(D >= d) / E[D]
    mean = float((np.arange(1, D + 1) * p).sum())
    np.testing.assert_allclose(np.exp(logs[2]), np.exp(logs[1]) / mean, rtol=1e-12)


def test_minimum_geometric_pmf() -> None:
    # Reference: geometric tail above a hard minimum, mean = min + mean_excess (common practice).
    dur = MinimumGeometricDuration(mean_excess=20.0, min_samples=8)
    D = dur.support()
    p = dur.pmf(D)
    assert (p[:7] == 0).all() and p.sum() == pytest.approx(1.0, abs=1e-12)
    assert float((np.arange(1, D + 1) * p).sum()) == pytest.approx(28.0, rel=1e-4)


def test_fit_durations_shrinks_rare_tract_toward_pooled_prior() -> None:
    cfg = load_config().section("sequence")["duration"]
    rng = np.random.default_rng(3)
    common = [list(np.round(np.exp(rng.normal(np.log(100), 0.2, 40))).astype(int))
              for _ in range(3)]
    rare = [20]                                       # one complete run, far thinner
    complete = [*common, rare]
    cut: list[list[int]] = [[], [], [], []]
    k = float(cfg["prior_runs"])
    fits = fit_durations("explicit", complete, cut, np.array([8, 8, 8, 8]), k,
                         float(cfg["prior_log_sigma"]), float(cfg["log_sigma_floor"]))
    pooled = float(np.log(np.median([r for runs in complete for r in runs])))
    # Reference: normal-mean posterior with a prior worth k observations (from memory):
    # mu = (k * mu0 + sum x) / (k + n)
    expected = (k * pooled + np.log(20.0)) / (k + 1)
    rare_fit = fits[3]
    assert isinstance(rare_fit, ExplicitDuration)
    assert rare_fit.log_median == pytest.approx(expected, rel=1e-12)
    assert np.log(20.0) < rare_fit.log_median < pooled          # pulled toward the pool
    assert rare_fit.n_runs == 1
    for fit, runs in zip(fits[:3], common, strict=True):        # well-sampled: near their data
        assert isinstance(fit, ExplicitDuration)
        assert abs(fit.log_median - np.mean(np.log(runs))) < 0.02
        assert fit.log_sigma >= float(cfg["log_sigma_floor"])
    with pytest.raises(InputError, match="must be one of explicit, minimum_geometric"):
        fit_durations("gamma", complete, cut, np.array([8, 8, 8, 8]), k, 0.5, 0.3)


# ------------------------------------------------------------------ (e) posterior bookkeeping
def test_posteriors_sum_to_one_and_entries_count_changes() -> None:
    # Reference: brute-force expected number of run changes, E[R - 1] over all paths.
    rng = np.random.default_rng(5)
    for _ in range(15):
        n, D, T = int(rng.integers(2, 4)), int(rng.integers(2, 6)), int(rng.integers(2, 8))
        tb = random_tables(rng, n, D)
        e = rng.normal(size=(T, n))
        paths, scores, changes = _enumerate(tb, e)
        if not np.isfinite(scores).any():
            continue
        w = np.exp(scores - scores.max())
        w /= w.sum()
        expected_changes = float(sum(wk * len(ch) for wk, ch in zip(w, changes, strict=True)))
        fb = forward_backward_semimarkov(tb, e)
        np.testing.assert_allclose(fb.occupancy.sum(axis=1), 1.0, atol=1e-12)
        assert fb.entry.sum() == pytest.approx(expected_changes, abs=1e-10)
        assert (fb.entry[0] == 0).all()
    # a long sequence: still normalised, and at most one change per sample boundary
    tb = random_tables(rng, 4, 30)
    e = rng.normal(size=(500, 4))
    fb = forward_backward_semimarkov(tb, e)
    np.testing.assert_allclose(fb.occupancy.sum(axis=1), 1.0, atol=1e-9)
    assert 0.0 < fb.entry.sum() < 499


# ------------------------------------------------------------------ (f) slivers
RULES = load_rules(CONFIG_DIR / "sequence_rules.yaml")
LST, TST, EHST, LHST = range(4)


@pytest.fixture(scope="module")
def thick_model() -> TractSequenceModel:
    """Explicit durations fitted on runs of ~100 samples (0.5 ft step: ~50 ft tracts)."""
    seq_cfg = load_config().settings.sequence
    rng = np.random.default_rng(9)
    wells = []
    for _ in range(4):
        k, runs = int(rng.integers(0, 4)), []
        for _ in range(40):
            runs.append(np.full(int(np.exp(rng.normal(np.log(100), 0.25))), k))
            k = {LST: TST, TST: EHST, EHST: LHST}.get(k, LST if rng.random() < 0.6 else TST)
        wells.append(np.concatenate(runs)[::-1])          # fit takes TOP-DOWN labels
    model = TractSequenceModel.from_settings(
        RULES, replace(seq_cfg, duration=replace(seq_cfg.duration, model="explicit")))
    return model.fit(wells, step=0.5, depth_unit="ft")


def _sliver_emissions(lhst_gain: float) -> tuple[np.ndarray, slice]:
    """Up-section: LST 150, then TST 300 with an 8-sample stretch (4 ft) in its middle whose
    evidence favours LHST by ``lhst_gain`` nats per sample over TST."""
    truth = np.r_[np.full(150, LST), np.full(300, TST)]
    e = np.full((truth.size, 4), -2.0)
    e[np.arange(truth.size), truth] = 0.0
    sliver = slice(296, 304)
    e[sliver, LHST] = lhst_gain
    return e, sliver


def test_thin_sliver_is_not_decoded_unless_evidence_is_overwhelming(thick_model) -> None:
    med = [np.exp(d.log_median) for d in thick_model.params_.durations]
    np.testing.assert_allclose(med, 100.0, rtol=0.1)
    # moderate evidence: 3 nats per sample for LHST over 8 samples (24 nats in all) would be
    # decoded by a per-sample argmax, but an 8-sample run is ~10 sigma thin for ~100-sample
    # tracts: the decoded column stays TST
    e, sliver = _sliver_emissions(3.0)
    assert (e[sliver].argmax(axis=1) == LHST).all()
    res = thick_model.decode(e)
    assert not (res.path == LHST).any()
    assert (res.path[sliver] == TST).all()
    assert RULES.count_violations(res.path) == 0
    # overwhelming evidence (60 nats per sample): the sliver is decoded, obeying the rules
    # (an EHST run must precede LHST up-section) and the 8-sample minimum
    e, sliver = _sliver_emissions(60.0)
    res = thick_model.decode(e)
    assert (res.path[sliver] == LHST).all()
    assert RULES.count_violations(res.path) == 0
    starts = np.r_[0, np.flatnonzero(np.diff(res.path)) + 1]
    lengths = np.diff(np.r_[starts, res.path.size])
    assert (lengths[1:-1] >= 8).all()
