"""Tests of the synthetic demo basin (facies_ml.synthetic) and the bundled synthetic_wells/.

External references used below:
- CWLS LAS 2.0 standard (Canadian Well Logging Society, "LAS Version 2.0: A Digital Standard
  for Logs"): ~V must hold VERS and WRAP; ~W must hold STRT, STOP, STEP, NULL plus the
  information items; the first ~C curve is the index; STEP is the constant spacing.
- Published equations: volumetric density mixing / density porosity, the Wyllie et al. (1956)
  time average, Archie (1942), the API gamma relation GR = 16 K + 8 U + 4 Th (from memory).
- FORCE 2020 open dataset, ../shared/data/force2020/SOURCE.md (Bormann et al. 2020,
  doi 10.5281/zenodo.4351156): median GR sandstone < sandstone/shale < shale.
- Trade facts marked "common practice".
"""

from __future__ import annotations

import json
from pathlib import Path

import lasio
import numpy as np
import pandas as pd
import pytest
import yaml
from scipy.ndimage import uniform_filter1d

from facies_ml.config import load_facies_scheme
from facies_ml.errors import InputError
from facies_ml.synthetic import DEFAULT_SEED, DEFAULT_SYNTH_CONFIG, PRESETS, generate_basin
from facies_ml.synthetic.petrophysics import (
    bulk_density,
    gamma_ray_api,
    kerogen_volume,
    simandoux_rt,
    wyllie_slowness,
)

ROOT = Path(__file__).resolve().parent.parent
BUNDLED = ROOT / "synthetic_wells"
FORCE = Path(__file__).resolve().parents[2] / "shared" / "data" / "force2020"  # beside the checkout
CFG = yaml.safe_load(DEFAULT_SYNTH_CONFIG.read_text())
CHECKS = CFG["checks"]


@pytest.fixture(scope="module")
def basin() -> dict:
    return json.loads((BUNDLED / "basin.json").read_text())


@pytest.fixture(scope="module")
def truth(basin: dict) -> dict[str, pd.DataFrame]:
    return {w["name"]: pd.read_csv(BUNDLED / "truth" / f"{w['name']}.csv") for w in basin["wells"]}


@pytest.fixture(scope="module")
def surfaces() -> pd.DataFrame:
    return pd.read_csv(BUNDLED / "truth" / "surfaces.csv")


@pytest.fixture(scope="module")
def las_files(basin: dict) -> dict[str, lasio.LASFile]:
    return {w["name"]: lasio.read(str(BUNDLED / f"{w['name']}.las")) for w in basin["wells"]}


def _ft(w: dict) -> float:
    """Multiply a depth in the well's unit by this to get ft."""
    return 1.0 / 0.3048 if w["depth_unit"] == "m" else 1.0


def _slope(x: np.ndarray, y: np.ndarray) -> float:
    return float(np.polyfit(x, y, 1)[0])


# ---------------------------------------------------------------- reproducibility


def test_regeneration_is_byte_identical(tmp_path: Path) -> None:
    summary = generate_basin(tmp_path / "basin", seed=DEFAULT_SEED)
    out = tmp_path / "basin"
    new = {p.relative_to(out) for p in out.rglob("*") if p.is_file()}
    old = {p.relative_to(BUNDLED) for p in BUNDLED.rglob("*") if p.is_file()}
    assert new == old
    for rel in sorted(new):
        assert (tmp_path / "basin" / rel).read_bytes() == (BUNDLED / rel).read_bytes(), rel
    assert summary.wells == {f"QM-K{i}": "cored" for i in range(1, 6)} | {
        f"QM-O{i}": "offset" for i in range(1, 6)}


def test_default_demo_size(basin: dict) -> None:
    assert len(basin["wells"]) == 10 and basin["seed"] == DEFAULT_SEED
    for w in basin["wells"]:
        assert 2000 <= w["n_samples"] <= 4000, w["name"]


# ---------------------------------------------------------------- trade facts (common practice)


def test_gr_rises_through_tst_and_falls_through_hst(basin: dict, truth: dict) -> None:
    """Common practice: GR increases upward in the TST and decreases upward in the HST.
    Least-squares slope of true GR against height above base (up-section)."""
    n_checked = 0
    for w in basin["wells"]:
        t = truth[w["name"]]
        for seq, g in t.groupby("sequence"):
            h = g["height_above_base"].to_numpy()
            tst = (g["systems_tract"] == "TST").to_numpy()
            hst = g["systems_tract"].isin(["EHST", "LHST"]).to_numpy()
            if tst.sum() >= CHECKS["min_tract_samples"]:
                assert _slope(h[tst], g["gr_api"].to_numpy()[tst]) > 0, (w["name"], seq)
                n_checked += 1
            if hst.sum() >= CHECKS["min_tract_samples"]:
                assert _slope(h[hst], g["gr_api"].to_numpy()[hst]) < 0, (w["name"], seq)
                n_checked += 1
    assert n_checked == 2 * 10 * basin["n_sequences"]


