"""LAS reading and conditioning, checked against the CWLS LAS 2.0 standard's definitions.

LAS 2.0 (Canadian Well Logging Society, "LAS Version 2.0: A Digital Standard for Logs"):
~V VERS/WRAP; ~W STRT = first index value, STOP = last index value, STEP = constant increment
(may be negative; 0 when not constant), NULL = value marking missing data; ~C lists the curves,
the first being the index (DEPT); with WRAP. YES the index value stands alone on the first line
of each depth step and the other values follow on lines of at most 80 characters.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from facies_ml.config import load_config
from facies_ml.errors import InputError
from facies_ml.wells import intake_summary, read_well

FT = 0.3048  # exact: international foot, 1 ft = 0.3048 m (1959 agreement)


def las_text(curves: list[tuple[str, str]], rows: list[list[float | str]], *, unit: str = "F",
             null: str = "-999.25", wrap: bool = False, well: str = "QM-K1",
             step: str | None = None) -> str:
    """Hand-written LAS 2.0 text (the index is the first of ``curves``)."""
    depths = [float(r[0]) for r in rows]
    if step is None:
        step = f"{depths[1] - depths[0]:.4f}" if len(depths) > 1 else "0"
    lines = ["~VERSION INFORMATION",
             " VERS.                 2.0 : CWLS LOG ASCII STANDARD - VERSION 2.0",
             f" WRAP.                 {'YES' if wrap else 'NO'} : wrap mode",
             "~WELL INFORMATION",
             f" STRT.{unit}            {depths[0]:.4f} : START DEPTH",
             f" STOP.{unit}            {depths[-1]:.4f} : STOP DEPTH",
             f" STEP.{unit}            {step} : STEP",
             f" NULL.                 {null} : NULL VALUE",
             " COMP.                 Quillmere Test Operator : COMPANY",
             f" WELL.                 {well} : WELL",
             " FLD .                 Quillmere Basin : FIELD",
             "~CURVE INFORMATION"]
    for mnem, cunit in curves:
        lines.append(f" {mnem}.{cunit}    : {mnem} curve")
    lines.append("~A")
    for r in rows:
        cells = [str(v) for v in r]
        if wrap:
            lines.append(cells[0])
            rest = cells[1:]
            for i in range(0, len(rest), 2):   # two values per line: well under 80 characters
                lines.append(" ".join(rest[i:i + 2]))
        else:
            lines.append(" ".join(cells))
    return "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def cfg():
    return load_config()


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


CURVES = [("DEPT", "F"), ("GR", "GAPI"), ("RHOB", "G/CC"), ("NPHI", "V/V"), ("ILD", "OHMM")]


def base_rows(n: int = 21, top: float = 5000.0, step: float = 0.5) -> list[list[float | str]]:
    rows = []
    for i in range(n):
        d = top + i * step
        rows.append([d, 60.0 + i, 2.40 + 0.005 * i, 0.20 + 0.002 * i, 10.0 + 0.1 * i])
    return rows


def test_unwrapped_feet_values_and_nulls(tmp_path, cfg):
    rows = base_rows()
    rows[4][1] = "-999.25"   # the file's NULL value (LAS 2.0 ~W NULL)
    for i in range(12, 17):  # five NULL samples in a row: a 3.0 ft hole > max_gap 2.0 ft
        rows[i][1] = "-999.25"
    well = read_well(write(tmp_path, "k1.las", las_text(CURVES, rows)), cfg)
    assert well.name == "QM-K1"
    assert well.original_depth_unit == "ft" and well.depth_unit == "ft"
    # STRT/STOP per LAS 2.0 = first/last index values; STEP = increment
    assert well.header["STRT"] == 5000.0 and well.header["STOP"] == 5010.0
    assert well.header["STEP"] == 0.5
    np.testing.assert_allclose(well.depth, 5000.0 + 0.5 * np.arange(21))
    gr = well.curves["gr_api"].to_numpy()
    expected = 60.0 + np.arange(21)
    # one NULL leaves a 1.0 ft hole (<= intake.max_gap_interpolate 2.0 ft): bridged linearly,
    # and GR is linear in depth here, so the bridged value is exact
    assert gr[4] == pytest.approx(64.0)
    assert np.isnan(gr[12:17]).all()                # the 3.0 ft hole stays missing
    keep = np.r_[0:12, 17:21]
    np.testing.assert_allclose(gr[keep], expected[keep])
    np.testing.assert_allclose(well.curves["rhob_g_cc"], 2.40 + 0.005 * np.arange(21))
    assert set(well.roles) == {"gr_api", "rhob_g_cc", "nphi_v_v", "rt_ohmm"}
    assert well.intake["dropped"]["null_value_cells"] == 6
    assert well.intake["roles"]["rt_ohmm"]["mnemonic"] == "ILD"
    json.dumps(well.intake)                       # the intake report is JSON-serialisable
    assert "QM-K1" in intake_summary(well) and "\n" not in intake_summary(well)


def test_wrapped_equals_unwrapped_with_other_null(tmp_path, cfg):
    rows = base_rows()
    for i in (7, 8, 9, 10, 11):
        rows[i][3] = "-9999"
    wrapped = [r[:] for r in rows]
    a = read_well(write(tmp_path, "a.las", las_text(CURVES, rows, null="-9999")), cfg)
    b = read_well(write(tmp_path, "b.las", las_text(CURVES, wrapped, null="-9999", wrap=True)),
                  cfg)
    assert b.header["wrap"].upper() == "YES"
    assert np.isnan(b.curves["nphi_v_v"].iloc[7:12]).all()
    assert b.intake["dropped"]["null_value_cells"] == 5
    np.testing.assert_array_equal(a.curves.to_numpy(), b.curves.to_numpy())


def test_metre_file_converted_with_exact_foot(tmp_path, cfg):
    # Index in metres, 0.1524 m = 0.5 ft exactly; GR linear in depth so interpolation is exact.
    n = 41
    d_m = 1524.0 + 0.1524 * np.arange(n)             # 1524 m = 5000 ft exactly
    rows = [[f"{d:.4f}", f"{2.0 * d - 2900.0:.6f}", "2.5"] for d in d_m]
    text = las_text([("DEPT", "M"), ("GR", "GAPI"), ("RHOB", "G/CC")], rows, unit="M")
    well = read_well(write(tmp_path, "m.las", text), cfg)
    assert well.original_depth_unit == "m" and well.depth_unit == "ft"
    np.testing.assert_allclose(well.depth, 5000.0 + 0.5 * np.arange(n), atol=1e-6)
    expected_gr = 2.0 * (well.depth * FT) - 2900.0
    np.testing.assert_allclose(well.curves["gr_api"], expected_gr, atol=1e-6)
    np.testing.assert_allclose(well.to_original_depth(well.depth), d_m, atol=1e-9)


def test_metre_working_unit_keeps_metres(tmp_path):
    cfg_m = load_config(overrides={"project": {"working_depth_unit": "m", "step": 0.1524}})
    rows = [[f"{1000 + 0.1524 * i:.4f}", 50 + i] for i in range(10)]
    text = las_text([("DEPTH", "METRES"), ("GR", "API")], rows, unit="METRES")
    well = read_well(write(tmp_path, "m.las", text), cfg_m)
    assert well.original_depth_unit == "m" and well.depth_unit == "m"
    assert well.curves["gr_api"].notna().sum() >= 9


def test_missing_optional_curves_and_no_caliper(tmp_path, cfg):
    text = las_text([("DEPT", "FT"), ("GR", "GAPI")], [[1000 + 0.5 * i, 40 + i] for i in range(9)],
                    unit="FT")
    well = read_well(write(tmp_path, "g.las", text), cfg)
    assert well.roles == ["gr_api"]
    assert any("no caliper" in n for n in well.intake["notes"])
    assert not well.flags["bad_hole"].any()


def test_step_zero_irregular_index_is_resampled(tmp_path, cfg):
    # LAS 2.0: STEP 0 means the increment is not constant.
    depths = [2000.0, 2000.3, 2001.0, 2001.4, 2002.0]
    rows = [[d, 3.0 * d - 5900.0] for d in depths]     # GR linear in depth
    text = las_text([("DEPT", "F"), ("GR", "GAPI")], rows, step="0")
    well = read_well(write(tmp_path, "s.las", text), cfg)
    np.testing.assert_allclose(well.depth, [2000.0, 2000.5, 2001.0, 2001.5, 2002.0])
    np.testing.assert_allclose(well.curves["gr_api"], 3.0 * well.depth - 5900.0, atol=1e-9)


def test_negative_step_reversed_depth_sorted(tmp_path, cfg):
    rows = base_rows()[::-1]                      # LAS 2.0 allows STEP < 0 (bottom-up logging)
    well = read_well(write(tmp_path, "r.las", las_text(CURVES, rows)), cfg)
    assert np.all(np.diff(well.depth) > 0)
    np.testing.assert_allclose(well.curves["gr_api"], 60.0 + np.arange(21))
    assert any("sorted" in n for n in well.intake["notes"])


def test_duplicate_depth_keeps_first(tmp_path, cfg):
    rows = base_rows()
    dup = rows[5][:]
    dup[1] = 500.0
    rows.insert(6, dup)
    well = read_well(write(tmp_path, "d.las", las_text(CURVES, rows, step="0")), cfg)
    assert well.intake["dropped"]["duplicate_depth_rows"] == 1
    assert well.curves["gr_api"].iloc[5] == 65.0


def test_no_depth_index_is_input_error(tmp_path, cfg):
    text = las_text([("GR", "GAPI"), ("RHOB", "G/CC")], [[50, 2.4], [51, 2.5]])
    p = write(tmp_path, "nodepth.las", text)
    with pytest.raises(InputError) as e:
        read_well(p, cfg)
    assert str(p) in str(e.value) and "depth index" in str(e.value)


def test_unknown_depth_unit_is_input_error(tmp_path, cfg):
    text = las_text([("DEPT", "FURLONG"), ("GR", "GAPI")], [[1, 50], [2, 51]], unit="FURLONG")
    with pytest.raises(InputError, match="depth unit"):
        read_well(write(tmp_path, "u.las", text), cfg)


def test_preference_order_and_alternatives(tmp_path, cfg):
    curves = [("DEPT", "F"), ("SGR", "GAPI"), ("GR", "GAPI")]
    rows = [[1000 + 0.5 * i, 80 + i, 50 + i] for i in range(9)]
    well = read_well(write(tmp_path, "p.las", las_text(curves, rows)), cfg)
    assert well.intake["roles"]["gr_api"]["mnemonic"] == "GR"       # GR listed before SGR
    assert well.intake["roles"]["gr_api"]["alternatives"] == ["SGR"]
    assert well.curves["gr_api"].iloc[0] == 50


def test_all_null_curve_dropped_with_warning(tmp_path, cfg, caplog):
    curves = [("DEPT", "F"), ("GR", "GAPI"), ("PEF", "B/E")]
    rows = [[1000 + 0.5 * i, 50 + i, -999.25] for i in range(9)]
    with caplog.at_level("WARNING", logger="facies_ml.wells"):
        well = read_well(write(tmp_path, "n.las", las_text(curves, rows)), cfg)
    assert "pe_b_e" not in well.curves
    assert well.intake["unusable_curves"] == {"pe_b_e": {"mnemonic": "PEF", "reason": "all null"}}
    (msg,) = well.intake["warnings"]
    assert "'QM-K1'" in msg and "'PEF'" in msg and "no data" in msg
    assert msg in caplog.text                                   # printed on the console too


def test_gap_longer_than_max_gap_not_interpolated(tmp_path, cfg):
    # max_gap_interpolate = 2.0 ft (configs/default.yaml): a 1.0 ft hole is bridged, 5 ft is not
    depths = [100.0, 100.5, 101.5, 102.0, 107.0, 107.5]
    rows = [[d, 2 * d] for d in depths]
    well = read_well(write(tmp_path, "g.las", las_text([("DEPT", "F"), ("GR", "GAPI")], rows,
                                                       step="0")), cfg)
    gr = well.curves["gr_api"]
    assert gr.loc[101.0] == pytest.approx(202.0)         # inside the 1 ft gap: interpolated
    assert gr.loc[103.0:106.5].isna().all()              # inside the 5 ft gap: missing


def test_fast_reader_equals_lasio_full_reader_on_demo_wells(cfg, monkeypatch):
    # The fast path (lasio reads the header text only, numpy the ~A block) must give the same
    # conditioned well as lasio's own full reader (the reference) on every bundled file.
    from facies_ml.wells import las as las_module

    demo = Path(__file__).resolve().parents[1] / "synthetic_wells"
    files = sorted(demo.glob("*.las"))
    assert len(files) >= 10
    fast = [read_well(f, cfg) for f in files]
    monkeypatch.setattr(las_module, "_read_fast", lambda src: None)
    for f, a in zip(files, fast, strict=True):
        b = read_well(f, cfg)
        assert (a.name, a.depth_unit, a.original_depth_unit) == \
               (b.name, b.depth_unit, b.original_depth_unit), f.name
        np.testing.assert_array_equal(a.depth, b.depth)
        assert list(a.curves.columns) == list(b.curves.columns), f.name
        np.testing.assert_array_equal(a.curves.to_numpy(), b.curves.to_numpy())
        assert json.dumps(a.intake, sort_keys=True, default=str) == \
               json.dumps(b.intake, sort_keys=True, default=str), f.name


def test_fast_reader_falls_back_for_a_section_after_the_data(tmp_path, cfg):
    # Anything the fast path does not cover (here a section after ~A) goes to lasio's reader.
    from facies_ml.wells.las import _read_fast

    text = las_text(CURVES, base_rows())
    plain = write(tmp_path, "plain.las", text)
    assert _read_fast(str(plain)) is not None
    odd = write(tmp_path, "odd.las", text + "~Other\nnote\n")
    assert _read_fast(str(odd)) is None
