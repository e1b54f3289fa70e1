"""Champion/challenger retrain: the paired bootstrap, the promotion rule, the core-label check,
and a retrain with a new cored well whose core labels were scrambled."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest

from facies_ml import api
from facies_ml.champion import (
    METRICS,
    PromotionRule,
    compare,
    core_label_check,
    format_comparison,
    paired_bootstrap,
    well_scores,
)
from facies_ml.config import DEFAULT_CONFIG, read_yaml
from facies_ml.settings import check_settings

SETTINGS = check_settings(read_yaml(DEFAULT_CONFIG)).evaluation
RULE = PromotionRule.from_settings(SETTINGS.promotion, seed=1)


def _scores(f1: float, tract: float, surf: float, acc: float | None = None,
            ) -> dict[str, float | None]:
    return {"lithofacies_f1_macro": f1, "systems_tract_accuracy": tract,
            "surfaces_within_close": surf, "lithofacies_accuracy": f1 if acc is None else acc}


def _wells(n: int = 5) -> list[str]:
    return [f"QM-T{i}" for i in range(1, n + 1)]


def test_paired_bootstrap_against_the_binomial_by_hand():
    # differences d = [0, 0, 0, 1] (challenger - champion): a resample of 4 wells has mean k/4
    # with k ~ Binomial(4, 1/4): P(k <= 2) = 0.949, P(k <= 3) = 0.996, so the 95 % percentile
    # interval is [0, 0.75]; the mean is 0.25.
    mean, low, high = paired_bootstrap([0.5, 0.5, 0.5, 0.5], [0.5, 0.5, 0.5, 1.5], 9999, 0.95, 3)
    assert mean == pytest.approx(0.25)
    assert (low, high) == (pytest.approx(0.0), pytest.approx(0.75))
    # identical scores: every resample has mean 0, the interval is the point 0
    assert paired_bootstrap([0.8, 0.6, 0.7], [0.8, 0.6, 0.7], 999, 0.9, 3) == (0.0, 0.0, 0.0)
    # same seed, same interval (deterministic)
    d = ([0.70, 0.80, 0.90, 0.60], [0.72, 0.79, 0.95, 0.61])
    assert paired_bootstrap(*d, 999, 0.9, 5) == paired_bootstrap(*d, 999, 0.9, 5)


def test_well_scores_surface_share_by_hand():
    recorded = {"lithofacies_f1_macro": 0.8, "lithofacies_accuracy": 0.9,
                "systems_tract_accuracy": 0.85, "mfs_within_close": 4, "mfs_true_count": 5,
                "sb_within_close": 1, "sb_true_count": 4}
    s = well_scores(recorded)
    assert s["surfaces_within_close"] == pytest.approx(5 / 9)
    no_tracts = {"lithofacies_f1_macro": 0.8, "lithofacies_accuracy": 0.9,
                 "systems_tract_accuracy": None}
    assert well_scores(no_tracts)["surfaces_within_close"] is None


def test_identical_scores_are_not_promoted_and_the_interval_holds_zero():
    champ = {w: _scores(0.8 + 0.02 * i, 0.9 - 0.01 * i, 0.6) for i, w in enumerate(_wells())}
    comp = compare(champ, dict(champ), [], RULE, SETTINGS.core_check)
    assert not comp.promote
    for d in comp.differences:
        assert d.low <= 0.0 <= d.high and d.mean_difference == 0.0
    assert "not better" in comp.reason


def test_a_uniform_improvement_is_promoted():
    champ = {w: _scores(0.8 + 0.02 * i, 0.9 - 0.01 * i, 0.6) for i, w in enumerate(_wells())}
    chal = {w: {k: v + 0.03 for k, v in s.items()} for w, s in champ.items()}
    comp = compare(champ, chal, [], RULE, SETTINGS.core_check)
    assert comp.promote, comp.reason
    primary = next(d for d in comp.differences if d.metric == RULE.primary_metric)
    assert primary.low == pytest.approx(0.03) and primary.high == pytest.approx(0.03)


def test_worse_on_one_metric_beyond_tolerance_is_refused_although_primary_improves():
    champ = {w: _scores(0.8, 0.9, 0.6) for w in _wells()}
    chal = {w: _scores(0.85, 0.9 - 0.05 - 0.01 * i, 0.6) for i, w in enumerate(_wells())}
    comp = compare(champ, chal, [], RULE, SETTINGS.core_check)
    by_metric = {d.metric: d for d in comp.differences}
    assert by_metric["lithofacies_f1_macro"].mean_difference == pytest.approx(0.05)
    assert not by_metric["lithofacies_f1_macro"].blocks
    assert by_metric["systems_tract_accuracy"].blocks
    assert not comp.promote and "systems_tract_accuracy may be worse" in comp.reason
    # a loss within the tolerance on every well does not block
    chal_ok = {w: _scores(0.85, 0.9 - 0.005, 0.6) for w in _wells()}
    assert compare(champ, chal_ok, [], RULE, SETTINGS.core_check).promote


def test_too_few_paired_wells_keep_the_champion():
    champ = {w: _scores(0.8, 0.9, 0.6) for w in _wells(2)}
    chal = {w: _scores(0.9, 0.95, 0.7) for w in _wells(2)}
    comp = compare(champ, chal, [], RULE, SETTINGS.core_check)
    assert not comp.promote
    assert f"too few wells (2 < {RULE.min_wells})" in comp.reason


def test_core_check_flags_a_well_far_below_the_others():
    agreement = {"QM-T1": {"lithofacies_accuracy": 0.95, "systems_tract_accuracy": 0.9},
                 "QM-T2": {"lithofacies_accuracy": 0.93, "systems_tract_accuracy": 0.92},
                 "QM-T3": {"lithofacies_accuracy": 0.96, "systems_tract_accuracy": 0.88},
                 "QM-T4": {"lithofacies_accuracy": 0.94, "systems_tract_accuracy": 0.91},
                 "QM-NEW": {"lithofacies_accuracy": 0.35, "systems_tract_accuracy": 0.90}}
    flags, notes = core_label_check(agreement, ["QM-NEW"], SETTINGS.core_check)
    assert [f["well"] for f in flags] == ["QM-NEW"] and flags[0]["labels"] == "lithofacies"
    assert "check the core file for well QM-NEW" in flags[0]["message"]
    # median 0.945, MAD 0.01 -> spread max(1.4826 * 0.01, min_spread)
    spread = max(1.4826 * 0.01, SETTINGS.core_check.min_spread)
    assert flags[0]["robust_z"] == pytest.approx((0.35 - 0.945) / spread, rel=1e-3)
    # a merely weaker well (a few spreads below) is not flagged
    agreement["QM-NEW"]["lithofacies_accuracy"] = 0.90
    assert core_label_check(agreement, ["QM-NEW"], SETTINGS.core_check)[0] == []
    # too few other wells: skipped, and said so
    small = {k: agreement[k] for k in ("QM-T1", "QM-NEW")}
    flags, notes = core_label_check(small, ["QM-NEW"], SETTINGS.core_check)
    assert flags == [] and notes and "skipped" in notes[0]


def test_a_flagged_new_well_keeps_the_champion_even_when_metrics_look_fine():
    champ = {w: _scores(0.8, 0.9, 0.6, acc=0.95) for w in _wells()}
    chal = {w: _scores(0.82, 0.9, 0.6, acc=0.95) for w in _wells()}
    champ["QM-T5"] = chal["QM-T5"] = _scores(0.2, 0.9, 0.6, acc=0.3)
    comp = compare(champ, chal, ["QM-T5"], RULE, SETTINGS.core_check)
    assert not comp.promote and comp.flags[0]["well"] == "QM-T5"
    text = format_comparison({"comparison": comp.to_dict(), "champion_before": "v001",
                              "challenger": "v002", "promoted": comp.promote,
                              "reason": comp.reason, "champion_after": "v001"})
    assert "FLAG: check the core file for well QM-T5" in text
    assert text.splitlines()[-1].startswith("KEPT CHAMPION")


@pytest.fixture(scope="module")
def champion_dir(tiny_basin, tmp_path_factory):
    """A champion trained on all cored wells of the tiny basin but the last, with lean settings
    (few boosting rounds, one evidence weight); its config lets the core check compare against
    2 other wells (the tiny basin has 3 cored wells)."""
    root = tmp_path_factory.mktemp("retrain")
    cfg = root / "cfg.yaml"
    cfg.write_text("lithofacies:\n  n_estimators: 30\n  early_stopping_rounds: 10\n"
                   "sequence:\n  evidence_weight_grid: [0.05]\n"
                   "evaluation:\n  core_check:\n    min_other_wells: 2\n")
    core = pd.read_csv(tiny_basin / "core_intervals.csv")
    new_well = sorted(core["well"].unique())[-1]
    old = root / "core_old.csv"
    core[core["well"] != new_well].to_csv(old, index=False)
    api.train(tiny_basin, old, root / "models", cfg)
    return root, cfg, core, new_well


def test_scrambled_core_labels_of_a_new_well_keep_the_champion_and_flag_it(
        champion_dir, tiny_basin, tmp_path):
    root, cfg, core, new_well = champion_dir
    model_dir = tmp_path / "models"
    shutil.copytree(root / "models", model_dir)
    bad = core.copy()
    rows = np.flatnonzero(bad["well"] == new_well)
    rng = np.random.default_rng(4)
    pick = rng.choice(rows, size=int(0.75 * len(rows)), replace=False)
    labels = sorted(core["lithofacies"].unique())
    # every picked interval gets another lithofacies than its own
    bad.loc[pick, "lithofacies"] = [rng.choice([x for x in labels if x != v])
                                    for v in bad.loc[pick, "lithofacies"]]
    bad_core = tmp_path / "core_scrambled.csv"
    bad.to_csv(bad_core, index=False)
    res = api.retrain(model_dir, tiny_basin, bad_core, cfg)
    assert not res["promoted"]
    assert res["flagged_wells"] == [new_well]
    assert res["champion_after"] == res["champion_before"] == "v001"
    assert f"check the core file for well {new_well}" in format_comparison(res)
    registry = json.loads((model_dir / "registry.json").read_text())
    assert registry == registry | {"champion": "v001", "versions": ["v001", "v002"]}
    manifest = json.loads((model_dir / "v002" / "manifest.json").read_text())
    assert manifest["metrics"]["champion_comparison"]["flags"][0]["well"] == new_well
    assert {d["metric"] for d in res["comparison"]["differences"]} == set(METRICS)