def test_mfs_at_highest_gr_of_each_sequence(basin: dict, truth: dict,
                                            surfaces: pd.DataFrame) -> None:
    """Common practice: the MFS sits at the highest GR of its sequence (smoothed true GR)."""
    offsets = []
    for w in basin["wells"]:
        t = truth[w["name"]]
        win = max(1, round(CHECKS["mfs_gr_smoothing_ft"] / (w["step"] * _ft(w))))
        sgr = uniform_filter1d(t["gr_api"].to_numpy(), win, mode="nearest")
        for seq, g in t.groupby("sequence"):
            mfs = surfaces[(surfaces["well"] == w["name"]) & (surfaces["sequence"] == seq)
                           & (surfaces["surface"] == "MFS")]
            assert len(mfs) == 1
            i = g.index[int(np.argmax(sgr[g.index]))]
            offsets.append(abs(t.loc[i, "depth"] - mfs["depth"].iloc[0]) * _ft(w))
    assert max(offsets) <= CHECKS["mfs_tolerance_ft"], max(offsets)


def test_toc_richest_in_tst_and_ehst(basin: dict, truth: dict) -> None:
    """Common practice: TST and EHST are richest in TOC; LST and LHST organic-lean.
    Also LHST is clay-rich and TST+EHST quartz-rich relative to the LHST."""
    for w in basin["wells"]:
        for seq, g in truth[w["name"]].groupby("sequence"):
            rich = g[g["systems_tract"].isin(["TST", "EHST"])]
            lean = g[g["systems_tract"].isin(["LST", "LHST"])]
            assert rich["toc_wt_pct"].mean() > lean["toc_wt_pct"].mean(), (w["name"], seq)
        t = truth[w["name"]]
        by = t.groupby("systems_tract")[["vclay_v_v", "vquartz_v_v"]].mean()
        assert by.loc["LHST", "vclay_v_v"] > by.loc["TST", "vclay_v_v"], w["name"]
        assert by.loc[["TST", "EHST"], "vquartz_v_v"].mean() > by.loc["LHST", "vquartz_v_v"]


def test_sequence_stacking_and_lateral_geometry(basin: dict, truth: dict) -> None:
    """Up-section order within each sequence is LST? -> TST -> EHST -> LHST; sequence 1 is the
    deepest; LST only in basinward wells; the LHST top is eroded below each SB in proximal wells
    (third-order phase at its top < 1) but complete distally; tract thickness changes laterally."""
    rank = {"LST": 0, "TST": 1, "EHST": 2, "LHST": 3}
    top_phase, tst_ft = {}, {}
    n_seq = basin["n_sequences"]
    for w in basin["wells"]:
        t = truth[w["name"]]
        up = t.iloc[::-1]                                   # deepest sample first
        assert up["sequence"].is_monotonic_increasing
        assert t["sequence"].iloc[-1] == 1
        for _, g in up.groupby("sequence"):
            assert np.all(np.diff(g["systems_tract"].map(rank).to_numpy()) >= 0)
        has_lst = bool((t["systems_tract"] == "LST").any())
        lst_min = CFG["sea_level"]["lst_min_position"]
        assert has_lst == w["lst_present"] == (w["position"] >= lst_min)
        lhst = t[(t["systems_tract"] == "LHST") & (t["sequence"] < n_seq)]
        top_phase[w["position"]] = float(lhst.groupby("sequence")["phase"].max().max())
        tst_ft[w["position"]] = (t["systems_tract"] == "TST").sum() * w["step"] * _ft(w)
    pos = sorted(top_phase)
    assert top_phase[pos[0]] < 0.9 and top_phase[pos[-1]] > 0.99
    assert tst_ft[pos[-1]] > 1.1 * tst_ft[pos[0]]


def test_beds_have_realistic_thickness(truth: dict, basin: dict) -> None:
    """Beds from a few samples to several ft (brief); every class of the scheme occurs."""
    scheme = load_facies_scheme(ROOT / "configs" / "facies_demo.yaml")
    seen = set()
    for w in basin["wells"]:
        lab = truth[w["name"]]["lithofacies"].to_numpy()
        seen |= set(lab)
        change = np.flatnonzero(lab[1:] != lab[:-1])
        runs = np.diff(np.concatenate([[-1], change, [len(lab) - 1]])) * w["step"] * _ft(w)
        assert 1.0 <= np.median(runs) <= 10.0, w["name"]
    assert seen == set(scheme.labels)


# ---------------------------------------------------------------- petrophysics (published)


