"""Feature functions checked against published equations, hand-worked values and trade facts."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from facies_ml.config import load_config
from facies_ml.errors import InputError
from facies_ml.features import (
    build_features,
    delta_log_r,
    feature_reference,
    toc_passey,
    upsection_slope,
    vsh_larionov_older,
    vsh_larionov_tertiary,
    vsh_linear,
)

FORCE = Path(__file__).resolve().parents[2] / "shared" / "data" / "force2020"  # beside the checkout
SETTINGS = load_config().settings.features


def _curves(n: int = 400, step: float = 0.5, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    depth = 5000.0 + step * np.arange(n)
    gr = 80 + 30 * np.sin(np.arange(n) / 25.0) + rng.normal(0, 3, n)
    return pd.DataFrame({
        "gr_api": gr,
        "rt_ohmm": np.exp(rng.normal(2.0, 0.4, n)),
        "rhob_g_cc": 2.5 + rng.normal(0, 0.03, n),
        "dtc_us_ft": 85 + rng.normal(0, 4, n),
    }, index=pd.Index(depth, name="depth"))


# --- Linear gamma-ray index: IGR = (GR - GRmin) / (GRmax - GRmin) (published definition, e.g.
# Asquith & Krygowski, Basic Well Log Analysis, 2004 - from memory). Hand-worked values.
def test_vsh_linear_worked_values_and_clipping() -> None:
    out = vsh_linear(np.array([20.0, 60.0, 100.0, 10.0, 150.0, np.nan]), 20.0, 100.0)
    np.testing.assert_allclose(out[:5], [0.0, 0.5, 1.0, 0.0, 1.0])
    assert np.isnan(out[5])
    with pytest.raises(InputError, match="must exceed"):
        vsh_linear(np.array([50.0]), 100.0, 100.0)


# --- Larionov (1969): older rocks 0.33*(2**(2 IGR)-1); Tertiary 0.083*(2**(3.7 IGR)-1).
# Hand-worked: IGR=0.5 -> older 0.33*(2-1)=0.33; IGR=1 -> 0.33*3=0.99;
# Tertiary IGR=0.5 -> 0.083*(2**1.85-1) = 0.083*2.60500 = 0.216215; IGR=1 -> 0.083*(12.99604-1).
def test_larionov_worked_values() -> None:
    igr = np.array([0.0, 0.5, 1.0])
    np.testing.assert_allclose(vsh_larionov_older(igr), [0.0, 0.33, 0.99], atol=1e-12)
    np.testing.assert_allclose(vsh_larionov_tertiary(igr), [0.0, 0.216215, 0.995671], atol=2e-6)
    # Larionov curves lie below the linear index between 0 and 1 (the point of the correction).
    mid = np.linspace(0.05, 0.95, 19)
    assert np.all(vsh_larionov_older(mid) < mid)
    assert np.all(vsh_larionov_tertiary(mid) < mid)


# --- Passey et al. (1990), AAPG Bulletin 74(12): sonic dlogR = log10(R/Rb) + 0.02 (dt - dtb);
# density dlogR = log10(R/Rb) - 2.50 (rho - rhob); TOC = dlogR * 10**(2.297 - 0.1688 LOM)
# (coefficients from memory). Hand-worked: R=10, Rb=1, dt=100, dtb=80 -> 1 + 0.4 = 1.4;
# rho 2.30 vs 2.50 -> 1 + 0.5 = 1.5; LOM 10.5 -> factor 10**0.5246 = 3.34657 -> TOC 4.68520.
def test_passey_worked_example() -> None:
    s = delta_log_r(np.array([10.0]), dt=np.array([100.0]), rt_baseline=1.0, dt_baseline=80.0)
    d = delta_log_r(np.array([10.0]), rhob=np.array([2.30]), rt_baseline=1.0, rhob_baseline=2.5)
    np.testing.assert_allclose(s, [1.4])
    np.testing.assert_allclose(d, [1.5])
    np.testing.assert_allclose(toc_passey(s, 10.5), [1.4 * 3.34657], rtol=1e-5)
    # On the baseline (non-source rock) the separation and TOC are zero.
    np.testing.assert_allclose(toc_passey(delta_log_r(np.array([3.0]), dt=np.array([90.0]),
                                                      rt_baseline=3.0, dt_baseline=90.0), 8), [0])
    # Higher maturity -> smaller TOC for the same separation (Passey et al. 1990, from memory).
    assert toc_passey(1.0, 12.0) < toc_passey(1.0, 8.0)
    with pytest.raises(InputError, match="rt_ohmm"):
        delta_log_r(np.array([-1.0]), dt=np.array([90.0]))
    with pytest.raises(InputError, match="exactly one"):
        delta_log_r(np.array([1.0]))


# --- Up-section slope: depth index increases DOWNWARD; a GR that increases with HEIGHT (i.e.
# decreases with depth) must give a positive slope (common practice: TST = GR increasing upward).
def test_upsection_slope_sign_and_value() -> None:
    step = 0.5
    depth = 1000 + step * np.arange(200)
    gr = 300.0 - 2.0 * depth                   # +2 API per unit of height
    slope = upsection_slope(gr, step, 21)
    np.testing.assert_allclose(slope, 2.0, atol=1e-9)
    np.testing.assert_allclose(upsection_slope(-gr, step, 21), -2.0, atol=1e-9)
    gr_nan = gr.copy()
    gr_nan[50:55] = np.nan
    s2 = upsection_slope(gr_nan, step, 21)
    np.testing.assert_allclose(s2, 2.0, atol=1e-9)   # NaN-aware: still exact on a line
    all_nan = np.full(30, np.nan)
    assert np.isnan(upsection_slope(all_nan, step, 5)).all()


@settings(max_examples=40, deadline=None)
@given(a=st.floats(-50, 50), b=st.floats(-5, 5), step=st.floats(0.05, 2.0),
       w=st.integers(3, 41))
def test_upsection_slope_recovers_linear_trend(a: float, b: float, step: float, w: int) -> None:
    height = -step * np.arange(120)
    values = a + b * height
    slope = upsection_slope(values, step, w)
    ok = np.isfinite(slope)
    # Only the truncated end windows with < max(3, half the window) samples may be NaN.
    assert ok[w // 2: -(w // 2) or None].all()
    np.testing.assert_allclose(slope[ok], b, atol=1e-6 * (1 + abs(b)))


def test_upsection_slope_matches_numpy_polyfit() -> None:
    # Independent reference: numpy.polyfit of value vs height over the same centred window.
    rng = np.random.default_rng(3)
    step, w = 0.25, 9
    v = rng.normal(size=60)
    ours = upsection_slope(v, step, w)
    height = -step * np.arange(60)
    for i in (10, 30, 49):
        ref = np.polyfit(height[i - 4:i + 5], v[i - 4:i + 5], 1)[0]
        assert ours[i] == pytest.approx(ref, rel=1e-9)


def test_build_features_columns_direction_and_missing_roles() -> None:
    c = _curves()
    X = build_features(c, 0.5, replace(SETTINGS, include_relative_position=True))
    assert X.index.equals(c.index)
    for col in ("gr_api", "log10_rt", "igr", "vsh_larionov_older", "gr_api_mean_w5",
                "gr_api_upslope_w10", "delta_log_r_sonic", "toc_passey_density",
                "gr_peak_height_above", "relative_position"):
        assert col in X.columns, col
    assert "rt_ohmm" not in X.columns and "bs_in" not in X.columns
    # Missing roles -> their features are absent, not zero-filled.
    for col in ("nphi_v_v", "pe_b_e", "th_u_ratio", "nphi_minus_dphi", "cali_minus_bs_in"):
        assert col not in X.columns
    # relative position: 0 at the base (deepest = last row), 1 at the top.
    assert X["relative_position"].iloc[-1] == 0.0 and X["relative_position"].iloc[0] == 1.0
    no_rt = build_features(c.drop(columns=["rt_ohmm"]), 0.5, SETTINGS)
    assert not any(k.startswith(("log10_rt", "delta_log_r", "toc_")) for k in no_rt.columns)


def test_gr_peak_height_sign() -> None:
    # One GR peak at sample 100; samples shallower (smaller index) are ABOVE it -> positive.
    step = 0.5
    n = 201
    gr = 100.0 - np.abs(np.arange(n) - 100.0) * 0.5
    c = pd.DataFrame({"gr_api": gr}, index=2000.0 + step * np.arange(n))
    X = build_features(c, step, replace(SETTINGS, gr_peak_window=40.0))
    assert X["gr_peak_height_above"].iloc[90] == pytest.approx(5.0)     # 10 samples above
    assert X["gr_peak_height_above"].iloc[110] == pytest.approx(-5.0)
    assert X["gr_minus_window_max"].iloc[100] == 0.0


def test_gr_reference_from_training_wells_is_used() -> None:
    wells = [_curves(seed=s) for s in (1, 2)]
    ref = feature_reference(wells, SETTINGS)
    pooled = np.concatenate([w["gr_api"].to_numpy() for w in wells])
    assert ref["gr_clean"] == pytest.approx(np.percentile(pooled, 5))
    assert ref["gr_shale"] == pytest.approx(np.percentile(pooled, 95))
    target = _curves(seed=9)
    X = build_features(target, 0.5, SETTINGS, gr_reference=ref)
    expected = vsh_linear(target["gr_api"].to_numpy(), ref["gr_clean"], ref["gr_shale"])
    np.testing.assert_allclose(X["igr"].to_numpy(), expected)


def test_bad_input_raises_input_error() -> None:
    c = _curves()
    c.attrs["well"] = "QM-O1"
    bad_order = c.iloc[::-1]
    with pytest.raises(InputError, match="QM-O1.*regular"):
        build_features(bad_order, 0.5, SETTINGS)
    c2 = c.copy()
    c2.iloc[37, c2.columns.get_loc("rt_ohmm")] = -2.0
    with pytest.raises(InputError) as err:
        build_features(c2, 0.5, SETTINGS)
    assert "rt_ohmm" in str(err.value) and f"{c2.index[37]:g}" in str(err.value)
    c3 = c.copy()
    c3["gr_api"] = 50.0
    with pytest.raises(InputError, match="flat"):
        build_features(c3, 0.5, SETTINGS)


@pytest.mark.skipif(not (FORCE / "16_2-6.csv").is_file(), reason="FORCE 2020 data not present")
def test_force2020_well_shale_has_higher_igr_than_sandstone() -> None:
    # Open dataset: ../shared/data/force2020 (see its SOURCE.md; FORCE 2020 Machine Learning
    # competition, Bormann et al. 2020). "Lithofacies data was provided by the FORCE Machine
    # Learning competition with well logs and seismic 2020". SOURCE.md: 30000 = sandstone,
    # 65000 = shale; shale has the higher GR (common practice, and SOURCE.md's medians).
    df = pd.read_csv(FORCE / "16_2-6.csv")
    curves = pd.DataFrame({"gr_api": df["GR"].to_numpy(), "rt_ohmm": df["RDEP"].to_numpy(),
                           "rhob_g_cc": df["RHOB"].to_numpy(), "nphi_v_v": df["NPHI"].to_numpy(),
                           "dtc_us_ft": df["DTC"].to_numpy()}, index=df["DEPT"].to_numpy())
    X = build_features(curves, 0.152, SETTINGS)
    lab = df["FORCE_2020_LITHOFACIES_LITHOLOGY"].to_numpy()
    igr_sh = np.nanmedian(X["igr"].to_numpy()[lab == 65000])
    igr_ss = np.nanmedian(X["igr"].to_numpy()[lab == 30000])
    assert igr_sh > igr_ss + 0.1
    # Shale: neutron reads well above density porosity (common practice); sandstone less so.
    sep = X["nphi_minus_dphi"].to_numpy()
    assert np.nanmedian(sep[lab == 65000]) > np.nanmedian(sep[lab == 30000])
