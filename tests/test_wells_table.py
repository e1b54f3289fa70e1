"""Tables (CSV / Parquet), folders of wells, and the open FORCE 2020 dataset.

FORCE 2020 facts used below are from shared/data/force2020/SOURCE.md: one CSV per well,
columns WELL, DEPT (m, regular 0.152 m grid), ..., CALI, BS, RDEP, RHOB, GR, SGR, NPHI, PEF,
DTC; empty cell = LAS null; 32/2-1 has 6059 rows and curves CALI BS RSHA RMED RDEP RHOB DRHO
GR NPHI PEF DTC DTS ROP ROPA.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from facies_ml.config import load_config
from facies_ml.errors import InputError
from facies_ml.wells import read_table, read_wells

# shared/ sits beside the repository checkout (as in CI)
FORCE = Path(__file__).resolve().parents[2] / "shared" / "data" / "force2020"  # beside the checkout
FT = 0.3048  # exact, international foot


@pytest.fixture(scope="module")
def cfg():
    return load_config()


@pytest.mark.skipif(not (FORCE / "32_2-1.csv").is_file(), reason="FORCE 2020 subset not present")
def test_force2020_well_through_alias_table(cfg):
    (well,) = read_table(FORCE / "32_2-1.csv", cfg, depth_unit="m")   # SOURCE.md: DEPT in m
    assert well.name == "32/2-1"                                  # SOURCE.md: WELL column
    assert well.original_depth_unit == "m"                         # SOURCE.md: DEPT in m
    assert {"gr_api", "rt_ohmm", "rhob_g_cc", "nphi_v_v", "pe_b_e", "dtc_us_ft", "cali_in",
            "bs_in"} <= set(well.roles)
    assert well.intake["roles"]["rt_ohmm"]["mnemonic"] == "RDEP"
    assert well.intake["roles"]["gr_api"]["mnemonic"] == "GR"
    raw = pd.read_csv(FORCE / "32_2-1.csv")
    assert len(raw) == 6059                                        # SOURCE.md row count
    assert np.allclose(np.diff(raw["DEPT"]), 0.152, atol=1e-4)     # SOURCE.md: 0.152 m grid
    # depth range converted with 1 ft = 0.3048 m
    logged = raw[["GR", "RDEP", "RHOB", "NPHI", "PEF", "DTC", "CALI", "BS"]].notna().any(axis=1)
    assert well.depth[0] * FT == pytest.approx(raw.loc[logged, "DEPT"].min(), abs=0.5 * FT)
    assert well.depth[-1] * FT == pytest.approx(raw.loc[logged, "DEPT"].max(), abs=0.5 * FT)
    # GR on the 0.5 ft grid is the linear interpolation of the file's GR wherever the file
    # has data on both sides and the sample was not removed as a spike
    ref = np.interp(well.depth * FT, raw["DEPT"], raw["GR"])
    got = well.curves["gr_api"].to_numpy()
    both = np.isfinite(ref) & np.isfinite(got)
    assert both.sum() > 5000
    close = np.isclose(got[both], ref[both], atol=1e-6)
    assert close.mean() > 0.99
    # medians agree with the file (conditioning did not shift the log)
    assert np.nanmedian(got) == pytest.approx(np.nanmedian(raw["GR"]), abs=1.0)


def test_multi_well_csv_and_parquet(tmp_path, cfg):
    rows = []
    for name, top in (("QM-O1", 100.0), ("QM-O2", 200.0)):
        for i in range(30):
            rows.append({"WELL": name, "DEPTH_M": top + 0.1524 * i, "GR": 50 + i,
                         "NPHI": 25.0 + 0.1 * (i % 3), "junk": "x"})
    frame = pd.DataFrame(rows)
    frame.to_csv(tmp_path / "wells.csv", index=False)
    units = {"intake": {"table": {"units": {"NPHI": "%"}}}}
    wells = read_table(tmp_path / "wells.csv", load_config(overrides=units))
    assert [w.name for w in wells] == ["QM-O1", "QM-O2"]
    assert all(w.original_depth_unit == "m" for w in wells)       # from the _M suffix
    nphi = wells[0].curves["nphi_v_v"]
    assert 0.25 - 1e-9 <= nphi.min() and nphi.max() <= 0.252 + 1e-9          # % -> v/v (/100)
    frame.to_parquet(tmp_path / "wells.parquet")
    pq = read_table(tmp_path / "wells.parquet", load_config(overrides=units))
    pd.testing.assert_frame_equal(pq[1].curves, wells[1].curves)
    with pytest.raises(InputError, match="wrong units"):           # NPHI 25 read as v/v
        read_table(tmp_path / "wells.csv", cfg)
    ft = read_table(tmp_path / "wells.csv", load_config(overrides=units), depth_unit="ft")
    assert ft[0].original_depth_unit == "ft"


def test_blank_well_name_names_row(tmp_path, cfg):
    p = tmp_path / "w.csv"
    p.write_text("well,depth_ft,GR\nQM-O1,100,50\n,100.5,51\n")
    with pytest.raises(InputError, match="row 2") as e:
        read_table(p, cfg)
    assert str(p) in str(e.value)


def las_file(path: Path, well: str, gr_unit: str = "GAPI") -> None:
    lines = ["~V", " VERS. 2.0 :", " WRAP. NO :", "~W", " STRT.F 100 :", " STOP.F 104.5 :",
             " STEP.F 0.5 :", " NULL. -999.25 :", f" WELL. {well} :", "~C", " DEPT.F :",
             f" GR.{gr_unit} :", "~A"]
    lines += [f"{100 + 0.5 * i} {50 + i}" for i in range(10)]
    path.write_text("\n".join(lines) + "\n")


def test_folder_skips_non_well_tables_and_collects_failures(tmp_path, cfg):
    las_file(tmp_path / "QM-K1.las", "QM-K1")
    las_file(tmp_path / "QM-K2.LAS", "QM-K2")
    las_file(tmp_path / "QM-O9.las", "QM-O9", gr_unit="PARSEC")   # unit not accepted
    (tmp_path / "core_intervals.csv").write_text("well,top,base,lithofacies\nQM-K1,100,101,ORSM\n")
    (tmp_path / "core_gamma.csv").write_text("well,depth,core_gr_api\nQM-K1,100,50\n")
    (tmp_path / "notes.txt").write_text("not a well")
    pd.DataFrame({"well": "QM-O1", "depth": 100 + 0.5 * np.arange(10),
                  "GR": 60.0 + np.arange(10)}).to_csv(tmp_path / "offsets.csv", index=False)
    cfg = load_config(overrides={"intake": {"table": {"depth_unit": "m"}}})   # plain "depth"
    wells, failures = read_wells(tmp_path, cfg, on_error="collect")
    assert [w.name for w in wells] == ["QM-K1", "QM-K2", "QM-O1"]   # sorted by file name
    assert len(failures) == 1
    assert failures[0]["well"] == "QM-O9" and "PARSEC" in failures[0]["reason"]
    with pytest.raises(InputError, match="PARSEC"):
        read_wells(tmp_path, cfg, on_error="raise")
    (tmp_path / "QM-O9.las").unlink()
    wells, failures = read_wells(tmp_path, cfg)
    assert len(wells) == 3 and failures == []
    single, _ = read_wells(tmp_path / "QM-K1.las", cfg)
    assert [w.name for w in single] == ["QM-K1"]


def test_duplicate_well_name_in_folder(tmp_path, cfg):
    las_file(tmp_path / "a.las", "QM-K1")
    las_file(tmp_path / "b.las", "QM-K1")
    wells, failures = read_wells(tmp_path, cfg, on_error="collect")
    assert len(wells) == 1 and "used by both a.las and b.las" in failures[0]["reason"]


def test_missing_folder(tmp_path, cfg):
    with pytest.raises(InputError, match="not found"):
        read_wells(tmp_path / "nope", cfg)


@pytest.mark.skipif(not (FORCE / "16_8-1.csv").is_file(), reason="FORCE 2020 subset not present")
def test_force2020_folder_copy(tmp_path, cfg):
    # SOURCE.md: 16/8-1 has no PEF and no bit size -> those roles are absent, not an error
    shutil.copy(FORCE / "16_8-1.csv", tmp_path / "16_8-1.csv")
    shutil.copy(FORCE / "penalty_matrix.csv", tmp_path / "penalty_matrix.csv")  # not a well
    cfg = load_config(overrides={"intake": {"table": {"depth_unit": "m"}}})  # SOURCE.md: DEPT m
    wells, failures = read_wells(tmp_path, cfg, on_error="raise")
    assert [w.name for w in wells] == ["16/8-1"] and failures == []
    w = wells[0]
    assert "pe_b_e" not in w.roles and "bs_in" not in w.roles
    assert w.intake["bad_hole_reference"] == "caliper - median caliper"
