"""Log-derived features for the lithofacies and systems-tract classifiers.

Depth convention: every input is indexed by depth in the working unit, **increasing downward**
(top-down, as logs are recorded), on a regular ``step``. Stratigraphic trend features are computed
**up-section**: slopes are taken against HEIGHT (= minus depth), so a positive slope means the
value increases upward (e.g. GR increasing upward in a TST, common practice).

Feature columns (only built when the roles they need are present; never zero-filled):

- raw curves in their canonical role names (``gr_api``, ``rhob_g_cc``, ...; bit size excluded),
  ``log10_rt`` (log10 of deep resistivity, ohm.m) instead of ``rt_ohmm``;
- ``cali_minus_bs_in`` (caliper minus bit size, in), ``nphi_minus_dphi`` (neutron porosity minus
  sandstone-matrix density porosity, v/v);
- ``<role>_mean_w<W>`` / ``<role>_std_w<W>``: centred moving mean / standard deviation over a
  window of ``W`` working-depth units (``settings.windows``);
- ``<role>_upslope_w<W>``: least-squares slope per working-depth unit of the value against height
  over a centred window ``W`` (``settings.trend_windows``), positive = increasing upward;
- ``gr_peak_height_above``: height of the sample above the highest GR within a centred window of
  ``settings.gr_peak_window`` units (negative = the sample lies below that peak);
  ``gr_minus_window_max``: GR minus that window maximum (API, <= 0);
- ``igr`` (linear gamma-ray index, 0..1), ``vsh_larionov_older``, ``vsh_larionov_tertiary``;
- ``delta_log_r_sonic`` / ``delta_log_r_density`` (Passey et al. 1990) and the matching
  ``toc_passey_sonic`` / ``toc_passey_density`` (wt %) at maturity ``settings.passey_lom``;
- ``th_u_ratio`` (Th/U, ppm/ppm) when spectral gamma ray exists;
- ``relative_position`` (0 = base of the logged interval, 1 = top) if
  ``settings.include_relative_position``.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from facies_ml.errors import InputError
from facies_ml.settings import FeatureSettings

# Matrix and fluid densities for the density-porosity term of ``nphi_minus_dphi`` (g/cm3):
# sandstone matrix and fresh mud filtrate (common practice).
_RHO_MATRIX = 2.65
_RHO_FLUID = 1.0



# ----------------------------------------------------------------------------- shale volume
def vsh_linear(gr: np.ndarray, gr_clean: float, gr_shale: float) -> np.ndarray:
    """Linear gamma-ray index IGR = (GR - GRclean) / (GRshale - GRclean), clipped to 0..1.

    ``gr`` in API; NaN stays NaN. ``gr_shale`` must exceed ``gr_clean``.
    """
    gr = np.asarray(gr, dtype=float)
    if not np.isfinite(gr_clean) or not np.isfinite(gr_shale) or gr_shale <= gr_clean:
        raise InputError(f"gamma-ray shale value ({gr_shale:g}) must exceed the clean value "
                         f"({gr_clean:g})", curve="gr_api")
    return np.clip((gr - gr_clean) / (gr_shale - gr_clean), 0.0, 1.0)


def vsh_larionov_older(igr: np.ndarray) -> np.ndarray:
    """Larionov (1969) shale volume for older (pre-Tertiary) rocks: 0.33 * (2**(2*IGR) - 1)."""
    igr = np.asarray(igr, dtype=float)
    return 0.33 * (np.power(2.0, 2.0 * igr) - 1.0)


def vsh_larionov_tertiary(igr: np.ndarray) -> np.ndarray:
    """Larionov (1969) shale volume for Tertiary (unconsolidated) rocks: 0.083*(2**(3.7*IGR)-1)."""
    igr = np.asarray(igr, dtype=float)
    return 0.083 * (np.power(2.0, 3.7 * igr) - 1.0)


# ----------------------------------------------------------------------------- Passey
def _check_positive(values: np.ndarray, curve: str) -> None:
    bad = np.isfinite(values) & (values <= 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"resistivity must be > 0 ohm.m, found {values[i]:g} at sample {i}",
                         curve=curve)


def delta_log_r(
    rt: np.ndarray,
    dt: np.ndarray | None = None,
    rhob: np.ndarray | None = None,
    rt_baseline: float = 1.0,
    dt_baseline: float = 100.0,
    rhob_baseline: float = 2.5,
) -> np.ndarray:
    """Passey et al. (1990) Delta log R separation (dimensionless, log10 cycles).

    Sonic form: log10(R/Rbase) + 0.02 * (dt - dtbase), dt in us/ft.
    Density form: log10(R/Rbase) - 2.50 * (rhob - rhobase), rhob in g/cm3.
    Exactly one of ``dt`` / ``rhob`` must be given. ``rt`` in ohm.m, > 0.
    """
    rt = np.asarray(rt, dtype=float)
    if (dt is None) == (rhob is None):
        raise InputError("delta_log_r needs exactly one porosity curve (sonic or density)")
    _check_positive(rt, "rt_ohmm")
    if not rt_baseline > 0:
        raise InputError(f"resistivity baseline must be > 0 ohm.m, not {rt_baseline:g}",
                         curve="rt_ohmm")
    with np.errstate(invalid="ignore", divide="ignore"):
        log_ratio = np.log10(rt / rt_baseline)
    if dt is not None:
        return log_ratio + 0.02 * (np.asarray(dt, dtype=float) - dt_baseline)
    return log_ratio - 2.50 * (np.asarray(rhob, dtype=float) - rhob_baseline)


def toc_passey(delta_logr: np.ndarray, lom: float) -> np.ndarray:
    """Passey et al. (1990) TOC (wt %) = Delta log R * 10**(2.297 - 0.1688 * LOM)."""
    return np.asarray(delta_logr, dtype=float) * 10.0 ** (2.297 - 0.1688 * float(lom))


# ----------------------------------------------------------------------------- trends
def _odd_window(window: float, step: float) -> int:
    """Window length in samples (odd, >= 1) for a window of ``window`` depth units."""
    n = max(1, int(round(float(window) / float(step))))
    return n if n % 2 == 1 else n + 1


def _centred_sum(a: np.ndarray, half: int) -> np.ndarray:
    """Sum of ``a`` over the centred window [i-half, i+half], truncated at the ends."""
    c = np.concatenate([[0.0], np.cumsum(a)])
    n = len(a)
    idx = np.arange(n)
    hi = np.minimum(idx + half + 1, n)
    lo = np.maximum(idx - half, 0)
    return c[hi] - c[lo]


def upsection_slope(values: np.ndarray, step: float, window_samples: int) -> np.ndarray:
    """Least-squares slope of ``values`` against HEIGHT (up-section), per depth unit.

    ``values`` are ordered top-down (depth increasing downward, regular ``step``), so height of
    sample i is ``-i * step``; a positive slope means the value increases upward. The window is
    centred on each sample (``window_samples`` rounded up to odd) and truncated at the ends.
    NaN samples are ignored; the slope is NaN where fewer than max(3, half the window) valid
    samples remain.
    """
    y = np.asarray(values, dtype=float)
    if step <= 0:
        raise InputError(f"sample step must be > 0, not {step:g}")
    w = max(3, int(window_samples))
    if w % 2 == 0:
        w += 1
    half = w // 2
    n = len(y)
    if n == 0:
        return np.empty(0)
    valid = np.isfinite(y)
    # Regress on the sample index t (downward), then convert: height = -t * step.
    t = np.arange(n, dtype=float)
    yv = np.where(valid, y, 0.0)
    tv = np.where(valid, t, 0.0)
    cnt = _centred_sum(valid.astype(float), half)
    s_t = _centred_sum(tv, half)
    s_y = _centred_sum(yv, half)
    s_tt = _centred_sum(tv * tv, half)
    s_ty = _centred_sum(tv * yv, half)
    with np.errstate(invalid="ignore", divide="ignore"):
        var_t = s_tt - s_t * s_t / cnt
        cov_ty = s_ty - s_t * s_y / cnt
        slope_index = cov_ty / var_t          # value per sample, downward
    slope = -slope_index / step              # value per depth unit, upward
    min_valid = max(3, (w + 1) // 2)
    slope[(cnt < min_valid) | ~(var_t > 0)] = np.nan
    return slope


def _height_above_window_max(gr: np.ndarray, step: float, window_samples: int
                             ) -> tuple[np.ndarray, np.ndarray]:
    """Height (depth units) of each sample above the GR maximum of its centred window, and
    GR minus that maximum. Positive height = sample shallower than the peak. NaN-aware."""
    n = len(gr)
    half = window_samples // 2
    filled = np.where(np.isfinite(gr), gr, -np.inf)
    padded = np.concatenate([np.full(half, -np.inf), filled, np.full(half, -np.inf)])
    win = np.lib.stride_tricks.sliding_window_view(padded, 2 * half + 1)
    arg = win.argmax(axis=1)
    peak = win[np.arange(n), arg]
    peak_index = np.arange(n) - half + arg
    height = (peak_index - np.arange(n)) * step   # peak deeper (larger index) -> sample above it
    ok = np.isfinite(peak) & np.isfinite(gr)
    height = np.where(ok, height.astype(float), np.nan)
    diff = np.where(ok, gr - np.where(np.isfinite(peak), peak, 0.0), np.nan)
    return height, diff


# ----------------------------------------------------------------------------- helpers
def _well_name(curves: pd.DataFrame) -> str | None:
    name = curves.attrs.get("well") if hasattr(curves, "attrs") else None
    return str(name) if name else None


def _check_index(curves: pd.DataFrame, step: float) -> np.ndarray:
    well = _well_name(curves)
    if not isinstance(curves, pd.DataFrame):
        raise InputError("curves must be a DataFrame indexed by depth", well=well)
    if step is None or not np.isfinite(step) or step <= 0:
        raise InputError(f"sample step must be a positive number, not {step!r}", well=well)
    try:
        depth = curves.index.to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise InputError("depth index is not numeric", well=well) from None
    if len(depth) == 0:
        raise InputError("well has no samples", well=well)
    if not np.all(np.isfinite(depth)):
        raise InputError("depth index holds a missing value", well=well)
    if len(depth) > 1:
        d = np.diff(depth)
        bad = np.flatnonzero((d <= 0) | (np.abs(d - step) > 0.01 * step))
        if len(bad):
            i = int(bad[0])
            raise InputError(f"depth is not on the regular {step:g} step increasing downward "
                             f"(next sample at {depth[i + 1]:g})", well=well, depth=depth[i])
    return depth


def _curve(curves: pd.DataFrame, role: str) -> np.ndarray | None:
    """Float values of ``role`` or ``None`` when the role is absent or entirely missing."""
    if role not in curves.columns:
        return None
    try:
        values = pd.to_numeric(curves[role], errors="raise").to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise InputError("curve holds non-numeric values", well=_well_name(curves),
                         curve=role) from None
    values = np.where(np.isfinite(values), values, np.nan)
    if np.isnan(values).all():
        return None
    return values


def _check_rt(rt: np.ndarray, depth: np.ndarray, curves: pd.DataFrame) -> None:
    bad = np.isfinite(rt) & (rt <= 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"deep resistivity must be > 0 ohm.m, found {rt[i]:g}",
                         well=_well_name(curves), curve="rt_ohmm", depth=float(depth[i]))


def _gr_limits(gr: np.ndarray, settings: FeatureSettings, gr_reference: dict | None,
               curves: pd.DataFrame) -> tuple[float, float]:
    if gr_reference is not None and "gr_clean" in gr_reference and "gr_shale" in gr_reference:
        return float(gr_reference["gr_clean"]), float(gr_reference["gr_shale"])
    lo, hi = settings.gr_clean_percentile, settings.gr_shale_percentile
    clean, shale = np.nanpercentile(gr, [lo, hi])
    if not shale > clean:
        raise InputError(f"gamma ray is flat (P{lo:g} = P{hi:g} = {clean:g} API); cannot scale "
                         "a shale volume", well=_well_name(curves), curve="gr_api")
    return float(clean), float(shale)


def feature_reference(curves_list: Sequence[pd.DataFrame], settings: FeatureSettings) -> dict:
    """Reference values fitted on TRAINING wells only (pooled samples).

    Returns ``{"gr_clean": P_lo, "gr_shale": P_hi, "n_wells": ..., "n_samples": ...}`` with the
    gamma-ray percentiles ``settings.gr_clean_percentile`` / ``.gr_shale_percentile`` (API).
    Without any gamma ray, returns ``{}`` (each well then uses its own percentiles).
    """
    lo, hi = settings.gr_clean_percentile, settings.gr_shale_percentile
    pooled = []
    for curves in curves_list:
        gr = _curve(curves, "gr_api")
        if gr is not None:
            pooled.append(gr[np.isfinite(gr)])
    if not pooled or sum(len(p) for p in pooled) == 0:
        return {}
    allgr = np.concatenate(pooled)
    clean, shale = np.percentile(allgr, [lo, hi])
    if not shale > clean:
        raise InputError(f"training gamma ray is flat (P{lo:g} = P{hi:g} = {clean:g} API)",
                         curve="gr_api")
    return {"gr_clean": float(clean), "gr_shale": float(shale), "n_wells": len(pooled),
            "n_samples": int(len(allgr)), "percentiles": [lo, hi]}


def _window_label(w: float) -> str:
    return f"w{float(w):g}".replace(".", "p")


def build_features(
    curves: pd.DataFrame,
    step: float,
    settings: FeatureSettings,
    gr_reference: dict | None = None,
) -> pd.DataFrame:
    """Feature table with the same depth index as ``curves`` (see the module docstring).

    ``curves``: canonical roles, depth index in the working unit increasing downward on the
    regular ``step``. ``settings``: the checked ``features`` settings (``config.settings.features``).
    ``gr_reference``: from :func:`feature_reference` on the training wells; when ``None`` the
    well's own GR percentiles scale the shale volume. Windows are in working-depth units.
    Delta log R baseline: the median resistivity / sonic / density over the well's own shale
    samples (IGR >= ``settings.dlogr_baseline_igr``) — an automatic stand-in for a baseline
    picked by hand in non-source mudstone; Delta log R is therefore relative within each well.
    """
    depth = _check_index(curves, step)
    n = len(depth)
    out: dict[str, np.ndarray] = {}
    base: dict[str, np.ndarray] = {}

    for role in ("gr_api", "rhob_g_cc", "nphi_v_v", "pe_b_e", "dtc_us_ft", "cali_in",
                 "k_pct", "u_ppm", "th_ppm"):
        v = _curve(curves, role)
        if v is not None:
            base[role] = v
    rt = _curve(curves, "rt_ohmm")
    if rt is not None:
        _check_rt(rt, depth, curves)
        base["log10_rt"] = np.log10(rt)
    out.update(base)

    cali, bs = _curve(curves, "cali_in"), _curve(curves, "bs_in")
    if cali is not None and bs is not None:
        out["cali_minus_bs_in"] = cali - bs
    if "nphi_v_v" in base and "rhob_g_cc" in base:
        dphi = (_RHO_MATRIX - base["rhob_g_cc"]) / (_RHO_MATRIX - _RHO_FLUID)
        out["nphi_minus_dphi"] = base["nphi_v_v"] - dphi

    stat_roles = settings.stat_roles
    for role in stat_roles:
        if role not in base:
            continue
        s = pd.Series(base[role])
        for w in settings.windows:
            ns = _odd_window(w, step)
            if ns < 3:
                continue
            roll = s.rolling(ns, center=True, min_periods=(ns + 1) // 2)
            out[f"{role}_mean_{_window_label(w)}"] = roll.mean().to_numpy()
            out[f"{role}_std_{_window_label(w)}"] = roll.std().to_numpy()

    for role in settings.trend_roles:
        if role not in base:
            continue
        for w in settings.trend_windows:
            ns = _odd_window(w, step)
            if ns < 3:
                continue
            out[f"{role}_upslope_{_window_label(w)}"] = upsection_slope(base[role], step, ns)

    if "gr_api" in base:
        gr = base["gr_api"]
        ns = _odd_window(settings.gr_peak_window, step)
        height, diff = _height_above_window_max(gr, step, ns)
        out["gr_peak_height_above"] = height
        out["gr_minus_window_max"] = diff
        clean, shale = _gr_limits(gr, settings, gr_reference, curves)
        igr = vsh_linear(gr, clean, shale)
        out["igr"] = igr
        out["vsh_larionov_older"] = vsh_larionov_older(igr)
        out["vsh_larionov_tertiary"] = vsh_larionov_tertiary(igr)

        if rt is not None:
            shale_mask = np.isfinite(igr) & (igr >= settings.dlogr_baseline_igr)
            lom = settings.passey_lom
            for kind, role in (("sonic", "dtc_us_ft"), ("density", "rhob_g_cc")):
                if role not in base:
                    continue
                m = shale_mask & np.isfinite(rt) & np.isfinite(base[role])
                if m.sum() < 3:
                    continue
                kwargs = {"rt_baseline": float(np.median(rt[m]))}
                if kind == "sonic":
                    kwargs["dt_baseline"] = float(np.median(base[role][m]))
                    dlr = delta_log_r(rt, dt=base[role], **kwargs)
                else:
                    kwargs["rhob_baseline"] = float(np.median(base[role][m]))
                    dlr = delta_log_r(rt, rhob=base[role], **kwargs)
                out[f"delta_log_r_{kind}"] = dlr
                out[f"toc_passey_{kind}"] = toc_passey(dlr, lom)

    if "th_ppm" in base and "u_ppm" in base:
        u = base["u_ppm"]
        with np.errstate(invalid="ignore", divide="ignore"):
            out["th_u_ratio"] = np.where(u > 0, base["th_ppm"] / np.where(u > 0, u, 1.0), np.nan)

    if settings.include_relative_position:
        span = depth[-1] - depth[0]
        out["relative_position"] = (depth[-1] - depth) / span if span > 0 else np.full(n, 0.5)

    frame = pd.DataFrame(out, index=curves.index)
    return frame
