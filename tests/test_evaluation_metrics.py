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
    depth_p10: float = 0.0
    depth_p90: float = 0.0
    sequence: str = ""


def test_match_surfaces_missed_and_extra():
    true = [_S("MFS", 100.0, sequence="S1"), _S("MFS", 200.0, sequence="S2"), _S("SB", 150.0)]
    pred = [_S("MFS", 103.0, 99.0, 104.0, "S1"), _S("MFS", 260.0),
            _S("MFS", 198.0, 198.5, 199.0, "S3"), _S("SB", 400.0)]
    m = match_surfaces(true, pred, "MFS", tolerance=10.0, close=2.5)
    assert sorted(m["errors"]) == [-2.0, 3.0]          # signed: predicted - true
    assert m["missed"] == 0 and m["extra"] == 1
    assert m["within_close"] == 1                       # only the 2 ft error is within 2.5
    assert m["covered"] == 1                            # 100 lies in 99-104, 200 not in 198.5-199
    assert (m["named_right"], m["name_checked"]) == (1, 2)
    sb = match_surfaces(true, pred, "SB", tolerance=10.0, close=5.0, depth_range=(90.0, 210.0))
    assert sb["missed"] == 1 and sb["extra"] == 0 and sb["errors"] == []


def test_score_tops_agrees_with_the_shared_scorer(tmp_path):
    # Outside reference: ../shared/tools/score_picks.py, the product owner's scorer, run on
    # the same tables (one metres well, a far pick, a missing pick, renamed sequences).
    import subprocess
    import sys
    from pathlib import Path

    import pandas as pd

    from facies_ml.evaluation import score_tops

    scorer = Path(__file__).resolve().parents[2] / "shared" / "tools" / "score_picks.py"
    if not scorer.is_file():
        pytest.skip("../shared/tools/score_picks.py is not beside this checkout")
    truth = pd.DataFrame({"well": ["A", "A", "A", "B", "B"],
                          "surface": ["SB", "MFS", "SB", "MFS", "SB"],
                          "depth": [1000.0, 950.0, 900.0, 300.0, 320.0],
                          "sequence": [2, 2, 3, 1, 2],
                          "depth_unit": ["ft", "ft", "ft", "m", "m"]})
    tops = pd.DataFrame({"well": ["A", "A", "A", "B", "B"],
                         "surface": ["SB", "MFS", "SB", "MFS", "MFS"],
                         "sequence": ["S2", "S2", "S3", "S1", "S9"],
                         "depth": [1003.0, 949.0, 880.0, 984.0, 1100.0],
                         "depth_p10": [995.0, 948.0, 870.0, 980.0, 1090.0],
                         "depth_p90": [1004.0, 955.0, 890.0, 990.0, 1110.0],
                         "depth_unit": ["ft"] * 5})
    truth.to_csv(tmp_path / "truth.csv", index=False)
    tops.to_csv(tmp_path / "tops.csv", index=False)
    out = subprocess.run([sys.executable, str(scorer), "--tops", str(tmp_path / "tops.csv"),
                          "--truth", str(tmp_path / "truth.csv")], capture_output=True,
                         text=True, check=True).stdout.split()
    mine = score_tops(tops, truth, tolerance=15.0, close=5.0)
    theirs_mfs = float(out[out.index("MFS") + 6])      # "within 5 ft <x>"
    assert mine["MFS"]["within_close"] == pytest.approx(theirs_mfs, abs=1e-3)
    theirs_sb = float(out[out.index("SB") + 6])
    assert mine["SB"]["within_close"] == pytest.approx(theirs_sb, abs=1e-3)
    assert mine["coverage"] == pytest.approx(float(out[out.index("coverage") + 1]), abs=1e-3)
    assert mine["names"] == pytest.approx(float(out[-1]), abs=1e-3)
    assert mine["SB"]["missed"] == 2 and mine["MFS"]["extra"] == pytest.approx(1 / 2)
