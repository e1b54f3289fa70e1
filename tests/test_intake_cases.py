"""No silent data loss at intake: each case of issue #12 is a one-line InputError or a console
warning naming the well, the curve and the depths, and the warning stays in the intake report
(``Well.intake["warnings"]``, which predict writes to summary.json).

Outside facts used: LAS 2.0 (CWLS) -- the ~A section holds one value per ~C curve on each line
when WRAP is NO, the first curve is the depth index, units after the mnemonic's period;
1 ft = 0.3048 m exactly (international foot), so a 0.5 ft step is 0.1524 m (common practice:
0.5 ft and 0.1524 m are the usual wireline sampling steps); Windows-1252 / Latin-1 encode
"é" as the single byte 0xE9, which is not valid UTF-8 on its own (Unicode standard, UTF-8
well-formed byte sequences).
"""

from __future__ import annotations

import logging
from pathlib import Path

import lasio
import numpy as np
import pandas as pd
import pytest

from facies_ml.api import load_project
from facies_ml.cli import _settings, build_parser, main
from facies_ml.config import load_config
from facies_ml.core import read_core_intervals
from facies_ml.errors import InputError
from facies_ml.pipeline import FaciesPipeline
from facies_ml.wells import read_table, read_well, read_wells

FT = 0.3048


@pytest.fixture(scope="module")
def cfg():
    return load_config()


@pytest.fixture
def warned(caplog):
    """The console warnings (``facies_ml.wells`` logger) of the test, as one text."""
    caplog.set_level(logging.WARNING, logger="facies_ml.wells")
    return caplog


def las_file(path: Path, well: str, depth: np.ndarray, curves: dict[str, tuple[str, list]],
             unit: str = "F") -> Path:
    """LAS 2.0, WRAP NO, written by hand so that cells can hold anything (text, bad bytes)."""
    step = float(depth[1] - depth[0])
    head = ["~VERSION INFORMATION", " VERS. 2.0 : CWLS LAS 2.0", " WRAP. NO : one line per step",
            "~WELL INFORMATION", f" STRT.{unit} {depth[0]:.4f} :", f" STOP.{unit} {depth[-1]:.4f} :",
            f" STEP.{unit} {step:.4f} :", " NULL. -999.25 :", f" WELL. {well} : WELL",
            "~CURVE INFORMATION", f" DEPT.{unit} : depth"]
    head += [f" {m}.{u} : curve" for m, (u, _) in curves.items()]
    body = []
    for i, d in enumerate(depth):
        cells = [f"{d:.4f}"] + [str(v[i]) for _, v in curves.values()]
        body.append(" ".join(cells))
    text = "\n".join(head + ["~A"] + body) + "\n"
    path.write_bytes(text.encode("latin-1"))
    return path


def gr_curve(n: int, seed: int = 0) -> list[float]:
    rng = np.random.default_rng(seed)
    return list(np.round(60 + 30 * np.sin(np.arange(n) / 7.0) + rng.normal(0, 3, n), 3))


def core_csv(path: Path, rows: list[tuple[str, float, float, str]]) -> Path:
    pd.DataFrame(rows, columns=["well", "top", "base", "lithofacies"]).to_csv(path, index=False)
    return path


