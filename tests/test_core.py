"""Core intervals -> labels and core-to-log depth shift.

Depth shift: core (driller's) depth and log depth differ by a bulk offset that is found by
cross-correlating core gamma with the log GR (common practice); here the true shift is known
because the core gamma is generated from the log at core depth + shift.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from facies_ml.config import load_config
from facies_ml.core import (
    align_core_labels,
    estimate_depth_shift,
    intervals_to_labels,
    read_core_gamma,
    read_core_intervals,
)
from facies_ml.errors import InputError
from facies_ml.wells import Well


@pytest.fixture(scope="module")
def cfg():
    return load_config()


def csv(tmp_path: Path, text: str, name: str = "core_intervals.csv") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


def grid_well(name: str = "QM-K1", top: float = 5000.0, n: int = 200, original: str = "ft",
              gr: np.ndarray | None = None) -> Well:
    depth = top + 0.5 * np.arange(n)
    gr = np.linspace(50, 150, n) if gr is None else gr
    return Well(name=name, curves=pd.DataFrame({"gr_api": gr}, index=depth), depth_unit="ft",
                original_depth_unit=original, step=0.5, intake={"notes": []})


GOOD = """well,top,base,lithofacies,systems_tract
QM-K1,5010,5020,ORSM,TST
QM-K1,5020,5030.5,CALM,EHST
QM-K1,5040,5050,4,LHST
QM-K2,6000,6010,SSTB,
"""


def test_read_intervals_and_gaps_stay_unlabelled(tmp_path, cfg):
    iv = read_core_intervals(csv(tmp_path, GOOD), cfg.facies)
    assert list(iv.columns[:6]) == ["well", "top", "base", "lithofacies", "systems_tract",
                                    "lithofacies_label"]
    assert iv["lithofacies"].tolist() == [0, 1, 3, 4]          # code 4 -> SILM (index 3)
    assert iv["lithofacies_label"].tolist() == ["ORSM", "CALM", "SILM", "SSTB"]
    assert iv["systems_tract"].tolist() == [1, 2, 3, -1]
    lab = intervals_to_labels(grid_well(), iv)
    d = lab.index.to_numpy()
    assert (lab.loc[(d >= 5010) & (d < 5020), "lithofacies"] == 0).all()
    assert (lab.loc[(d >= 5020) & (d < 5030.5), "lithofacies"] == 1).all()
    assert (lab.loc[(d >= 5030.5) & (d < 5040), "lithofacies"] == -1).all()    # gap
    assert (lab.loc[d < 5010, ["lithofacies", "systems_tract"]] == -1).all().all()
    assert lab.loc[5050.0, "lithofacies"] == -1                # base is exclusive
    assert (lab["lithofacies"] >= 0).sum() == 20 + 21 + 20


def test_shift_is_added_and_metre_intervals_converted(tmp_path, cfg):
    iv = read_core_intervals(csv(tmp_path, "well,top,base,lithofacies\nQM-K1,1524,1527.048,CLYM\n"),
                             cfg.facies)
    w = grid_well(original="m")                       # 1524 m = 5000 ft, 3.048 m = 10 ft exactly
    lab = intervals_to_labels(w, iv, shift=2.0)        # core depth + 2 ft = log depth
    idx = np.flatnonzero(lab["lithofacies"].to_numpy() == 2)
    assert w.depth[idx[0]] == pytest.approx(5002.0) and w.depth[idx[-1]] == pytest.approx(5011.5)


@pytest.mark.parametrize("text,match", [
    ("well,top,base,lithofacies\nQM-K1,5010,5020,ORSM\nQM-K1,5015,5025,CALM\n", "overlaps row 1"),
    ("well,top,base,lithofacies\nQM-K1,5010,5020,MARBLE\n", "'MARBLE' is not in scheme"),
    ("well,top,base,lithofacies\nQM-K1,5010,5020,ORSM\nQM-K1,5030,5025,CALM\n",
     "top 5030 is not above base 5025"),
    ("well,top,base,lithofacies\nQM-K1,50x0,5020,ORSM\n", "top '50x0' is not a number"),
    ("well,top,base,lithofacies,systems_tract\nQM-K1,5010,5020,ORSM,FSST\n", "systems tract"),
    ("well,top,lithofacies\nQM-K1,5010,ORSM\n", "missing column"),
])
def test_interval_errors_name_file_and_row(tmp_path, cfg, text, match):
    p = csv(tmp_path, text)
    with pytest.raises(InputError, match=match) as e:
        read_core_intervals(p, cfg.facies)
    msg = str(e.value)
    assert str(p) in msg and "\n" not in msg
    if "missing column" not in match:
        assert "row " in msg


def test_unknown_well_when_known_wells_given(tmp_path, cfg):
    p = csv(tmp_path, GOOD)
    with pytest.raises(InputError, match="QM-K2") as e:
        read_core_intervals(p, cfg.facies, known_wells=["QM-K1"])
    assert "row 4" in str(e.value)


def random_walk_well(seed: int, n: int = 1200) -> Well:
    rng = np.random.default_rng(seed)
    gr = 90 + np.cumsum(rng.normal(0, 3.0, n))
    return grid_well(n=n, gr=gr)


@pytest.mark.parametrize("true_shift,seed", [(3.0, 1), (-2.5, 2), (1.25, 3), (-4.75, 4)])
def test_depth_shift_recovered_within_one_sample(true_shift, seed):
    w = random_walk_well(seed)
    rng = np.random.default_rng(100 + seed)
    core_d = np.arange(5100.0, 5400.0, 0.5)          # core depth (ft, original unit)
    log_gr = np.interp(core_d + true_shift, w.depth, w.curves["gr_api"].to_numpy())
    core_gr = 0.8 * log_gr + 12 + rng.normal(0, 2.0, core_d.size)   # other scale + noise
    cg = pd.DataFrame({"well": "QM-K1", "depth": core_d, "core_gr_api": core_gr})
    res = estimate_depth_shift(w, cg, max_shift=6.0, min_correlation=0.5)
    assert res["applied"] is True
    assert abs(res["shift"] - true_shift) <= w.step          # within one sample
    assert res["correlation"] > 0.9


def test_depth_shift_not_applied_when_uncorrelated_or_at_edge():
    w = random_walk_well(5)
    rng = np.random.default_rng(9)
    core_d = np.arange(5100.0, 5400.0, 0.5)
    noise = pd.DataFrame({"well": "QM-K1", "depth": core_d, "core_gr_api": rng.normal(0, 1, 600)})
    res = estimate_depth_shift(w, noise, 6.0, 0.5)
    assert res["applied"] is False and "reason" in res
    far = np.interp(core_d + 20.0, w.depth, w.curves["gr_api"].to_numpy())
    cg = pd.DataFrame({"well": "QM-K1", "depth": core_d, "core_gr_api": far})
    res = estimate_depth_shift(w, cg, 6.0, 0.5)     # true 20 ft is outside +/-6 ft
    assert res["applied"] is False
    none = estimate_depth_shift(w, cg.assign(well="QM-K9"), 6.0, 0.5)
    assert none["applied"] is False and none["reason"] == "no core gamma for this well"


def test_align_records_shift(tmp_path, cfg):
    w = random_walk_well(6)
    core_d = np.arange(5100.0, 5400.0, 0.5)
    gr = np.interp(core_d + 2.0, w.depth, w.curves["gr_api"].to_numpy())
    gpath = csv(tmp_path, pd.DataFrame({"well": "QM-K1", "depth": core_d,
                                        "core_gr_api": gr}).to_csv(index=False), "core_gamma.csv")
    cg = read_core_gamma(gpath)
    iv = read_core_intervals(csv(tmp_path, "well,top,base,lithofacies\nQM-K1,5200,5210,ORSM\n"),
                             cfg.facies)
    other = grid_well(name="QM-O1")
    labels = align_core_labels([w, other], iv, cg, cfg)
    assert set(labels) == {"QM-K1"}
    ds = w.intake["depth_shift"]
    assert ds["applied"] and ds["shift"] == pytest.approx(2.0, abs=0.5)
    lab = labels["QM-K1"]
    first = lab.index[lab["lithofacies"] == 0][0]
    assert first == pytest.approx(5200.0 + ds["shift"], abs=0.5)


def test_read_core_gamma_errors(tmp_path):
    p = csv(tmp_path, "well,depth,core_gr_api\nQM-K1,5000,abc\n", "core_gamma.csv")
    with pytest.raises(InputError, match="row 1") as e:
        read_core_gamma(p)
    assert str(p) in str(e.value)
