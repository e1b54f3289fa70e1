"""Settings are typed and checked once: every key of configs/default.yaml is declared, and a bad
value stops the load with its key path."""

from __future__ import annotations

import copy
import typing
from dataclasses import fields, is_dataclass

import pytest
import yaml

from facies_ml.config import DEFAULT_CONFIG, load_config, read_yaml
from facies_ml.errors import InputError
from facies_ml.settings import Settings, check_settings


def _declared(cls: type, prefix: str = "") -> set[str]:
    hints = typing.get_type_hints(cls)
    out = set()
    for f in fields(cls):
        tp = hints[f.name]
        out |= _declared(tp, f"{prefix}{f.name}.") if is_dataclass(tp) else {prefix + f.name}
    return out


def _keys(mapping: dict, prefix: str = "") -> set[str]:
    out = set()
    for k, v in mapping.items():
        nested = isinstance(v, dict) and v and k not in ("units", "score_weights")
        out |= _keys(v, f"{prefix}{k}.") if nested else {f"{prefix}{k}"}
    return out


def test_every_default_is_declared_and_every_declaration_has_a_default():
    raw = read_yaml(DEFAULT_CONFIG)
    assert _keys(raw) == _declared(Settings)
    s = check_settings(raw)
    assert s.project.working_depth_unit in ("ft", "m")
    assert all(isinstance(v, float) for v in s.intake.null_values)   # -1.0e+30 is a number


@pytest.mark.parametrize("section, key, value, message", [
    ("lithofacies", "n_estimator", 300, "lithofacies.n_estimator: unknown setting; did you mean "
                                        "n_estimators?"),
    ("sequence", "decode_resolution", 0.0, "sequence.decode_resolution: 0.0 is out of range"),
    ("applicability", "min_features", 2.5, "applicability.min_features: expected an integer"),
    ("lithofacies", "class_weight", "balance", "lithofacies.class_weight: expected 'balanced'"),
    ("project", "working_depth_unit", "yd", "project.working_depth_unit: expected 'ft' | 'm'"),
    ("features", "windows", [2.0, -5.0], r"features.windows\[1\]: -5.0 is out of range"),
    ("intake", "table", {"well_columns": ["well"]}, "intake.table.depth_columns: missing"),
])
def test_bad_settings_name_their_key_path(section, key, value, message):
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw[section][key] = value
    with pytest.raises(InputError, match=message):
        check_settings(raw)


def test_nested_enum_and_cross_checks():
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw["sequence"]["checks"]["depth_from"] = "median"
    with pytest.raises(InputError, match="sequence.checks.depth_from: expected 'viterbi'"):
        check_settings(raw)
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw["intake"]["gr_normalization"]["low_percentile"] = 96
    with pytest.raises(InputError, match="low_percentile must be below high_percentile"):
        check_settings(raw)
    raw = copy.deepcopy(read_yaml(DEFAULT_CONFIG))
    raw["sequence"]["checks"]["mfs_gr_windw"] = 3
    with pytest.raises(InputError, match="did you mean mfs_gr_window"):
        check_settings(raw)


def test_load_config_stops_at_a_misspelt_key_in_a_user_file(tmp_path):
    user = tmp_path / "project.yaml"
    user.write_text("lithofacies:\n  n_estimator: 50\n")
    with pytest.raises(InputError, match=r"project.yaml: lithofacies.n_estimator: unknown "
                                         r"setting; did you mean n_estimators\?"):
        load_config(user)


def test_tract_list_lives_only_in_the_rule_table(tmp_path):
    cfg = load_config()
    states = read_yaml(cfg.path("sequence_rules"))["states"]
    assert list(cfg.facies.systems_tracts) == states == ["LST", "TST", "EHST", "LHST"]
    # a facies scheme that still lists the tracts is refused, naming the file and the key
    scheme = read_yaml(cfg.path("facies_scheme"))
    scheme["systems_tracts"] = ["LST", "TST"]
    bad = tmp_path / "facies.yaml"
    bad.write_text(yaml.safe_dump(scheme))
    with pytest.raises(InputError, match=r"facies.yaml: systems_tracts: .*sequence rule table"):
        load_config(overrides={"files": {"facies_scheme": str(bad)}})
