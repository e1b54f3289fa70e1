"""LithofaciesClassifier, SubsetModels, calibration helpers and the feature envelope.

External references: scikit-learn (clone/get_params contract, GroupShuffleSplit,
brier_score_loss, f1_score, calibration_curve) and the FORCE 2020 penalty matrix (SOURCE.md of
../shared/data/force2020).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.calibration import calibration_curve
from sklearn.metrics import brier_score_loss

from facies_ml.applicability import FeatureEnvelope
from facies_ml.errors import InputError
from facies_ml.lithofacies import (
    LithofaciesClassifier,
    SubsetModels,
    available_features,
    brier_per_class,
    cost_score,
    reliability_table,
    summarize_contributions,
)

FORCE = Path(__file__).resolve().parents[2] / "shared" / "data" / "force2020"  # beside the checkout
FAST = {"n_estimators": 60, "learning_rate": 0.2, "num_leaves": 8, "early_stopping_rounds": 10}


def _synthetic(n_per_well: int = 300, wells: int = 5, k: int = 3, seed: int = 0,
               noise: float = 0.6) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """Well-separated classes: class centres 0, 3, 6 on two informative features."""
    rng = np.random.default_rng(seed)
    n = n_per_well * wells
    y = rng.integers(0, k, n)
    X = pd.DataFrame({
        "a": 3.0 * y + rng.normal(0, noise, n),
        "b": -2.0 * y + rng.normal(0, noise, n),
        "noise": rng.normal(0, 1, n),
    })
    groups = np.repeat([f"QM-K{i + 1}" for i in range(wells)], n_per_well)
    return X, y, groups


def test_clone_and_get_params_round_trip() -> None:
    est = LithofaciesClassifier(n_estimators=77, learning_rate=0.1, random_state=5)
    params = est.get_params()
    assert params["n_estimators"] == 77 and params["random_state"] == 5
    cl = clone(est)
    assert cl.get_params() == params and cl is not est
    cl.set_params(num_leaves=7)
    assert cl.num_leaves == 7 and est.num_leaves == 31


def test_deterministic_same_seed_identical_proba() -> None:
    X, y, g = _synthetic(noise=2.0)
    p1 = LithofaciesClassifier(**FAST, random_state=3).fit(X, y, groups=g).predict_proba(X)
    p2 = LithofaciesClassifier(**FAST, random_state=3).fit(X, y, groups=g).predict_proba(X)
    assert np.array_equal(p1, p2)
    np.testing.assert_allclose(p1.sum(axis=1), 1.0)


def test_thread_count_does_not_change_the_model() -> None:
    # LightGBM documents `deterministic=True` (with `force_row_wise`) as giving stable results;
    # batch workers rely on it when they train a reduced-curve model on one thread while the
    # serial run uses two. Prediction with a different thread count must not change either.
    X, y, g = _synthetic(noise=2.0)
    one = LithofaciesClassifier(**FAST, random_state=3, n_jobs=1).fit(X, y, groups=g)
    two = LithofaciesClassifier(**FAST, random_state=3, n_jobs=2).fit(X, y, groups=g)
    assert one.best_iteration_ == two.best_iteration_
    p2 = two.predict_proba(X)
    assert np.array_equal(one.predict_proba(X), p2)
    two.predict_threads = 1
    assert np.array_equal(two.predict_proba(X), p2)


def test_early_stopping_split_is_whole_wells_and_never_the_held_out_well() -> None:
    X, y, g = _synthetic(wells=6, noise=2.0)
    held_out = "QM-K6"
    train = g != held_out
    est = LithofaciesClassifier(**FAST, validation_fraction=0.34).fit(X[train], y[train],
                                                                      groups=g[train])
    assert est.validation_groups_, "early stopping must use an inner validation split"
    assert held_out not in est.validation_groups_
    assert set(est.validation_groups_) <= set(g[train])
    # The inner split equals scikit-learn's GroupShuffleSplit on the same seed (whole wells).
    from sklearn.model_selection import GroupShuffleSplit
    _, va = next(GroupShuffleSplit(1, test_size=0.34, random_state=0).split(
        X[train], y[train], g[train]))
    assert sorted(set(g[train][va])) == est.validation_groups_
    assert 1 <= est.best_iteration_ <= FAST["n_estimators"]


def test_absent_class_gets_zero_probability_column() -> None:
    X, y, g = _synthetic(k=3)
    y = np.where(y == 1, 3, y)          # classes 0, 2, 3 present; 1 and 4 absent
    est = LithofaciesClassifier(**FAST).fit(X, y, groups=g, n_classes=5)
    p = est.predict_proba(X)
    assert p.shape == (len(X), 5)
    assert np.all(p[:, [1, 4]] == 0.0)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    assert list(est.classes_) == [0, 1, 2, 3, 4]
    assert set(np.unique(est.predict(X))) <= {0, 2, 3}
    c = est.contributions(X.iloc[:10])
    assert c.shape == (10, 5, 4)
    # pred_contrib sums to the raw score; softmax of the sums reproduces predict_proba.
    raw = c.sum(axis=2)[:, [0, 2, 3]]
    soft = np.exp(raw - raw.max(axis=1, keepdims=True))
    soft /= soft.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(soft, p[:10][:, [0, 2, 3]], atol=1e-9)


def test_brier_better_than_prior_on_separable_set_and_matches_sklearn() -> None:
    X, y, g = _synthetic(seed=1)
    Xt, yt, _ = _synthetic(seed=2, wells=2)
    est = LithofaciesClassifier(**FAST).fit(X, y, groups=g)
    p = est.predict_proba(Xt)
    ours = brier_per_class(yt, p)
    prior = np.bincount(y, minlength=3) / len(y)
    prior_p = np.tile(prior, (len(yt), 1))
    base = brier_per_class(yt, prior_p)
    for k in range(3):
        # scikit-learn reference for the one-vs-rest Brier score.
        assert ours[k] == pytest.approx(brier_score_loss(yt == k, p[:, k]))
        assert ours[k] < 0.25 * base[k]
    rel = reliability_table(yt, p, n_bins=10)
    assert rel.groupby("class")["n"].sum().tolist() == [len(yt)] * 3
    # scikit-learn reference: calibration_curve(strategy="uniform") gives the same non-empty
    # bins (no probability sits exactly on an interior bin edge here).
    edges = np.linspace(0, 1, 11)[1:-1]
    assert not np.isin(p, edges).any()
    for k in range(3):
        frac, mean_p = calibration_curve(yt == k, p[:, k], n_bins=10, strategy="uniform")
        mine = rel[rel["class"] == k]
        np.testing.assert_allclose(mine["observed_frequency"], frac, atol=1e-12)
        np.testing.assert_allclose(mine["mean_predicted"], mean_p, atol=1e-12)
    top = rel[rel["lower"] >= 0.9]
    # Confident predictions on a separable set are right most of the time.
    assert (top["observed_frequency"] * top["n"]).sum() / top["n"].sum() > 0.9


def test_bad_labels_and_missing_features_raise_input_error() -> None:
    X, y, g = _synthetic()
    with pytest.raises(InputError, match="negative"):
        LithofaciesClassifier(**FAST).fit(X, np.where(np.arange(len(y)) == 4, -1, y))
    with pytest.raises(InputError, match="only one class"):
        LithofaciesClassifier(**FAST).fit(X, np.zeros(len(y), dtype=int))
    with pytest.raises(InputError, match="outside"):
        LithofaciesClassifier(**FAST).fit(X, y, n_classes=2)
    est = LithofaciesClassifier(**FAST).fit(X, y, groups=g)
    with pytest.raises(InputError, match="'b'"):
        est.predict_proba(X.drop(columns=["b"]))


def test_subset_models_lazy_cached_and_reported() -> None:
    X, y, g = _synthetic()
    calls = []

    def factory() -> LithofaciesClassifier:
        calls.append(1)
        return LithofaciesClassifier(**FAST)

    subs = SubsetModels(factory, X, y, g, n_classes=3)
    assert not calls                                  # lazy: nothing trained yet
    offset = X.drop(columns=["b"]).assign(extra=1.0)
    m1, name1 = subs.model_for(available_features(offset), well="QM-O1")
    m2, name2 = subs.model_for(["noise", "a"], well="QM-O2")
    assert len(calls) == 1 and m1 is m2 and name1 == name2 != "full"
    assert list(m1.feature_names_in_) == ["a", "noise"]
    _, full = subs.model_for(list(X.columns), well="QM-O3")
    assert full == "full" and len(calls) == 2
    rep = subs.report()
    assert rep.set_index("well")["model"].to_dict() == {"QM-O1": name1, "QM-O2": name1,
                                                        "QM-O3": "full"}
    with pytest.raises(InputError, match="none of the features"):
        subs.model_for(["zzz"], well="QM-O4")


def test_summarize_contributions_ranks_informative_features() -> None:
    X, y, g = _synthetic()
    est = LithofaciesClassifier(**FAST).fit(X, y, groups=g)
    pred = est.predict(X)
    table = summarize_contributions(est.contributions(X), list(X.columns), pred, ["x", "y", "z"])
    assert list(table.columns) == ["x", "y", "z", "all"]
    assert table.index[-1] == "noise"                  # pure noise ranks last


def test_feature_envelope_flags_out_of_range() -> None:
    rng = np.random.default_rng(0)
    train = pd.DataFrame({"a": rng.normal(size=2000), "b": rng.uniform(0, 1, 2000)})
    env = FeatureEnvelope(lower=0.005, upper=0.995).fit(train)
    assert env.fraction(train) == pytest.approx(0.02, abs=0.006)   # ~1 % per tail per feature
    test = pd.DataFrame({"a": [0.0, 10.0, np.nan, 0.0], "b": [0.5, 0.5, 0.5, -3.0]})
    assert env.flag(test).tolist() == [False, True, False, True]
    env2 = FeatureEnvelope(min_features=2).fit(train)
    assert env2.flag(pd.DataFrame({"a": [10.0], "b": [-3.0]})).tolist() == [True]
    assert env2.flag(pd.DataFrame({"a": [10.0], "b": [0.5]})).tolist() == [False]


@pytest.mark.skipif(not (FORCE / "penalty_matrix.csv").is_file(), reason="FORCE data absent")
def test_cost_score_on_force_penalty_matrix() -> None:
    # FORCE 2020 scoring (SOURCE.md, from memory): score = -(1/N) sum A[true, pred]; class order
    # 30000, 65030, 65000, 80000, 74000, 70000, 70032, 88000, 86000, 99000, 90000, 93000.
    A = pd.read_csv(FORCE / "penalty_matrix.csv", index_col=0).to_numpy()
    assert cost_score([0, 1, 2], [0, 1, 2], A) == 0.0
    # Hand-worked: Limestone(5)->Chalk(6) 1.375, Shale(2)->Halite(7) 4.0, Sand(0)->Sand(0) 0.
    assert cost_score([5, 2, 0], [6, 7, 0], A) == pytest.approx(-(1.375 + 4.0) / 3)
    with pytest.raises(InputError):
        cost_score([0], [12], A)
