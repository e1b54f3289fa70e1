"""Core-plug geochemistry (facies_ml.geochem): published log-TOC relations, plug file reading,
plug placement, the uncalibrated Passey baseline, and the calibrated plug models.

External references used below:
- Passey, Creaney, Kulla, Moretti & Stroud (1990), AAPG Bulletin 74(12) 1777-1794:
  Delta log R = log10(R/Rbase) + 0.02 (dt - dtbase) (sonic) or - 2.50 (rho - rhobase)
  (density; both factors from memory), TOC = Delta log R * 10**(2.297 - 0.1688 LOM).
  Hand-worked: R = 20, Rbase = 2 ohm.m, dt = 100, dtbase = 80 us/ft -> 1 + 0.4 = 1.4;
  LOM 10.5 -> 10**(2.297 - 1.7724) = 10**0.5246 = 3.3466; TOC = 1.4 * 3.3466 = 4.685 wt %.
- Schmoker & Hester (1983), AAPG Bulletin 67(12) 2165-2174 (Bakken; from memory):
  TOC = 154.497 / rho_b - 57.261; hand-worked rho_b = 2.30 g/cm3 -> 67.1726 - 57.261 = 9.912.
- Jarvie et al. (2007), AAPG Bulletin 91(4) (from memory): BI = Q / (Q + C + Cl).
- Wang & Gale (2009), GCAGS Transactions 59 (from memory): BI = (Q + Dol) / (Q + Dol + Cal +
  Cl + TOC).
- Common practice: kerogen lowers the bulk density (raising density porosity) while clay
  raises the neutron porosity, so neutron-density separation marks clay, not organic matter;
  organic-lean shale reads lower resistivity than organic-rich shale.
"""

from __future__ import annotations

import copy
import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from facies_ml.config import DEFAULT_CONFIG, load_config, read_yaml
from facies_ml.errors import InputError
from facies_ml.features import delta_log_r, toc_passey
from facies_ml.geochem import (
    UNCALIBRATED_LABEL,
    PlugRegressor,
    brittleness,
    brittleness_jarvie,
    brittleness_wang_gale,
    dumps_models,
    fit_plug_models,
    loads_models,
    lom_from_factor,
    passey_factor,
    pick_passey_baseline,
    plugs_on_well,
    predict_geochem,
    read_geochem,
    toc_schmoker_bakken,
    uncalibrated_toc,
)
from facies_ml.settings import check_settings
from facies_ml.wells import Well

SETTINGS = load_config().settings.geochem


# ------------------------------------------------------------------ published relations
def test_passey_hand_worked_values() -> None:
    """Passey et al. (1990), worked by hand in the module docstring."""
    dlr = delta_log_r(np.array([20.0]), dt=np.array([100.0]), rt_baseline=2.0, dt_baseline=80.0)
    assert dlr[0] == pytest.approx(1.4, abs=1e-12)
    dlr_d = delta_log_r(np.array([20.0]), rhob=np.array([2.40]), rt_baseline=2.0,
                        rhob_baseline=2.60)
    assert dlr_d[0] == pytest.approx(1.0 + 2.5 * 0.2, abs=1e-12)
    assert passey_factor(10.5) == pytest.approx(3.3466, abs=1e-4)
    assert toc_passey(dlr, 10.5)[0] == pytest.approx(4.685, abs=1e-3)
    assert lom_from_factor(passey_factor(8.7)) == pytest.approx(8.7, abs=1e-12)
    assert np.isnan(lom_from_factor(-1.0))


def test_schmoker_hand_worked_value() -> None:
    """Schmoker & Hester (1983): 154.497 / 2.30 - 57.261 = 9.912 wt %; negatives kept."""
    assert toc_schmoker_bakken(np.array([2.30]))[0] == pytest.approx(9.9117, abs=1e-4)
    assert toc_schmoker_bakken(np.array([2.80]))[0] < 0          # dense rock: not floored


