"""Project settings as typed, frozen objects, checked once when they are loaded.

The values (and every default) live in ``configs/default.yaml`` only; this module declares
their types and allowed ranges. :func:`check_settings` turns the merged YAML mapping into a
:class:`Settings` object or stops with one :class:`~facies_ml.errors.InputError` naming the
key path, e.g. ``lithofacies.n_estimator: unknown setting; did you mean n_estimators?``, before
any well is read.

Depth-like values are in the project's working depth unit (``project.working_depth_unit``).
"""

from __future__ import annotations

import difflib
import types
import typing
from dataclasses import dataclass, field, fields, is_dataclass
from typing import Any, Literal

from facies_ml.errors import InputError


def _limits(low: float | None = None, high: float | None = None, *, low_open: bool = False,
            high_open: bool = False) -> Any:
    """Field metadata: allowed range of a number (or of each number in a list)."""
    return field(metadata={"low": low, "high": high, "low_open": low_open,
                           "high_open": high_open})


POSITIVE = {"low": 0.0, "high": None, "low_open": True, "high_open": False}
UNIT_INTERVAL = {"low": 0.0, "high": 1.0, "low_open": False, "high_open": False}


def _positive() -> Any:
    return field(metadata=POSITIVE)


def _fraction() -> Any:
    return field(metadata=UNIT_INTERVAL)


@dataclass(frozen=True)
class ProjectSettings:
    working_depth_unit: Literal["ft", "m"]
    step: float = _positive()
    seed: int = _limits(0)


@dataclass(frozen=True)
class FileSettings:
    """Settings files, relative to the folder of the YAML that names them."""

    facies_scheme: str
    curve_aliases: str
    sequence_rules: str
    plot_style: str


@dataclass(frozen=True)
class TableSettings:
    well_columns: tuple[str, ...]
    depth_columns: tuple[str, ...]
    depth_unit: Literal["ft", "m"] | None     # None: a depth column without a unit is refused
    units: dict[str, str]


@dataclass(frozen=True)
class GRNormalizationSettings:
    enabled: bool
    low_percentile: float = _limits(0, 100)
    high_percentile: float = _limits(0, 100)


@dataclass(frozen=True)
class DepthShiftSettings:
    enabled: bool
    max_shift: float = _limits(0)
    min_correlation: float = _limits(-1, 1)


@dataclass(frozen=True)
class IntakeSettings:
    null_values: tuple[float, ...]
    despike_roles: tuple[str, ...]
    log_scale_roles: tuple[str, ...]
    bad_hole_roles: tuple[str, ...]
    flat_curve_exempt_roles: tuple[str, ...]
    unknown_unit: Literal["error", "warn"]
    table: TableSettings
    gr_normalization: GRNormalizationSettings
    depth_shift: DepthShiftSettings
    despike_window: int = _limits(1)
    despike_threshold: float = _positive()
    washout_caliper_excess_in: float = _positive()
    max_gap_interpolate: float = _limits(0)
    max_samples: int = _limits(1)
    metre_like_steps: tuple[float, ...] = _positive()     # file steps, in the file's unit
    flat_curve_min_samples: int = _limits(2)


@dataclass(frozen=True)
class FeatureSettings:
    include_relative_position: bool
    stat_roles: tuple[str, ...]
    trend_roles: tuple[str, ...]
    windows: tuple[float, ...] = _positive()
    trend_windows: tuple[float, ...] = _positive()
    gr_clean_percentile: float = _limits(0, 100)
    gr_shale_percentile: float = _limits(0, 100)
    passey_lom: float = _limits(0, 20)
    gr_peak_window: float = _positive()
    dlogr_baseline_igr: float = _fraction()
    min_well_coverage: float = _fraction()


@dataclass(frozen=True)
class LithofaciesSettings:
    """LightGBM parameters (see :class:`facies_ml.lithofacies.LithofaciesClassifier`)."""

    class_weight: Literal["balanced"] | None
    n_estimators: int = _limits(1)
    learning_rate: float = _limits(0, 1, low_open=True)
    num_leaves: int = _limits(2)
    max_bin: int = _limits(2)
    min_child_samples: int = _limits(1)
    subsample: float = _limits(0, 1, low_open=True)
    colsample_bytree: float = _limits(0, 1, low_open=True)
    reg_lambda: float = _limits(0)
    early_stopping_rounds: int = _limits(0)
    validation_fraction: float = _limits(0, 1, low_open=True, high_open=True)
    n_jobs: int = _limits(1)


