"""Leave-one-well-out is honest: nothing of the held-out well's labels reaches its own fold."""

from __future__ import annotations

import numpy as np

from facies_ml.api import load_project
from facies_ml.config import load_config
from facies_ml.evaluation import leave_one_well_out


def test_held_out_labels_do_not_change_their_fold(tiny_basin, fast_config):
    cfg = load_config(fast_config)
    project = load_project(tiny_basin, tiny_basin / "core_intervals.csv", cfg)
    labels = project.labels
    target = sorted(labels)[0]
    _, preds_a = leave_one_well_out(project.cored, labels, cfg)
    # Alter the held-out well's labels: scramble its facies and relabel every tract sample as
    # TST (a rule-consistent change, so it can also train the other folds). Its own fold must
    # not move.
    rng = np.random.default_rng(0)
    altered = dict(labels)
    scrambled = labels[target].copy()
    has = scrambled["lithofacies"] >= 0
    scrambled.loc[has, "lithofacies"] = rng.integers(0, len(cfg.facies.classes), int(has.sum()))
    has_t = scrambled["systems_tract"] >= 0
    scrambled.loc[has_t, "systems_tract"] = list(cfg.facies.systems_tracts).index("TST")
    altered[target] = scrambled
    _, preds_b = leave_one_well_out(project.cored, altered, cfg)
    a, b = preds_a[target].table, preds_b[target].table
    assert np.array_equal(a["lithofacies"].to_numpy(), b["lithofacies"].to_numpy())
    assert np.allclose(a.filter(like="p_").to_numpy(), b.filter(like="p_").to_numpy())
    assert np.array_equal(a["systems_tract"].to_numpy(), b["systems_tract"].to_numpy())
    # ... while the other folds, which train on the scrambled well, do change (the test can fail).
    others = [w for w in labels if w != target]
    changed = [not np.allclose(preds_a[w].table.filter(like="p_").to_numpy(),
                               preds_b[w].table.filter(like="p_").to_numpy()) for w in others]
    assert any(changed)