def test_brittleness_indices() -> None:
    assert brittleness_jarvie(np.array([40.0]), np.array([20.0]), np.array([40.0]))[0] == \
        pytest.approx(0.4)
    assert brittleness_wang_gale(np.array([40.0]), np.array([10.0]), np.array([10.0]),
                                 np.array([35.0]), np.array([5.0]))[0] == pytest.approx(0.5)
    assert np.isnan(brittleness_jarvie(np.zeros(1), np.zeros(1), np.zeros(1))[0])
    table = pd.DataFrame({"quartz_wt_pct": [60.0], "carbonate_wt_pct": [10.0],
                          "clay_wt_pct": [30.0]})
    bi = brittleness(table, SETTINGS)
    assert bi is not None and bi.name == "brittleness_jarvie_2007" and bi.iloc[0] == 0.6
    assert brittleness(table.drop(columns="clay_wt_pct"), SETTINGS) is None


# ------------------------------------------------------------------ reading plug files
GOOD = ("well,depth,toc_wt_pct,quartz_wt_pct,carbonate_wt_pct,clay_wt_pct,lab\n"
        "QM-K1,7010.5,3.2,55,10,35,A\n"
        "QM-K1,7002.0,0.8,30,5,64,A\n"
        "QM-K2,8000.0,,40,20,40,B\n")


def _write(tmp_path: Path, text: str | bytes, name: str = "plugs.csv") -> Path:
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text)
    return p


def test_read_geochem_good_file(tmp_path: Path) -> None:
    t = read_geochem(_write(tmp_path, GOOD), SETTINGS)
    assert list(t.columns) == ["well", "depth", "toc_wt_pct", "quartz_wt_pct",
                               "carbonate_wt_pct", "clay_wt_pct", "row"]
    assert t["depth"].tolist() == [7002.0, 7010.5, 8000.0]          # sorted downward per well
    assert t["row"].tolist() == [2, 1, 3]                             # file rows kept
    assert np.isnan(t.loc[2, "toc_wt_pct"])                           # blank = not measured
    assert t.attrs["ignored_columns"] == ["lab"]
    assert t.attrs["minerals"] == ["quartz_wt_pct", "carbonate_wt_pct", "clay_wt_pct"]


@pytest.mark.parametrize("text, message", [
    ("well,depth\nA,1\n", "missing column.*toc_wt_pct"),
    ("well,depth,toc_wt_pct\nA,1,abc\n", r"row 1, curve 'toc_wt_pct': toc_wt_pct 'abc' is not"),
    ("well,depth,toc_wt_pct\nA,1,2\nA,x,2\n", "row 2, curve 'depth': depth 'x' is not a number"),
    ("well,depth,toc_wt_pct\nA,1,2\nA,2,120\n", r"row 2, curve 'toc_wt_pct': toc_wt_pct 120 is "
                                                r"outside the physical range 0-100"),
    ("well,depth,toc_wt_pct\nA,1,-0.5\n", "toc_wt_pct -0.5 is outside"),
    ("well,depth,toc_wt_pct,clay_wt_pct\nA,1,2,-3\n", "clay_wt_pct -3 is outside"),
    ("well,depth,toc_wt_pct,quartz_wt_pct,clay_wt_pct\nA,1,2,60,50\n",
     r"row 1: minerals sum to 110 wt %, more than 100 \+ 2"),
    ("well,depth,toc_wt_pct\n,1,2\n", "row 1: blank well name"),
    ("well,depth,toc_wt_pct,clay_wt_pct\nA,1,,\n", "row 1: row holds no measurement"),
    ("well,depth,toc_wt_pct\nA,5,2\nA,5,3\n", r"depth 5 is given twice \(rows 1 and 2\)"),
    ("well,depth,toc_wt_pct\n", "no core-plug rows"),
])
def test_read_geochem_refuses_bad_rows(tmp_path: Path, text: str, message: str) -> None:
    with pytest.raises(InputError, match=message) as info:
        read_geochem(_write(tmp_path, text), SETTINGS)
    assert "\n" not in str(info.value) and "plugs.csv" in str(info.value)


def test_read_geochem_unknown_well_and_encoding(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="well 'QM-K2', row 3: well is not among"):
        read_geochem(_write(tmp_path, GOOD), SETTINGS, known_wells=["QM-K1"])
    latin = "well,depth,toc_wt_pct\nQM-K1,1,2\nMéa,2,3\n".encode("latin-1")
    with pytest.raises(InputError, match="not UTF-8 text .* on line 3"):
        read_geochem(_write(tmp_path, latin), SETTINGS)
    bom = "\ufeffwell,depth,toc_wt_pct\nQM-K1,1,2\n".encode()
    assert read_geochem(_write(tmp_path, bom), SETTINGS)["well"].tolist() == ["QM-K1"]