def test_petrophysics_worked_values() -> None:
    dens = {"quartz": 2.65, "water": 1.0}
    # density porosity, textbook: 20 % water-filled quartz sandstone -> 0.8*2.65 + 0.2*1.0
    rho = bulk_density({"quartz": np.array([0.8]), "water": np.array([0.2])}, dens)
    assert rho[0] == pytest.approx(2.32)
    # Wyllie et al. (1956): phi 0.2, dt_ma 55.5, dt_f 189 us/ft -> 82.2 us/ft
    dt = wyllie_slowness({"quartz": np.array([0.8]), "water": np.array([0.2])},
                         {"quartz": 55.5, "water": 189.0})
    assert dt[0] == pytest.approx(82.2)
    # Archie (1942), a=1 m=2 n=2, Rw 0.05, phi 0.1: Sw=1 -> 5 ohm.m, Sw=0.5 -> 20 ohm.m
    rt = simandoux_rt(np.array([0.1, 0.1]), np.array([1.0, 0.5]), np.zeros(2), 0.05, 2.0)
    assert rt == pytest.approx([5.0, 20.0])
    # API spectral relation (from memory): K 2 %, U 3 ppm, Th 12 ppm -> 32 + 24 + 48 = 104 gAPI
    gr = gamma_ray_api(np.array(2.0), np.array(3.0), np.array(12.0), CFG["petrophysics"]
                       ["gr_api_coeff"])
    assert float(gr) == pytest.approx(104.0)
    # kerogen volume: round trip to TOC = 100 * Vk rho_k / (1.2 rho_b)
    toc, phi, rho_ma = np.array([0.5, 4.0, 9.0]), np.array([0.05, 0.08, 0.1]), 2.65
    vk = kerogen_volume(toc, phi, np.full(3, rho_ma), 1.25, 1.05, 1.2)
    rho_b = (1 - phi - vk) * rho_ma + vk * 1.25 + phi * 1.05
    assert 100 * vk * 1.25 / (1.2 * rho_b) == pytest.approx(toc)


def test_truth_logs_follow_the_equations(basin: dict, truth: dict) -> None:
    """Truth GR = 16K + 8U + 4Th; truth RHOB = sum V_i rho_i with the configured densities."""
    d = CFG["petrophysics"]["density_g_cc"]
    for w in basin["wells"][:3]:
        t = truth[w["name"]]
        gr = 16 * t["k_pct"] + 8 * t["u_ppm"] + 4 * t["th_ppm"]
        assert np.allclose(gr, t["gr_api"], atol=2e-3)
        vols = ["vclay_v_v", "vquartz_v_v", "vcalcite_v_v", "vkerogen_v_v", "phi_v_v"]
        vsum = t[vols].sum(axis=1)
        assert np.allclose(vsum, 1.0, atol=5e-4)
        rho = (t["vclay_v_v"] * d["clay"] + t["vquartz_v_v"] * d["quartz"]
               + t["vcalcite_v_v"] * d["calcite"] + t["vkerogen_v_v"] * d["kerogen"]
               + t["phi_v_v"] * d["water"])
        assert np.allclose(rho, t["rhob_g_cc"], atol=1e-3)


def test_gr_ordering_matches_force2020(basin: dict, truth: dict, las_files: dict) -> None:
    """FORCE 2020 (SOURCE.md; labels 30000 sandstone, 65000 shale): within a well the median GR
    of sandstone is below that of shale (7 of the 8 bundled wells; wells differ in calibration,
    so compare within wells). Every synthetic well must show SSTB < CLYM on the LOGGED GR."""
    below = 0
    files = sorted(p for p in FORCE.glob("*.csv") if p.name != "penalty_matrix.csv")
    for path in files:
        f = pd.read_csv(path, usecols=["GR", "FORCE_2020_LITHOFACIES_LITHOLOGY"]).dropna()
        med = f.groupby("FORCE_2020_LITHOFACIES_LITHOLOGY")["GR"].median()
        below += int(med[30000] < med[65000])
    assert len(files) == 8 and below >= 7
    for w in basin["wells"]:
        gr = pd.Series(las_files[w["name"]][w["curves"]["gr_api"]])
        med = gr.groupby(truth[w["name"]]["lithofacies"].to_numpy()).median()
        assert med["SSTB"] < med["SILM"] < med["CLYM"], w["name"]


# ---------------------------------------------------------------- LAS 2.0 conformance


