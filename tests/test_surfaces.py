"""Surface picking on up-section decoded paths: placement, ranges, GR check, unit invariance."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from facies_ml.config import CONFIG_DIR
from facies_ml.errors import InputError
from facies_ml.sequence.rules import load_rules
from facies_ml.sequence.surfaces import pick_surfaces

RULES = load_rules(CONFIG_DIR / "sequence_rules.yaml")
L, T, E, H = range(4)
FT_TO_M = 0.3048                             # international foot (1959), exact


def column(runs: list[tuple[int, int]], base: float = 8000.0, step: float = 0.5):
    """Up-section path from (tract, n_samples) runs; depth decreases from ``base`` (ft)."""
    path = np.concatenate([np.full(n, k) for k, n in runs])
    depth = base - step * np.arange(path.size)
    return depth, path


def test_surfaces_sit_at_the_tract_changes() -> None:
    # Common practice: SB at the base of an LST or of a TST resting on an HST; MFS at the
    # TST -> EHST turnaround; LST -> TST and EHST -> LHST are not picked.
    depth, path = column([(L, 10), (T, 12), (E, 10), (H, 10), (T, 10), (E, 10), (H, 8), (L, 6)])
    post = np.eye(4)[path]
    s = pick_surfaces(depth, path, post, RULES)
    assert [x.kind for x in s] == ["MFS", "SB", "MFS", "SB"]
    # first MFS between sample 21 (TST) and 22 (EHST): 8000 - 0.5*21.5
    assert s[0].depth == pytest.approx(8000 - 0.5 * 21.5)
    assert (s[1].lower, s[1].upper) == ("LHST", "TST")
    assert (s[3].lower, s[3].upper) == ("LHST", "LST")
    for x in s:                               # one-hot posterior: range within one sample
        assert x.depth_p10 <= x.depth <= x.depth_p90
        assert x.depth_p90 - x.depth_p10 <= 0.5 + 1e-9
        assert x.confidence == pytest.approx(1.0)
        assert x.gr_check is None


def test_range_follows_posterior_spread() -> None:
    depth, path = column([(T, 40), (E, 40)])
    t = np.arange(80)
    p_e = 1.0 / (1.0 + np.exp(-(t - 39.5) / 4.0))   # logistic, scale 4 samples
    post = np.zeros((80, 4))
    post[:, T], post[:, E] = 1 - p_e, p_e
    (s,) = pick_surfaces(depth, path, post, RULES)
    # logistic quantiles: 0.1 / 0.9 at +-4*ln(9) = +-8.79 samples = +-4.39 ft around the surface
    half = 4.0 * np.log(9.0) * 0.5
    assert s.depth_p10 == pytest.approx(s.depth - half, abs=0.05)
    assert s.depth_p90 == pytest.approx(s.depth + half, abs=0.05)
    assert 0.5 < s.confidence < 1.0


def test_mfs_gr_check() -> None:
    # Common practice: the MFS sits at (near) the highest GR of its sequence.
    depth, path = column([(L, 20), (T, 20), (E, 20), (H, 20), (T, 20)])
    post = np.eye(4)[path]
    gr = np.full(path.size, 60.0)
    gr[41] = 150.0                            # 0.75 ft above the MFS (between 39 and 40)
    (mfs,) = [x for x in pick_surfaces(depth, path, post, RULES, gr=gr) if x.kind == "MFS"]
    assert mfs.gr_check is True
    gr2 = np.full(path.size, 60.0)
    gr2[5] = 150.0                            # 17.25 ft below the MFS
    (mfs2,) = [x for x in pick_surfaces(depth, path, post, RULES, gr=gr2, mfs_gr_window=10.0)
               if x.kind == "MFS"]
    assert mfs2.gr_check is False
    gr3 = gr2.copy()
    gr3[90] = 500.0                           # above the SB: another sequence, ignored
    (mfs3,) = [x for x in pick_surfaces(depth, path, post, RULES, gr=gr3, mfs_gr_window=20.0)
               if x.kind == "MFS"]
    assert mfs3.gr_check is True


def test_bad_input_is_reported() -> None:
    depth, path = column([(L, 10), (T, 10)])
    post = np.eye(4)[path]
    with pytest.raises(InputError, match="depth must decrease"):
        pick_surfaces(depth[::-1], path, post, RULES)
    with pytest.raises(InputError, match="same 20 samples"):
        pick_surfaces(depth, path[:-1], post, RULES)
    with pytest.raises(InputError, match="GR has 5 samples"):
        pick_surfaces(depth, path, post, RULES, gr=np.zeros(5))


CYCLE = {L: [T], T: [E], E: [H], H: [L, T]}


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), n_runs=st.integers(1, 12),
       base_ft=st.floats(500.0, 15000.0), window_ft=st.floats(1.0, 60.0))
def test_same_surfaces_in_feet_and_metres(seed: int, n_runs: int, base_ft: float,
                                          window_ft: float) -> None:
    rng = np.random.default_rng(seed)
    runs, k = [], int(rng.integers(0, 4))
    for _ in range(n_runs):
        runs.append((k, int(rng.integers(1, 30))))
        nxt = CYCLE[k]
        k = nxt[int(rng.integers(0, len(nxt)))]
    depth_ft, path = column(runs, base=base_ft)
    post = rng.dirichlet(np.ones(4), size=path.size)
    post[np.arange(path.size), path] += 1.0
    post /= post.sum(axis=1, keepdims=True)
    gr = rng.normal(80, 20, size=path.size)
    a = pick_surfaces(depth_ft, path, post, RULES, gr=gr, mfs_gr_window=window_ft)
    b = pick_surfaces(depth_ft * FT_TO_M, path, post, RULES, gr=gr,
                      mfs_gr_window=window_ft * FT_TO_M)
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        assert (x.kind, x.index, x.gr_check, x.note) == (y.kind, y.index, y.gr_check, y.note)
        assert x.confidence == pytest.approx(y.confidence, abs=1e-12)
        for f in ("depth", "depth_p10", "depth_p90"):
            assert getattr(x, f) * FT_TO_M == pytest.approx(getattr(y, f), rel=1e-12)
