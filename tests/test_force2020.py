"""Cheap leave-one-well-out run on the open FORCE 2020 wells (regression floor, not a score).

Data: ../shared/data/force2020, see its SOURCE.md (logs NLOD 2.0, labels CC BY 4.0).
Citation: Bormann P., Aursand P., Dilib F., Dischington P., Manral S. 2020. FORCE Machine
Learning Competition, https://github.com/bolgebrygg/Force-2020-Machine-Learning-competition.
"Lithofacies data was provided by the FORCE Machine Learning competition with well logs and
seismic 2020".
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from facies_ml.config import load_config

DATA = Path(__file__).resolve().parents[2] / "shared" / "data" / "force2020"  # beside the checkout
SCRIPT = Path(__file__).resolve().parent.parent / "benchmarks" / "force2020_eval.py"

pytestmark = pytest.mark.skipif(not (DATA / "SOURCE.md").is_file(),
                                reason="FORCE 2020 open dataset not present")


def _module():
    spec = importlib.util.spec_from_file_location("force2020_eval", SCRIPT)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_loader_matches_source_md_counts() -> None:
    # SOURCE.md "Wells included": 16/2-6 has 13094 rows and 9138 labelled rows, 4794 of 65000.
    mod = _module()
    cfg = load_config(mod.FORCE_CONFIG)
    name, curves, y = mod.load_force_well(DATA / "16_2-6.csv", cfg)
    assert name == "16/2-6" and len(curves) == 13094
    assert int((y >= 0).sum()) == 9138
    assert int((y == cfg.facies.index_of(65000)).sum()) == 4794
    # Depth: regular 0.152 m step, increasing downward (SOURCE.md "Depth order").
    np.testing.assert_allclose(np.diff(curves.index.to_numpy()), 0.152, atol=1e-4)
    # Wireline curves only: no location, confidence, ROP or mud weight.
    assert set(curves.columns) <= set(mod.FC["columns"].values())
    # 16/8-1 has no PEF (SOURCE.md) -> the role is absent, not zero-filled.
    _, c81, _ = mod.load_force_well(DATA / "16_8-1.csv", cfg)
    assert "pe_b_e" not in c81.columns


def test_bayes_decision_minimises_expected_penalty() -> None:
    # Bayes decision rule for a cost matrix (standard decision theory): choose
    # argmin_j sum_i p_i A[i, j]. Checked against a brute-force loop on the published
    # competition matrix (penalty_matrix.csv, SOURCE.md) and random probabilities.
    mod = _module()
    cost = np.loadtxt(DATA / "penalty_matrix.csv", delimiter=",", skiprows=1,
                      usecols=range(1, 13))
    rng = np.random.default_rng(0)
    proba = rng.dirichlet(np.full(12, 0.3), size=200)
    got = mod.bayes_decision(proba, cost)
    want = [min(range(12), key=lambda j, p=p: sum(p[i] * cost[i, j] for i in range(12)))
            for p in proba]
    np.testing.assert_array_equal(got, want)
    # Worked case: 0.45 sandstone / 0.55 limestone -> argmax says limestone, but the expected
    # penalty of each pick (row = true class) decides; compute it by hand from the matrix.
    p = np.zeros(12)
    p[0], p[5] = 0.45, 0.55
    exp_pen = [0.45 * cost[0, j] + 0.55 * cost[5, j] for j in range(12)]
    assert mod.bayes_decision(p[None, :], cost)[0] == int(np.argmin(exp_pen))


def test_gr_normalization_uses_training_wells_only() -> None:
    # Two-point GR normalization (common practice): after mapping, the held-out well's GR
    # P5/P95 equal the P5/P95 pooled over the TRAINING wells; the reference must not move when
    # the held-out well's GR is altered (no leakage). Wells from SOURCE.md.
    mod = _module()
    cfg = load_config(mod.FORCE_CONFIG)
    wells = {n: c for n, c, _ in mod.load_wells(cfg)}
    train = [wells["16/2-6"], wells["31/3-4"]]
    test = wells["32/2-1"]
    out = mod.normalize_gr_fold(train, [test], cfg.step)[0]
    pooled = np.concatenate([c["gr_api"].dropna().to_numpy() for c in train])
    np.testing.assert_allclose(np.nanpercentile(out["gr_api"], [5, 95]),
                               np.percentile(pooled, [5, 95]), rtol=1e-9)
    hot = test.copy()
    hot["gr_api"] = hot["gr_api"] * 3.0 + 40.0
    out_hot = mod.normalize_gr_fold(train, [hot], cfg.step)[0]
    np.testing.assert_allclose(out_hot["gr_api"], out["gr_api"], rtol=1e-9, atol=1e-9)
    assert out.index.equals(test.index) and out.attrs["well"] == "32/2-1"


def test_cheap_leave_one_well_out_floor() -> None:
    # Two folds with the configured settings (60 fixed rounds, class_weight none, every 4th
    # training sample, per-fold GR normalization, measured depth, Bayes decision). Measured
    # with this exact run: 16/2-16 penalty score -0.558, accuracy 0.802, macro-F1 0.431;
    # 16/2-6 -0.457, 0.838, 0.501; pooled -0.510 (argmax -0.517; logistic regression on raw
    # curves -0.601). Floors sit well below (catch regressions, not noise). A uniform random
    # guess over the 12 classes scores about -3.1 (mean of penalty_matrix.csv).
    mod = _module()
    cfg = load_config(mod.FORCE_CONFIG)
    wells = mod.load_wells(cfg)
    res = mod.evaluate(cfg, wells, held_out=["16/2-16", "16/2-6"], n_estimators=60,
                       train_every=4, baselines=("logreg_raw",))
    assert res["decision"] == "bayes" and res["gr_normalization"] and res["depth_feature"]
    for row in res["folds"]:
        assert row["ours_accuracy"] > 0.72, row
        assert row["ours_penalty_score"] > -0.7, row
        assert row["ours_macro_f1"] > 0.33, row
    pooled = res["overall_pooled"]
    assert pooled["ours"]["penalty_score"] > -0.62
    # The configured Bayes rule must not be clearly worse than argmax on the same probabilities.
    assert pooled["ours_bayes"]["penalty_score"] > pooled["ours_argmax"]["penalty_score"] - 0.02
    assert pooled["logreg_raw"]["accuracy"] > 0.5