@dataclass(frozen=True)
class ApplicabilitySettings:
    lower_quantile: float = _fraction()
    upper_quantile: float = _fraction()
    min_features: int = _limits(1)


@dataclass(frozen=True)
class DurationSettings:
    model: Literal["explicit", "minimum_geometric"]
    prior_runs: float = _limits(0)
    prior_log_sigma: float = _positive()
    log_sigma_floor: float = _limits(0)


@dataclass(frozen=True)
class CheckSettings:
    """Surface pick checks (see :class:`facies_ml.sequence.surfaces.SurfaceChecks`)."""

    depth_from: Literal["viterbi", "posterior_median"]
    mfs_gr_window: float = _positive()
    gr_smoothing: float = _limits(0)
    sb_trend_window: float = _positive()
    edge_run_min: float = _limits(0)
    confidence_tolerance: float = _positive()
    low_confidence: float = _fraction()
    failed_check_confidence: float = _fraction()


@dataclass(frozen=True)
class SequenceSettings:
    stacking_curves: tuple[str, ...]
    duration: DurationSettings
    checks: CheckSettings
    prior_count: float = _limits(0)
    facies_windows: tuple[float, ...] = _positive()
    stacking_windows: tuple[float, ...] = _positive()
    evidence_row_stride: int = _limits(1)
    evidence_weight: float = _limits(0, 1, low_open=True)
    evidence_weight_grid: tuple[float, ...] = _limits(0, 1, low_open=True)
    decode_resolution: float = _positive()
    target_coverage: float = _limits(0, 1, low_open=True, high_open=True)


@dataclass(frozen=True)
class CorrelationSettings:
    """Basin-wide sequence naming (see :class:`facies_ml.correlation.SequenceCorrelator`)."""

    feature_weights: dict[str, float] | None
    skip_cost_interior: float = _limits(0)
    extra_cost: float = _limits(0)
    edge_fragment_cost: float = _limits(0)
    spread_prior_count: float = _limits(0)
    spread_floor_fraction: float = _limits(0)
    scale_iterations: int = _limits(0)
    max_thickness_ratio: float = _limits(1)


@dataclass(frozen=True)
class PromotionToleranceSettings:
    """Largest mean per-well loss (challenger - champion) still counted as noise, per metric."""

    lithofacies_f1_macro: float = _fraction()
    systems_tract_accuracy: float = _fraction()
    surfaces_within_close: float = _fraction()


@dataclass(frozen=True)
class PromotionSettings:
    """When ``retrain`` promotes a challenger (see :mod:`facies_ml.champion`)."""

    primary_metric: Literal["lithofacies_f1_macro", "systems_tract_accuracy",
                            "surfaces_within_close"]
    tolerance: PromotionToleranceSettings
    primary_min_gain: float = _limits(0, 1)
    bootstrap_resamples: int = _limits(100)
    confidence: float = _limits(0, 1, low_open=True, high_open=True)
    min_wells: int = _limits(2)


@dataclass(frozen=True)
class CoreCheckSettings:
    """Flagging a new cored well whose labels disagree with every model (robust z-score)."""

    robust_z: float = _positive()
    min_spread: float = _fraction()
    min_other_wells: int = _limits(2)


@dataclass(frozen=True)
class EvaluationSettings:
    promotion: PromotionSettings
    core_check: CoreCheckSettings
    surface_match_tolerance: float = _positive()
    surface_close_tolerance: float = _positive()
    learning_curve_repeats: int = _limits(1)
    reliability_bins: int = _limits(2)


@dataclass(frozen=True)
class ReportSettings:
    datum_sequence: str | None
    panel_max_wells: int = _limits(1)
    stale_staging_hours: float = _positive()  # hours; see facies_ml.report.run_folder


