"""Property-based fuzzing of well intake: garbled LAS and CSV input gives either a clean Well or
an InputError whose message is one line naming the file/well -- never another exception, and
never a silently dropped well (each file in a folder is a well or a reported failure).

LAS layout per the CWLS LAS 2.0 standard (~V, ~W, ~C, ~A sections; first curve = index).
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from facies_ml.config import load_config
from facies_ml.errors import InputError
from facies_ml.wells import ROLES, Well, read_table, read_well, read_wells

CFG = load_config()
SETTINGS = settings(max_examples=120, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

CURVES = [("GR", "GAPI"), ("RHOB", "G/CC"), ("NPHI", "V/V"), ("ILD", "OHMM"), ("CALI", "IN"),
          ("BS", "IN"), ("PEF", "B/E"), ("DT", "US/FT"), ("XYZ", "MV"), ("NPHI", "%")]
TYPICAL = {"GR": (20, 200), "RHOB": (2.0, 2.8), "NPHI": (0.05, 0.45), "ILD": (1, 100),
           "CALI": (8, 12), "BS": (8.5, 8.5), "PEF": (2, 5), "DT": (60, 120), "XYZ": (-50, 50)}

cell = st.one_of(
    st.just("typical"), st.just("typical"), st.just("typical"), st.just("typical"),
    st.sampled_from(["-999.25", "-9999", "abc", "nan", "1e308", "-1e308", "inf", "1,5", "",
                     "999999999", "0", "-0.0", "1e-300", "--"]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)


@st.composite
def garbled_table(draw):
    n = draw(st.integers(0, 25))
    curves = draw(st.lists(st.sampled_from(CURVES), min_size=1, max_size=5))
    order = draw(st.sampled_from(["up", "down", "dup", "shuffle"]))
    step = draw(st.sampled_from([0.5, 0.25, 1.0, 0.1524]))
    depth = 1000.0 + step * np.arange(n)
    if order == "down":
        depth = depth[::-1]
    elif order == "dup" and n > 2:
        depth[draw(st.integers(1, n - 1))] = depth[0]
    elif order == "shuffle":
        depth = np.array(draw(st.permutations(list(depth)))) if n else depth
    all_null = draw(st.sets(st.integers(0, max(0, len(curves) - 1)), max_size=2))
    rows = []
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    for i in range(n):
        d = depth[i]
        dcell = draw(st.sampled_from(["ok"] * 12 + ["-999.25", "x", ""]))
        row = [f"{d:.4f}" if dcell == "ok" else dcell]
        for j, (m, u) in enumerate(curves):
            c = draw(cell)
            if j in all_null:
                c = "-999.25"
            elif c == "typical":
                lo, hi = TYPICAL[m]
                v = rng.uniform(lo, hi) * (100 if u == "%" else 1)
                c = f"{v:.4f}"
            row.append(c)
        rows.append(row)
    cut = draw(st.one_of(st.none(), st.floats(0.0, 1.0)))
    return curves, rows, cut


def check_outcome(fn, path: Path):
    """Run ``fn``; it must return valid Well(s) or raise a one-line InputError naming the file."""
    try:
        out = fn()
    except InputError as err:
        msg = str(err)
        assert "\n" not in msg and msg.strip()
        assert str(path) in msg
        return None
    wells = out if isinstance(out, list) else [out]
    for w in wells:
        assert isinstance(w, Well)
        d = w.depth
        assert d.size >= 1 and np.all(np.isfinite(d))
        if d.size > 1:
            assert np.allclose(np.diff(d), w.step)            # regular grid, increasing downward
        assert set(w.curves.columns) <= set(ROLES) and w.curves.shape[1] >= 1
        assert w.flags is not None and w.flags.index.equals(w.curves.index)
        vals = w.curves.to_numpy()
        assert not np.isinf(vals).any()
        json.dumps(w.intake)
    return wells


def las_text(curves, rows, cut) -> str:
    lines = ["~VERSION INFORMATION", " VERS. 2.0 : CWLS LAS 2.0", " WRAP. NO :",
             "~WELL INFORMATION", " STRT.F 1000.0 :", " STOP.F 1010.0 :", " STEP.F 0.5 :",
             " NULL. -999.25 :", " WELL. QM-O5 : WELL", "~CURVE INFORMATION", " DEPT.F : depth"]
    lines += [f" {m}.{u} : curve" for m, u in curves]
    lines += ["~ASCII"] + [" ".join(c if c != "" else "-" for c in r) for r in rows]
    text = "\n".join(lines) + "\n"
    if cut is not None:
        text = text[: int(len(text) * cut)]
    return text


@SETTINGS
@given(garbled_table())
def test_garbled_las(case):
    curves, rows, cut = case
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "QM-O5.las"
        p.write_text(las_text(curves, rows, cut))
        check_outcome(lambda: read_well(p, CFG), p)
        good = Path(tmp) / "QM-K1.las"
        good.write_text(las_text([("GR", "GAPI")], [[f"{1000 + 0.5 * i}", f"{60 + i}"]
                                                    for i in range(10)], None).replace(
            "QM-O5", "QM-K1"))
        wells, failures = read_wells(tmp, CFG, on_error="collect")
        assert len(wells) + len(failures) == 2          # nothing silently dropped
        assert "QM-K1" in [w.name for w in wells]
        for f in failures:
            assert f["file"] == str(p) and "\n" not in f["reason"]


@SETTINGS
@given(garbled_table(), st.booleans())
def test_garbled_csv(case, two_wells):
    curves, rows, cut = case
    header = ["well", "depth"] + [m for m, _ in curves]
    lines = [",".join(header)]
    names = set()
    for i, r in enumerate(rows):
        name = "QM-O2" if (two_wells and i % 2) else "QM-O1"
        names.add(name)
        lines.append(",".join([name] + [c.replace(",", ";") for c in r]))
    text = "\n".join(lines) + "\n"
    if cut is not None:
        text = text[: int(len(text) * cut)]
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "offsets.csv"
        p.write_text(text)
        check_outcome(lambda: read_table(p, CFG), p)
        try:
            wells, failures = read_wells(tmp, CFG, on_error="collect")
        except InputError as err:                       # e.g. the folder's only file unreadable
            assert "\n" not in str(err)
            return
        got = {w.name for w in wells} | {f.get("well") for f in failures}
        whole_file_failed = any(f.get("well") is None for f in failures)
        recognised = any(m != "XYZ" for m, _ in curves)
        if cut is None and recognised and not whole_file_failed:
            assert names <= got                         # every well is read or reported