# ----------------------------------------------------------------- 1. depth unit plausibility
def test_metres_labelled_feet_is_an_error_for_a_training_well(tmp_path, cfg, warned):
    # 600 samples every 0.1524 (= 0.5 ft in m), depths 2300-2391 written as FT; the core file
    # gives the true interval in ft (2300 m = 7545.9 ft), so it misses the log as labelled.
    depth = 2300 + 0.1524 * np.arange(600)
    wells = tmp_path / "wells"
    wells.mkdir()
    las_file(wells / "QM-K7.las", "QM-K7", depth, {"GR": ("GAPI", gr_curve(600))}, unit="F")
    top_ft = 2310 / FT
    core = core_csv(tmp_path / "core.csv", [("QM-K7", round(top_ft, 2), round(top_ft + 20, 2),
                                             "ORSM")])
    with pytest.raises(InputError) as err:
        load_project(wells, core, cfg)
    msg = str(err.value)
    assert "\n" not in msg and "'QM-K7'" in msg
    assert "'F'" in msg and "step 0.1524" in msg                   # labelled unit and step
    assert "log 2300-2391 ft" in msg and "core 7578.74-7598.74 ft" in msg  # both ranges
    assert "if the log depths were metres" in msg and "--depth-unit m" in msg   # the fix
    # the step alone is a warning when the well is read (e.g. an offset well to predict)
    w = read_well(wells / "QM-K7.las", cfg)
    assert any("0.1524" in m and "metric step" in m for m in w.intake["warnings"])
    assert "metric step" in warned.text
    # labelled M, with the core in the log's unit (m), the same file trains
    las_file(wells / "QM-K7.las", "QM-K7", depth, {"GR": ("GAPI", gr_curve(600))}, unit="M")
    core_csv(core, [("QM-K7", 2310, 2310 + 20 * FT, "ORSM")])
    project = load_project(wells, core, cfg)
    assert (project.labels["QM-K7"]["lithofacies"] >= 0).sum() == pytest.approx(40, abs=1)


# ---------------------------------------------------------------- 2. core outside the logs
def test_core_intervals_outside_the_log(tmp_path, cfg, warned):
    depth = 1000 + 0.5 * np.arange(201)                              # 1000-1100 ft
    wells = tmp_path / "wells"
    wells.mkdir()
    las_file(wells / "QM-K8.las", "QM-K8", depth, {"GR": ("GAPI", gr_curve(201))})
    core = core_csv(tmp_path / "core.csv", [("QM-K8", 1010, 1020, "ORSM"),
                                            ("QM-K8", 1200, 1210, "CALM"),
                                            ("QM-K8", 1300, 1305, "CLYM")])
    project = load_project(wells, core, cfg)
    assert (project.labels["QM-K8"]["lithofacies"] >= 0).sum() == 20   # 1010-1020 ft at 0.5
    (msg,) = [m for m in project.wells[0].intake["warnings"] if "core interval" in m]
    assert "'QM-K8'" in msg and "2 of 3 core interval(s)" in msg
    assert "1200-1210 (row 2)" in msg and "1300-1305 (row 3)" in msg and "1000-1100 ft" in msg
    assert msg in warned.text
    # nothing overlaps (in ft or read as m): an error, not a training well
    core_csv(tmp_path / "core.csv", [("QM-K8", 5000, 5010, "ORSM")])
    with pytest.raises(InputError, match=r"well 'QM-K8'.*no core interval overlaps the log: "
                                         r"core 5000-5010 ft .*log 1000-1100 ft"):
        load_project(wells, core, cfg)


# ----------------------------------------------- 3. an all-null or constant curve, training
def _two_wells(src: Path, dst: Path, gr_null: bool = False, drop_pe: bool = False) -> None:
    """QM-K1 and QM-K2 of the tiny basin; QM-K1's GR all NULL or its PE column removed."""
    dst.mkdir()
    for name in ("QM-K1", "QM-K2"):
        las = lasio.read(src / f"{name}.las")
        if name == "QM-K1" and gr_null:
            las["GR"] = np.full(len(las.index), np.nan)
        if name == "QM-K1" and drop_pe:
            las.delete_curve("PEF")
        las.write(str(dst / f"{name}.las"), version=2.0)


def _fit_lithofacies(project) -> FaciesPipeline:
    # lithofacies stage only (no tract labels, so no sequence stage): quick
    labels = {k: v.assign(systems_tract=-1) for k, v in project.labels.items()}
    cfg = load_config(overrides={"lithofacies": {"n_estimators": 10, "n_jobs": 1,
                                                 "early_stopping_rounds": 0}})
    return FaciesPipeline(cfg).fit(project.cored, labels)