def test_las_files_conform_to_las20(basin: dict, las_files: dict) -> None:
    """CWLS LAS 2.0: VERS 2.0, WRAP NO, required ~W items, index first, STRT/STOP/STEP match
    the data, NULL declared and used, every curve has a unit."""
    for w in basin["wells"]:
        las = las_files[w["name"]]
        assert float(las.version["VERS"].value) == 2.0
        assert str(las.version["WRAP"].value).strip().upper() == "NO"
        for item in ("STRT", "STOP", "STEP", "NULL", "COMP", "WELL", "FLD", "LOC", "SRVC",
                     "DATE", "UWI"):
            assert str(las.well[item].value).strip() != "", (w["name"], item)
        assert las.well["WELL"].value == w["name"]
        assert las.curves[0].mnemonic == "DEPT"
        depth = las.index
        assert las.curves[0].unit == w["depth_unit"] == las.well["STRT"].unit
        assert float(las.well["STRT"].value) == pytest.approx(depth[0], abs=1e-4)
        assert float(las.well["STOP"].value) == pytest.approx(depth[-1], abs=1e-4)
        assert np.all(np.diff(depth) > 0)
        assert np.allclose(np.diff(depth), float(las.well["STEP"].value), atol=1e-4)
        assert float(las.well["STEP"].value) == pytest.approx(w["step"])
        assert float(las.well["NULL"].value) == -999.25
        assert all(c.unit.strip() for c in las.curves), w["name"]
        assert len(depth) == w["n_samples"]
        text = (BUNDLED / f"{w['name']}.las").read_text()
        assert " -999.25" in text.split("~A")[1]
        for gap in w["null_gaps"]:
            vals = las[gap["curve"]][(depth >= gap["top"] - 1e-6) & (depth <= gap["base"] + 1e-6)]
            assert vals.size > 0 and np.isnan(vals).all(), (w["name"], gap)


# ---------------------------------------------------------------- special wells (basin.json)


