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
MUTATE = settings(max_examples=80, deadline=None,
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
    header = ["well", "depth_ft"] + [m for m, _ in curves]
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


# --------------------------------------------------------------------------------------------
# Mutations of VALID files (issue #12, item 7): every mutated cell that the reader keeps as a
# well is reported by a warning naming the well and the curve; anything else is one InputError
# line naming the file or well; never another exception, never a silently lost file.

VALID_CURVES = [("GR", "GAPI", 40.0, 150.0), ("RHOB", "G/CC", 2.2, 2.7),
                ("NPHI", "V/V", 0.1, 0.4), ("ILD", "OHMM", 2.0, 50.0), ("XYZ", "MV", -20.0, 20.0)]
BAD_CELLS = ["abc", "NaN", "inf", "-inf", "1e30", "1,5", "\xe9\xff", "--"]


def valid_rows(n: int, seed: int) -> list[list[str]]:
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        row = [f"{2000 + 0.5 * i:.2f}"]
        row += [f"{rng.uniform(lo, hi):.4f}" for _, _, lo, hi in VALID_CURVES]
        rows.append(row)
    return rows


@st.composite
def mutations(draw, n_rows: int):
    """A list of (kind, row, column, payload) edits of a valid file."""
    kinds = st.sampled_from(["cell", "cell", "cell", "drop_value", "extra_value", "garble_header",
                             "swap_unit", "inject_bytes", "truncate", "blank_line"])
    out = []
    for _ in range(draw(st.integers(1, 4))):
        out.append((draw(kinds), draw(st.integers(0, n_rows - 1)),
                    draw(st.integers(0, len(VALID_CURVES))), draw(st.sampled_from(BAD_CELLS)),
                    draw(st.integers(0, 10**6))))
    return out


def mutated_las(rows: list[list[str]], edits) -> tuple[bytes, dict[tuple[str, str], set[str]]]:
    """LAS bytes after ``edits``; returns also {(well, mnemonic): payloads} of bad cells."""
    head = ["~VERSION INFORMATION", " VERS. 2.0 : CWLS LAS 2.0", " WRAP. NO :",
            "~WELL INFORMATION", f" STRT.F {rows[0][0]} :", f" STOP.F {rows[-1][0]} :",
            " STEP.F 0.5 :", " NULL. -999.25 :", " WELL. QM-O6 : WELL", "~CURVE INFORMATION",
            " DEPT.F : depth"] + [f" {m}.{u} : curve" for m, u, _, _ in VALID_CURVES]
    data = [list(r) for r in rows]
    bad: dict[tuple[str, str], set[str]] = {}
    structural = False
    tail_ops = []
    for kind, row, col, payload, seed in edits:
        if kind == "cell":
            col = col % len(data[row])
            data[row][col] = payload
            name = "DEPT" if col == 0 else VALID_CURVES[col - 1][0]
            bad.setdefault(("QM-O6", name), set()).add(payload)
        elif kind == "drop_value":
            data[row].pop(col % len(data[row]))
            structural = True
        elif kind == "extra_value":
            data[row].append("7.5")
            structural = True
        elif kind == "garble_header":
            head[2 + seed % (len(head) - 2)] = ["~~", "WELL QM-O6", " STRT.F abc :", "\x00\x01",
                                                " DEPT.F", ""][seed % 6]
            structural = True
        elif kind == "swap_unit":
            head[10] = [" DEPT.M : depth", " DEPT.PARSEC : depth", " DEPT. : depth"][seed % 3]
            head[4:7] = [h.replace(".F", ".M") for h in head[4:7]] if seed % 2 else head[4:7]
            structural = True
        else:
            tail_ops.append((kind, seed))
    text = "\n".join(head + ["~A"] + [" ".join(r) for r in data]) + "\n"
    blob = text.encode("latin-1")
    for kind, seed in tail_ops:
        structural = True
        if kind == "inject_bytes":
            k = seed % len(blob)
            blob = blob[:k] + bytes([0xE9, 0xFF, 0x00]) + blob[k:]
        elif kind == "truncate":
            blob = blob[:seed % len(blob)]
        elif kind == "blank_line":
            lines = blob.split(b"\n")
            k = seed % len(lines)
            blob = b"\n".join(lines[:k] + [b"   "] + lines[k:])
    return blob, ({} if structural else bad)


def assert_cells_reported(wells, bad: dict[tuple[str, str], set[str]]) -> None:
    """Each curve given a bad cell is named by a warning of its well: ``bad`` maps
    (well, column) to the cell texts written there."""
    by_name = {w.name: w for w in wells}
    for (well, name), payloads in bad.items():
        if name == "XYZ" and payloads <= {"1e30"}:
            continue                           # a number in a curve the model does not use
        text = " ".join(by_name[well].intake.get("warnings", []))
        assert f"well {well!r}" in text and f"curve {name!r}" in text, (well, name, payloads)


@MUTATE
@given(st.integers(8, 40), st.integers(0, 2**16), st.data())
def test_mutated_las(n_rows, seed, data):
    rows = valid_rows(n_rows, seed)
    edits = data.draw(mutations(n_rows))
    blob, bad = mutated_las(rows, edits)
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "QM-O6.las"
        p.write_bytes(blob)
        out = check_outcome(lambda: read_well(p, CFG), p)
        if out is not None:
            assert_cells_reported(out, bad)
        good = Path(tmp) / "QM-K1.las"
        good.write_bytes(mutated_las(valid_rows(10, 1), [])[0].replace(b"QM-O6", b"QM-K1"))
        wells, failures = read_wells(tmp, CFG, on_error="collect")
        assert len(wells) + len(failures) == 2                  # nothing silently dropped
        assert "QM-K1" in [w.name for w in wells]
        for f in failures:
            assert f["file"] == str(p) and "\n" not in f["reason"] and f["reason"].strip()


@st.composite
def mutated_table(draw):
    """A valid two-well CSV (or one plain-depth table) with edits; (text bytes, bad cells,
    well names, plain_depth)."""
    n = draw(st.integers(5, 25))
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    plain = draw(st.booleans())
    header = ["well", "depth" if plain else "depth_ft"] + [m for m, _, _, _ in VALID_CURVES]
    body = []
    names = ["QM-O1", "QM-O2"]
    if draw(st.booleans()):
        names = ["QM-O1", "QM-O1"]                              # a repeated name, 2 blocks
    for k, name in enumerate(names):
        for i in range(n):
            body.append([name, f"{1000 + 200 * k + 0.5 * i:.2f}"]
                        + [f"{rng.uniform(lo, hi):.4f}" for _, _, lo, hi in VALID_CURVES])
    bad: dict[tuple[str, str], set[str]] = {}
    structural = False
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["cell", "cell", "drop_value", "extra_value", "truncate",
                                     "bytes"]))
        r = draw(st.integers(0, len(body) - 1))
        c = draw(st.integers(1, len(header) - 1))
        c = c % len(body[r]) or 1
        if kind == "cell":
            payload = draw(st.sampled_from(BAD_CELLS)).replace(",", ";")
            body[r][c] = payload
            bad.setdefault((body[r][0], header[c]), set()).add(payload)
        elif kind == "drop_value":
            body[r].pop(c)
            structural = True
        elif kind == "extra_value":
            body[r].append("1.0")
            structural = True
        else:
            structural = True
            body[r][c] = body[r][c] + ("\udcff" if kind == "bytes" else "")
    text = "\n".join(",".join(row) for row in [header] + body) + "\n"
    blob = text.encode("utf-8", errors="surrogateescape")
    cut = structural and draw(st.booleans())
    if cut:                                  # a CSV has no end marker: lost rows are unseen
        blob = blob[:draw(st.integers(0, len(blob)))]
    return blob, ({} if structural else bad), set() if cut else set(names), plain


@MUTATE
@given(mutated_table())
def test_mutated_csv(case):
    blob, bad, names, plain = case
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "offsets.csv"
        p.write_bytes(blob)
        out = check_outcome(lambda: read_table(p, CFG), p)
        if out is not None:
            assert not plain                                     # a unit is never guessed
            assert names <= {w.name for w in out}               # no well disappears
            assert_cells_reported(out, bad)
        try:
            wells, failures = read_wells(tmp, CFG, on_error="collect")
        except InputError as err:                                # the folder's only file
            assert "\n" not in str(err) and p.name in str(err)
            return
        assert wells or failures                                 # the file is accounted for
        for f in failures:
            assert "\n" not in f["reason"] and (str(p) in f["reason"] or f["well"])
