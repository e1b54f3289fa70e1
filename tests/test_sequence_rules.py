"""Rule-table loader: structure of the bundled table, unit handling, and rejected tables."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from facies_ml.config import CONFIG_DIR
from facies_ml.errors import InputError
from facies_ml.sequence.rules import load_rules

BUNDLED = CONFIG_DIR / "sequence_rules.yaml"


def test_bundled_table_follows_the_stratigraphic_order() -> None:
    # Common practice (sequence stratigraphy, up-section): LST -> TST -> EHST -> LHST, then a
    # sequence boundary to LST or (no lowstand) straight to TST; MFS at the TST -> EHST turn.
    r = load_rules(BUNDLED)
    assert r.states == ("LST", "TST", "EHST", "LHST")
    expected = np.array([[1, 1, 0, 0],
                         [0, 1, 1, 0],
                         [0, 0, 1, 1],
                         [1, 1, 0, 1]], dtype=bool)
    np.testing.assert_array_equal(r.allowed, expected)
    assert set(r.sb_transitions) == {("LHST", "LST"), ("LHST", "TST")}
    assert r.mfs_transitions == (("TST", "EHST"),)
    assert set(r.disabled) == {("EHST", "LST"), ("EHST", "TST")}
    assert r.thickness_unit == "ft"


def test_min_samples_converts_units() -> None:
    # 1 ft = 0.3048 m exactly (international foot, 1959 agreement).
    r = load_rules(BUNDLED)
    assert r.min_samples(0.5, "ft") == dict.fromkeys(r.states, 8)        # 4 ft / 0.5 ft
    assert r.min_samples(0.1524, "m") == dict.fromkeys(r.states, 8)      # 1.2192 m / 0.1524 m
    assert r.min_samples(0.5, "m") == dict.fromkeys(r.states, 3)         # ceil(2.4384)
    with pytest.raises(InputError, match="depth unit"):
        r.min_samples(0.5, "yd")


def test_count_violations_skips_gaps() -> None:
    r = load_rules(BUNDLED)
    L, T, E, H = range(4)
    assert r.count_violations(np.array([L, L, T, E, H, T, E])) == 0
    assert r.count_violations(np.array([L, E, T, L])) == 3  # LST->EHST, EHST->TST, TST->LST
    assert r.count_violations(np.array([L, -1, E, -1, -1, L])) == 0  # gaps are not transitions
    assert r.count_violations(np.array([E, L, -1, H, E])) == 2      # EHST->LST (disabled), LHST->EHST


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "rules.yaml"
    p.write_text(text)
    return p


BASE = """
states: [LST, TST, EHST, LHST]
min_thickness:
  default: {value: 1.5, unit: m}
  TST: {value: 3.0, unit: ft}
transitions:
  - {from: LST, to: TST, enabled: true}
  - {from: TST, to: EHST, enabled: true, surface: MFS}
  - {from: EHST, to: LHST, enabled: true}
  - {from: LHST, to: LST, enabled: %s, surface: SB}
  - {from: LHST, to: TST, enabled: true, surface: SB}
"""


def test_per_state_thickness_in_the_default_unit(tmp_path: Path) -> None:
    r = load_rules(_write(tmp_path, BASE % "true"))
    assert r.thickness_unit == "m"
    assert r.min_thickness["TST"] == pytest.approx(3.0 * 0.3048)
    assert r.min_samples(0.5, "ft")["TST"] == 6 and r.min_samples(0.5, "ft")["LST"] == 10


def test_unreachable_state_is_rejected(tmp_path: Path) -> None:
    p = _write(tmp_path, BASE % "false")
    with pytest.raises(InputError) as err:
        load_rules(p)
    assert "state 'LST' is unreachable" in str(err.value) and str(p) in str(err.value)


def test_state_without_exit_is_rejected(tmp_path: Path) -> None:
    text = BASE % "true"
    text = text.replace("{from: EHST, to: LHST, enabled: true}",
                        "{from: EHST, to: LHST, enabled: false}")
    text += "  - {from: TST, to: LHST, enabled: true}\n"
    p = _write(tmp_path, text)
    with pytest.raises(InputError, match="state 'EHST' has no exit") as err:
        load_rules(p)
    assert str(p) in str(err.value)


@pytest.mark.parametrize("old,new,msg", [
    ("{from: LST, to: TST, enabled: true}", "{from: LST, to: TSTT, enabled: true}",
     "unknown state 'TSTT'"),
    ("{from: LST, to: TST, enabled: true}", "{from: LST, to: TST, enabled: 'yes'}",
     "'enabled' must be true or false"),
    ("{from: LST, to: TST, enabled: true}", "{from: LST, to: LST, enabled: true}",
     "self transitions are always allowed"),
    ("TST: {value: 3.0, unit: ft}", "TST: {value: 3.0, unit: yd}", "unit of state 'TST'"),
    ("TST: {value: 3.0, unit: ft}", "TTS: {value: 3.0, unit: ft}", "unknown state 'TTS'"),
    ("TST: {value: 3.0, unit: ft}", "TST: {value: -1, unit: ft}", "number >= 0"),
])
def test_malformed_tables_name_the_problem(tmp_path: Path, old: str, new: str, msg: str) -> None:
    text = (BASE % "true").replace(old, new)
    with pytest.raises(InputError, match=msg):
        load_rules(_write(tmp_path, text))