def test_all_null_curve_in_a_training_well_keeps_the_model_features(tiny_basin, tmp_path, cfg,
                                                                    warned):
    core = tiny_basin / "core_intervals.csv"
    intervals = read_core_intervals(core, cfg.facies)
    two = core_csv(tmp_path / "core2.csv", [
        (r.well, r.top, r.base, cfg.facies.labels[r.lithofacies])
        for r in intervals.itertuples() if r.well in ("QM-K1", "QM-K2")])
    _two_wells(tiny_basin, tmp_path / "clean")
    _two_wells(tiny_basin, tmp_path / "nullgr", gr_null=True)
    clean = _fit_lithofacies(load_project(tmp_path / "clean", two, cfg))
    project = load_project(tmp_path / "nullgr", two, cfg)
    k1 = next(w for w in project.wells if w.name == "QM-K1")
    assert "gr_api" not in k1.curves
    assert k1.intake["unusable_curves"]["gr_api"] == {"mnemonic": "GR", "reason": "all null"}
    (msg,) = [m for m in k1.intake["warnings"] if "training well" in m]
    assert "'QM-K1'" in msg and "GR (gr_api: all null)" in msg and "keeps" in msg
    assert msg in warned.text
    defect = _fit_lithofacies(project)
    # min_well_coverage 0.6 of 2 wells would need both: the GR features stay all the same
    assert len(defect.feature_names_) == len(clean.feature_names_)
    assert set(defect.feature_names_) == set(clean.feature_names_)
    assert {"gr_api", "igr", "gr_peak_height_above"} <= set(defect.feature_names_)
    # a curve genuinely not logged in one of the two wells is still left out (coverage rule)
    _two_wells(tiny_basin, tmp_path / "nope", drop_pe=True)
    no_pe = _fit_lithofacies(load_project(tmp_path / "nope", two, cfg))
    assert "pe_b_e" in clean.feature_names_ and "pe_b_e" not in no_pe.feature_names_


def test_constant_curve_treated_as_missing(tmp_path, cfg, warned):
    depth = 1000 + 0.5 * np.arange(100)
    p = las_file(tmp_path / "c.las", "QM-O6", depth,
                 {"GR": ("GAPI", gr_curve(100)), "RHOB": ("G/CC", [2.45] * 100),
                  "BS": ("IN", [8.5] * 100)})
    w = read_well(p, cfg)
    assert "rhob_g_cc" not in w.curves and "bs_in" in w.curves     # bit size is constant by nature
    assert w.intake["unusable_curves"]["rhob_g_cc"]["reason"] == "constant 2.45 g/cc"
    (msg,) = w.intake["warnings"]
    assert "'QM-O6'" in msg and "'RHOB'" in msg and "1000-1049.5 ft" in msg
    assert msg in warned.text


# ------------------------------------------------------------------- 4. duplicate well names
def test_duplicate_well_names_refused_naming_both_files(tmp_path, cfg):
    depth = 1000 + 0.5 * np.arange(40)
    las_file(tmp_path / "a.las", "QM-K1", depth, {"GR": ("GAPI", gr_curve(40))})
    las_file(tmp_path / "b.las", "QM-K1", depth, {"GR": ("GAPI", gr_curve(40, 1))})
    for mode in ("raise", "collect"):
        with pytest.raises(InputError, match=r"used by both a\.las and b\.las"):
            load_project(tmp_path, None, cfg, on_error=mode)


def test_repeated_name_in_a_table_hides_no_other_well(tmp_path, cfg, warned):
    depth = 1000 + 0.5 * np.arange(40)
    las_file(tmp_path / "a.las", "QM-O1", depth, {"GR": ("GAPI", gr_curve(40))})
    rows = []
    for name, top in (("QM-O1", 2000), ("QM-O2", 3000), ("QM-O3", 4000), ("QM-O2", 3020)):
        rows += [{"well": name, "depth_ft": top + 0.5 * i, "GR": 50 + i % 7} for i in range(40)]
    pd.DataFrame(rows).to_csv(tmp_path / "b.csv", index=False)
    wells, failures = read_wells(tmp_path, cfg, on_error="collect")
    assert [w.name for w in wells] == ["QM-O1", "QM-O2", "QM-O3"]
    assert wells[0].source.endswith("a.las")                       # first file keeps the name
    (f,) = failures
    assert f["well"] == "QM-O1" and "a.las and b.csv" in f["reason"]
    # QM-O2's rows come in two blocks of b.csv: read as one well, with a warning
    o2 = wells[1]
    assert o2.depth[0] == 3000 and o2.depth[-1] == 3039.5
    assert any("2 separate blocks" in m and "1-40" not in m and "41-80, 121-160" in m
               for m in o2.intake["warnings"])