# ------------------------------------------------------------------ plug placement
def _well(name: str, top: float, n: int, step: float = 0.5, unit: str = "ft",
          original: str = "ft") -> Well:
    depth = np.round(top + step * np.arange(n), 6)
    return Well(name=name, curves=pd.DataFrame({"gr_api": np.linspace(50, 150, n)},
                                               index=depth),
                depth_unit=unit, original_depth_unit=original, step=step)


def test_plugs_on_well_shift_nearest_sample_and_outside_warning() -> None:
    w = _well("QM-K1", 1000.0, 41)                          # 1000 .. 1020 ft
    plugs = pd.DataFrame({"well": ["QM-K1"] * 4 + ["QM-K2"],
                          "depth": [998.1, 1005.13, 1017.9, 1019.0, 1005.0],
                          "toc_wt_pct": [1.0, 2.0, 3.0, 4.0, 5.0], "row": [1, 2, 3, 4, 5]})
    placed, warnings = plugs_on_well(w, plugs, shift=2.0)
    # log depth = core depth + shift: 1000.1, 1007.13, 1019.9, 1021.0 (outside)
    assert placed["log_depth"].tolist() == pytest.approx([1000.1, 1007.13, 1019.9])
    assert placed["sample_depth"].tolist() == [1000.0, 1007.0, 1020.0]
    assert placed["sample"].tolist() == [0, 14, 40]
    assert placed["toc_wt_pct"].tolist() == [1.0, 2.0, 3.0]
    assert placed["row"].tolist() == [1, 2, 3]
    assert len(warnings) == 1 and "QM-K1" in warnings[0] and "1019" in warnings[0]
    assert "1000-1020" in warnings[0] and "\n" not in warnings[0]
    none, w2 = plugs_on_well(_well("QM-O9", 0.0, 5), plugs)
    assert none.empty and w2 == []


def test_plugs_on_well_converts_a_metres_core_file() -> None:
    """Core depth in the well's original unit (m) -> working ft, like core intervals."""
    w = _well("QM-K3", 3280.0, 41, original="m")                       # working unit ft
    plugs = pd.DataFrame({"well": ["QM-K3"], "depth": [1000.0], "toc_wt_pct": [2.0],
                          "row": [1]})
    placed, warnings = plugs_on_well(w, plugs, shift=0.0)
    assert warnings == []
    assert placed["log_depth"].iloc[0] == pytest.approx(1000.0 / 0.3048)   # 3280.84 ft
    assert placed["sample_depth"].iloc[0] == 3281.0


# ------------------------------------------------------------------ uncalibrated baseline
def _shale_play(n: int = 600, seed: int = 3) -> tuple[pd.DataFrame, np.ndarray]:
    """Three rock types: organic-lean clay shale (TOC ~0.3), organic-rich shale (TOC ~6, the
    HIGHEST gamma ray, high Rt, low density, little neutron-density separation) and silt.
    Logs follow Passey's density form with a known baseline (Rbase 3 ohm.m, rho 2.60) and
    LOM 10.5, so TOC = 3.3466 * Delta log R."""
    rng = np.random.default_rng(seed)
    kind = rng.choice(3, size=n, p=[0.35, 0.35, 0.30])          # 0 lean, 1 rich, 2 silt
    toc = np.choose(kind, [0.3, 6.0, 1.0]) + 0.1 * rng.standard_normal(n)
    rho = np.choose(kind, [2.60, 2.42, 2.55]) + 0.01 * rng.standard_normal(n)
    dlr = toc / passey_factor(10.5)
    log10_rt = np.log10(3.0) + dlr + 2.5 * (rho - 2.60)
    gr = np.choose(kind, [120.0, 180.0, 70.0]) + 5 * rng.standard_normal(n)
    sep = np.choose(kind, [0.18, 0.02, 0.05]) + 0.01 * rng.standard_normal(n)
    X = pd.DataFrame({"log10_rt": log10_rt, "rhob_g_cc": rho, "gr_api": gr,
                      "igr": np.clip((gr - 60) / 120, 0, 1), "nphi_minus_dphi": sep},
                     index=np.arange(n) * 0.5)
    return X, toc


