"""Intake of the bundled synthetic demo wells (synthetic_wells/, invented Quillmere Basin).

Known answers come from the generator's own record, synthetic_wells/basin.json (curve
mnemonics per role, missing curves, depth unit, washout intervals, spike depths, core shift);
raw spike values are read back independently with lasio.
"""

from __future__ import annotations

import json
from pathlib import Path

import lasio
import numpy as np
import pytest

from facies_ml.config import load_config
from facies_ml.core import align_core_labels, read_core_gamma, read_core_intervals
from facies_ml.wells import read_wells

DEMO = Path(__file__).resolve().parent.parent / "synthetic_wells"
pytestmark = pytest.mark.skipif(not (DEMO / "basin.json").is_file(),
                                reason="synthetic demo wells not generated")


@pytest.fixture(scope="module")
def demo():
    cfg = load_config()
    wells, failures = read_wells(DEMO, cfg, on_error="collect")
    basin = {w["name"]: w for w in json.loads((DEMO / "basin.json").read_text())["wells"]}
    return cfg, {w.name: w for w in wells}, failures, basin


def test_all_demo_wells_read(demo):
    _, wells, failures, basin = demo
    assert failures == []
    assert set(wells) == set(basin)                   # core_*.csv were not taken for wells
    for name, info in basin.items():
        w = wells[name]
        assert w.original_depth_unit == info["depth_unit"]
        assert set(w.roles) == set(info["curves"]), name
        for role, mnemonic in info["curves"].items():
            assert w.intake["roles"][role]["mnemonic"] == mnemonic
        assert not set(info["missing_curves"]) & set(w.roles)


def test_washouts_flagged(demo):
    _, wells, _, basin = demo
    inside = flagged_in = flagged_out = 0
    for name, info in basin.items():
        w = wells[name]
        d = w.to_original_depth(w.depth)
        flag = w.flags["bad_hole"].to_numpy()
        win = np.zeros(d.size, dtype=bool)
        near = np.zeros(d.size, dtype=bool)
        for wo in info["washouts"]:
            win |= (d >= wo["top"]) & (d <= wo["base"])
            pad = 1.0 if info["depth_unit"] == "ft" else 0.3048
            near |= (d >= wo["top"] - pad) & (d <= wo["base"] + pad)
        inside += win.sum()
        flagged_in += (flag & win).sum()
        flagged_out += (flag & ~near).sum()
    assert flagged_in / inside > 0.7        # most washed-out samples are flagged
    assert flagged_out == 0                 # nothing flagged away from a washout


def test_spikes_removed(demo):
    _, wells, _, basin = demo
    total = removed = 0
    for name, info in basin.items():
        w = wells[name]
        las = lasio.read(str(DEMO / f"{name}.las"))
        for sp in info["spikes"]:
            role = next(r for r, m in info["curves"].items() if m == sp["curve"])
            raw = float(las[sp["curve"]][np.argmin(np.abs(las.index - sp["depth"]))])
            k = int(np.argmin(np.abs(w.to_original_depth(w.depth) - sp["depth"])))
            got = float(w.curves[role].iloc[k])
            total += 1
            removed += (not np.isfinite(got)) or not np.isclose(got, raw, rtol=0.02)
    assert total > 0 and removed / total >= 0.9


def test_core_shift_recovered(demo):
    cfg, wells, _, basin = demo
    iv = read_core_intervals(DEMO / "core_intervals.csv", cfg.facies, known_wells=list(wells))
    cg = read_core_gamma(DEMO / "core_gamma.csv")
    cored = [wells[n] for n, i in basin.items() if i["core_shift"] is not None]
    labels = align_core_labels(cored, iv, cg, cfg)
    for w in cored:
        ds = w.intake["depth_shift"]
        true = basin[w.name]["core_shift"]
        assert ds["applied"], w.name
        assert abs(ds["shift"] - true) <= w.step, (w.name, ds["shift"], true)
        assert (labels[w.name]["lithofacies"] >= 0).mean() > 0.5