@dataclass(frozen=True)
class LandingSettings:
    target_tracts: tuple[str, ...]
    organic_facies: tuple[str, ...]
    score_weights: dict[str, float]
    window_length: float = _positive()


GeochemModel = Literal["passey_density", "passey_sonic", "schmoker_density", "linear",
                       "lightgbm"]


@dataclass(frozen=True)
class GeochemBoostSettings:
    """LightGBM regression candidate of :class:`facies_ml.geochem.PlugRegressor`."""

    n_estimators: int = _limits(1)
    learning_rate: float = _limits(0, 1, low_open=True)
    num_leaves: int = _limits(2)
    min_child_samples: int = _limits(1)
    subsample: float = _limits(0, 1, low_open=True)
    colsample_bytree: float = _limits(0, 1, low_open=True)
    reg_lambda: float = _limits(0)
    max_bin: int = _limits(2)
    n_jobs: int = _limits(1)


@dataclass(frozen=True)
class GeochemSettings:
    """Core-plug geochemistry, TOC and mineral models (see :mod:`facies_ml.geochem`)."""

    toc_candidates: tuple[GeochemModel, ...]
    mineral_candidates: tuple[Literal["linear", "lightgbm"], ...]
    selection_metric: Literal["r2", "median_abs_error"]
    brittleness: Literal["jarvie_2007", "wang_gale_2009"]
    lightgbm: GeochemBoostSettings
    passey_lom: float = _limits(0, 20)
    baseline_clay_fraction: float = _limits(0, 1, low_open=True)
    baseline_lean_fraction: float = _limits(0, 1, low_open=True)
    baseline_min_samples: int = _limits(3)
    band_quantiles: tuple[float, ...] = _limits(0, 1, low_open=True, high_open=True)
    band_bins: int = _limits(1)
    plug_match_steps: float = _positive()
    toc_max_wt_pct: float = _limits(0, 100, low_open=True)
    mineral_max_wt_pct: float = _limits(0, 100, low_open=True)
    mineral_sum_tolerance_wt_pct: float = _limits(0)
    linear_alpha: float = _limits(0)

    def __post_init__(self) -> None:
        q = self.band_quantiles
        if len(q) != 2 or not q[0] < q[1]:
            raise InputError("geochem.band_quantiles: give two quantiles, low below high "
                             f"(got {list(q)})")
        if not self.toc_candidates:
            raise InputError("geochem.toc_candidates: give at least one model")
        if not self.mineral_candidates:
            raise InputError("geochem.mineral_candidates: give at least one model")


@dataclass(frozen=True)
class Settings:
    """Every project setting, one frozen object per ``configs/default.yaml`` section."""

    project: ProjectSettings
    files: FileSettings
    intake: IntakeSettings
    features: FeatureSettings
    lithofacies: LithofaciesSettings
    applicability: ApplicabilitySettings
    sequence: SequenceSettings
    correlation: CorrelationSettings
    evaluation: EvaluationSettings
    report: ReportSettings
    landing: LandingSettings
    geochem: GeochemSettings


# ------------------------------------------------------------------------------- checking
def _type_name(tp: Any) -> str:
    origin = typing.get_origin(tp)
    if origin is Literal:
        return " | ".join(repr(a) for a in typing.get_args(tp))
    if origin in (types.UnionType, typing.Union):
        return " or ".join(_type_name(a) for a in typing.get_args(tp))
    if origin is tuple:
        return f"a list of {_type_name(typing.get_args(tp)[0])}"
    if origin is dict:
        return f"a mapping of name to {_type_name(typing.get_args(tp)[1])}"
    if tp is type(None):
        return "null"
    if is_dataclass(tp):
        return "a mapping"
    return {int: "an integer", float: "a number", bool: "true/false", str: "text"}.get(
        tp, str(tp))


def _bad(path: str, value: Any, tp: Any) -> InputError:
    return InputError(f"{path}: expected {_type_name(tp)}, got {value!r}")


