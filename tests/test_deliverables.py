"""Offset-well deliverables: tops table vs in-memory surfaces, plots with missing curves,
landing windows, and Dask (reference engine) results identical to the serial run."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from facies_ml.api import load_project
from facies_ml.batch import list_well_files, run_batch
from facies_ml.config import load_config
from facies_ml.pipeline import FaciesPipeline
from facies_ml.report.landing import landing_summary
from facies_ml.report.outputs import fixed_decimal_rows, write_prediction_las, write_tops
from facies_ml.report.plots import Style, correlation_panel, well_section

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


@pytest.fixture(scope="module")
def fitted(tiny_basin, fast_config):
    cfg = load_config(fast_config)
    project = load_project(tiny_basin, tiny_basin / "core_intervals.csv", cfg)
    pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
    return pipe, project


def test_tops_table_matches_in_memory_surfaces(fitted, tmp_path):
    pipe, project = fitted
    preds = [pipe.predict_well(w) for w in project.wells]
    path = write_tops([(p.well.name, p.well.depth_unit, p.surfaces) for p in preds],
                      tmp_path / "tops.csv")
    tops = pd.read_csv(path, comment="#")
    expected = [(p.well.name, s.kind, s.depth, s.depth_p10, s.depth_p90, s.confidence)
                for p in preds for s in p.surfaces]
    assert len(tops) == len(expected) > 0
    for row, exp in zip(tops.itertuples(), expected, strict=True):
        assert (row.well, row.surface) == exp[:2]
        assert row.depth == pytest.approx(exp[2], abs=1e-3)
        assert row.depth_p10 == pytest.approx(exp[3], abs=1e-3)
        assert row.depth_p90 == pytest.approx(exp[4], abs=1e-3)
        assert row.confidence == pytest.approx(exp[5], abs=1e-3)
        assert row.depth_p10 <= row.depth <= row.depth_p90


def test_plots_for_a_well_missing_curves(fitted, tmp_path):
    pipe, project = fitted
    well = project.uncored[0] if project.uncored else project.wells[0]
    stripped = type(well)(**{**well.__dict__})
    stripped.curves = well.curves.drop(columns=[c for c in ("rhob_g_cc", "nphi_v_v", "rt_ohmm",
                                                            "pe_b_e") if c in well.curves])
    pred = pipe.predict_well(stripped)
    assert pred.model_used != "full"
    style = Style(pipe.config.path("plot_style"))
    p1 = well_section(pred, pipe.config.facies.labels, pipe.tract_names_, style,
                      tmp_path / "section.png")
    p2 = correlation_panel([pred, pipe.predict_well(well)], pipe.tract_names_, style,
                           tmp_path / "panel.png")
    for p in (p1, p2):
        assert p.read_bytes()[:8] == PNG_SIGNATURE and p.stat().st_size > 5000


def test_reported_organic_proxy_is_passey_floored_at_zero(fitted):
    # Passey et al. (1990), TOC = Delta log R x 10^(2.297 - 0.1688 LOM): a negative separation
    # means no organic signal, so the reported proxy is max(0, TOC); missing stays missing.
    from facies_ml.features import build_features

    pipe, project = fitted
    well = project.wells[0]
    pred = pipe.predict_well(well)
    norm = pipe.gr_normalizer_.transform(well) if pipe.gr_normalizer_ is not None else well
    X = build_features(norm.curves, norm.step, pipe.config.settings.features,
                       pipe.feature_reference_)
    col = "toc_passey_density" if "toc_passey_density" in X else "toc_passey_sonic"
    raw = X[col].to_numpy(float)
    got = pred.table["organic_proxy_toc_wt_pct"].to_numpy(float)
    assert (raw < 0).any() and (raw > 0).any()  # the check has teeth on this well
    np.testing.assert_array_equal(np.isnan(got), np.isnan(raw))
    ok = ~np.isnan(raw)
    np.testing.assert_allclose(got[ok], np.maximum(raw[ok], 0.0))


def test_landing_window_inside_target(fitted):
    pipe, project = fitted
    pred = pipe.predict_well(project.wells[0])
    settings = pipe.config.section("landing")
    table = landing_summary(pred, settings)
    assert len(table) >= 1
    depth = pred.table.index.to_numpy(float)
    target = np.isin(pred.table["systems_tract_label"], settings["target_tracts"])
    for row in table.itertuples():
        sel = (depth >= row.top) & (depth <= row.base)
        assert row.gross_target_thickness == pytest.approx(target[sel].sum() * pred.well.step)
        if row.best_window_top is not None and row.gross_target_thickness > 2 * settings["window_length"]:
            win = (depth >= row.best_window_top) & (depth <= row.best_window_base)
            # the best window by the configured score lies mostly in the TST + EHST target
            assert target[win].mean() > 0.5


def test_dask_local_cluster_matches_serial(fitted, tiny_basin, tmp_path):
    distributed = pytest.importorskip("distributed")
    pipe, _ = fitted
    files = list_well_files(tiny_basin)[:3]
    serial = run_batch(pipe, files, tmp_path / "serial", progress=False)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                  dashboard_address=None, processes=True) as cluster:
        remote = run_batch(pipe, files, tmp_path / "dask", scheduler=cluster.scheduler_address,
                           progress=False)
    assert [r.well for r in serial] == [r.well for r in remote]
    for a, b in zip(serial, remote, strict=True):
        assert a.failure is None and b.failure is None
        assert [(s.kind, s.depth, s.depth_p10, s.depth_p90) for s in a.surfaces] == \
               [(s.kind, s.depth, s.depth_p10, s.depth_p90) for s in b.surfaces]
        sa = (tmp_path / "serial" / f"{a.well}.csv").read_bytes()
        sb = (tmp_path / "dask" / f"{b.well}.csv").read_bytes()
        assert sa == sb


def test_joblib_matches_serial(fitted, tiny_basin, tmp_path):
    # One well without PE, so each worker trains a reduced-curve model on its single thread
    # while the serial run trains it on two: every output file must still be identical.
    import lasio

    pipe, _ = fitted
    files = list_well_files(tiny_basin)[:2]
    wells = tmp_path / "wells"
    wells.mkdir()
    las = lasio.read(str(files[0]))
    pe = [c.mnemonic for c in las.curves if c.mnemonic.upper().startswith("PE")]
    assert pe, "the demo forward model writes a photoelectric curve"
    for mnemonic in pe:
        las.delete_curve(mnemonic)
    las.well["WELL"].value = "QM-NOPE"
    las.write(str(wells / "QM-NOPE.las"), version=2.0)
    files = [wells / "QM-NOPE.las", files[1]]
    serial = run_batch(pipe, files, tmp_path / "s", progress=False)
    parallel = run_batch(pipe, files, tmp_path / "p", n_jobs=2, progress=False)
    assert serial[0].model_used.startswith("subset") and serial[0].failure is None
    for a, b in zip(serial, parallel, strict=True):
        assert a.model_used == b.model_used
        for suffix in (".csv", ".las"):
            assert (tmp_path / "s" / f"{a.well}{suffix}").read_bytes() == \
                   (tmp_path / "p" / f"{b.well}{suffix}").read_bytes(), suffix
        pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "s" / f"{a.well}.parquet"),
                                      pd.read_parquet(tmp_path / "p" / f"{b.well}.parquet"))


def test_a_figure_that_fails_never_aborts_the_batch(fitted, tiny_basin, tmp_path, monkeypatch):
    # Batch contract: one bad well never aborts the batch; a section that cannot be drawn
    # becomes a note on that well, and its prediction files are still written.
    import facies_ml.batch as batch

    pipe, _ = fitted
    files = list_well_files(tiny_basin)[:2]

    def broken(pipe_, pred, fig_dir, core_labels=None):
        raise RuntimeError("renderer exploded\nsecond line")

    monkeypatch.setattr(batch, "draw_well_section", broken)
    rows = run_batch(pipe, files, tmp_path, progress=False, section_dir=tmp_path / "figures")
    assert len(rows) == 2 and all(r.failure is None for r in rows)
    for r in rows:
        assert r.notes == ["well section not drawn (RuntimeError: renderer exploded)"]
        assert (tmp_path / f"{r.well}.las").is_file()


def test_fixed_decimal_rows_match_printf_formatting():
    # Reference: Python's float formatting "{:.5f}" (the C printf "%.5f" conversion). Rows
    # with a value near a rounding tie at the 6th decimal are left out: there binary rounding
    # of value x 10^5 may differ from exact decimal rounding by one unit in the last place.
    rng = np.random.default_rng(11)
    data = np.column_stack([rng.normal(0, 300, 2000), rng.random(2000), rng.normal(0, 1e6, 2000),
                            rng.integers(-3, 9, 2000), np.full(2000, -999.25)])
    scaled = np.abs(data) * 1e5
    data = data[(np.abs(scaled - np.floor(scaled) - 0.5) > 1e-3).all(axis=1)]
    assert len(data) > 1900
    lines = fixed_decimal_rows(data, 5).decode().splitlines()
    assert len(lines) == len(data)
    for line, row in zip(lines, data, strict=True):
        assert line.split() == [f"{v:.5f}" for v in row]
    widths = {len(line) for line in lines}
    assert len(widths) == 1  # aligned columns: every line has the same length
    assert fixed_decimal_rows(np.array([[2.5, -0.4]]), 0) == b" 2 0\n"  # half to even, no -0
    with pytest.raises(ValueError):
        fixed_decimal_rows(np.array([[np.nan]]))


def _written_las(pipe, well, path):
    cfg = pipe.config
    pred = pipe.predict_well(well)
    write_prediction_las(pred, path, cfg.facies.codes, cfg.facies.labels, pipe.tract_names_)
    return pred


def test_written_las_keeps_the_input_curves_and_adds_predictions(fitted, tiny_basin, tmp_path):
    # Reference: lasio (LAS 2.0 reader) on both the input file and our output. The input's
    # curves come back with their mnemonics, units, depths and values (5 decimals written);
    # the predictions sit on the same rows.
    import lasio

    from facies_ml.wells import read_well

    pipe, _ = fitted
    src = sorted(tiny_basin.glob("*.las"))[-1]
    pred = _written_las(pipe, read_well(src, pipe.config), tmp_path / "w.las")
    inp, out = lasio.read(str(src)), lasio.read(str(tmp_path / "w.las"))
    n_in = len(inp.curves)
    assert [(c.mnemonic, c.unit) for c in out.curves[:n_in]] == \
           [(c.mnemonic, c.unit) for c in inp.curves]
    np.testing.assert_allclose(out.index, inp.index, atol=5.01e-6)
    for c in inp.curves[1:]:
        np.testing.assert_allclose(out[c.mnemonic], c.data, atol=5.01e-6, equal_nan=True)
    # predictions: the working grid here is the file's own sampling (0.5 ft = 0.1524 m)
    table = pred.table
    code = pd.Series(table["lithofacies_code"].to_numpy(float), index=np.round(table.index, 3))
    rows = np.isfinite(out["LITHO_CODE"])
    assert rows.sum() == len(table)
    keys = np.round(pred.well.from_original_depth(out.index[rows]), 3)
    np.testing.assert_array_equal(out["LITHO_CODE"][rows], code.reindex(keys).to_numpy())
    for lab in pipe.config.facies.labels:
        p_ = pd.Series(table[f"p_{lab}"].to_numpy(float), index=code.index)
        np.testing.assert_allclose(out[f"P_{lab}"][rows], p_.reindex(keys), atol=5.01e-6)
    assert out.well["UWI"].value == inp.well["UWI"].value


def test_written_las_on_a_finer_metre_sampling(fitted, tiny_basin, tmp_path):
    # The file is in metres every 0.1 m (the working grid is 0.5 ft = 0.1524 m): every file
    # row inside the gridded interval takes the nearest grid sample's prediction (within half
    # a step); the file's depths and unit are kept.
    import lasio

    from facies_ml.wells import read_well

    pipe, _ = fitted
    src = lasio.read(str(sorted(tiny_basin.glob("*.las"))[-1]))
    assert src.curves[0].unit.upper() in ("M", "F", "FT")
    depth_m = src.index * (1.0 if src.curves[0].unit.upper() == "M" else 0.3048)  # 1 ft = 0.3048 m
    fine = np.arange(np.ceil(depth_m[0] * 10) / 10, depth_m[-1], 0.1)
    las = lasio.LASFile()
    las.well["WELL"].value = "QM-FINE"
    las.append_curve("DEPT", fine, unit="M")
    for c in src.curves[1:]:
        ok = np.isfinite(c.data)
        las.append_curve(c.mnemonic, np.interp(fine, depth_m[ok], c.data[ok]), unit=c.unit)
    las.write(str(tmp_path / "fine.las"), version=2.0)
    well = read_well(tmp_path / "fine.las", pipe.config)
    pred = _written_las(pipe, well, tmp_path / "out.las")
    out = lasio.read(str(tmp_path / "out.las"))
    assert out.curves[0].unit == "M"
    np.testing.assert_allclose(out.index, fine, atol=5.01e-6)
    grid_m = pred.table.index.to_numpy(float) * 0.3048
    inside = (fine >= grid_m[0]) & (fine <= grid_m[-1])
    assert np.isfinite(out["LITHO_CODE"][inside]).all()
    nearest = np.abs(fine[inside, None] - grid_m[None, :]).argmin(axis=1)
    np.testing.assert_array_equal(out["LITHO_CODE"][inside],
                                  pred.table["lithofacies_code"].to_numpy(float)[nearest])