def test_baseline_is_picked_in_lean_clay_shale_not_in_the_hottest_shale() -> None:
    X, toc = _shale_play()
    base = pick_passey_baseline(X, SETTINGS, well="QM-T1")
    assert base["ok"] and base["clay_indicator"] == "nphi_minus_dphi"
    # between rock with no TOC (Rbase = 3 ohm.m) and the mean lean shale (TOC 0.3)
    assert 2.8 <= base["rt_baseline_ohmm"] <= 3.0 * 10 ** (0.3 / 3.3466)
    assert base["rhob_baseline_g_cc"] == pytest.approx(2.60, abs=0.01)
    # the highest-GR shale would put the baseline in the organic-rich rock
    hot = X["igr"].to_numpy() >= 0.9
    assert 10 ** np.median(X["log10_rt"].to_numpy()[hot]) > 10 * base["rt_baseline_ohmm"]
    table, info = uncalibrated_toc(X, SETTINGS, well="QM-T1")
    assert info["label"] == UNCALIBRATED_LABEL and info["form"] == "density"
    est = table["toc_uncalibrated_wt_pct"].to_numpy()
    assert np.mean(est) == pytest.approx(np.mean(toc) - 0.3, abs=0.15)   # lean rock reads ~0
    rich = toc > 4
    assert np.mean(est[rich]) == pytest.approx(5.7, abs=0.3)
    # negatives are kept (not floored) and counted
    assert (est < 0).any() and info["negative_share"] == pytest.approx(np.mean(est < 0))


def test_baseline_without_neutron_uses_igr_and_reports_missing_logs() -> None:
    X, _ = _shale_play()
    base = pick_passey_baseline(X.drop(columns="nphi_minus_dphi"), SETTINGS)
    assert base["ok"] and base["clay_indicator"] == "igr"
    no_rt = pick_passey_baseline(X.drop(columns="log10_rt"), SETTINGS)
    assert not no_rt["ok"] and "resistivity" in no_rt["reason"]
    table, info = uncalibrated_toc(X.drop(columns=["rhob_g_cc"]), SETTINGS)
    assert not info["baseline"]["ok"] and table["toc_uncalibrated_wt_pct"].isna().all()


# ------------------------------------------------------------------ calibrated models
def _plug_wells(n_wells: int, per_well: int, seed: int, hetero: bool = False
                ) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """Plugs obeying the Schmoker & Hester (1983) relation TOC = 154.497 / rho - 57.261 plus
    noise (sd 0.25 wt %, or 0.05 + 0.08 TOC when ``hetero``), with a nuisance log."""
    rng = np.random.default_rng(seed)
    rho = rng.uniform(2.25, 2.62, n_wells * per_well)
    toc = 154.497 / rho - 57.261
    sd = 0.05 + 0.08 * np.abs(toc) if hetero else 0.25
    y = toc + sd * rng.standard_normal(rho.size)
    X = pd.DataFrame({"rhob_g_cc": rho, "gr_api": rng.normal(100, 20, rho.size),
                      "log10_rt": rng.normal(1.0, 0.2, rho.size)})
    groups = np.repeat([f"W{i}" for i in range(n_wells)], per_well)
    return X, y, groups


def _model(**kw: object) -> PlugRegressor:
    base = {"n_estimators": 40, "num_leaves": 7, "min_child_samples": 10, "n_jobs": 1}
    return PlugRegressor(**{**base, **kw})


def test_calibration_recovers_a_known_schmoker_relation() -> None:
    X, y, g = _plug_wells(4, 120, seed=1)
    m = _model(candidates=("schmoker_density", "linear", "lightgbm")).fit(X, y, g)
    assert m.selected_ == "schmoker_density"
    assert m.params_["slope"] == pytest.approx(154.497, rel=0.03)
    assert m.params_["intercept"] == pytest.approx(-57.261, abs=2.0)
    s = m.scores_["schmoker_density"]
    assert s["r2"] > 0.95 and abs(s["bias"]) < 0.05
    assert s["median_abs_error"] == pytest.approx(0.25 * 0.6745, rel=0.25)  # half-normal median
    assert set(s["per_well"]) == {"W0", "W1", "W2", "W3"}
    assert all(v["n"] == 120 for v in s["per_well"].values())
    # a new well from the same relation is predicted
    Xn, yn, _ = _plug_wells(1, 200, seed=9)
    assert np.median(np.abs(m.predict(Xn) - yn)) < 0.25