def _convert(value: Any, tp: Any, path: str, limits: dict[str, Any] | None) -> Any:
    origin = typing.get_origin(tp)
    if origin is Literal:
        if value not in typing.get_args(tp):
            raise _bad(path, value, tp)
        return value
    if origin in (types.UnionType, typing.Union):
        options = typing.get_args(tp)
        if value is None and type(None) in options:
            return None
        errors = []
        for option in options:
            if option is type(None):
                continue
            try:
                return _convert(value, option, path, limits)
            except InputError as exc:
                errors.append(exc)
        raise errors[0] if len(errors) == 1 else _bad(path, value, tp)
    if origin is tuple:
        if not isinstance(value, (list, tuple)):
            raise _bad(path, value, tp)
        item = typing.get_args(tp)[0]
        return tuple(_convert(v, item, f"{path}[{i}]", limits) for i, v in enumerate(value))
    if origin is dict:
        if not isinstance(value, dict):
            raise _bad(path, value, tp)
        item = typing.get_args(tp)[1]
        return {str(k): _convert(v, item, f"{path}.{k}", limits) for k, v in value.items()}
    if is_dataclass(tp):
        return _build(tp, value, path)
    if tp is bool:
        if not isinstance(value, bool):
            raise _bad(path, value, tp)
        return value
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise _bad(path, value, tp)
    elif tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise _bad(path, value, tp)
        value = float(value)
    elif tp is str:
        if not isinstance(value, str):
            raise _bad(path, value, tp)
        return value
    if limits:
        _check_limits(value, path, limits)
    return value


def _check_limits(value: float, path: str, lim: dict[str, Any]) -> None:
    low, high = lim.get("low"), lim.get("high")
    if value != value:                                    # NaN
        raise InputError(f"{path}: expected a number, got NaN")
    too_low = low is not None and (value <= low if lim.get("low_open") else value < low)
    too_high = high is not None and (value >= high if lim.get("high_open") else value > high)
    if too_low or too_high:
        lo = "" if low is None else f"{'>' if lim.get('low_open') else '>='} {low:g}"
        hi = "" if high is None else f"{'<' if lim.get('high_open') else '<='} {high:g}"
        raise InputError(f"{path}: {value!r} is out of range (must be "
                         f"{' and '.join(x for x in (lo, hi) if x)})")


def _build(cls: type, mapping: Any, path: str) -> Any:
    if not isinstance(mapping, dict):
        raise InputError(f"{path or 'settings'}: expected a mapping, got {mapping!r}")
    hints = typing.get_type_hints(cls)
    known = {f.name: f for f in fields(cls)}
    for key in mapping:
        if key not in known:
            near = difflib.get_close_matches(str(key), list(known), n=1)
            hint = f"; did you mean {near[0]}?" if near else f"; known: {', '.join(known)}"
            raise InputError(f"{path + '.' if path else ''}{key}: unknown setting{hint}")
    values = {}
    for name, f in known.items():
        where = f"{path}.{name}" if path else name
        if name not in mapping:
            raise InputError(f"{where}: missing setting (its default belongs in "
                             "configs/default.yaml)")
        values[name] = _convert(mapping[name], hints[name], where, dict(f.metadata) or None)
    return cls(**values)


def _cross_checks(s: Settings) -> None:
    g = s.intake.gr_normalization
    if not g.low_percentile < g.high_percentile:
        raise InputError("intake.gr_normalization: low_percentile must be below high_percentile")
    if not s.applicability.lower_quantile < s.applicability.upper_quantile:
        raise InputError("applicability: lower_quantile must be below upper_quantile")
    if not s.features.gr_clean_percentile < s.features.gr_shale_percentile:
        raise InputError("features: gr_clean_percentile must be below gr_shale_percentile")
    if not s.sequence.evidence_weight_grid:
        raise InputError("sequence.evidence_weight_grid: give at least one weight")


def check_settings(raw: dict[str, Any]) -> Settings:
    """The merged YAML mapping as a :class:`Settings` object; the first bad key stops it.

    Raises :class:`~facies_ml.errors.InputError` naming the key path (unknown keys with the
    nearest known name, wrong types, values out of range, missing keys).
    """
    settings = _build(Settings, raw, "")
    _cross_checks(settings)
    return settings
