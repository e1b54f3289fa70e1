"""Our metric code against scikit-learn's reference implementations, and surface matching."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from sklearn.metrics import (
    accuracy_score,
    brier_score_loss,
    classification_report,
    confusion_matrix,
    f1_score,
)

from facies_ml.evaluation import (
    adjacent_accuracy,
    brier_score,
    classification_metrics,
    labelled_runs,
    match_surfaces,
)

LABELS = ["A", "B", "C", "D"]


@pytest.fixture
def sample():
    rng = np.random.default_rng(3)
    y_true = rng.integers(0, 4, 400)
    y_pred = np.where(rng.random(400) < 0.6, y_true, rng.integers(0, 4, 400))
    proba = rng.dirichlet(np.ones(4), 400)
    proba[np.arange(400), y_pred] += 1.0
    proba /= proba.sum(axis=1, keepdims=True)
    return y_true, y_pred, proba


def test_metrics_agree_with_scikit_learn(sample):
    # Reference: scikit-learn's classification_report / f1_score / confusion_matrix.
    y_true, y_pred, proba = sample
    ours = classification_metrics(y_true, y_pred, proba, LABELS)
    report = classification_report(y_true, y_pred, target_names=LABELS, output_dict=True,
                                   zero_division=0)
    assert ours["accuracy"] == pytest.approx(accuracy_score(y_true, y_pred))
    assert ours["f1_macro"] == pytest.approx(f1_score(y_true, y_pred, average="macro"))
    assert ours["f1_macro"] == pytest.approx(report["macro avg"]["f1-score"])
    for lab in LABELS:
        for ours_key, ref_key in (("precision", "precision"), ("recall", "recall"), ("f1", "f1-score")):
            assert ours["per_class"][lab][ours_key] == pytest.approx(report[lab][ref_key])
        assert ours["per_class"][lab]["support"] == report[lab]["support"]
    assert ours["confusion_matrix"] == confusion_matrix(y_true, y_pred).tolist()
    # Multi-class Brier score (Brier, 1950) equals scikit-learn's brier_score_loss (>= 1.7).
    assert ours["brier"] == pytest.approx(brier_score_loss(y_true, proba, labels=[0, 1, 2, 3]))
    assert brier_score(y_true, proba) == pytest.approx(ours["brier"])


def test_adjacent_accuracy_counts_near_misses():
    adj = np.eye(3, dtype=bool)
    adj[0, 1] = adj[1, 0] = True
    y_true = np.array([0, 0, 1, 2])
    y_pred = np.array([0, 1, 2, 0])
    assert adjacent_accuracy(y_true, y_pred, adj) == pytest.approx(0.5)


def test_labelled_runs():
    runs = labelled_runs(np.array([-1, 0, 0, -1, 2, 3, -1, -1, 1]))
    assert runs == [(1, 3), (4, 6), (8, 9)]


@dataclass
class _S:
    kind: str
    depth: float


def test_match_surfaces_missed_and_extra():
    true = [_S("MFS", 100.0), _S("MFS", 200.0), _S("SB", 150.0)]
    pred = [_S("MFS", 103.0), _S("MFS", 260.0), _S("MFS", 198.0), _S("SB", 400.0)]
    m = match_surfaces(true, pred, "MFS", tolerance=10.0)
    assert sorted(m["errors"]) == [2.0, 3.0]
    assert m["missed"] == 0 and m["extra"] == 1
    sb = match_surfaces(true, pred, "SB", tolerance=10.0, depth_range=(90.0, 210.0))
    assert sb["missed"] == 1 and sb["extra"] == 0 and sb["errors"] == []