def test_calibration_recovers_passey_maturity_and_baseline() -> None:
    """Plugs made with Passey's density form at LOM 9 and Rbase 4 ohm.m at rho_base 2.55."""
    rng = np.random.default_rng(5)
    n = 400
    rho = rng.uniform(2.3, 2.6, n)
    dlr = rng.uniform(0.0, 1.2, n)
    lrt = np.log10(4.0) + dlr + 2.5 * (rho - 2.55)
    y = toc_passey(dlr, 9.0) + 0.1 * rng.standard_normal(n)
    X = pd.DataFrame({"log10_rt": lrt, "rhob_g_cc": rho})
    m = _model(candidates=("passey_density", "schmoker_density")).fit(
        X, y, np.repeat(["A", "B", "C", "D"], n // 4))
    assert m.selected_ == "passey_density"
    assert m.params_["lom"] == pytest.approx(9.0, abs=0.1)
    # the baseline is reported at the plugs' median density; it must lie on Rbase / rho_base line
    rb, rhob = m.params_["rt_baseline_ohmm"], m.params_["rhob_baseline_g_cc"]
    assert np.log10(rb) == pytest.approx(np.log10(4.0) + 2.5 * (rhob - 2.55), abs=0.02)


def test_band_covers_about_80_percent_of_plugs_in_new_wells() -> None:
    X, y, g = _plug_wells(5, 150, seed=2, hetero=True)
    m = _model(candidates=("schmoker_density", "linear")).fit(X, y, g)
    Xn, yn, _ = _plug_wells(3, 300, seed=12, hetero=True)
    band = m.predict_band(Xn)
    inside = (yn >= band["toc_wt_pct_p10"]) & (yn <= band["toc_wt_pct_p90"])
    assert 0.72 <= inside.mean() <= 0.88
    # errors grow with TOC: the band is wider for rich rock than for lean rock
    width = band["toc_wt_pct_p90"] - band["toc_wt_pct_p10"]
    rich = band["toc_wt_pct"] > 8
    lean = band["toc_wt_pct"] < 3
    assert width[rich].mean() > 1.5 * width[lean].mean()
    assert 0.7 <= m.held_out_["band_coverage"] <= 0.9


def test_state_round_trip_is_json_data_and_predicts_the_same(monkeypatch) -> None:
    X, y, g = _plug_wells(3, 80, seed=4)
    for cands in (("lightgbm",), ("linear",), ("schmoker_density",)):
        m = _model(candidates=cands).fit(X, y, g)
        text = json.dumps(m.to_state(), allow_nan=False)
        back = PlugRegressor.from_state(json.loads(text))
        assert back.selected_ == cands[0]
        pd.testing.assert_frame_equal(back.predict_band(X), m.predict_band(X))
    models = {"toc_wt_pct": m}
    again = loads_models(dumps_models(models))
    assert np.array_equal(again["toc_wt_pct"].predict(X), m.predict(X))
    with pytest.raises(InputError, match="not a saved core-plug model"):
        PlugRegressor.from_state({"format": "pickle"})
    # the model folder writer (facies_ml.bundle) stores it as data once the class is allowed
    from facies_ml import bundle
    lgb_model = _model(candidates=("lightgbm",)).fit(X, y, g)
    monkeypatch.setitem(bundle.ALLOWED_CLASSES, "PlugRegressor", PlugRegressor)
    writer = bundle._Writer()
    node = writer.node(lgb_model)
    json.dumps(node, allow_nan=False)
    assert node["$object"] == "PlugRegressor" and list(writer.texts) == ["lightgbm_0.txt"]


def test_fit_refuses_bad_input() -> None:
    X, y, g = _plug_wells(2, 30, seed=6)
    with pytest.raises(InputError, match="at least two wells"):
        _model().fit(X, y, np.full(len(y), "W0"))
    with pytest.raises(InputError, match="unknown geochem model 'magic'"):
        _model(candidates=("magic",)).fit(X, y, g)
    with pytest.raises(InputError, match="must match"):
        _model().fit(X, y[:-1], g)
    y2 = y.copy()
    y2[3] = np.nan
    with pytest.raises(InputError, match="row 3 is blank"):
        _model().fit(X, y2, g)
    m = _model(candidates=("passey_sonic", "linear")).fit(X, y, g)      # no sonic: skipped
    assert m.selected_ == "linear" and "passey_sonic" in m.skipped_
    with pytest.raises(InputError, match="not fitted"):
        _model().predict(X)


def test_fit_plug_models_and_predict_geochem_with_minerals() -> None:
    rng = np.random.default_rng(8)
    n = 240
    X = pd.DataFrame({"rhob_g_cc": rng.uniform(2.3, 2.6, n), "pe_b_e": rng.uniform(2, 5, n),
                      "gr_api": rng.uniform(60, 160, n)})
    carb = 10 + 20 * (X["pe_b_e"] - 2)
    clay = 0.3 * (X["gr_api"] - 60)
    plugs = pd.DataFrame({"well": np.repeat(["A", "B", "C"], n // 3),
                          "toc_wt_pct": 154.497 / X["rhob_g_cc"] - 57.261,
                          "carbonate_wt_pct": carb, "clay_wt_pct": clay,
                          "quartz_wt_pct": 100 - carb - clay})
    plugs.loc[::7, "toc_wt_pct"] = np.nan                               # XRD-only plugs
    s = replace(SETTINGS, lightgbm=replace(SETTINGS.lightgbm, n_estimators=20, n_jobs=1))
    models = fit_plug_models(X, plugs, s, seed=0)
    assert set(models) == {"toc_wt_pct", "carbonate_wt_pct", "clay_wt_pct", "quartz_wt_pct"}
    assert models["carbonate_wt_pct"].scores_["linear"]["r2"] > 0.95
    table = predict_geochem(models, X, s)
    assert {"toc_wt_pct_p10", "quartz_wt_pct_p90", "brittleness_jarvie_2007"} <= set(table)
    assert table["brittleness_jarvie_2007"].between(0, 1).all()


def test_geochem_settings_are_checked() -> None:
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw["geochem"]["band_quantiles"] = [0.9, 0.1]
    with pytest.raises(InputError, match="geochem.band_quantiles: give two quantiles"):
        check_settings(raw)
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw["geochem"]["toc_candidates"] = ["passey_density", "crystal_ball"]
    with pytest.raises(InputError, match=r"geochem.toc_candidates\[1\]"):
        check_settings(raw)


def test_a_well_without_a_log_gets_a_model_refitted_without_it() -> None:
    """PE drives carbonate here; a well logged without PE must not be served by a model that
    reads its PE as missing everywhere, but by one refitted (and scored) without PE."""
    rng = np.random.default_rng(11)
    n = 300
    X = pd.DataFrame({"pe_b_e": rng.uniform(2, 5, n), "rhob_g_cc": rng.uniform(2.3, 2.7, n)})
    X["rhob_g_cc"] += 0.02 * (X["pe_b_e"] - 3.5)                 # density carries a little PE
    y = 10 + 20 * (X["pe_b_e"].to_numpy() - 2) + rng.normal(0, 1, n)
    m = _model(target="carbonate_wt_pct", candidates=("linear", "lightgbm")).fit(
        X, y, np.repeat(["A", "B", "C"], n // 3))
    no_pe = X.assign(pe_b_e=np.nan)
    assert m.missing_inputs(no_pe) == ["pe_b_e"]
    assert m.model_name(no_pe).endswith("without pe_b_e") and m.model_name(X) == m.selected_
    reduced = m.without(["pe_b_e"])
    assert reduced.feature_names_in_ == ["rhob_g_cc"] and m.without(["pe_b_e"]) is reduced
    band = m.predict_band(no_pe)
    assert np.allclose(band["carbonate_wt_pct"], reduced.predict(no_pe))
    assert reduced.held_out_["r2"] < m.held_out_["r2"]          # honest, poorer scores
    back = PlugRegressor.from_state(json.loads(json.dumps(m.to_state(), allow_nan=False)))
    assert np.allclose(back.predict(no_pe), m.predict(no_pe))
