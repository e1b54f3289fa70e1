"""TractSequenceModel: learning from synthetic TOP-DOWN label arrays and constrained
semi-Markov decoding (up-section), decode_well and weight calibration."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from facies_ml.config import CONFIG_DIR, load_config
from facies_ml.errors import InputError
from facies_ml.sequence.durations import ExplicitDuration
from facies_ml.sequence.model import TractSequenceModel
from facies_ml.sequence.reference import reference_viterbi
from facies_ml.sequence.rules import load_rules
from facies_ml.sequence.runs import split_runs
from facies_ml.sequence.surfaces import SurfaceChecks

RULES = load_rules(CONFIG_DIR / "sequence_rules.yaml")
L, T, E, H = range(4)
STEP, UNIT = 0.5, "ft"                       # 4 ft minimum -> 8 samples per tract
MEDIANS = np.array([30.0, 50.0, 80.0, 120.0])  # true median run thickness (samples) per tract


def settings_kwargs(**over: Any) -> dict[str, Any]:
    """Constructor arguments from configs/default.yaml (sequence:), optionally overridden."""
    model = TractSequenceModel.from_settings(RULES, load_config().settings.sequence)
    kw: dict[str, Any] = {k: v for k, v in vars(model).items() if k != "rules"}
    kw.update(over)
    return kw


def simulate(rng: np.random.Generator, n_runs: int, p_lhst_to_lst: float) -> np.ndarray:
    """UP-SECTION tract sequence LST->TST->EHST->LHST->(LST | TST), log-normal thicknesses
    (median MEDIANS, log sd 0.3), never below 8 samples."""
    seq, k = [], int(rng.integers(0, 4))
    for _ in range(n_runs):
        d = max(8, int(round(np.exp(rng.normal(np.log(MEDIANS[k]), 0.3)))))
        seq.append(np.full(d, k))
        if k == H:
            k = L if rng.random() < p_lhst_to_lst else T
        else:
            k = {L: T, T: E, E: H}[k]
    return np.concatenate(seq)


@pytest.fixture(scope="module")
def fitted() -> TractSequenceModel:
    rng = np.random.default_rng(11)
    seqs = [simulate(rng, 200, 0.7) for _ in range(5)]
    seqs[0][100:140] = -1                    # an uncored stretch splits the sequence
    topdown = [s[::-1].copy() for s in seqs]  # fit takes TOP-DOWN arrays
    return TractSequenceModel(RULES, **settings_kwargs()).fit(topdown, step=STEP,
                                                               depth_unit=UNIT)


def test_fit_recovers_transition_structure(fitted: TractSequenceModel) -> None:
    p = fitted.params_
    sw = p.switch
    off_forbidden = ~RULES.allowed
    assert (sw[off_forbidden] == 0.0).all()                    # exactly zero, not just small
    assert (np.diag(sw) == 0.0).all()
    np.testing.assert_allclose(sw.sum(axis=1), 1.0)
    assert sw[L, T] == sw[T, E] == sw[E, H] == 1.0             # single allowed exit
    assert sw[H, L] == pytest.approx(0.7, abs=0.05)            # simulated 70 % LHST -> LST
    # thickness: read up-section from top-down input, the fitted medians are the simulated ones
    for dur, med in zip(p.durations, MEDIANS, strict=True):
        assert isinstance(dur, ExplicitDuration)
        assert dur.min_samples == 8
        assert np.exp(dur.log_median) == pytest.approx(med, rel=0.08)
    np.testing.assert_allclose(p.tract_prior.sum(), 1.0)
    assert p.step == STEP and p.depth_unit == UNIT


def test_fit_reads_topdown_arrays_up_section() -> None:
    # top-down [TST x 20, LST x 20] is LST below TST: the allowed LST -> TST (up-section)
    seq = np.array([T] * 20 + [L] * 20)
    m = TractSequenceModel(RULES, **settings_kwargs()).fit([seq] * 3, step=STEP, depth_unit=UNIT)
    assert m.params_.start.argmax() == L
    # the reverse order (top-down LST over TST) is TST -> LST up-section: forbidden
    with pytest.raises(InputError, match="forbidden up-section transition TST -> LST"):
        TractSequenceModel(RULES, **settings_kwargs()).fit([seq[::-1].copy()], step=STEP,
                                                           depth_unit=UNIT)


def test_fit_rejects_bad_training_input() -> None:
    seq = np.array([L] * 10 + [T] * 10 + [L] * 10)              # symmetric: TST -> LST either way
    with pytest.raises(InputError, match=r"row 20: training sequence #0: forbidden up-section "
                                         r"transition TST -> LST \(up-section index 19\)"):
        TractSequenceModel(RULES, **settings_kwargs()).fit([seq], step=STEP, depth_unit=UNIT)
    with pytest.raises(InputError, match="outside -1..3"):
        TractSequenceModel(RULES, **settings_kwargs()).fit([np.array([0, 7])], step=STEP,
                                                           depth_unit=UNIT)
    with pytest.raises(InputError, match="1-D integer array"):
        TractSequenceModel(RULES, **settings_kwargs()).fit([np.array([0.0, 1.0])], step=STEP,
                                                           depth_unit=UNIT)
    with pytest.raises(InputError, match="sequence.prior_count must be > 0"):
        TractSequenceModel(RULES, **settings_kwargs(prior_count=0.0)).fit(
            [seq[:20]], step=STEP, depth_unit=UNIT)
    with pytest.raises(InputError, match="sequence.duration.model must be one of"):
        TractSequenceModel(RULES, **settings_kwargs(duration_model="poisson")).fit(
            [np.array([T] * 10 + [L] * 10)], step=STEP, depth_unit=UNIT)


def test_decode_equals_reference_decoder(fitted: TractSequenceModel) -> None:
    # Reference: facies_ml.sequence.reference.reference_viterbi (plain loops, itself checked by
    # enumeration and against hmmlearn 0.3.3 in test_semimarkov.py) on the model's tables.
    rng = np.random.default_rng(12)
    ll = rng.normal(size=(120, 4)) * 2.0
    res = fitted.decode(ll, block=1)
    path, lp = reference_viterbi(fitted.params_.tables(ll.shape[0]), ll)
    np.testing.assert_array_equal(res.path, path)
    assert res.log_prob == pytest.approx(lp, rel=1e-10)
    np.testing.assert_allclose(res.posterior.sum(axis=1), 1.0)
    assert res.log_likelihood >= res.log_prob                  # all paths >= the best one


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(ll=arrays(np.float64, st.tuples(st.integers(1, 300), st.just(4)),
                 elements=st.floats(-8, 8, allow_nan=False)))
def test_decoded_path_obeys_rules_and_min_thickness(fitted: TractSequenceModel,
                                                    ll: np.ndarray) -> None:
    res = fitted.decode(ll)
    assert RULES.count_violations(res.path) == 0               # forbidden: never decoded
    _, lengths, _ = split_runs(res.path)
    # first (bottom) and last (top) runs are cut by the log window and may be thinner
    assert (lengths[1:-1] >= 8).all()
    assert np.isfinite(res.log_prob)


def test_decoding_repairs_a_noisy_classifier(fitted: TractSequenceModel) -> None:
    rng = np.random.default_rng(13)
    truth = simulate(rng, 60, 0.7)
    # noisy classifier: right tract favoured by 1.0 nat, Gaussian noise sd 1.0
    ll = rng.normal(size=(truth.size, 4))
    ll[np.arange(truth.size), truth] += 1.0
    raw = ll.argmax(axis=1)
    res = fitted.decode(ll)
    acc_raw, acc_dec = (raw == truth).mean(), (res.path == truth).mean()
    assert RULES.count_violations(raw) > 100 and RULES.count_violations(res.path) == 0
    assert acc_dec > acc_raw + 0.2, (acc_raw, acc_dec)
    assert (res.posterior.argmax(axis=1) == truth).mean() > acc_raw + 0.2


def test_emission_is_weighted_scaled_likelihood(fitted: TractSequenceModel) -> None:
    # Reference: scaled likelihood p(k|x) / p(k) (Bourlard & Morgan 1994), raised to the weight
    rng = np.random.default_rng(14)
    post = rng.dirichlet(np.ones(4), size=50)
    prior = fitted.params_.tract_prior
    w = fitted.params_.evidence_weight
    np.testing.assert_allclose(fitted.emission(post), w * np.log(post / prior), rtol=1e-12)
    np.testing.assert_allclose(fitted.emission(post, weight=1.0), np.log(post / prior))


def test_decode_well_is_topdown_and_picks_surfaces(fitted: TractSequenceModel) -> None:
    rng = np.random.default_rng(15)
    up = simulate(rng, 12, 0.7)                               # truth, up-section
    post_up = np.full((up.size, 4), 0.05)
    post_up[np.arange(up.size), up] = 0.85
    post_top = post_up[::-1].copy()
    depth_top = 9000.0 + STEP * np.arange(up.size)            # increasing downward
    chk = SurfaceChecks(**load_config().section("sequence")["checks"])
    ws = fitted.decode_well(post_top, depth_top, None, chk)
    ref = fitted.decode(fitted.emission(post_up))
    np.testing.assert_array_equal(ws.path, ref.path[::-1])     # returned TOP-DOWN
    np.testing.assert_allclose(ws.posterior, ref.posterior[::-1])
    np.testing.assert_array_equal(ws.path, up[::-1])          # clear evidence: the truth
    assert ws.violations == 0
    assert ws.violations_raw == RULES.count_violations(post_up.argmax(axis=1))
    # surfaces deepest first, one per SB / MFS transition of the truth
    depths = [s.depth for s in ws.surfaces]
    assert depths == sorted(depths, reverse=True)
    starts, _, tr = split_runs(up)
    kinds = [RULES.surface_kind(int(a), int(b)) for a, b in zip(tr[:-1], tr[1:], strict=True)]
    assert [s.kind for s in ws.surfaces] == [k for k in kinds if k]
    for s in ws.surfaces:
        assert s.depth_p10 <= s.depth <= s.depth_p90
        assert 0.0 <= s.confidence <= 1.0
        assert s.gr_check is None                             # no GR given


def test_calibrate_weight_path_by_accuracy_ranges_by_coverage(fitted: TractSequenceModel) -> None:
    rng = np.random.default_rng(16)
    posts, labs, depths = [], [], []
    for _ in range(2):
        up = simulate(rng, 10, 0.7)
        post = rng.dirichlet(np.ones(4), size=up.size) * 0.5
        post[np.arange(up.size), up] += 0.5
        posts.append(post[::-1].copy())
        labs.append(up[::-1].copy())
        depths.append(5000.0 + STEP * np.arange(up.size))      # top-down, ft
    model = TractSequenceModel(RULES, **settings_kwargs()).fit(
        [simulate(np.random.default_rng(s), 60, 0.7)[::-1].copy() for s in range(3)],
        step=STEP, depth_unit=UNIT)
    seq = load_config().section("sequence")
    grid = [float(w) for w in seq["evidence_weight_grid"]]
    target = float(seq["target_coverage"])
    rows = model.calibrate_weight(posts, labs, depths, grid, target, match_tolerance=15.0)
    assert [r["evidence_weight"] for r in rows] == grid
    best_path = max(rows, key=lambda r: r["path_accuracy"])
    assert model.params_.path_weight == best_path["evidence_weight"]
    gap = min(abs(r["coverage"] - target) for r in rows)
    chosen = next(r for r in rows if r["evidence_weight"] == model.params_.evidence_weight)
    assert abs(chosen["coverage"] - target) == gap
    assert all(r["mean_log_score"] <= 0.0 for r in rows)        # mean log of probabilities
    assert all(0.0 <= r["coverage"] <= 1.0 and 0.0 <= r["path_accuracy"] <= 1.0 for r in rows)
    with pytest.raises(InputError, match="evidence_weight_grid is empty"):
        model.calibrate_weight(posts, labs, depths, [], target, 15.0)
    with pytest.raises(InputError, match="target_coverage must lie in"):
        model.calibrate_weight(posts, labs, depths, grid, 1.5, 15.0)


def test_decode_input_errors(fitted: TractSequenceModel) -> None:
    with pytest.raises(InputError, match=r"shape \(T, 4\) for tracts LST, TST, EHST, LHST"):
        fitted.decode(np.zeros((10, 3)))
    bad = np.zeros((10, 4))
    bad[3, 2] = np.inf
    with pytest.raises(InputError, match="row 3: emission log-likelihood is not finite"):
        fitted.decode(bad)
    with pytest.raises(InputError, match="empty sequence"):
        fitted.decode(np.zeros((0, 4)))
    with pytest.raises(InputError, match="not fitted"):
        TractSequenceModel(RULES, **settings_kwargs()).decode(np.zeros((5, 4)))
    with pytest.raises(InputError, match=r"tract posteriors must have shape \(T, 4\)"):
        fitted.emission(np.zeros((5, 2)))
