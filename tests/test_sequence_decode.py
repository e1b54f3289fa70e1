"""Decoders checked against hmmlearn 0.3.3 (reference library) and brute-force enumeration."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hmmlearn.base import BaseHMM

from facies_ml.errors import InputError
from facies_ml.sequence.decode import (
    _chain_forward_backward,
    expand_durations,
    forward_backward,
    forward_backward_durations,
    viterbi,
    viterbi_durations,
)


class ReferenceHMM(BaseHMM):
    """hmmlearn HMM whose per-state emission log-likelihoods are the input rows themselves."""

    def __init__(self, n_components: int) -> None:
        super().__init__(n_components=n_components, algorithm="viterbi", random_state=0,
                         n_iter=1, tol=0.0, verbose=False, params="", init_params="",
                         implementation="log")

    def _check(self) -> None:
        self._check_sum_1("startprob_")
        self._check_sum_1("transmat_")

    def _compute_log_likelihood(self, X: np.ndarray) -> np.ndarray:
        return X


def _reference(start: np.ndarray, trans: np.ndarray) -> ReferenceHMM:
    ref = ReferenceHMM(start.shape[0])
    ref.startprob_ = start
    ref.transmat_ = trans
    return ref


def _random_model(rng: np.random.Generator, n: int, zero_frac: float = 0.0):
    start = rng.dirichlet(np.ones(n))
    trans = rng.dirichlet(np.ones(n), size=n)
    if zero_frac:
        mask = rng.random((n, n)) < zero_frac
        np.fill_diagonal(mask, False)
        trans = np.where(mask, 0.0, trans)
        trans /= trans.sum(axis=1, keepdims=True)
    return start, trans


def _log(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(x)


@pytest.mark.parametrize("seed,n,T,zero_frac,block", [
    (0, 4, 400, 0.0, None), (1, 4, 3000, 0.4, 64), (2, 6, 2500, 0.5, 100), (3, 3, 50, 0.3, None)])
def test_viterbi_matches_hmmlearn(seed: int, n: int, T: int, zero_frac: float, block) -> None:
    # Reference: hmmlearn BaseHMM.decode(algorithm='viterbi') on the same model.
    rng = np.random.default_rng(seed)
    start, trans = _random_model(rng, n, zero_frac)
    emit = rng.normal(size=(T, n)) * 1.5
    ref_lp, ref_path = _reference(start, trans).decode(emit, algorithm="viterbi")
    path, lp = viterbi(_log(start), _log(trans), emit, block_size=block)
    np.testing.assert_array_equal(path, ref_path)
    assert lp == pytest.approx(ref_lp, rel=1e-9, abs=1e-7)


@pytest.mark.parametrize("seed,n,T,zero_frac", [(4, 4, 500, 0.0), (5, 5, 800, 0.4)])
def test_forward_backward_matches_hmmlearn(seed: int, n: int, T: int, zero_frac: float) -> None:
    # Reference: hmmlearn predict_proba (posteriors) and score (log-likelihood).
    rng = np.random.default_rng(seed)
    start, trans = _random_model(rng, n, zero_frac)
    emit = rng.normal(size=(T, n)) * 2.0
    ref = _reference(start, trans)
    post, ll = forward_backward(_log(start), _log(trans), emit)
    np.testing.assert_allclose(post, ref.predict_proba(emit), atol=1e-9)
    assert ll == pytest.approx(ref.score(emit), rel=1e-10)


def test_tiny_cases_equal_brute_force() -> None:
    # Reference: the definitions of the MAP path and of posterior marginals, by enumerating
    # every state path (Rabiner 1989, eqs. for delta and gamma) on T <= 7, n <= 3.
    rng = np.random.default_rng(6)
    for trial in range(30):
        n = int(rng.integers(1, 4))
        T = int(rng.integers(1, 8))
        start, trans = _random_model(rng, n, 0.3 if n > 1 else 0.0)
        ls, lt = _log(start), _log(trans)
        emit = rng.normal(size=(T, n)) * 2.0
        paths = np.array(list(itertools.product(range(n), repeat=T)))
        scores = (ls[paths[:, 0]] + lt[paths[:, :-1], paths[:, 1:]].sum(axis=1)
                  + emit[np.arange(T), paths].sum(axis=1))
        best = int(np.argmax(scores))
        path, lp = viterbi(ls, lt, emit)
        np.testing.assert_array_equal(path, paths[best], err_msg=f"trial {trial}")
        assert lp == pytest.approx(scores[best], abs=1e-9)
        w = np.exp(scores - scores.max())
        marg = np.stack([np.bincount(paths[:, t], weights=w, minlength=n) for t in range(T)])
        marg /= w.sum()
        post, ll = forward_backward(ls, lt, emit)
        np.testing.assert_allclose(post, marg, atol=1e-10)
        finite = np.isfinite(scores)
        lse = scores.max() + np.log(np.exp(scores[finite] - scores.max()).sum())
        assert ll == pytest.approx(lse, abs=1e-9)


def _duration_model(rng: np.random.Generator, m: np.ndarray):
    n = m.size
    stay = rng.uniform(0.5, 0.95, size=n)
    sw = rng.dirichlet(np.ones(n), size=n)
    np.fill_diagonal(sw, 0.0)
    sw[0, n - 1] = 0.0                      # one forbidden transition
    sw /= sw.sum(axis=1, keepdims=True)
    return _log(rng.dirichlet(np.ones(n))), _log(stay), _log(sw * (1 - stay)[:, None])


@pytest.mark.parametrize("seed,m,T,block", [
    (7, [3, 2, 4, 1], 600, None), (8, [5, 1, 3], 4000, 40), (9, [6, 6, 6, 6], 3000, 30)])
def test_duration_viterbi_matches_hmmlearn_on_expanded_model(seed, m, T, block) -> None:
    # Reference: hmmlearn dense Viterbi on the explicitly expanded sub-state model; our
    # collapsed chain decoder must give the same tract path and log-probability.
    rng = np.random.default_rng(seed)
    m = np.asarray(m)
    ls, stay, sw = _duration_model(rng, m)
    x = expand_durations(ls, stay, sw, m)
    np.testing.assert_allclose(np.exp(x.log_trans).sum(axis=1), 1.0)
    emit = rng.normal(size=(T, m.size)) * 1.5
    ref_lp, ref_path = _reference(np.exp(x.log_start), np.exp(x.log_trans)).decode(
        emit[:, x.state_tract], algorithm="viterbi")
    path, lp = viterbi_durations(ls, stay, sw, m, emit, block_size=block)
    np.testing.assert_array_equal(path, x.state_tract[ref_path])
    assert lp == pytest.approx(ref_lp, rel=1e-9, abs=1e-7)


def test_duration_posteriors_match_hmmlearn_on_expanded_model() -> None:
    # Reference: hmmlearn predict_proba on the expanded model, summed over each tract's
    # sub-states; and score() for the log-likelihood.
    rng = np.random.default_rng(10)
    m = np.array([4, 2, 3, 1])
    ls, stay, sw = _duration_model(rng, m)
    x = expand_durations(ls, stay, sw, m)
    emit = rng.normal(size=(700, 4))
    ref = _reference(np.exp(x.log_start), np.exp(x.log_trans))
    ref_post = ref.predict_proba(emit[:, x.state_tract])
    summed = np.stack([ref_post[:, x.state_tract == k].sum(axis=1) for k in range(4)], axis=1)
    post, ll = forward_backward_durations(ls, stay, sw, m, emit)
    np.testing.assert_allclose(post, summed, atol=1e-9)
    assert ll == pytest.approx(ref.score(emit[:, x.state_tract]), rel=1e-10)


def _summed_reference(x, emit: np.ndarray) -> tuple[np.ndarray, float]:
    ref = _reference(np.exp(x.log_start), np.exp(x.log_trans))
    post = ref.predict_proba(emit[:, x.state_tract])
    n = int(x.state_tract.max()) + 1
    summed = np.stack([post[:, x.state_tract == k].sum(axis=1) for k in range(n)], axis=1)
    return summed, ref.score(emit[:, x.state_tract])


@pytest.mark.parametrize("seed,m,T,scale", [
    (14, [8, 5, 10, 3], 6000, 8.0),      # strong emissions: row spreads of tens of nats
    (15, [12, 1, 6, 9], 5000, 25.0),     # very strong (hundreds of nats between tracts)
    (16, [1, 1, 1, 1], 8000, 15.0)])     # plain chain (every tract min 1 sample)
def test_long_strong_duration_posteriors_match_hmmlearn(seed, m, T, scale) -> None:
    # Reference: hmmlearn 0.3.3 predict_proba / score on the expanded model (log-space
    # implementation). T >= 5000 with strong emissions checks the blocked sweeps' stability.
    rng = np.random.default_rng(seed)
    m = np.asarray(m)
    ls, stay, sw = _duration_model(rng, m)
    x = expand_durations(ls, stay, sw, m)
    truth = np.repeat(rng.integers(0, m.size, T // 40 + 1), 40)[:T]
    emit = rng.normal(size=(T, m.size)) * scale
    emit[np.arange(T), truth] += scale
    summed, ref_ll = _summed_reference(x, emit)
    post, ll = forward_backward_durations(ls, stay, sw, m, emit)
    assert np.abs(post - summed).max() < 1e-9
    assert ll == pytest.approx(ref_ll, rel=1e-10)
    # the sequence model overrides the per-sample argmax somewhere (the check has teeth)
    assert (post.argmax(axis=1) != emit.argmax(axis=1)).mean() > 0.01


@pytest.mark.parametrize("T", [1, 2, 3, 5, 9])
def test_logs_shorter_than_a_chain_match_hmmlearn(T) -> None:
    # Reference: hmmlearn 0.3.3 predict_proba / score and Viterbi on the expanded model, for
    # logs shorter than the longest minimum duration (10 samples), where a path may end inside
    # a chain (a hypothesis run found T = 3 failing before the fix).
    rng = np.random.default_rng(30 + T)
    m = np.array([10, 2, 4, 1])
    ls, stay, sw = _duration_model(rng, m)
    x = expand_durations(ls, stay, sw, m)
    emit = rng.normal(size=(T, 4)) * 2.0
    summed, ref_ll = _summed_reference(x, emit)
    post, ll = forward_backward_durations(ls, stay, sw, m, emit)
    np.testing.assert_allclose(post, summed, atol=1e-9)
    assert ll == pytest.approx(ref_ll, rel=1e-10)
    ref_lp, ref_path = _reference(np.exp(x.log_start), np.exp(x.log_trans)).decode(
        emit[:, x.state_tract], algorithm="viterbi")
    path, lp = viterbi_durations(ls, stay, sw, m, emit)
    np.testing.assert_array_equal(path, x.state_tract[ref_path])
    assert lp == pytest.approx(ref_lp, rel=1e-9, abs=1e-7)


@pytest.mark.parametrize("block", [8, 16, 40, 100000])
def test_duration_posteriors_do_not_depend_on_the_block_size(block) -> None:
    # Reference: hmmlearn predict_proba on the expanded model; small blocks force many
    # blocks, burn-ins and re-sweeps (block 100000 = one sequential sweep).
    rng = np.random.default_rng(17)
    m = np.array([6, 3, 9, 2])
    ls, stay, sw = _duration_model(rng, m)
    x = expand_durations(ls, stay, sw, m)
    emit = rng.normal(size=(3000, 4)) * 1.5
    summed, ref_ll = _summed_reference(x, emit)
    post, ll = _chain_forward_backward(ls, stay, np.where(np.eye(4, dtype=bool), -np.inf, sw),
                                       m, emit, block)
    np.testing.assert_allclose(post, summed, atol=1e-9)
    assert ll == pytest.approx(ref_ll, rel=1e-10)


def test_long_plain_forward_backward_matches_hmmlearn() -> None:
    # Reference: hmmlearn predict_proba / score, T = 6000, emissions sd 10 nats.
    rng = np.random.default_rng(18)
    start, trans = _random_model(rng, 4, 0.4)
    emit = rng.normal(size=(6000, 4)) * 10.0
    ref = _reference(start, trans)
    post, ll = forward_backward(_log(start), _log(trans), emit)
    np.testing.assert_allclose(post, ref.predict_proba(emit), atol=1e-9)
    assert ll == pytest.approx(ref.score(emit), rel=1e-10)


def test_dead_end_names_the_row() -> None:
    # state 0 -> state 1 only; state 1 has no way on: no path lasts beyond sample 1
    lt = _log(np.array([[0.0, 1.0], [0.0, 0.0]]))
    with pytest.raises(InputError, match="row 2"):
        forward_backward(_log(np.array([1.0, 0.0])), lt, np.zeros((6, 2)))
    with pytest.raises(InputError, match="agree on the number of tracts"):
        forward_backward_durations(np.zeros(3), np.zeros(2), np.zeros((3, 3)), [1, 1, 1],
                                   np.zeros((4, 3)))


def test_bad_emissions_name_the_row() -> None:
    emit = np.zeros((10, 2))
    emit[6, 1] = np.nan
    lt = np.log(np.full((2, 2), 0.5))
    with pytest.raises(InputError, match="row 6"):
        viterbi(np.log([0.5, 0.5]), lt, emit)
    with pytest.raises(InputError, match=r"shape \(T, 2\)"):
        forward_backward(np.log([0.5, 0.5]), lt, np.zeros((5, 3)))
