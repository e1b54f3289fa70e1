"""Basin-wide sequence names: splitting a tract path into sequences and correlating wells.

All wells here are invented: a synthetic basin of 8 sequences (S1 deepest .. S8 youngest),
4 named "cored" wells and 6 "offset" wells with different logged windows, lateral thickness
factors, GR calibration and two eroded interior sequences.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest

from facies_ml.correlation import (
    CorrelationResult,
    SequenceCorrelator,
    SequenceUnit,
    split_sequences,
    surface_names,
    unit_names_from_samples,
)
from facies_ml.errors import InputError

TRACTS = ["LST", "TST", "EHST", "LHST"]
L, T, E, H = range(4)
# Common practice (and the project's rule table): an SB lies at the base of an LST, or of a
# TST resting directly on a highstand; the MFS is the TST -> EHST turnaround. Read up-section.
SB = {("LHST", "LST"), ("LHST", "TST"), ("EHST", "LST"), ("EHST", "TST")}
N_SEQ = 8
SEQ_NAMES = [f"S{i + 1}" for i in range(N_SEQ)]
STEP = 0.5   # ft


def correlator(**over: object) -> SequenceCorrelator:
    from facies_ml.config import load_config

    params: dict[str, object] = dict(load_config().section("correlation"))  # project defaults
    params.update(over)
    return SequenceCorrelator(**params)  # type: ignore[arg-type]


# ---------------------------------------------------------------- synthetic basin
@dataclass
class Basin:
    tract_ft: np.ndarray      # (N_SEQ, 4) basin-mean tract thickness, ft
    log_rt: np.ndarray        # (N_SEQ,) log10 resistivity level
    rhob: np.ndarray          # (N_SEQ,) g/cc
    nphi: np.ndarray          # (N_SEQ,) v/v


def make_basin(seed: int = 11) -> Basin:
    rng = np.random.default_rng(seed)
    seq_factor = rng.permutation(np.linspace(0.55, 1.9, N_SEQ))    # distinct per sequence
    tract = seq_factor[:, None] * np.array([12.0, 16.0, 20.0, 28.0]) * rng.uniform(0.7, 1.3,
                                                                                   (N_SEQ, 4))
    tract[[2, 6], L] = 0.0          # two sequences without a lowstand (SB = LHST -> TST)
    k = np.arange(N_SEQ)
    return Basin(tract_ft=tract,
                 log_rt=0.6 + 0.06 * k + rng.normal(0, 0.12, N_SEQ),   # slow trend + noise
                 rhob=2.58 - 0.012 * k + rng.normal(0, 0.025, N_SEQ),
                 nphi=0.16 + 0.004 * k + rng.normal(0, 0.015, N_SEQ))


BASIN = make_basin()


@dataclass
class Well:
    depth: np.ndarray         # top-down
    tracts: np.ndarray        # top-down
    curves: pd.DataFrame
    truth: list[str]          # per sample, top-down


def make_well(seed: int, first: tuple[int, float], last: tuple[int, float], lateral: float,
              eroded: tuple[int, ...] = (), extra_after: int | None = None) -> Well:
    """Column of the basin logged from sequence ``first[0]`` (at fraction ``first[1]`` of its
    thickness) up to ``last[0]`` (fraction ``last[1]``); sequence indices 0-based bottom-up.
    ``extra_after``: a spurious tiny LST + LHST pair near the top of that sequence."""
    rng = np.random.default_rng(seed)
    pieces: list[tuple[int, int, float]] = []          # (seq, tract, ft) bottom-up
    for s in range(N_SEQ):
        if s in eroded:
            continue
        for t in range(4):
            thk = BASIN.tract_ft[s, t] * lateral * rng.uniform(0.93, 1.07)
            if thk > 0:
                pieces.append((s, t, thk))
        if extra_after == s:
            pieces += [(s, L, 1.5), (s, H, 1.5)]
    tops = np.cumsum([p[2] for p in pieces])
    bases = tops - np.array([p[2] for p in pieces])
    seq_of = np.array([p[0] for p in pieces])

    def height(s: int, frac: float) -> float:
        idx = np.flatnonzero(seq_of == s)
        return bases[idx[0]] + frac * (tops[idx[-1]] - bases[idx[0]])

    h = np.arange(height(*first), height(*last), STEP)               # up-section heights
    which = np.searchsorted(tops, h, side="right")
    seq = seq_of[which]
    tract = np.array([pieces[w][1] for w in which])
    n = h.size
    flood = np.isin(tract, [T, E])
    log_rt = BASIN.log_rt[seq] + 0.15 * flood - 0.05 * (tract == L) + rng.normal(0, 0.04, n)
    rhob = BASIN.rhob[seq] - 0.04 * flood + rng.normal(0, 0.015, n)
    nphi = BASIN.nphi[seq] + 0.02 * flood + rng.normal(0, 0.01, n)
    gain, offset = rng.uniform(0.8, 1.25), rng.uniform(-20, 20)       # per-well GR calibration
    gr = gain * (65 + 45 * flood - 15 * (tract == L) + rng.normal(0, 6, n)) + offset
    rt = 10 ** log_rt
    rt[rng.random(n) < 0.02] = np.nan                                 # a few gaps
    top = rng.uniform(5000.0, 7000.0)
    depth = top + (h[-1] - h)                                         # increases downward
    curves = pd.DataFrame({"gr_api": gr, "rt_ohmm": rt, "rhob_g_cc": rhob, "nphi_v_v": nphi})
    return Well(depth=depth[::-1], tracts=tract[::-1], curves=curves.iloc[::-1]
                .reset_index(drop=True), truth=[SEQ_NAMES[s] for s in seq[::-1]])


def units_of(w: Well) -> list[SequenceUnit]:
    return split_sequences(w.depth, w.tracts, w.curves, TRACTS, SB)


CORED = {
    "core-A": make_well(1, (0, 0.2), (7, 0.8), 1.00),
    "core-B": make_well(2, (0, 0.5), (6, 0.6), 0.82),
    "core-C": make_well(3, (1, 0.3), (7, 0.9), 1.18),
    "core-D": make_well(4, (0, 0.1), (7, 0.5), 0.92),
}
OFFSET = {
    "off-1": make_well(21, (0, 0.3), (7, 0.6), 1.25, eroded=(3,)),
    "off-2": make_well(22, (1, 0.6), (6, 0.6), 0.78, eroded=(5,)),
    "off-3": make_well(23, (2, 0.5), (5, 0.5), 1.05),
    "off-4": make_well(24, (0, 0.7), (4, 0.3), 0.85),
    "off-5": make_well(25, (3, 0.4), (7, 0.7), 1.30),
    "off-6": make_well(26, (1, 0.2), (7, 0.95), 0.75),
}


@pytest.fixture(scope="module")
def fitted() -> SequenceCorrelator:
    wells = {w: units_of(x) for w, x in CORED.items()}
    names = {w: unit_names_from_samples(wells[w], CORED[w].truth) for w in CORED}
    return correlator().fit(wells, names)


# ---------------------------------------------------------------- split_sequences
def test_split_sequences_hand_built_column() -> None:
    # up-section runs: LHST 4 | LST 2, TST 3, EHST 3, LHST 2 | TST 2, EHST 4 (samples, 1 ft)
    up = [H] * 4 + [L] * 2 + [T] * 3 + [E] * 3 + [H] * 2 + [T] * 2 + [E] * 4
    n = len(up)
    depth_up = 1000.0 - np.arange(n)                     # deepest sample first
    gr_up = np.where(np.isin(up, [T, E]), 120.0, 60.0)
    curves = pd.DataFrame({"gr_api": gr_up[::-1], "rhob_g_cc": np.full(n, 2.5)})  # no rt, nphi
    units = split_sequences(depth_up[::-1], np.array(up[::-1]), curves, TRACTS, SB)
    assert len(units) == 3
    u0, u1, u2 = units
    # unit 0: the LHST at the base of the log; SB between samples 3 and 4 -> 996.5
    assert (u0.base_depth, u0.top_depth) == (1000.0, 996.5)
    assert u0.base_is_log_edge and not u0.top_is_log_edge and u0.mfs_depth is None
    # unit 1: samples 4..13, SB below at 996.5, SB above between 13 and 14 -> 986.5
    assert (u1.base_depth, u1.top_depth) == (996.5, 986.5)
    assert not u1.base_is_log_edge and not u1.top_is_log_edge
    assert u1.mfs_depth == 991.5                          # between samples 8 (TST) and 9 (EHST)
    assert u1.tract_thickness == {"LST": 2.0, "TST": 3.0, "EHST": 3.0, "LHST": 2.0}
    assert u1.fingerprint["thickness"] == 10.0
    assert u1.fingerprint["flood_thickness"] == 6.0
    assert u1.fingerprint["flood_fraction"] == pytest.approx(0.6)
    assert u1.fingerprint["rhob"] == pytest.approx(2.5)
    assert math.isnan(u1.fingerprint["log10_rt"]) and math.isnan(u1.fingerprint["nphi"])
    # GR contrast: flood mean 120 minus unit median (120) over the well IQR (120 - 60)
    assert u1.fingerprint["gr_flood_contrast"] == pytest.approx(0.0)
    # unit 2: TST on LHST is an SB; top is the log edge at the shallowest sample (981)
    assert (u2.base_depth, u2.top_depth) == (986.5, 981.0)
    assert u2.top_is_log_edge and not u2.base_is_log_edge
    assert u2.mfs_depth == 984.5
    assert u2.tract_thickness["TST"] == 2.0 and u2.tract_thickness["EHST"] == 3.5
    assert (u1.first_sample, u1.n_samples) == (4, 10)
    # MFS-to-MFS spacing below a unit: defined where the unit and the one below hold an MFS
    assert u2.fingerprint["mfs_spacing"] == 991.5 - 984.5
    assert np.isnan(u1.fingerprint["mfs_spacing"]) and np.isnan(u0.fingerprint["mfs_spacing"])


def test_gr_contrast_is_invariant_to_gain_and_offset() -> None:
    w = OFFSET["off-3"]
    a = units_of(w)
    cur = w.curves.copy()
    cur["gr_api"] = 1.2 * cur["gr_api"] - 17.0
    b = split_sequences(w.depth, w.tracts, cur, TRACTS, SB)
    for x, y in zip(a, b, strict=True):
        assert x.fingerprint["gr_flood_contrast"] == pytest.approx(y.fingerprint["gr_flood_contrast"])


def test_split_sequences_rejects_bad_input() -> None:
    depth = np.array([10.0, 9.0, 11.0])
    with pytest.raises(InputError, match="increasing"):
        split_sequences(depth, np.array([0, 1, 2]), pd.DataFrame(index=range(3)), TRACTS, SB,
                        well="w-x")
    with pytest.raises(InputError, match="tract index"):
        split_sequences(np.arange(3.0), np.array([0, 1, 7]), pd.DataFrame(index=range(3)),
                        TRACTS, SB)
    with pytest.raises(InputError, match="not in"):
        split_sequences(np.arange(3.0), np.array([0, 1, 2]), pd.DataFrame(index=range(3)),
                        TRACTS, {("LHST", "XST")})


# ---------------------------------------------------------------- fit / assign
def test_fit_learns_the_basin_order(fitted: SequenceCorrelator) -> None:
    assert fitted.sequence_names_ == SEQ_NAMES
    assert fitted.order_notes_ == []


def test_offset_wells_are_named_right(fitted: SequenceCorrelator) -> None:
    right = total = 0
    for w, well in OFFSET.items():
        units = units_of(well)
        truth = unit_names_from_samples(units, well.truth)
        res = fitted.assign(units, w)
        assert isinstance(res, CorrelationResult)
        right += sum(a == b for a, b in zip(res.names, truth, strict=True))
        total += len(units)
    accuracy = right / total
    assert accuracy >= 0.9, accuracy


def test_eroded_sequence_is_reported(fitted: SequenceCorrelator) -> None:
    res = fitted.assign(units_of(OFFSET["off-1"]), "off-1")
    assert res.skipped_interior == ["S4"]
    assert "sequence S4 missing between S3 and S5 (eroded or not picked)" in res.flags
    assert "S4" not in res.names
    res = fitted.assign(units_of(OFFSET["off-2"]), "off-2")
    assert res.skipped_interior == ["S6"]
    assert any("S6 missing" in f for f in res.flags)


def test_edge_unit_without_levels_is_flagged(fitted: SequenceCorrelator) -> None:
    # logged only up into the lowstand of S8 (no flooding part): that unit's name rests on its
    # (lower-bound) thickness alone, and S7 eroded beneath it cannot be told from S7 present
    well = make_well(22, (1, 0.6), (7, 0.05), 0.78, eroded=(6,))
    units = units_of(well)
    assert units[-1].top_is_log_edge and units[-1].tract_thickness["TST"] == 0.0
    res = fitted.assign(units, "off-2b")
    assert res.names[:-1] == ["S2", "S3", "S4", "S5", "S6"]
    assert any(f.startswith(f"unit {len(units) - 1} (cut by the log edge)") for f in res.flags)


def test_partial_window_is_named_in_place(fitted: SequenceCorrelator) -> None:
    res = fitted.assign(units_of(OFFSET["off-3"]), "off-3")
    assert res.names == ["S3", "S4", "S5", "S6"]            # not S1..S4
    assert res.skipped_interior == [] and res.extra_units == []


def test_thicker_well_keeps_its_names(fitted: SequenceCorrelator) -> None:
    res = fitted.assign(units_of(OFFSET["off-5"]), "off-5")
    assert res.names == ["S4", "S5", "S6", "S7", "S8"]
    assert res.thickness_ratio == pytest.approx(1.30, rel=0.08)


def test_spurious_tiny_sequence_does_not_shift_names(fitted: SequenceCorrelator) -> None:
    well = make_well(31, (0, 0.4), (7, 0.6), 1.1, extra_after=4)
    units = units_of(well)
    truth = unit_names_from_samples(units, well.truth)
    assert truth.count("S5") == 2                           # S5 split by the spurious pick
    res = fitted.assign(units, "off-x")
    tiny = int(np.argmin([u.thickness for u in units]))
    assert units[tiny].thickness < 5
    others = [i for i in range(len(units)) if i != tiny]
    assert [res.names[i] for i in others] == [truth[i] for i in others]
    assert res.names[tiny] == "" and res.extra_units == [tiny]
    assert any(f.startswith("an extra sequence between S5 and S6") for f in res.flags)
    labels = [lab for _, _, lab in surface_names(units, res)]
    assert "SB S6" in labels and "MFS S3" in labels and "SB (extra)" in labels


def test_conflicting_orders_raise(fitted: SequenceCorrelator) -> None:
    wells = {w: units_of(x) for w, x in list(CORED.items())[:2]}
    names = {w: unit_names_from_samples(wells[w], CORED[w].truth) for w in wells}
    bad = list(names["core-B"])
    i3, i4 = bad.index("S3"), bad.index("S4")
    bad[i3], bad[i4] = "S4", "S3"
    names["core-B"] = bad
    with pytest.raises(InputError, match="core-A") as err:
        correlator().fit(wells, names)
    assert "core-B" in str(err.value) and "conflict" in str(err.value)


def test_bad_parameters_raise() -> None:
    wells = {"core-A": units_of(CORED["core-A"])}
    names = {"core-A": unit_names_from_samples(wells["core-A"], CORED["core-A"].truth)}
    with pytest.raises(InputError, match="extra_cost"):
        correlator(extra_cost=-1.0).fit(wells, names)
    with pytest.raises(InputError, match="unknown feature"):
        correlator(feature_weights={"colour": 1.0}).fit(wells, names)
    with pytest.raises(InputError, match="not fitted"):
        correlator().assign(wells["core-A"], "core-A")


def test_unnamed_fallback_numbers_consistently() -> None:
    wells = {w: units_of(x) for w, x in CORED.items()}
    corr = correlator().fit(wells, None)
    ref = max(sorted(wells), key=lambda w: len(wells[w]))
    assert corr.sequence_names_ == [f"SQ{i + 1}" for i in range(len(wells[ref]))]
    # the same true sequence gets the same SQ number in every cored well
    mapping: dict[str, set[str]] = {}
    for w in wells:
        truth = unit_names_from_samples(wells[w], CORED[w].truth)
        for t, got in zip(truth, corr.well_names_[w], strict=True):
            mapping.setdefault(t, set()).add(got)
    assert all(len(v) == 1 for v in mapping.values()), mapping
    assert len({next(iter(v)) for v in mapping.values()}) == len(mapping)
    # numbered from the deepest
    assert corr.well_names_[ref][0] == "SQ1"
    # an offset well named with the numbers follows the same mapping
    res = corr.assign(units_of(OFFSET["off-3"]), "off-3")
    assert res.names == [next(iter(mapping[s])) for s in ["S3", "S4", "S5", "S6"]]