# ------------------------------------------------------------------------ 5. bad cells
def test_bad_cells_become_missing_with_a_warning_per_curve(tmp_path, cfg, warned):
    n = 60
    depth = 1000 + 0.5 * np.arange(n)
    gr = [f"{v:.3f}" for v in gr_curve(n)]
    rhob = [f"{2.3 + 0.002 * i:.4f}" for i in range(n)]
    gr[4], gr[9], gr[20] = "abc", "NaN", "\xe9\xff"        # text, NaN text, non-UTF-8 bytes
    rhob[7], rhob[8] = "1e30", "inf"
    p = las_file(tmp_path / "bad.las", "QM-O7", depth, {"GR": ("GAPI", gr),
                                                        "RHOB": ("G/CC", rhob)})
    w = read_well(p, cfg)
    orig = w.original
    assert np.isnan(orig.loc[[1002.0, 1004.5, 1010.0], "GR"]).all()
    assert np.isnan(orig.loc[1004.0, "RHOB"])                      # inf
    assert orig.loc[1003.5, "RHOB"] == 1e30          # the file's own value kept in the original,
    assert w.curves.loc[1003.5, "rhob_g_cc"] < 2.5      # the model sees neighbours' density
    assert orig["GR"].notna().sum() == n - 3 and orig["RHOB"].notna().sum() == n - 1
    msgs = w.intake["warnings"]
    gr_msg = next(m for m in msgs if "'GR'" in m)
    assert "'QM-O7'" in gr_msg and "3 cell(s) not numbers" in gr_msg
    assert "1002, 1004.5, 1010 ft" in gr_msg
    inf_msg = next(m for m in msgs if "'RHOB'" in m and "infinite" in m)
    assert "1 infinite value(s) at 1004 ft" in inf_msg
    big = next(m for m in msgs if "'RHOB'" in m and "outside the valid" in m)  # 1e30 g/cc
    assert "1 value(s)" in big and "1003.5 ft" in big
    for m in msgs:
        assert m in warned.text and "\n" not in m


def test_bad_cells_in_a_csv_and_the_count_past_the_first_few(tmp_path, cfg):
    n = 30
    frame = pd.DataFrame({"well": "QM-O8", "depth_ft": 500 + 0.5 * np.arange(n),
                          "GR": [f"{v:.2f}" for v in gr_curve(n)]})
    frame.loc[[2, 5, 6, 7, 11], "GR"] = ["x", "NaN", "--", "1,5", "nan"]
    p = tmp_path / "t.csv"
    frame.to_csv(p, index=False)
    (w,) = read_table(p, cfg)
    (msg,) = [m for m in w.intake["warnings"] if "'GR'" in m]
    assert "5 cell(s) not numbers" in msg and "501, 502.5, 503 ft (+2 more, 501-505.5 ft)" in msg


# ------------------------------------------------------------------ 6. table depth units
def test_plain_depth_column_needs_a_unit(tmp_path, cfg):
    frame = pd.DataFrame({"well": "QM-O9", "depth": 100 + 0.5 * np.arange(20),
                          "GR": gr_curve(20)})
    p = tmp_path / "t.csv"
    frame.to_csv(p, index=False)
    with pytest.raises(InputError) as err:
        read_table(p, cfg)
    msg = str(err.value)
    assert str(p) in msg and "'depth'" in msg and "--depth-unit" in msg and "\n" not in msg
    (w,) = read_table(p, load_config(overrides={"intake": {"table": {"depth_unit": "m"}}}))
    assert w.original_depth_unit == "m" and w.depth[0] == pytest.approx(100 / FT, abs=0.5)
    for column, unit in (("depth_ft", "ft"), ("DEPT_M", "m"), ("md_m", "m"), ("MD (ft)", "ft"),
                         ("Depth [m]", "m")):
        frame.rename(columns={"depth": column}).to_csv(p, index=False)
        (w,) = read_table(p, cfg)
        assert w.original_depth_unit == unit, column
    frame.assign(depth_unit="ft").to_csv(p, index=False)            # a unit column
    (w,) = read_table(p, cfg)
    assert w.original_depth_unit == "ft"


