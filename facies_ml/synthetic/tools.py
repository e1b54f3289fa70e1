"""Logging-tool effects on the noise-free logs: vertical response, noise, calibration, washouts,
spikes and NULL gaps. Arrays here are in LOG order (index 0 = shallowest, depth increasing)."""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.ndimage import gaussian_filter1d

# log-curve key -> (truth column, smoothing key)
CURVES: dict[str, tuple[str, str]] = {
    "gr": ("gr_api", "gr"), "rt": ("rt_ohmm", "rt"), "rhob": ("rhob_g_cc", "rhob"),
    "nphi": ("nphi_v_v", "nphi"), "pe": ("pe_b_e", "pe"), "dt": ("dtc_us_ft", "dt"),
    "k": ("k_pct", "spectral"), "u": ("u_ppm", "spectral"), "th": ("th_ppm", "spectral"),
}


def tool_response(x: np.ndarray, sigma_samples: float) -> np.ndarray:
    """Gaussian vertical response of width ``sigma_samples`` (edges held at the end value)."""
    return gaussian_filter1d(np.asarray(x, float), sigma_samples, mode="nearest")


def washout_intervals(n: int, step: float, log_cfg: dict[str, Any], rng: np.random.Generator
                      ) -> list[tuple[int, int, float]]:
    """Non-overlapping enlarged-hole intervals as (first index, end index, enlargement in)."""
    lo, hi = log_cfg["washouts_per_well"]
    count = int(rng.integers(lo, hi + 1))
    out: list[tuple[int, int, float]] = []
    tries = 0
    while len(out) < count and tries < 50:
        tries += 1
        length = max(2, int(round(rng.uniform(*log_cfg["washout_length_ft"]) / step)))
        i0 = int(rng.integers(10, max(11, n - length - 10)))
        if any(i0 < b + 5 and i0 + length + 5 > a for a, b, _ in out):
            continue
        out.append((i0, i0 + length, float(rng.uniform(*log_cfg["washout_enlargement_in"]))))
    return sorted(out)


def caliper(n: int, bit_size: float, washouts: list[tuple[int, int, float]], noise: float,
            rng: np.random.Generator) -> np.ndarray:
    """Caliper (in): bit size plus slight gauge excess and rugosity, enlarged in washouts."""
    cal = bit_size + 0.12 + noise * rng.standard_normal(n)
    for i0, i1, enl in washouts:
        shape = np.sin(np.linspace(0.0, np.pi, i1 - i0)) ** 0.5
        cal[i0:i1] += enl * shape
    return cal


def log_curves(truth: dict[str, np.ndarray], log_cfg: dict[str, Any], mud: dict[str, float],
               washouts: list[tuple[int, int, float]], cal: np.ndarray, bit_size: float,
               gr_scale: float, gr_offset: float, rng: np.random.Generator,
               gr_drift: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Smoothed, calibrated, borehole-affected and noisy logs (before spikes / NULL gaps).

    ``gr_drift`` (gAPI per sample, optional) is a slow calibration drift added to the GR."""
    sm, nz = log_cfg["smoothing_sigma_samples"], log_cfg["noise"]
    out: dict[str, np.ndarray] = {}
    for key, (col, skey) in CURVES.items():
        x = truth[col]
        if key == "rt":
            y = 10.0 ** tool_response(np.log10(x), sm[skey])
        else:
            y = tool_response(x, sm[skey])
        out[key] = y
    enl = np.clip(cal - bit_size, 0.0, None) / 4.0
    out["rhob"] = out["rhob"] - log_cfg["washout_density_loss"] * enl * (out["rhob"] - mud["rho"])
    out["nphi"] = out["nphi"] + log_cfg["washout_neutron_gain"] * enl
    out["pe"] = out["pe"] - log_cfg["washout_density_loss"] * enl * (out["pe"] - mud["pe"])
    n = len(cal)
    gr = gr_scale * out["gr"] + gr_offset
    if gr_drift is not None:
        gr = gr + gr_drift
    counting = nz["gr_poisson_scale"] * np.sqrt(np.clip(gr, 1.0, None))
    out["gr"] = gr + counting * rng.standard_normal(n)
    out["rt"] = out["rt"] * 10.0 ** (nz["rt_log10"] * rng.standard_normal(n))
    for key in ("rhob", "nphi", "pe", "dt", "k", "u", "th"):
        out[key] = out[key] + nz[key] * rng.standard_normal(n)
    for key in ("k", "u", "th"):
        out[key] = np.clip(out[key], 0.0, None)
    out["cali"] = cal
    return out


def add_spikes(curves: dict[str, np.ndarray], keys: list[str], log_cfg: dict[str, Any],
               rng: np.random.Generator) -> list[tuple[str, int]]:
    """Single-sample spikes (value times 2.5-4, or plus 300 gAPI on GR); returns (key, index)."""
    lo, hi = log_cfg["spikes_per_well"]
    made = []
    for _ in range(int(rng.integers(lo, hi + 1))):
        key = keys[int(rng.integers(len(keys)))]
        i = int(rng.integers(5, len(curves[key]) - 5))
        if key == "gr":
            curves[key][i] += 300.0
        else:
            curves[key][i] *= float(rng.uniform(2.5, 4.0))
        made.append((key, i))
    return sorted(made, key=lambda x: (x[1], x[0]))


def add_null_gaps(curves: dict[str, np.ndarray], keys: list[str], log_cfg: dict[str, Any],
                  rng: np.random.Generator) -> list[tuple[str, int, int]]:
    """NULL (NaN) gaps: a late-starting sonic plus random gaps; returns (key, first, end)."""
    gaps = []
    n = len(next(iter(curves.values())))
    top = int(rng.integers(log_cfg["dt_missing_top_samples"][0],
                           log_cfg["dt_missing_top_samples"][1] + 1))
    if "dt" in curves and top > 0:
        curves["dt"][:top] = np.nan
        gaps.append(("dt", 0, top))
    lo, hi = log_cfg["null_gaps_per_well"]
    for _ in range(int(rng.integers(lo, hi + 1))):
        key = keys[int(rng.integers(len(keys)))]
        g_lo, g_hi = log_cfg["null_gap_samples"]
        length = int(rng.integers(g_lo, g_hi + 1))
        i0 = int(rng.integers(20, max(21, n - length - 20)))
        curves[key][i0:i0 + length] = np.nan
        gaps.append((key, i0, i0 + length))
    return sorted(gaps, key=lambda x: (x[1], x[0]))
