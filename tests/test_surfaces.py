"""Surface picking on up-section decoded paths: placement, entry-posterior ranges and
confidence, the MFS GR check and the SB stacking check, flags, unit invariance."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from facies_ml.config import CONFIG_DIR, load_config
from facies_ml.errors import InputError
from facies_ml.sequence.rules import load_rules
from facies_ml.sequence.surfaces import SurfaceChecks, pick_surfaces

RULES = load_rules(CONFIG_DIR / "sequence_rules.yaml")
L, T, E, H = range(4)
FT_TO_M = 0.3048                             # international foot (1959), exact
CHECKS = SurfaceChecks(**load_config().section("sequence")["checks"])   # working unit: ft


def column(runs: list[tuple[int, int]], base: float = 8000.0, step: float = 0.5
           ) -> tuple[np.ndarray, np.ndarray]:
    """Up-section path from (tract, n_samples) runs; depth decreases from ``base`` (ft)."""
    path = np.concatenate([np.full(n, k) for k, n in runs])
    depth = base - step * np.arange(path.size)
    return depth, path


def test_surfaces_sit_at_the_tract_changes() -> None:
    # Common practice: SB at the base of an LST or of a TST resting on an HST; MFS at the
    # TST -> EHST turnaround; LST -> TST and EHST -> LHST are not picked.
    depth, path = column([(L, 10), (T, 12), (E, 10), (H, 10), (T, 10), (E, 10), (H, 8), (L, 6)])
    s = pick_surfaces(depth, path, RULES)
    assert [x.kind for x in s] == ["MFS", "SB", "MFS", "SB"]
    # first MFS between sample 21 (TST) and 22 (EHST): 8000 - 0.5*21.5
    assert s[0].depth == pytest.approx(8000 - 0.5 * 21.5)
    assert s[0].index == 22
    assert (s[1].lower, s[1].upper) == ("LHST", "TST")
    assert (s[3].lower, s[3].upper) == ("LHST", "LST")
    for x in s:                               # no entry posterior: the path is taken as certain
        assert x.depth_p10 == x.depth == x.depth_p90
        assert x.confidence == 1.0
        assert x.gr_check is None and x.flags == ()
    assert pick_surfaces(depth[:1], path[:1], RULES) == []


def _entry_around(n_samples: int, boundary: int, sd: float, mass: float) -> np.ndarray:
    """TST -> EHST entry posterior: a discretized normal (sd samples) of total ``mass``."""
    t = np.arange(n_samples)
    w = np.exp(-0.5 * ((t - boundary) / sd) ** 2)
    entry = np.zeros((n_samples, 4, 4))
    entry[:, T, E] = mass * w / w.sum()
    entry[0] = 0.0
    return entry


@pytest.mark.parametrize("sd", [2.0, 4.0, 8.0])
def test_range_follows_posterior_spread(sd: float) -> None:
    depth, path = column([(T, 60), (E, 60)])
    (s,) = pick_surfaces(depth, path, RULES, entry=_entry_around(120, 60, sd, 0.9))
    # Reference: normal 10 / 90 % quantiles at -+1.2816 sd (from memory); one sample (0.5 ft)
    # of slack for the discretization
    half = 1.2816 * sd * 0.5
    assert s.depth_p10 == pytest.approx(s.depth - half, abs=0.5)
    assert s.depth_p90 == pytest.approx(s.depth + half, abs=0.5)
    # no checks, so no confidence tolerance: the mass between the two runs' middles (+-29
    # samples: all but the normal tail beyond 3.6 sd for sd = 8)
    assert s.confidence == pytest.approx(0.9, abs=1e-3)
    # the range always holds the pick, even when the mass sits to one side
    (s2,) = pick_surfaces(depth, path, RULES, entry=_entry_around(120, 75, 1.0, 0.9))
    assert s2.depth_p10 < s2.depth_p90 == s2.depth


def test_wider_posterior_gives_wider_range_and_lower_confidence() -> None:
    depth, path = column([(T, 60), (E, 60)])
    widths, confs = [], []
    for sd in (1.0, 3.0, 9.0):
        (s,) = pick_surfaces(depth, path, RULES, entry=_entry_around(120, 60, sd, 0.95),
                             checks=CHECKS)
        widths.append(s.depth_p90 - s.depth_p10)
        confs.append(s.confidence)
    assert widths[0] < widths[1] < widths[2]
    assert confs[0] > confs[1] > confs[2]


def test_confidence_is_mass_within_tolerance() -> None:
    # confidence = P(surface within confidence_tolerance of the pick). Reference: a normal of
    # sd 8 samples (4 ft) holds 2 Phi(10.5 / 8) - 1 = 0.8107 within +-10 samples (5 ft, the
    # configured tolerance at 0.5 ft samples; half a sample for the discretization), from
    # memory of the normal CDF; times the total mass 0.9
    assert CHECKS.confidence_tolerance == 5.0
    depth, path = column([(T, 60), (E, 60)])
    (s,) = pick_surfaces(depth, path, RULES, entry=_entry_around(120, 60, 8.0, 0.9),
                         checks=CHECKS)
    assert s.confidence == pytest.approx(0.9 * 0.8107, abs=0.01)


def test_low_confidence_is_flagged() -> None:
    depth, path = column([(T, 60), (E, 60)])
    (s,) = pick_surfaces(depth, path, RULES, entry=_entry_around(120, 60, 3.0, 0.4),
                         checks=CHECKS)
    assert s.confidence == pytest.approx(0.4, abs=1e-3)     # +-10 samples hold 3.3 sd
    assert s.flags == ("low confidence 0.40",)


def _mfs(depth: np.ndarray, path: np.ndarray, gr: np.ndarray,
         checks: SurfaceChecks = CHECKS):
    (m,) = [x for x in pick_surfaces(depth, path, RULES, gr=gr, checks=checks)
            if x.kind == "MFS"]
    return m


def test_mfs_gr_check_passes_and_fails() -> None:
    # Common practice: the MFS sits at (near) the highest GR of its sequence (between SBs).
    depth, path = column([(L, 40), (T, 40), (E, 40), (H, 40), (T, 40)])   # MFS at index 80
    t = np.arange(path.size)
    near = 60.0 + 60.0 * np.exp(-0.5 * ((t - 82) / 4.0) ** 2)          # peak 1 ft above MFS
    m = _mfs(depth, path, near)
    assert m.gr_check is True and m.flags == () and m.confidence == 1.0
    far = 60.0 + 60.0 * np.exp(-0.5 * ((t - 20) / 4.0) ** 2)           # peak 30 ft below it
    m = _mfs(depth, path, far)
    assert 30.0 > CHECKS.mfs_gr_window
    assert m.gr_check is False
    assert "MFS not at its sequence's highest GR" in m.flags
    assert m.confidence <= CHECKS.failed_check_confidence
    assert m.confidence == CHECKS.failed_check_confidence           # capped from 1.0
    assert f"low confidence {m.confidence:.2f}" in m.flags          # 0.5 < low_confidence 0.6
    # a higher GR above the SB belongs to the next sequence and is ignored
    other = near.copy()
    other[180:] = 300.0
    assert _mfs(depth, path, other).gr_check is True


def test_mfs_gr_check_ignores_a_thin_hot_bed() -> None:
    # a 1-sample 300 API stringer 30 ft below the MFS vs a broad 120 API zone at the MFS:
    # smoothing over gr_smoothing (4 ft = 8 samples) leaves the broad zone highest
    depth, path = column([(L, 40), (T, 40), (E, 40), (H, 40), (T, 40)])
    gr = np.full(path.size, 60.0)
    gr[72:92] = 120.0
    gr[20] = 300.0
    assert _mfs(depth, path, gr).gr_check is True
    unsmoothed = replace(CHECKS, gr_smoothing=0.5)                 # one sample: no smoothing
    assert _mfs(depth, path, gr, unsmoothed).gr_check is False


def _sb(gr: np.ndarray):
    depth, path = column([(E, 40), (H, 40), (T, 40), (E, 40)])      # SB at index 80
    (sb,) = [x for x in pick_surfaces(depth, path, RULES, gr=gr, checks=CHECKS)
             if x.kind == "SB"]
    return sb


def test_sb_stacking_check() -> None:
    # Common practice: below an SB the highstand cleans upward (GR decreasing upward), above
    # it the transgressive fill dirties upward (GR increasing upward).
    h = np.arange(160, dtype=float)                    # up-section sample = height
    good = np.where(h < 80, 120.0 - 0.5 * h, 40.0 + 0.5 * (h - 80))
    sb = _sb(good)
    assert sb.gr_check is True and sb.flags == () and sb.confidence == 1.0
    bad = np.where(h < 80, 60.0 + 0.5 * h, 100.0 - 0.5 * (h - 80))    # the opposite turn
    sb = _sb(bad)
    assert sb.gr_check is False
    assert "no upward turn of the GR stacking at this SB" in sb.flags
    assert sb.confidence == CHECKS.failed_check_confidence
    nan_gr = np.full(160, np.nan)
    sb = _sb(nan_gr)                                    # no GR: no verdict, no flag
    assert sb.gr_check is None and sb.confidence == 1.0


def test_bad_input_is_reported() -> None:
    depth, path = column([(L, 10), (T, 10)])
    with pytest.raises(InputError, match="depth must decrease"):
        pick_surfaces(depth[::-1], path, RULES)
    with pytest.raises(InputError, match="same 20 samples"):
        pick_surfaces(depth, path[:-1], RULES)
    with pytest.raises(InputError, match="GR has 5 samples, expected 20"):
        pick_surfaces(depth, path, RULES, gr=np.zeros(5))
    with pytest.raises(InputError, match=r"entry posterior has shape \(20, 4, 3\)"):
        pick_surfaces(depth, path, RULES, entry=np.zeros((20, 4, 3)))
    bad_path = path.copy()
    bad_path[4] = 9
    with pytest.raises(InputError, match="row 4: tract index 9 is outside 0..3"):
        pick_surfaces(depth, bad_path, RULES)
    nan_depth = depth.copy()
    nan_depth[2] = np.nan
    with pytest.raises(InputError, match="depth is not finite"):
        pick_surfaces(nan_depth, path, RULES)
    raw = load_config().section("sequence")["checks"]
    with pytest.raises(InputError, match="sequence.checks.mfs_gr_window must be > 0"):
        SurfaceChecks(**{**raw, "mfs_gr_window": 0.0})
    with pytest.raises(InputError, match="sequence.checks.low_confidence must lie in 0..1"):
        SurfaceChecks(**{**raw, "low_confidence": 1.5})


CYCLE = {L: [T], T: [E], E: [H], H: [L, T]}


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), n_runs=st.integers(1, 12),
       base_ft=st.floats(500.0, 15000.0), window_ft=st.floats(1.0, 60.0),
       smooth_n=st.integers(1, 12), trend_n=st.integers(3, 40),
       tol_ft=st.floats(0.3, 20.0))
def test_same_surfaces_in_feet_and_metres(seed: int, n_runs: int, base_ft: float,
                                          window_ft: float, smooth_n: int, trend_n: int,
                                          tol_ft: float) -> None:
    rng = np.random.default_rng(seed)
    runs, k = [], int(rng.integers(0, 4))
    for _ in range(n_runs):
        runs.append((k, int(rng.integers(1, 30))))
        nxt = CYCLE[k]
        k = nxt[int(rng.integers(0, len(nxt)))]
    depth_ft, path = column(runs, base=base_ft)
    entry = rng.random((path.size, 4, 4)) * rng.random((path.size, 1, 1)) * 0.1
    entry[0] = 0.0
    gr = rng.normal(80, 20, size=path.size)
    # smoothing / trend windows as whole numbers of 0.5 ft samples (a window of x.5 samples
    # would round either way under the float error of the unit change)
    ft = replace(CHECKS, mfs_gr_window=window_ft, gr_smoothing=0.5 * smooth_n,
                 sb_trend_window=0.5 * trend_n, confidence_tolerance=tol_ft)
    m = replace(ft, mfs_gr_window=ft.mfs_gr_window * FT_TO_M,
                edge_run_min=ft.edge_run_min * FT_TO_M,
                confidence_tolerance=ft.confidence_tolerance * FT_TO_M,
                gr_smoothing=ft.gr_smoothing * FT_TO_M,
                sb_trend_window=ft.sb_trend_window * FT_TO_M)
    a = pick_surfaces(depth_ft, path, RULES, entry=entry, gr=gr, checks=ft)
    b = pick_surfaces(depth_ft * FT_TO_M, path, RULES, entry=entry, gr=gr, checks=m)
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        assert (x.kind, x.index, x.gr_check, x.flags) == (y.kind, y.index, y.gr_check, y.flags)
        assert x.confidence == pytest.approx(y.confidence, abs=1e-12)
        for f in ("depth", "depth_p10", "depth_p90"):
            assert getattr(x, f) * FT_TO_M == pytest.approx(getattr(y, f), rel=1e-12)


def test_boundary_exactly_at_the_tolerance_counts_in_metres_too() -> None:
    # Regression: with the configured 5 ft tolerance and 0.5 ft samples the boundaries 10
    # samples away lie exactly at the tolerance; after ft -> m float error they must still count.
    depth, path = column([(T, 60), (E, 60)])
    entry = np.zeros((120, 4, 4))
    entry[[50, 60, 70], T, E] = [0.25, 0.5, 0.25]
    (a,) = pick_surfaces(depth, path, RULES, entry=entry, checks=CHECKS)
    m = replace(CHECKS, mfs_gr_window=CHECKS.mfs_gr_window * FT_TO_M,
                edge_run_min=CHECKS.edge_run_min * FT_TO_M,
                gr_smoothing=CHECKS.gr_smoothing * FT_TO_M,
                sb_trend_window=CHECKS.sb_trend_window * FT_TO_M,
                confidence_tolerance=CHECKS.confidence_tolerance * FT_TO_M)
    (b,) = pick_surfaces(depth * FT_TO_M, path, RULES, entry=entry, checks=m)
    assert a.confidence == b.confidence == pytest.approx(1.0)


def test_surface_next_to_the_log_edge_is_not_verifiable() -> None:
    # 3 ft (6 samples) of LHST at the base of the log below an SB: less than edge_run_min
    # (8 ft) of the tract below is seen, so the pick is marked at_edge with its reason; the
    # same SB with 20 ft of LHST below it is an ordinary pick.
    for n_below, expect in ((6, True), (40, False)):
        depth, path = column([(H, n_below), (T, 40), (E, 40)])
        (sb,) = [s for s in pick_surfaces(depth, path, RULES, gr=np.full(path.size, 80.0),
                                          checks=CHECKS) if s.kind == "SB"]
        assert sb.at_edge is expect
        assert any("log edge: not verifiable" in f for f in sb.flags) is expect