def test_cli_depth_unit_sets_the_setting(tmp_path, capsys):
    args = build_parser().parse_args(["train", "--wells", "w", "--core", "c.csv",
                                      "--model-dir", "m", "--depth-unit", "m"])
    assert _settings(args).raw["intake"]["table"]["depth_unit"] == "m"
    for cmd in (["evaluate", "--out", "o"], ["retrain", "--model-dir", "m"],
                ["predict", "--model-dir", "m", "--out", "o"]):
        extra = [] if cmd[0] == "predict" else ["--core", "c.csv"]
        a = build_parser().parse_args(cmd + ["--wells", "w", *extra, "--depth-unit", "ft"])
        assert a.depth_unit == "ft"
    # without it, a plain depth column stops evaluate with one line saying how to give it
    pd.DataFrame({"well": "QM-K1", "depth": 100 + 0.5 * np.arange(20),
                  "GR": gr_curve(20)}).to_csv(tmp_path / "wells.csv", index=False)
    core_csv(tmp_path / "core.csv", [("QM-K1", 101, 105, "ORSM")])
    code = main(["evaluate", "--wells", str(tmp_path / "wells.csv"), "--core",
                 str(tmp_path / "core.csv"), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--depth-unit" in err[0]
    assert not (tmp_path / "out").exists()                          # no partial output


# ------------------------------------------------- 7. a LAS data line with a value missing
@pytest.mark.parametrize("change", ["drop", "add"])
def test_las_line_with_a_missing_or_extra_value(tmp_path, cfg, change):
    depth = 1000 + 0.5 * np.arange(30)
    p = las_file(tmp_path / "r.las", "QM-O4", depth, {"GR": ("GAPI", gr_curve(30)),
                                                      "RHOB": ("G/CC", [2.4] * 30)})
    lines = p.read_text().splitlines()
    k = next(i for i, line in enumerate(lines) if line.startswith("1008.5000"))
    lines[k] = lines[k].rsplit(" ", 1)[0] if change == "drop" else lines[k] + " 7.0"
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError) as err:
        read_well(p, cfg)
    msg = str(err.value)
    assert str(p) in msg and f"line {k + 1} " in msg and "depth 1008.5" in msg
    assert ("2 values for 3 curves" if change == "drop" else "4 values for 3 curves") in msg


# -------------------------------------------------------------- 8. a core CSV in Latin-1
def test_latin1_core_csv_is_read_with_a_warning(tmp_path, cfg, warned):
    text = "well,top,base,lithofacies,comment\nQM-K1,100,101,ORSM,argile feuilletée\n"
    p = tmp_path / "core.csv"
    p.write_bytes(text.encode("latin-1"))
    with pytest.raises(UnicodeDecodeError):
        text.encode("latin-1").decode("utf-8")                     # it really is not UTF-8
    out = read_core_intervals(p, cfg.facies)
    assert list(out["well"]) == ["QM-K1"] and out["lithofacies_label"].iloc[0] == "ORSM"
    pos = text.encode("latin-1").index(b"\xe9")
    assert f"core.csv is not UTF-8 (first byte that is not, 0xe9, at byte {pos})" in warned.text


def test_csv_line_with_a_missing_value_is_an_error(tmp_path, cfg):
    p = tmp_path / "t.csv"
    lines = ["well,depth_ft,GR,RHOB"] + [f"QM-O3,{100 + 0.5 * i},{50 + i % 9},2.4{i % 7}"
                                         for i in range(20)]
    lines[8] = "QM-O3,103.5,57"                                   # RHOB missing on line 9
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"line 9 has 3 values for 4 columns") as err:
        read_table(p, cfg)
    assert str(p) in str(err.value)
    lines[8] = "QM-O3,103.5,57,2.41,9"                            # one value too many
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"line 9, saw 5") as err:  # the CSV parser's words
        read_table(p, cfg)
