"""Cheap leave-one-well-out run on the open FORCE 2020 wells (regression floor, not a score).

Data: /work/shared/data/force2020, see its SOURCE.md (logs NLOD 2.0, labels CC BY 4.0).
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

DATA = Path("/work/shared/data/force2020")
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
    assert set(curves.columns) <= set(cfg.section("force2020")["columns"].values())
    # 16/8-1 has no PEF (SOURCE.md) -> the role is absent, not zero-filled.
    _, c81, _ = mod.load_force_well(DATA / "16_8-1.csv", cfg)
    assert "pe_b_e" not in c81.columns


def test_cheap_leave_one_well_out_floor() -> None:
    # Two folds, at most 60 trees, every 4th training sample. Measured with this exact run:
    # 16/2-16 penalty score -0.566, accuracy 0.803, macro-F1 0.432; 16/2-6 -0.685, 0.777,
    # 0.432; pooled -0.623. Floors sit well below (catch regressions, not noise). A uniform
    # random guess over the 12 classes scores about -3.1 (mean of penalty_matrix.csv).
    mod = _module()
    cfg = load_config(mod.FORCE_CONFIG)
    wells = mod.load_wells(cfg)
    res = mod.evaluate(cfg, wells, held_out=["16/2-16", "16/2-6"], n_estimators=60,
                       train_every=4, baselines=("logreg_raw",))
    for row in res["folds"]:
        assert row["ours_accuracy"] > 0.65, row
        assert row["ours_penalty_score"] > -0.9, row
        assert row["ours_macro_f1"] > 0.25, row
    assert res["overall_pooled"]["ours"]["penalty_score"] > -0.85
    assert res["overall_pooled"]["logreg_raw"]["accuracy"] > 0.5
