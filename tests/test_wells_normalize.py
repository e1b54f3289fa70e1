"""Two-point GR normalization (common practice):
gr_norm = ref_low + (gr - well_low) * (ref_high - ref_low) / (well_high - well_low).
Percentiles are numpy.percentile (linear interpolation), used here as the reference."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from facies_ml.errors import InputError
from facies_ml.wells import GRNormalizer, Well


def make_well(name: str, gr: np.ndarray | None, n: int | None = None) -> Well:
    n = len(gr) if gr is not None else (n or 10)
    depth = 1000.0 + 0.5 * np.arange(n)
    cols = {"rhob_g_cc": np.full(n, 2.5)}
    if gr is not None:
        cols["gr_api"] = gr
    return Well(name=name, curves=pd.DataFrame(cols, index=depth), intake={"notes": []})


def test_worked_example_uniform_grid():
    ref = make_well("QM-K1", np.linspace(0.0, 100.0, 1001))   # P5 = 5, P95 = 95 exactly
    assert np.percentile(ref.curves["gr_api"], [5, 95]) == pytest.approx([5.0, 95.0])
    x = np.linspace(0.0, 100.0, 1001)
    offset = make_well("QM-O1", 2.0 * x + 10.0)                # P5 = 20, P95 = 200
    norm = GRNormalizer(5, 95).fit([ref])
    out = norm.transform(offset)
    # 5 + (gr - 20) * (95 - 5) / (200 - 20) = 5 + (2x + 10 - 20) / 2 = x
    np.testing.assert_allclose(out.curves["gr_api"], x, atol=1e-9)
    rec = out.intake["gr_normalization"]
    assert rec["scale"] == pytest.approx(0.5) and rec["shift"] == pytest.approx(-5.0)
    assert rec["well_low"] == pytest.approx(20.0) and rec["well_high"] == pytest.approx(200.0)
    # a specific value: gr 110 -> 5 + 90 * 90/180 = 50
    assert out.curves["gr_api"].iloc[500] == pytest.approx(50.0)
    # the input well is untouched (a NEW well is returned)
    assert offset.curves["gr_api"].iloc[500] == pytest.approx(110.0)
    assert "gr_normalization" not in offset.intake


def test_pooled_reference_from_training_wells_only():
    rng = np.random.default_rng(3)
    k1, k2 = rng.uniform(20, 120, 500), rng.uniform(40, 160, 700)
    norm = GRNormalizer(10, 90).fit([make_well("QM-K1", k1), make_well("QM-K2", k2)])
    lo, hi = np.percentile(np.r_[k1, k2], [10, 90])
    assert (norm.ref_low, norm.ref_high) == pytest.approx((lo, hi))
    test = rng.gamma(4.0, 20.0, 400)
    out = norm.transform(make_well("QM-O2", test))
    wl, wh = np.percentile(test, [10, 90])
    expected = lo + (test - wl) * (hi - lo) / (wh - wl)
    np.testing.assert_allclose(out.curves["gr_api"], expected, rtol=1e-12)
    assert (norm.ref_low, norm.ref_high) == pytest.approx((lo, hi))  # transform does not refit
    # after normalization the offset well's P10/P90 equal the reference ones
    assert np.percentile(out.curves["gr_api"], [10, 90]) == pytest.approx([lo, hi])


def test_nan_samples_ignored_and_kept():
    gr = np.linspace(0.0, 100.0, 1001)
    gr[[3, 400]] = np.nan
    norm = GRNormalizer().fit([make_well("QM-K1", np.linspace(0.0, 100.0, 1001))])
    out = norm.transform(make_well("QM-O1", gr))
    assert out.curves["gr_api"].isna().sum() == 2


def test_well_without_gr_passes_unchanged():
    norm = GRNormalizer().fit([make_well("QM-K1", np.linspace(0, 100, 101))])
    w = make_well("QM-O3", None, n=12)
    out = norm.transform(w)
    pd.testing.assert_frame_equal(out.curves, w.curves)
    assert "gr_normalization" not in out.intake


def test_errors():
    with pytest.raises(InputError):
        GRNormalizer(95, 5)
    with pytest.raises(InputError, match="no gamma-ray"):
        GRNormalizer().fit([make_well("QM-K1", None)])
    norm = GRNormalizer().fit([make_well("QM-K1", np.linspace(0, 100, 101))])
    with pytest.raises(InputError, match="QM-O4"):
        norm.transform(make_well("QM-O4", np.full(50, 70.0)))
