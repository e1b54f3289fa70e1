"""Unit conversions, physical ranges, despiking and bad-hole flags.

Conversion factors (exact by definition): 1 ft = 0.3048 m (international foot, 1959), so
us/m * 0.3048 = us/ft; 1 in = 25.4 mm; 1 g/cm3 = 1000 kg/m3; porosity % / 100 = v/v.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from facies_ml.config import load_config
from facies_ml.errors import InputError
from facies_ml.wells import clean, read_well


@pytest.fixture(scope="module")
def cfg():
    return load_config()


def las(tmp_path: Path, curves: list[tuple[str, str]], columns: list[np.ndarray],
        top: float = 3000.0, step: float = 0.5, name: str = "w.las") -> Path:
    n = len(columns[0])
    depth = top + step * np.arange(n)
    head = ["~V", " VERS. 2.0 :", " WRAP. NO :", "~W",
            f" STRT.F {depth[0]} :", f" STOP.F {depth[-1]} :", f" STEP.F {step} :",
            " NULL. -999.25 :", " WELL. QM-O1 :", "~C", " DEPT.F :"]
    head += [f" {m}.{u} :" for m, u in curves]
    body = [" ".join([f"{depth[i]:.4f}"] + [f"{c[i]:.6f}" for c in columns]) for i in range(n)]
    p = tmp_path / name
    p.write_text("\n".join(head + ["~A"] + body) + "\n")
    return p


def smooth(n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.cumsum(rng.normal(0, 1, n)) * 0.2


def test_unit_conversions_exact_factors(tmp_path, cfg):
    n = 40
    nphi_pct = 20 + smooth(n, 1)
    rhob_kgm3 = 2450 + 10 * smooth(n, 2)
    dt_usm = 300 + 3 * smooth(n, 3)
    cal_mm = 215.9 + smooth(n, 4)                      # 8.5 in bit
    gr = 80 + smooth(n, 5)
    p = las(tmp_path, [("GR", "GAPI"), ("NPHI", "%"), ("RHOB", "KG/M3"), ("DT", "US/M"),
                       ("CALI", "MM")], [gr, nphi_pct, rhob_kgm3, dt_usm, cal_mm])
    w = read_well(p, cfg)
    c = w.curves
    # written with 6 decimals, so compare at that precision
    np.testing.assert_allclose(c["nphi_v_v"], nphi_pct / 100.0, atol=1e-8)
    np.testing.assert_allclose(c["rhob_g_cc"], rhob_kgm3 / 1000.0, atol=1e-8)
    np.testing.assert_allclose(c["dtc_us_ft"], dt_usm * 0.3048, atol=1e-6)
    np.testing.assert_allclose(c["cali_in"], cal_mm / 25.4, atol=1e-7)
    assert w.intake["roles"]["dtc_us_ft"]["converted"] == "US/M -> us/ft (x 0.3048)"
    assert w.intake["roles"]["nphi_v_v"]["unit"] == "%"


def test_unknown_unit_error_or_warning(tmp_path, cfg):
    n = 20
    p = las(tmp_path, [("GR", "GAPI"), ("DT", "FURLONG/S")], [80 + smooth(n), 90 + smooth(n, 1)])
    with pytest.raises(InputError) as e:
        read_well(p, cfg)
    msg = str(e.value)
    assert "curve 'DT'" in msg and "QM-O1" in msg and "FURLONG/S" in msg
    warn = load_config(overrides={"intake": {"unknown_unit": "warn"}})
    w = read_well(p, warn)
    assert "dtc_us_ft" in w.curves
    assert any("FURLONG/S" in note for note in w.intake["notes"])


def test_wrong_units_median_is_refused(tmp_path, cfg):
    # NPHI in porosity units (median 25) labelled v/v: median outside -0.1..0.8 -> wrong units
    n = 20
    p = las(tmp_path, [("GR", "GAPI"), ("NPHI", "V/V")], [80 + smooth(n), 25 + smooth(n, 1)])
    with pytest.raises(InputError, match=r"wrong units\?") as e:
        read_well(p, cfg)
    assert "curve 'NPHI'" in str(e.value) and "QM-O1" in str(e.value)


def test_out_of_range_values_removed_and_counted(tmp_path, cfg):
    n = 30
    rhob = 2.45 + 0.01 * smooth(n)
    rhob[[5, 20]] = [0.5, 3.9]                          # outside 1.0-3.2 g/cc
    p = las(tmp_path, [("GR", "GAPI"), ("RHOB", "G/CC")], [80 + smooth(n, 1), rhob])
    w = read_well(p, cfg)
    assert w.intake["out_of_range"] == {"rhob_g_cc": 2}
    # a lone removed sample is bridged from its neighbours (1 ft hole <= 2 ft max gap)
    assert w.curves["rhob_g_cc"].iloc[5] == pytest.approx((rhob[4] + rhob[6]) / 2)


def test_despike_removes_spike_keeps_bed_boundary():
    rng = np.random.default_rng(7)
    x = np.r_[np.full(50, 60.0), np.full(50, 120.0)] + rng.normal(0, 1.0, 100)  # a 60 API step
    x[25] += 80.0                                                              # one spike
    out, n = clean.despike(x, window=5, threshold=6.0)
    assert n == 1 and np.isnan(out[25])
    assert np.isfinite(out[45:55]).all()              # the bed boundary is not a spike


def test_despike_counts_in_intake(tmp_path, cfg):
    n = 60
    gr = 80 + smooth(n, 3)
    gr[30] = 600.0
    w = read_well(las(tmp_path, [("GR", "GAPI")], [gr]), cfg)
    assert w.intake["despiked"] == {"gr_api": 1}


def test_bad_hole_against_bit_size(tmp_path, cfg):
    n = 40
    cal = np.full(n, 8.6)
    cal[10:16] = 11.5                                   # 3 in over an 8.5 in bit (> 2.0 in)
    rhob = 2.5 + 0.01 * smooth(n)
    p = las(tmp_path, [("GR", "GAPI"), ("RHOB", "G/CC"), ("CALI", "IN"), ("BS", "IN")],
            [80 + smooth(n, 1), rhob, cal, np.full(n, 8.5)])
    w = read_well(p, cfg)
    assert w.intake["bad_hole_samples"] == 6
    assert w.flags["bad_hole"].to_numpy().nonzero()[0].tolist() == list(range(10, 16))
    assert w.curves["rhob_g_cc"].iloc[10:16].isna().all()
    assert w.curves["gr_api"].iloc[10:16].notna().all()   # GR is not a bad-hole role
    assert w.intake["bad_hole_reference"] == "caliper - bit size"


def test_bad_hole_against_median_caliper_without_bit_size():
    cal = np.r_[np.full(30, 8.7), np.full(5, 12.0)]
    mask, ref = clean.bad_hole_mask(cal, None, 2.0)
    assert ref == "caliper - median caliper" and mask.sum() == 5 and mask[30:].all()


def test_resample_no_bridge_over_long_gap():
    d = np.array([0.0, 0.5, 1.0, 4.0, 4.5])
    v = 10 * d
    g = clean.regular_grid(0.0, 4.5, 0.5)
    out = clean.resample(d, v, g, max_gap=2.0)
    assert np.isnan(out[3:8]).all()          # 1.5..3.5 lie in the 3.0 gap
    np.testing.assert_allclose(out[[0, 1, 2, 8, 9]], [0, 5, 10, 40, 45])


def test_to_numeric_counts_text_cells():
    vals, bad = clean.to_numeric(["1.5", "abc", "", None, "2e3"])
    assert bad == 1
    np.testing.assert_array_equal(np.isnan(vals), [False, True, True, True, False])
    assert vals[4] == 2000.0