def test_special_wells_present_as_declared(basin: dict, las_files: dict, truth: dict) -> None:
    wells = {w["name"]: w for w in basin["wells"]}
    metres = [n for n, w in wells.items() if w["depth_unit"] == "m"]
    no_pe = [n for n, w in wells.items() if "pe_b_e" in w["missing_curves"]]
    assert metres == ["QM-O3"] and no_pe == ["QM-O4"]
    m = las_files["QM-O3"]
    assert m.well["STEP"].unit == "m" and float(m.well["STEP"].value) == pytest.approx(0.1524)
    assert "b/e" not in {c.unit for c in las_files["QM-O4"].curves}
    pct = [n for n, w in wells.items() if w["nphi_unit"] == "%"]
    assert pct and all(np.nanmax(las_files[n][wells[n]["curves"]["nphi_v_v"]]) > 1.5
                    for n in pct)
    n_wash = 0
    for name, w in wells.items():
        las = las_files[name]
        mnems = {c.mnemonic for c in las.curves[1:]}
        assert mnems == set(w["curves"].values()), name
        cal = las[w["curves"]["cali_in"]]
        t = truth[name]
        for wo in w["washouts"]:
            sel = (las.index >= wo["top"]) & (las.index <= wo["base"])
            idx = np.flatnonzero(sel)
            core = idx[len(idx) // 4: 3 * len(idx) // 4]
            assert np.nanmedian(cal[core] - w["bit_size_in"]) > 1.5, (name, wo)
            rhob = las[w["curves"]["rhob_g_cc"]][core]
            assert np.nanmedian(rhob - t["rhob_g_cc"].to_numpy()[core]) < -0.05, (name, wo)
            n_wash += 1
        good = np.ones(len(cal), bool)
        for wo in w["washouts"]:
            good &= ~((las.index >= wo["top"] - 1) & (las.index <= wo["base"] + 1))
        assert np.nanmax(cal[good] - w["bit_size_in"]) < 1.0, name
    assert n_wash >= 1


# ---------------------------------------------------------------- core files


def test_core_intervals_and_shift(basin: dict, truth: dict, las_files: dict) -> None:
    """Core intervals in core depth (log = core + shift) match the truth labels; the core gamma
    recovers the recorded shift by cross-correlation with the logged GR."""
    core = pd.read_csv(BUNDLED / "core_intervals.csv")
    gamma = pd.read_csv(BUNDLED / "core_gamma.csv")
    assert list(core.columns) == ["well", "top", "base", "lithofacies", "systems_tract",
                                  "sequence"]
    assert list(gamma.columns) == ["well", "depth", "core_gr_api"]
    wells = {w["name"]: w for w in basin["wells"]}
    cored = sorted(n for n, w in wells.items() if w["role"] == "cored")
    assert sorted(core["well"].unique()) == cored == sorted(gamma["well"].unique())
    shifts = {wells[n]["core_shift"] for n in cored}
    assert 0.0 in shifts and all(-4 <= s <= 4 for s in shifts)
    assert sum(bool(wells[n]["lost_core"]) for n in cored) == 1
    for name in cored:
        w, t = wells[name], truth[name]
        c = core[core["well"] == name]
        assert (c["top"] < c["base"]).all()
        gaps = c["top"].to_numpy()[1:] - c["base"].to_numpy()[:-1]
        assert np.all(gaps >= -1e-6)
        assert np.sum(gaps > 1e-6) == (1 if w["lost_core"] else 0)
        mid = (c["top"] + c["base"]).to_numpy() / 2 + w["core_shift"]
        i = np.clip(np.searchsorted(t["depth"].to_numpy(), mid), 0, len(t) - 1)
        assert (t["lithofacies"].to_numpy()[i] == c["lithofacies"].to_numpy()).mean() > 0.97
        assert (t["systems_tract"].to_numpy()[i] == c["systems_tract"].to_numpy()).mean() > 0.97
        assert (c["sequence"].to_numpy() == "S" + t["sequence"].astype(str).to_numpy()[i]).all()
        # cross-correlation over candidate shifts (sample steps)
        g = gamma[gamma["well"] == name]
        las = las_files[name]
        gr = pd.Series(las[w["curves"]["gr_api"]], index=np.round(las.index, 4)).interpolate()
        best, best_r = None, -2.0
        for k in range(-12, 13):
            s = k * w["step"]
            log_gr = gr.reindex(np.round(g["depth"].to_numpy() + s, 4)).to_numpy()
            ok = np.isfinite(log_gr)
            r = np.corrcoef(g["core_gr_api"].to_numpy()[ok], log_gr[ok])[0, 1]
            if r > best_r:
                best, best_r = s, r
        assert best == pytest.approx(w["core_shift"]), (name, best, best_r)
        assert best_r > 0.8


# ---------------------------------------------------------------- small basins, bad input


def test_tiny_basin_and_roles(tmp_path: Path) -> None:
    s = generate_basin(tmp_path / "b", n_wells=4, n_cored=2, seed=11, samples_per_well=600)
    assert s.wells == {"QM-K1": "cored", "QM-O1": "offset", "QM-K2": "cored", "QM-O2": "offset"}
    b = json.loads((tmp_path / "b" / "basin.json").read_text())
    n = [w["n_samples"] for w in b["wells"]]
    assert abs(np.mean(n) - 600) < 5
    assert [w["depth_unit"] for w in b["wells"]].count("m") == 1
    assert sum("pe_b_e" in w["missing_curves"] for w in b["wells"]) == 1
    for w in b["wells"]:
        assert (tmp_path / "b" / f"{w['name']}.las").is_file()
        assert len(pd.read_csv(tmp_path / "b" / "truth" / f"{w['name']}.csv")) == w["n_samples"]
    s2 = generate_basin(tmp_path / "c", n_wells=2, n_cored=1, seed=3, samples_per_well=300)
    assert s2.wells == {"QM-K1": "cored", "QM-O1": "offset"}


def test_bad_input_raises_input_error(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="n_wells"):
        generate_basin(tmp_path / "x", n_wells=1)
    with pytest.raises(InputError, match="n_cored"):
        generate_basin(tmp_path / "x", n_wells=4, n_cored=0)
    with pytest.raises(InputError, match="not found"):
        generate_basin(tmp_path / "x", config_path=tmp_path / "missing.yaml")
    bad = dict(CFG)
    bad["facies"] = dict(CFG["facies"], labels=["A", "B", "C", "D", "E", "F"])
    bad["facies_scheme"] = str(ROOT / "configs" / "facies_demo.yaml")
    p = tmp_path / "bad.yaml"
    p.write_text(yaml.safe_dump(bad))
    with pytest.raises(InputError, match="facies.labels") as err:
        generate_basin(tmp_path / "x", config_path=p)
    assert "bad.yaml" in str(err.value)


# ---------------------------------------------------------------- observable truth surfaces


def _inside_log(surf: pd.DataFrame, wells: dict[str, dict]) -> None:
    """Every truth surface lies at least one sample step inside its well's logged interval and
    carries the well's depth unit."""
    assert list(surf.columns) == ["well", "surface", "depth", "sequence", "depth_unit"]
    for _, r in surf.iterrows():
        w = wells[r["well"]]
        assert r["depth_unit"] == w["depth_unit"]
        assert w["top"] + w["step"] - 1e-6 <= r["depth"] <= w["base"] - w["step"] + 1e-6, r


def test_demo_surfaces_only_inside_the_log(basin: dict, surfaces: pd.DataFrame) -> None:
    """The SB of sequence 1 is the base edge of every demo log, so it is not listed; every
    other SB (2..n) and every MFS (1..n) is."""
    wells = {w["name"]: w for w in basin["wells"]}
    _inside_log(surfaces, wells)
    n = basin["n_sequences"]
    for name in wells:
        s = surfaces[surfaces["well"] == name]
        assert sorted(s.loc[s["surface"] == "SB", "sequence"]) == list(range(2, n + 1))
        assert sorted(s.loc[s["surface"] == "MFS", "sequence"]) == list(range(1, n + 1))


# ---------------------------------------------------------------- hard preset

HARD_CFG = yaml.safe_load(PRESETS["hard"].read_text())


@pytest.fixture(scope="module")
def hard(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """A small hard-preset basin: 6 wells (3 cored), 1,600 simulated samples per well."""
    out = tmp_path_factory.mktemp("hard")
    generate_basin(out, n_wells=6, n_cored=3, seed=7, config_path=PRESETS["hard"],
                   samples_per_well=1600)
    b = json.loads((out / "basin.json").read_text())
    return {"dir": out, "basin": b, "wells": {w["name"]: w for w in b["wells"]},
            "truth": {w["name"]: pd.read_csv(out / "truth" / f"{w['name']}.csv")
                      for w in b["wells"]},
            "surfaces": pd.read_csv(out / "truth" / "surfaces.csv"),
            "core": pd.read_csv(out / "core_intervals.csv")}


def test_hard_preset_is_reproducible(tmp_path: Path, hard: dict) -> None:
    generate_basin(tmp_path / "again", n_wells=6, n_cored=3, seed=7,
                   config_path=PRESETS["hard"], samples_per_well=1600)
    for p in sorted(hard["dir"].rglob("*")):
        if p.is_file():
            rel = p.relative_to(hard["dir"])
            assert (tmp_path / "again" / rel).read_bytes() == p.read_bytes(), rel


def test_hard_preset_sequences_and_log_windows(hard: dict) -> None:
    """8 sequences; log windows start and stop in different sequences per well (at least one
    log starts above sequence 1, at least one ends below sequence 8); cored wells keep at least
    cored_min_mfs logged MFS; per-sample sequence order is still deepest = 1 at the base."""
    b, n = hard["basin"], HARD_CFG["sea_level"]["n_sequences"]
    assert b["n_sequences"] == n == 8 and b["preset"] == "hard"
    seen: set[int] = set()
    deepest, shallowest = [], []
    for name, w in hard["wells"].items():
        seq = hard["truth"][name]["sequence"].to_numpy()
        assert np.all(np.diff(seq) <= 0)                 # depth down -> sequence number down
        assert w["logged_sequences"] == sorted(set(seq.tolist()))
        deepest.append(int(seq[-1]))
        shallowest.append(int(seq[0]))
        seen |= set(seq.tolist())
        assert w["n_samples"] == len(seq)
        if w["role"] == "cored":
            mfs = hard["surfaces"].query("well == @name and surface == 'MFS'")
            assert len(mfs) >= HARD_CFG["wells"]["log_window"]["cored_min_mfs"], name
    assert seen == set(range(1, n + 1))
    assert max(deepest) > 1 and min(shallowest) < n
    assert len(set(zip(deepest, shallowest, strict=True))) > 1


def test_hard_preset_surfaces_inside_the_log(hard: dict) -> None:
    _inside_log(hard["surfaces"], hard["wells"])


def test_hard_preset_eroded_sequence_has_no_mfs(hard: dict) -> None:
    """In the eroded wells the whole eroded sequence is gone: no sample, no SB and no MFS of
    it in the truth; the next sequence's SB rests on the late highstand of the one below (an
    SB transition of the rule table)."""
    eroded = {n: w["eroded_sequences"] for n, w in hard["wells"].items() if w["eroded_sequences"]}
    assert len(eroded) == HARD_CFG["thickness"]["erosion"]["wells"] == 2
    surf = hard["surfaces"]
    for name, (k,) in eroded.items():
        t, s = hard["truth"][name], surf[surf["well"] == name]
        assert (t["sequence"] == k).sum() == 0, (name, k)
        assert s.query("sequence == @k").empty, (name, k)
        assert len(s.query("surface == 'MFS' and sequence == @k + 1")) == 1
        sb = s.query("surface == 'SB' and sequence == @k + 1")["depth"]
        assert len(sb) == 1
        below = t[t["depth"] > sb.iloc[0]].iloc[0]
        above = t[t["depth"] < sb.iloc[0]].iloc[-1]
        assert below["sequence"] == k - 1 and below["systems_tract"] == "LHST"
        assert above["sequence"] == k + 1 and above["systems_tract"] in ("LST", "TST")
    for name, w in hard["wells"].items():                 # non-eroded wells: every logged
        if name in eroded:                                 # complete sequence has its MFS
            continue
        s = surf[surf["well"] == name]
        inner = w["logged_sequences"][1:-1]
        assert set(inner) <= set(s.loc[s["surface"] == "MFS", "sequence"]), name


def test_hard_preset_core_sequence_names(hard: dict) -> None:
    """core_intervals.csv `sequence` S<k> equals the truth per-sample sequence k at every core
    sample depth (core depth + core shift = log depth)."""
    core = hard["core"]
    assert list(core.columns) == ["well", "top", "base", "lithofacies", "systems_tract",
                                  "sequence"]
    cored = [n for n, w in hard["wells"].items() if w["role"] == "cored"]
    assert sorted(core["well"].unique()) == sorted(cored)
    n_checked = 0
    for name in cored:
        w, t = hard["wells"][name], hard["truth"][name]
        c = core[core["well"] == name]
        depth = t["depth"].to_numpy()
        for top, base, seq in zip(c["top"], c["base"], c["sequence"], strict=True):
            sel = (depth >= top + w["core_shift"] - 1e-6) & (depth <= base + w["core_shift"])
            assert sel.any()
            assert set(("S" + t.loc[sel, "sequence"].astype(str)).tolist()) == {seq}
            n_checked += int(sel.sum())
        # cored over most of the logged interval, as in the demo
        assert n_checked > 0 and (c["base"].max() - c["top"].min()) > 0.9 * (w["base"] - w["top"])
    seqs = set(core["sequence"])
    assert len(seqs) >= HARD_CFG["wells"]["log_window"]["cored_min_mfs"]


def test_hard_preset_mfs_at_highest_gr_of_complete_sequences(hard: dict) -> None:
    """Common practice: the MFS sits at the highest GR of its sequence (smoothed true GR).
    Adapted honestly for the hard preset: only COMPLETE logged sequences are checked (both
    their SB and the next SB, or the column top, are logged); a sequence cut by the log window
    or eroded has its GR maximum elsewhere or no MFS. The truth GR includes the hot-shale
    stringers; the demo's smoothing window and tolerance still hold (measured max ~8 ft on
    seeds 1, 2, 3, 7 at full size)."""
    n = hard["basin"]["n_sequences"]
    offsets = []
    for name, w in hard["wells"].items():
        t = hard["truth"][name]
        s = hard["surfaces"][hard["surfaces"]["well"] == name]
        win = max(1, round(CHECKS["mfs_gr_smoothing_ft"] / (w["step"] * _ft(w))))
        sgr = uniform_filter1d(t["gr_api"].to_numpy(), win, mode="nearest")
        sbs = set(s.loc[s["surface"] == "SB", "sequence"])
        for seq, g in t.groupby("sequence"):
            mfs = s[(s["sequence"] == seq) & (s["surface"] == "MFS")]
            top_ok = (seq + 1 in sbs) or (seq == n and w["log_window_cut_sequences"]["top"] == 0)
            if seq not in sbs or not top_ok or mfs.empty:
                continue
            i = g.index[int(np.argmax(sgr[g.index]))]
            offsets.append(abs(t.loc[i, "depth"] - mfs["depth"].iloc[0]) * _ft(w))
    assert len(offsets) >= 3 * len(hard["wells"])
    assert max(offsets) <= CHECKS["mfs_tolerance_ft"], max(offsets)


def test_hard_preset_stringers_drift_and_calibration(hard: dict) -> None:
    """Hot stringers raise the true GR by about their recorded amount over their thickness;
    GR calibration (scale, offset) lies in the hard ranges; the logged GR follows
    scale * true + offset + recorded drift (compared at the log top and base)."""
    lg = HARD_CFG["logging"]
    hs = HARD_CFG["composition"]["hot_stringers"]
    n_beds = 0
    for name, w in hard["wells"].items():
        t = hard["truth"][name]
        assert lg["gr_scale"][0] <= w["gr_scale"] <= lg["gr_scale"][1]
        assert lg["gr_offset_api"][0] <= w["gr_offset_api"] <= lg["gr_offset_api"][1]
        depth, gr = t["depth"].to_numpy(), t["gr_api"].to_numpy()
        for bed in w["hot_stringers"]:
            inside = (depth > bed["top"]) & (depth < bed["base"])
            assert inside.any()
            assert set(t.loc[inside, "systems_tract"]) <= set(hs["tracts"])
            thick = (bed["base"] - bed["top"]) * _ft(w)
            assert hs["thickness_ft"][0] - w["step"] <= thick <= hs["thickness_ft"][1] + w["step"]
            assert hs["gr_api"][0] <= bed["gr_added_api"] <= hs["gr_api"][1]
            n_beds += 1
        dr = w["gr_drift_api"]
        assert dr is not None and dr["max_abs"] <= (lg["gr_drift"]["linear_api"]
                                                    + lg["gr_drift"]["wave_api"])
        las = lasio.read(str(hard["dir"] / f"{name}.las"))
        logged = las[w["curves"]["gr_api"]]
        model = w["gr_scale"] * uniform_filter1d(gr, 5, mode="nearest") + w["gr_offset_api"]
        k = max(20, len(gr) // 40)
        assert abs(np.nanmedian((logged - model)[:k]) - dr["top"]) < 4.0, name
        assert abs(np.nanmedian((logged - model)[-k:]) - dr["base"]) < 4.0, name
    assert n_beds >= len(hard["wells"])


def test_hard_preset_harder_than_demo() -> None:
    """The hard preset's settings: thinner sequences, more noise, stronger GR calibration."""
    demo, hard_cfg = CFG, HARD_CFG
    for tract, rate in demo["thickness"]["base_rate_ft"].items():
        assert hard_cfg["thickness"]["base_rate_ft"][tract] == pytest.approx(rate / 2)
    for key, sigma in demo["logging"]["noise"].items():
        if key != "cali":
            assert hard_cfg["logging"]["noise"][key] == pytest.approx(2 * sigma)
    assert hard_cfg["logging"]["gr_offset_api"][1] > demo["logging"]["gr_offset_api"][1]
    assert demo["thickness"]["erosion"]["wells"] == 0
    assert demo["composition"]["hot_stringers"]["per_100ft"] == 0


def test_hard_preset_with_an_eroded_sequence_below_a_log_window_cut(tmp_path: Path) -> None:
    # Seed 9 erodes a whole sequence in a well whose log window is cut: the eroded sequence
    # has no SB height, and the window must still be found (this seed crashed before).
    s = generate_basin(tmp_path / "h9", n_wells=10, n_cored=5, seed=9,
                       config_path=PRESETS["hard"])
    surf = pd.read_csv(tmp_path / "h9" / "truth" / "surfaces.csv")
    assert set(surf["well"]) == set(s.wells)
    meta = json.loads((tmp_path / "h9" / "basin.json").read_text())
    assert sum(bool(w["eroded_sequences"]) for w in meta["wells"]) == 2


# ---------------------------------------------------------------- core-plug geochemistry


def test_core_plugs_lie_in_recovered_core_and_measure_the_truth(basin: dict,
                                                                 truth: dict) -> None:
    """core_geochem.csv: plugs only inside the cored intervals (core depth, none in lost core),
    XRD closed to 100 wt % of the crystalline fraction (common practice), values equal to the
    true composition at log depth = core depth + shift within the configured lab noise."""
    from facies_ml.config import load_config
    from facies_ml.geochem import read_geochem
    from facies_ml.synthetic import GEOCHEM_COLUMNS

    plugs = pd.read_csv(BUNDLED / "core_geochem.csv")
    assert list(plugs.columns) == GEOCHEM_COLUMNS
    wells = {w["name"]: w for w in basin["wells"]}
    cored = sorted(n for n, w in wells.items() if w["role"] == "cored")
    assert sorted(plugs["well"].unique()) == cored
    core = pd.read_csv(BUNDLED / "core_intervals.csv")
    dens = CFG["petrophysics"]["density_g_cc"]
    noise = CFG["core"]["plugs"]
    for name in cored:
        w, t, p = wells[name], truth[name], plugs[plugs["well"] == name]
        c = core[core["well"] == name]
        d = p["depth"].to_numpy()
        inside = ((d[:, None] >= c["top"].to_numpy()) & (d[:, None] < c["base"].to_numpy()))
        assert inside.any(axis=1).all(), name
        if w["lost_core"]:
            top, base = w["lost_core"]
            assert not ((d > top) & (d < base)).any()
        spacing = np.median(np.diff(d))
        assert 0.8 * noise["spacing_ft"] <= spacing <= 1.2 * noise["spacing_ft"]
        i = np.clip(np.searchsorted(t["depth"].to_numpy(), d + w["core_shift"] - w["step"] / 2),
                    0, len(t) - 1)
        assert np.all(np.abs(t["depth"].to_numpy()[i] - (d + w["core_shift"])) <= w["step"] / 2)
        err = p["toc_wt_pct"].to_numpy() - t["toc_wt_pct"].to_numpy()[i]
        sigma = noise["toc_noise_abs_wt_pct"] + noise["toc_noise_rel"] * t["toc_wt_pct"].to_numpy()[i]
        assert 0.8 < np.std(err / sigma) < 1.2 and abs(np.mean(err)) < 0.05
        mass = {m: t[f"v{m}_v_v"].to_numpy()[i] * dens[m] for m in ("quartz", "calcite", "clay")}
        quartz = 100 * mass["quartz"] / sum(mass.values())
        assert np.median(np.abs(p["quartz_wt_pct"].to_numpy() - quartz)) < 1.5 * \
            noise["xrd_noise_wt_pct"]
    total = plugs[["quartz_wt_pct", "carbonate_wt_pct", "clay_wt_pct"]].sum(axis=1)
    assert np.allclose(total, 100.0, atol=0.2)
    assert (plugs["toc_wt_pct"] >= 0).all()
    assert len(read_geochem(BUNDLED / "core_geochem.csv", load_config().settings.geochem,
                            known_wells=list(wells))) == len(plugs)


def test_core_plugs_use_their_own_random_stream(tmp_path: Path) -> None:
    """Changing the plug settings changes core_geochem.csv (and the README line) only."""
    cfg = yaml.safe_load(DEFAULT_SYNTH_CONFIG.read_text())
    cfg["facies_scheme"] = str(DEFAULT_SYNTH_CONFIG.parent / cfg["facies_scheme"])
    cfg["core"]["plugs"]["spacing_ft"] = 3.0
    cfg["core"]["plugs"]["xrd_noise_wt_pct"] = 4.0
    other = tmp_path / "plugs.yaml"
    other.write_text(yaml.safe_dump(cfg))
    generate_basin(tmp_path / "a", n_wells=3, n_cored=2, seed=5, samples_per_well=400)
    generate_basin(tmp_path / "b", n_wells=3, n_cored=2, seed=5, samples_per_well=400,
                   config_path=other)
    files = sorted(p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*")
                   if p.is_file())
    changed = [str(f) for f in files
               if (tmp_path / "a" / f).read_bytes() != (tmp_path / "b" / f).read_bytes()]
    assert changed == ["README.md", "core_geochem.csv"]
