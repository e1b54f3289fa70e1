"""TractSequenceModel: learning from synthetic up-section sequences and constrained decoding."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from facies_ml.config import CONFIG_DIR
from facies_ml.errors import InputError
from facies_ml.sequence.decode import viterbi
from facies_ml.sequence.model import TractSequenceModel
from facies_ml.sequence.rules import load_rules

RULES = load_rules(CONFIG_DIR / "sequence_rules.yaml")
L, T, E, H = range(4)
STEP, UNIT = 0.5, "ft"                       # 4 ft minimum -> 8 samples per tract


def simulate(rng: np.random.Generator, n_runs: int, mean_extra: np.ndarray,
             p_lhst_to_lst: float) -> np.ndarray:
    """Up-section tract sequence: LST->TST->EHST->LHST->(LST | TST); run = 8 + geometric."""
    seq, k = [], int(rng.integers(0, 4))
    for _ in range(n_runs):
        extra = rng.geometric(1.0 / (1.0 + mean_extra[k])) - 1     # mean = mean_extra[k]
        seq.append(np.full(8 + extra, k))
        if k == H:
            k = L if rng.random() < p_lhst_to_lst else T
        else:
            k = {L: T, T: E, E: H}[k]
    return np.concatenate(seq)


@pytest.fixture(scope="module")
def fitted() -> TractSequenceModel:
    rng = np.random.default_rng(11)
    seqs = [simulate(rng, 400, np.array([6.0, 12.0, 20.0, 30.0]), 0.7) for _ in range(5)]
    seqs[0][100:140] = -1                    # an uncored stretch splits the sequence
    return TractSequenceModel(RULES, prior_count=1.0).fit(seqs, step=STEP, depth_unit=UNIT)


def test_fit_recovers_transition_structure(fitted: TractSequenceModel) -> None:
    A = fitted.transmat_
    forbidden = ~RULES.allowed
    assert (A[forbidden] == 0.0).all()                         # exactly zero, not just small
    np.testing.assert_allclose(A.sum(axis=1), 1.0)
    sw = fitted.switch_prob_
    assert sw[L, T] == sw[T, E] == sw[E, H] == 1.0             # single allowed exit
    assert sw[H, L] == pytest.approx(0.7, abs=0.05)            # simulated 70 % LHST -> LST
    np.testing.assert_array_equal(fitted.min_samples_, [8, 8, 8, 8])
    np.testing.assert_allclose(fitted.mean_thickness_samples_, [6, 12, 20, 30], rtol=0.15)
    # self-stay p of a geometric tail with mean x: p = x / (1 + x)
    x = fitted.mean_thickness_samples_
    np.testing.assert_allclose(np.diag(A), x / (1 + x))


def test_fit_rejects_forbidden_transition() -> None:
    seq = np.array([L] * 10 + [T] * 10 + [L] * 10)
    with pytest.raises(InputError, match="forbidden up-section transition TST -> LST between "
                                         "index 19 and 20"):
        TractSequenceModel(RULES).fit([seq], step=STEP, depth_unit=UNIT)
    with pytest.raises(InputError, match="outside -1..3"):
        TractSequenceModel(RULES).fit([np.array([0, 7])], step=STEP, depth_unit=UNIT)


def test_decode_equals_hmmlearn_style_dense_decode_of_expanded_model(fitted) -> None:
    # Same model as an explicit sub-state HMM decoded by the plain Viterbi (itself checked
    # against hmmlearn in test_sequence_decode.py): identical collapsed paths.
    rng = np.random.default_rng(12)
    ll = rng.normal(size=(1500, 4))
    res = fitted.decode(ll)
    x = fitted.expanded()
    path, lp = viterbi(x.log_start, x.log_trans, ll[:, x.state_tract], block_size=1500)
    np.testing.assert_array_equal(res.path, x.state_tract[path])
    assert res.log_prob == pytest.approx(lp, rel=1e-9)
    np.testing.assert_allclose(res.posterior.sum(axis=1), 1.0)


def test_decode_posteriors_equal_hmmlearn_on_expanded_model(fitted) -> None:
    # Reference: hmmlearn 0.3.3 predict_proba on fitted.expanded() (32 sub-states), summed per
    # tract; T = 5000 samples, emissions sd 4 nats.
    from hmmlearn.base import BaseHMM

    class Ref(BaseHMM):
        def _compute_log_likelihood(self, X: np.ndarray) -> np.ndarray:
            return X

    x = fitted.expanded()
    ref = Ref(n_components=x.log_start.size, params="", init_params="", implementation="log")
    ref.startprob_, ref.transmat_ = np.exp(x.log_start), np.exp(x.log_trans)
    rng = np.random.default_rng(19)
    ll = rng.normal(size=(5000, 4)) * 4.0
    post = ref.predict_proba(ll[:, x.state_tract])
    summed = np.stack([post[:, x.state_tract == k].sum(axis=1) for k in range(4)], axis=1)
    res = fitted.decode(ll)
    assert np.abs(res.posterior - summed).max() < 1e-9


def _run_lengths(path: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    starts = np.r_[0, np.flatnonzero(np.diff(path)) + 1]
    return path[starts], np.diff(np.r_[starts, path.size])


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(ll=arrays(np.float64, st.tuples(st.integers(1, 400), st.just(4)),
                 elements=st.floats(-8, 8, allow_nan=False)))
def test_decoded_path_obeys_rules_and_min_thickness(fitted, ll: np.ndarray) -> None:
    res = fitted.decode(ll)
    assert RULES.count_violations(res.path) == 0
    tracts, lengths = _run_lengths(res.path)
    # first (bottom) and last (top) runs are cut by the log window and may be thinner
    inner = slice(1, -1)
    assert (lengths[inner] >= fitted.min_samples_[tracts[inner]]).all()
    assert np.isfinite(res.log_prob)


def test_decoding_repairs_a_noisy_classifier(fitted) -> None:
    rng = np.random.default_rng(13)
    truth = simulate(rng, 120, np.array([6.0, 12.0, 20.0, 30.0]), 0.7)
    # noisy classifier: right tract favoured by 1.0 nat, Gaussian noise sd 1.0
    ll = rng.normal(size=(truth.size, 4))
    ll[np.arange(truth.size), truth] += 1.0
    raw = ll.argmax(axis=1)
    res = fitted.decode(ll)
    acc_raw, acc_dec = (raw == truth).mean(), (res.path == truth).mean()
    assert RULES.count_violations(raw) > 100 and RULES.count_violations(res.path) == 0
    assert acc_dec > acc_raw + 0.2, (acc_raw, acc_dec)
    assert (res.posterior.argmax(axis=1) == truth).mean() > acc_raw + 0.2


def test_decode_input_errors(fitted) -> None:
    with pytest.raises(InputError, match=r"shape \(T, 4\)"):
        fitted.decode(np.zeros((10, 3)))
    bad = np.zeros((10, 4))
    bad[3, 2] = np.inf
    with pytest.raises(InputError, match="row 3"):
        fitted.decode(bad)
    with pytest.raises(InputError, match="not fitted"):
        TractSequenceModel(RULES).decode(np.zeros((5, 4)))
