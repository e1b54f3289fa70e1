"""Synthetic demo basin: a forward model of the invented Quillmere Basin (Brackwater Shale).

Relative sea level (second- plus third-order cycles) -> systems tracts -> lithofacies beds ->
composition (minerals, porosity, TOC) -> noise-free logs -> tool response, noise and borehole
effects -> LAS files, core descriptions, core gamma and truth tables. The column is built
up-section (deepest sample first); files are written top-down with depth increasing.
All names, wells and values are invented demo data.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from facies_ml.config import CONFIG_DIR, load_facies_scheme, read_yaml
from facies_ml.errors import InputError
from facies_ml.synthetic import stratigraphy as strat
from facies_ml.synthetic import tools
from facies_ml.synthetic.petrophysics import mineral_weight_percent, rock_logs
from facies_ml.synthetic.writers import write_csv, write_json, write_las

DEFAULT_SYNTH_CONFIG = CONFIG_DIR / "synthetic_basin.yaml"
PRESETS: dict[str, Path] = {"demo": DEFAULT_SYNTH_CONFIG,
                            "hard": CONFIG_DIR / "synthetic_hard.yaml"}
DEFAULT_SEED = 20261202
M_PER_FT = 0.3048

__all__ = ["BasinSummary", "DEFAULT_SEED", "DEFAULT_SYNTH_CONFIG", "PRESETS", "generate_basin",
           "load_synth_config"]

# keys a synth YAML must carry beyond the sections (section, key)
_REQUIRED_KEYS = [("thickness", "erosion"), ("composition", "hot_stringers"),
                  ("logging", "gr_drift"), ("wells", "log_window"), ("core", "plugs")]
#: Columns of core_geochem.csv (depth = core depth in the well's unit).
GEOCHEM_COLUMNS = ["well", "depth", "toc_wt_pct", "quartz_wt_pct", "carbonate_wt_pct",
                   "clay_wt_pct"]


@dataclass
class BasinSummary:
    """What :func:`generate_basin` wrote."""

    out_dir: Path
    wells: dict[str, str]                       # well name -> "cored" | "offset"
    files: list[Path] = field(default_factory=list)


def load_synth_config(path: str | Path | None = None) -> dict[str, Any]:
    """Read the forward-model settings (default: bundled configs/synthetic_basin.yaml)."""
    path = Path(path) if path is not None else DEFAULT_SYNTH_CONFIG
    cfg = read_yaml(path)
    for key in ("sea_level", "thickness", "facies", "composition", "petrophysics", "logging",
                "wells", "core"):
        if not isinstance(cfg.get(key), dict):
            raise InputError(f"missing section {key!r}", file=str(path))
    scheme_path = Path(cfg.get("facies_scheme", "facies_demo.yaml"))
    if not scheme_path.is_absolute():
        scheme_path = path.resolve().parent / scheme_path
    scheme = load_facies_scheme(scheme_path)
    labels = list(cfg["facies"].get("labels") or [])
    if labels != scheme.labels:
        raise InputError(f"facies.labels {labels} must equal the scheme's labels {scheme.labels}",
                         file=str(path))
    n = len(labels)
    for sec, key in [("composition", "clay"), ("composition", "quartz"),
                     ("composition", "calcite"), ("composition", "porosity"),
                     ("composition", "toc_scale"), ("facies", "bed_median_ft")]:
        if len(cfg[sec].get(key) or []) != n:
            raise InputError(f"{sec}.{key} needs {n} values (one per lithofacies)", file=str(path))
    if not str(cfg.get("preset") or "").strip():
        raise InputError("missing setting preset (a name such as demo)", file=str(path))
    for sec, key in _REQUIRED_KEYS:
        if not isinstance(cfg[sec].get(key), dict):
            raise InputError(f"missing setting {sec}.{key} (see configs/synthetic_basin.yaml)",
                             file=str(path))
    for tract in strat.TRACTS:
        mix = cfg["facies"]["mix"].get(tract) or {}
        for end in ("base", "top"):
            if len(mix.get(end) or []) != n:
                raise InputError(f"facies.mix.{tract}.{end} needs {n} probabilities",
                                 file=str(path))
    cfg["_path"] = str(path)
    return cfg


def _plan(n_wells: int, n_cored: int, cfg: dict[str, Any]) -> list[dict[str, Any]]:
    """Names, roles, proximal->distal positions and per-well variants (interleaved roles)."""
    cored = [f"QM-K{i}" for i in range(1, n_cored + 1)]
    offset = [f"QM-O{i}" for i in range(1, n_wells - n_cored + 1)]
    order: list[str] = []
    for i in range(max(len(cored), len(offset))):
        order += cored[i:i + 1] + offset[i:i + 1]
    pos = np.linspace(0.05, 0.95, n_wells) if n_wells > 1 else np.array([0.5])
    wc = cfg["wells"]
    n_off = len(offset)

    def pick(number: int, fallback: int) -> int | None:
        if n_off == 0:
            return None
        return number if number <= n_off else fallback

    metres = pick(int(wc["metres_offset"]), n_off)
    no_pe = pick(int(wc["no_pe_offset"]), 1)
    if no_pe == metres and n_off > 1:
        no_pe = next(i for i in range(1, n_off + 1) if i != metres)
    nphi_pct = pick(int(wc["nphi_percent_offset"]), 0) or None
    plan = []
    for name, p in zip(order, pos, strict=True):
        role = "cored" if name in cored else "offset"
        num = int(name[4:])
        v = (num - 1) % 5
        spectral = num in (wc["spectral_cored"] if role == "cored" else wc["spectral_offset"])
        plan.append({
            "name": name, "role": role, "number": num, "position": round(float(p), 4),
            "unit": "m" if role == "offset" and num == metres else "ft",
            "has_pe": not (role == "offset" and num == no_pe),
            "nphi_unit": "%" if role == "offset" and num == nphi_pct else "v/v",
            "has_bs_curve": not (role == "offset" and num in wc.get("bs_curve_missing_offset", [])),
            "spectral": bool(spectral),
            "mnemonics": {k: wc[f"{k}_mnemonics"][v % len(wc[f"{k}_mnemonics"])]
                          for k in ("resistivity", "density", "neutron", "pe", "sonic", "caliper")},
        })
    return plan


def _compose(fac: np.ndarray, col: strat.Column, comp: dict[str, Any], rng: np.random.Generator
             ) -> dict[str, np.ndarray]:
    """Mineral shares (of mineral volume), porosity (v/v) and TOC (wt%) per sample."""
    n = len(fac)
    w = col.water_depth
    trend = float(comp["biogenic_silica_trend"]) * (w - 0.5)
    jit = float(comp["mineral_jitter"])
    clay = np.asarray(comp["clay"], float)[fac] - trend + jit * rng.standard_normal(n)
    qtz = np.asarray(comp["quartz"], float)[fac] + trend + jit * rng.standard_normal(n)
    cal = np.asarray(comp["calcite"], float)[fac] + jit * rng.standard_normal(n)
    mins = np.clip(np.vstack([clay, qtz, cal]), 0.005, None)
    mins /= mins.sum(axis=0)
    phi = np.asarray(comp["porosity"], float)[fac] + float(comp["porosity_jitter"]) * \
        rng.standard_normal(n)
    phi = np.clip(phi, 0.005, 0.3)
    scale = np.asarray(comp["toc_scale"], float)[fac]
    tmin, tmax = float(comp["toc_min_wt_pct"]), float(comp["toc_max_wt_pct"])
    toc = tmin + (tmax - tmin) * w ** float(comp["toc_exponent"])
    d = np.where(np.isfinite(col.dist_to_mfs_ft), col.dist_to_mfs_ft, 1e9)
    toc = toc + float(comp["toc_condensed_bonus_wt_pct"]) * np.exp(
        -0.5 * (d / float(comp["toc_condensed_width_ft"])) ** 2)
    toc = scale * toc * np.exp(float(comp["toc_noise_sigma"]) * rng.standard_normal(n))
    u_extra = float(comp["u_condensed_bonus_ppm"]) * np.exp(
        -0.5 * (d / float(comp["u_condensed_width_ft"])) ** 2)
    return {"clay": mins[0], "quartz": mins[1], "calcite": mins[2], "phi": phi, "toc": toc,
            "u_extra": u_extra}


def _hot_stringers(col: strat.Column, step: float, hs: dict[str, Any], u_per_api: float,
                   window: tuple[int, int], rng: np.random.Generator
                   ) -> tuple[np.ndarray, list[tuple[int, int, float]]]:
    """Thin uranium-rich (hot shale) beds inside the configured tracts of the logged window
    (up-section indices [lo, hi)), up-section order.

    Returns the extra uranium (ppm) per sample and the beds as (first, end, GR added in gAPI).
    A bed stays inside the tract and sequence where it starts.
    """
    n = len(col.height_ft)
    extra = np.zeros(n)
    beds: list[tuple[int, int, float]] = []
    rate = float(hs["per_100ft"])
    tracts = [strat.TRACTS.index(t) for t in hs["tracts"]]
    where = np.flatnonzero(np.isin(col.tract, tracts))
    where = where[(where >= window[0]) & (where < window[1])]
    if rate <= 0.0 or where.size == 0:
        return extra, beds
    count = int(rng.poisson(rate * where.size * step / 100.0))
    for start in np.sort(rng.choice(where, size=min(count, where.size), replace=False)):
        i0 = int(start)
        length = max(1, int(round(float(rng.uniform(*hs["thickness_ft"])) / step)))
        i1 = i0
        while (i1 < min(n, window[1]) and i1 - i0 < length and col.tract[i1] == col.tract[i0]
               and col.sequence[i1] == col.sequence[i0]):
            i1 += 1
        add = float(rng.uniform(*hs["gr_api"]))
        if beds and i0 < beds[-1][1]:                 # overlaps the previous bed: skip it
            continue
        extra[i0:i1] += add * u_per_api
        beds.append((i0, i1, round(add, 1)))
    return extra, beds


def _log_window(col: strat.Column, role: str, lw: dict[str, Any], n_seq: int,
                rng: np.random.Generator) -> tuple[int, int, float, float]:
    """Logged sub-range of the simulated column (up-section indices [lo, hi)) and the cuts.

    The base cut removes ``cut_base`` sequences' worth of rock from the bottom (fractions cut
    into the next sequence), the top cut likewise from the top. Cored wells keep at least
    ``cored_min_mfs`` sequences whose MFS is logged (cuts halved until they do).
    """
    n = len(col.height_ft)
    total = float(col.height_ft[-1] + (col.height_ft[1] - col.height_ft[0]) / 2) if n > 1 else 0.0
    bounds = np.concatenate([col.sb_height_ft, [total]])
    for k in range(n_seq - 1, -1, -1):        # an eroded sequence has no SB: zero thickness
        if not np.isfinite(bounds[k]):        # at the SB of the sequence above it
            bounds[k] = bounds[k + 1]
    cb = float(rng.uniform(*lw["cut_base_sequences"]))
    ct = float(rng.uniform(*lw["cut_top_sequences"]))

    def heights(cb: float, ct: float) -> tuple[float, float]:
        kb = min(int(cb), n_seq - 1)
        lo = bounds[kb] + (cb - kb) * (bounds[kb + 1] - bounds[kb])
        kt = min(int(ct), n_seq - 1)
        hi = bounds[n_seq - kt] - (ct - kt) * (bounds[n_seq - kt] - bounds[n_seq - kt - 1])
        return float(lo), float(hi)

    for _ in range(8):
        lo_h, hi_h = heights(cb, ct)
        mfs = col.mfs_height_ft[np.isfinite(col.mfs_height_ft)]
        seen = int(((mfs > lo_h) & (mfs < hi_h)).sum())
        if role != "cored" or seen >= int(lw["cored_min_mfs"]):
            break
        cb, ct = cb / 2.0, ct / 2.0
    else:
        cb, ct = 0.0, 0.0
        lo_h, hi_h = heights(cb, ct)
    keep = np.flatnonzero((col.height_ft >= lo_h) & (col.height_ft <= hi_h))
    if cb == 0.0 and ct == 0.0:
        return 0, n, 0.0, 0.0
    return int(keep[0]), int(keep[-1]) + 1, round(cb, 3), round(ct, 3)


def _gr_drift(n: int, gd: dict[str, Any], rng: np.random.Generator) -> np.ndarray | None:
    """Slow GR drift along the hole (gAPI, log order): a linear ramp plus one low-frequency
    wave; None when both amplitudes are zero."""
    lin, wave = float(gd["linear_api"]), float(gd["wave_api"])
    if lin <= 0.0 and wave <= 0.0:
        return None
    x = np.linspace(0.0, 1.0, n)
    a = float(rng.uniform(-lin, lin))
    b = float(rng.uniform(-wave, wave))
    cycles = float(rng.uniform(*gd["wave_cycles"]))
    phi = float(rng.uniform(0.0, 2.0 * np.pi))
    return a * (2.0 * x - 1.0) + b * np.sin(2.0 * np.pi * cycles * x + phi)


def _hard_features(cfg: dict[str, Any]) -> bool:
    """True when any setting beyond the demo's is switched on (then basin.json records it)."""
    lw, gd = cfg["wells"]["log_window"], cfg["logging"]["gr_drift"]
    return bool(max(lw["cut_base_sequences"]) > 0 or max(lw["cut_top_sequences"]) > 0
                or int(cfg["thickness"]["erosion"]["wells"]) > 0
                or float(cfg["composition"]["hot_stringers"]["per_100ft"]) > 0
                or float(gd["linear_api"]) > 0 or float(gd["wave_api"]) > 0)


def _erosion_plan(n_wells: int, cfg: dict[str, Any], seed: int) -> dict[int, tuple[int, float]]:
    """Well index -> (eroded sequence, kept TST share). The sequence is one that every log
    window still contains in full, so the erosion is always logged."""
    er = cfg["thickness"]["erosion"]
    lw = cfg["wells"]["log_window"]
    n_seq = int(cfg["sea_level"]["n_sequences"])
    count = min(int(er["wells"]), n_wells)
    lo = max(2, int(max(lw["cut_base_sequences"])) + 2)
    hi = min(n_seq - 1, n_seq - int(max(lw["cut_top_sequences"])) - 1)
    if count <= 0 or lo > hi:
        return {}
    rng = np.random.default_rng([seed, 6])
    wells = sorted(int(i) for i in rng.choice(n_wells, size=count, replace=False))
    return {i: (int(rng.integers(lo, hi + 1)), round(float(rng.uniform(*er["tst_kept"])), 3))
            for i in wells}


def _simulate_well(w: dict[str, Any], n_samples: int, segs: list[strat.Segment],
                   history: strat.BasinHistory, cfg: dict[str, Any], seed: int, idx: int
                   ) -> dict[str, Any]:
    """Geology, petrophysics and logging of one well; arrays returned in LOG order."""
    step = float(cfg["step_ft"])
    rng_geo = np.random.default_rng([seed, 2, idx])
    rng_log = np.random.default_rng([seed, 3, idx])
    col = strat.build_column(segs, n_samples, step, w["position"], history, cfg["sea_level"])
    fac = strat.lay_beds(col, step, w["position"], cfg["facies"], rng_geo)
    rock = _compose(fac, col, cfg["composition"], rng_geo)
    n_seq = len(col.sb_height_ft)
    lo, hi, cut_base, cut_top = _log_window(col, w["role"], cfg["wells"]["log_window"], n_seq,
                                            np.random.default_rng([seed, 5, idx]))
    u_per_api = 1.0 / float(cfg["petrophysics"]["gr_api_coeff"]["u_ppm"])
    hot_u, hot = _hot_stringers(col, step, cfg["composition"]["hot_stringers"], u_per_api,
                                (lo, hi), np.random.default_rng([seed, 7, idx]))
    if hot:
        rock["u_extra"] = rock["u_extra"] + hot_u
    mat_lo, mat_hi = cfg["petrophysics"]["maturity"]
    maturity = mat_lo + (mat_hi - mat_lo) * w["position"]
    truth = rock_logs(rock["clay"], rock["quartz"], rock["calcite"], rock["phi"], rock["toc"],
                      maturity, cfg["petrophysics"], float(cfg["composition"]["kerogen_per_toc"]),
                      rock["u_extra"])
    truth["toc_wt_pct"] = rock["toc"]
    # up-section -> log (top-down) order, logged window only
    flip = slice(hi - 1, lo - 1 if lo > 0 else None, -1)
    truth = {k: v[flip] for k, v in truth.items()}
    n_samples = hi - lo
    lg = cfg["logging"]
    bs = float(lg["bit_size_in"][idx % len(lg["bit_size_in"])])
    washouts = tools.washout_intervals(n_samples, step, lg, rng_log)
    cal = tools.caliper(n_samples, bs, washouts, float(lg["noise"]["cali"]), rng_log)
    dens, pe = cfg["petrophysics"]["density_g_cc"], cfg["petrophysics"]["pe_b_e"]
    gr_scale = round(float(rng_log.uniform(*lg["gr_scale"])), 3)
    gr_offset = round(float(rng_log.uniform(*lg["gr_offset_api"])), 2)
    drift = _gr_drift(n_samples, lg["gr_drift"], np.random.default_rng([seed, 8, idx]))
    logs = tools.log_curves(truth, lg, {"rho": dens["mud"], "pe": pe["mud"]}, washouts, cal, bs,
                            gr_scale, gr_offset, rng_log, drift)
    if not w["has_pe"]:
        del logs["pe"]
    if not w["spectral"]:
        for k in ("k", "u", "th"):
            del logs[k]
    keys = [k for k in ("gr", "rt", "rhob", "nphi", "pe", "dt") if k in logs]
    spikes = tools.add_spikes(logs, keys, lg, rng_log)
    gaps = tools.add_null_gaps(logs, keys, lg, rng_log)
    labels = cfg["facies"]["labels"]
    return {
        "col": col, "truth": truth, "logs": logs, "bs": bs, "washouts": washouts,
        "spikes": spikes, "gaps": gaps, "gr_scale": gr_scale, "gr_offset": gr_offset,
        "maturity": maturity,
        "lithofacies": np.asarray(labels)[fac][flip],
        "tract": np.asarray(strat.TRACTS)[col.tract][flip],
        "sequence": col.sequence[flip], "sea_level": col.sea_level[flip],
        "water_depth": col.water_depth[flip], "phase": col.phase[flip],
        "height_ft": col.height_ft[flip],
        "n_full": len(col.height_ft), "first": len(col.height_ft) - hi,   # log-order offset
        "cut_base": cut_base, "cut_top": cut_top, "drift": drift,
        "hot": sorted((hi - min(b, hi), hi - max(a, lo), g) for a, b, g in hot
                      if max(a, lo) < min(b, hi)),
    }


_DESCR = {
    "gr": ("gAPI", "gamma ray"), "k": ("%", "spectral gamma potassium"),
    "u": ("ppm", "spectral gamma uranium"), "th": ("ppm", "spectral gamma thorium"),
    "rt": ("ohmm", "deep resistivity"), "rhob": ("g/cc", "bulk density"),
    "nphi": ("v/v", "neutron porosity, limestone matrix"), "pe": ("b/e", "photoelectric factor"),
    "dt": ("us/ft", "compressional slowness"), "cali": ("in", "caliper"),
    "bs": ("in", "bit size"),
}
_ROLE_OF = {"gr": "gr_api", "k": "k_pct", "u": "u_ppm", "th": "th_ppm", "rt": "rt_ohmm",
            "rhob": "rhob_g_cc", "nphi": "nphi_v_v", "pe": "pe_b_e", "dt": "dtc_us_ft",
            "cali": "cali_in", "bs": "bs_in"}


def _mnemonic(key: str, w: dict[str, Any]) -> str:
    m = w["mnemonics"]
    return {"gr": "GR", "k": "POTA", "u": "URAN", "th": "THOR", "rt": m["resistivity"],
            "rhob": m["density"], "nphi": m["neutron"], "pe": m["pe"], "dt": m["sonic"],
            "cali": m["caliper"], "bs": "BS"}[key]


def _readme(cfg: dict[str, Any], seed: int, plan: list[dict[str, Any]], extras: bool) -> str:
    rows = "\n".join(f"| {w['name']} | {w['role']} | {w['position']:.2f} | {w['unit']} |"
                     for w in plan)
    hard = ""
    if extras:
        hard = f"""
Preset {cfg['preset']!r} adds: each well's log is a different sub-interval of the column (the
top and base of the formation are cut away by different amounts, so logs start and stop in
different sequences); in some wells one interior sequence lost its HST and upper TST to erosion
below the next SB (no MFS for it); thin hot-shale stringers (uranium) in highstand tracts; a
slow GR calibration drift along the hole. basin.json records, per well, `logged_sequences`,
`log_window_cut_sequences`, `eroded_sequences`, `gr_drift_api` and `hot_stringers`.
"""
    plug_ft = float(cfg["core"]["plugs"]["spacing_ft"])
    return f"""# Synthetic demo basin: {cfg['basin']}, {cfg['formation']}

CAUTION: this is INVENTED demo data made by a forward model (facies_ml.synthetic, generator
version {cfg['generator_version']}, seed {seed}). The basin, formation, wells, operator and
identifiers do not exist. Do not use it for any real decision.

The model: relative sea level (a slow second-order cycle plus {cfg['sea_level']['n_sequences']}
third-order cycles) sets systems tracts (LST in basinward wells only, TST, EHST, LHST; LHST
partly eroded below each SB in proximal wells); tracts set a lithofacies bed mix; lithofacies
and water depth set minerals, porosity and TOC; simple petrophysics gives the logs; tool
response, noise, GR calibration, washouts, spikes and NULL gaps make them look logged.
{hard}
| well | role | position (0 proximal, 1 distal) | depth unit |
|---|---|---|---|
{rows}

Files (depth increases downward; sequences are numbered from the deepest = 1):
- `<WELL>.las`: LAS 2.0 logs, NULL -999.25, depth in the well's unit.
- `core_intervals.csv`: `well,top,base,lithofacies,systems_tract,sequence`, cored wells only,
  in CORE depth (log depth = core depth + shift; the shift per well is in basin.json and
  truth). `sequence` is the geologist's basin-wide sequence name `S<k>` (k = the truth
  `sequence` number, 1 = deepest); intervals split where lithofacies, tract or sequence change.
- `core_gamma.csv`: `well,depth,core_gr_api`, gamma measured on the core, in core depth.
- `core_geochem.csv`: `well,depth,toc_wt_pct,quartz_wt_pct,carbonate_wt_pct,clay_wt_pct`,
  core-plug geochemistry of the cored wells in CORE depth (same shift as the core intervals),
  about one plug every {plug_ft:g} ft of recovered core: TOC in wt % of the bulk rock
  (combustion, lab noise added; a noisy value below 0 is reported as 0.00), quartz,
  carbonate (calcite) and clay in wt % of the crystalline fraction (XRD, noise added, closed
  to 100; kerogen and pore fluid excluded).
- `truth/<WELL>.csv`: the true model at every LAS sample (log depth), noise-free values.
- `truth/surfaces.csv`: `well,surface,depth,sequence,depth_unit` (SB = base of the sequence,
  MFS; depth in the well's own unit, `depth_unit` ft or m). Only surfaces strictly inside the
  logged interval, at least one sample step from its top and base, are listed.
- `basin.json`: roles, positions, units, missing curves, washouts, spikes, NULL gaps, core
  shift, GR calibration, seed and generator version.
"""


def generate_basin(out_dir: str | Path, n_wells: int = 10, n_cored: int = 5,
                   seed: int = DEFAULT_SEED, config_path: str | Path | None = None,
                   samples_per_well: int | None = None) -> BasinSummary:
    """Write a synthetic demo basin into ``out_dir`` and return what was written.

    ``samples_per_well``: mean samples per well of the SIMULATED column (default: the
    thickness the settings give, 2,000-4,000 samples at 0.5 ft for the demo); lateral thickness
    differences are kept. Where the settings cut a log window (``wells.log_window``), each LAS
    holds only its kept sub-range, so fewer samples. Same inputs give byte-identical files.
    """
    if int(n_wells) < 2:
        raise InputError(f"n_wells must be at least 2, not {n_wells}")
    if not 1 <= int(n_cored) <= int(n_wells):
        raise InputError(f"n_cored must be between 1 and n_wells ({n_wells}), not {n_cored}")
    if samples_per_well is not None and int(samples_per_well) < 200:
        raise InputError(f"samples_per_well must be at least 200, not {samples_per_well}")
    cfg = load_synth_config(config_path)
    out = Path(out_dir)
    (out / "truth").mkdir(parents=True, exist_ok=True)
    seed = int(seed)
    plan = _plan(int(n_wells), int(n_cored), cfg)
    step_ft = float(cfg["step_ft"])
    rng_basin = np.random.default_rng([seed, 1])
    history = strat.make_history(cfg["sea_level"], cfg["thickness"], rng_basin)
    erosion = _erosion_plan(len(plan), cfg, seed)
    segs = [strat.well_segments(w["position"], history, cfg["sea_level"], cfg["thickness"],
                                rng_basin, erosion.get(i)) for i, w in enumerate(plan)]
    extras = _hard_features(cfg)
    totals = np.array([sum(s.thickness_ft for s in ss) for ss in segs])
    scale = 1.0 if samples_per_well is None else samples_per_well * step_ft / totals.mean()
    th = cfg["thickness"]
    dec = int(cfg["logging"]["rounding"])
    files: list[Path] = []
    surfaces, core_rows, gamma_rows, meta = [], [], [], []
    plug_rows: list[dict[str, Any]] = []
    cored_no = 0
    for idx, (w, ss) in enumerate(zip(plan, segs, strict=True)):
        n_full = int(round(totals[idx] * scale / step_ft))
        sim = _simulate_well(w, n_full, ss, history, cfg, seed, idx)
        n = len(sim["sequence"])
        top_lo, top_hi = th["top_depth_ft"]
        top_ft = top_lo + (top_hi - top_lo) * w["position"] + float(th["top_depth_jitter_ft"]) * \
            rng_basin.uniform(-1.0, 1.0)
        top_ft = round(top_ft / step_ft) * step_ft
        f = M_PER_FT if w["unit"] == "m" else 1.0
        step = float(cfg["step_m"]) if w["unit"] == "m" else step_ft
        # top_ft is the formation top (top of the simulated column); the log keeps samples
        # first .. first + n - 1 of it
        depth = np.round(top_ft * f + (sim["first"] + np.arange(n)) * step, dec)
        base_edge = top_ft + (n_full - 0.5) * step_ft  # ft, bottom edge of the simulated column
        # --- LAS ---
        logs = dict(sim["logs"])
        if w["nphi_unit"] == "%":
            logs["nphi"] = logs["nphi"] * 100.0
        if w["has_bs_curve"]:
            logs["bs"] = np.full(n, sim["bs"])
        order = ["gr", "k", "u", "th", "rt", "rhob", "nphi", "pe", "dt", "cali", "bs"]
        curves = []
        for key in order:
            if key in logs:
                unit, descr = _DESCR[key]
                if key == "nphi":
                    unit = w["nphi_unit"]
                curves.append((_mnemonic(key, w), unit, descr, logs[key]))
        uwi = f"99-QB-{1000 + idx:04d}-{w['name'][3:]}"
        header = {"WELL": w["name"], "COMP": "Quillmere Demo Operating (invented)",
                  "FLD": "Quillmere Basin (invented)", "LOC": f"transect position "
                  f"{w['position']:.2f} (0 proximal, 1 distal)", "PROV": "Quillmere (invented)",
                  "SRVC": "synthetic forward model", "DATE": "2026-12-02", "UWI": uwi}
        params = [("BS", "in", sim["bs"], "bit size"),
                  ("EKB", w["unit"], round((820.0 + 40.0 * idx) * f, 2), "kelly bushing elevation"),
                  ("FORM", "", cfg["formation"], "formation logged")]
        other = (f"Invented demo data: {cfg['basin']} forward model, facies_ml.synthetic "
                 f"{cfg['generator_version']}, seed {seed}. Not a real well.")
        las_path = out / f"{w['name']}.las"
        write_las(las_path, depth, w["unit"], curves, header, params, other, dec)
        files.append(las_path)
        # --- truth ---
        t = sim["truth"]
        truth = pd.DataFrame({
            "depth": depth, "lithofacies": sim["lithofacies"], "systems_tract": sim["tract"],
            "sequence": sim["sequence"], "toc_wt_pct": t["toc_wt_pct"],
            "vclay_v_v": t["vclay_v_v"], "vquartz_v_v": t["vquartz_v_v"],
            "vcalcite_v_v": t["vcalcite_v_v"], "vkerogen_v_v": t["vkerogen_v_v"],
            "phi_v_v": t["phi_v_v"], "sw_v_v": t["sw_v_v"], "gr_api": t["gr_api"],
            "k_pct": t["k_pct"], "u_ppm": t["u_ppm"], "th_ppm": t["th_ppm"],
            "rt_ohmm": t["rt_ohmm"], "rhob_g_cc": t["rhob_g_cc"], "nphi_v_v": t["nphi_v_v"],
            "pe_b_e": t["pe_b_e"], "dtc_us_ft": t["dtc_us_ft"],
            "relative_sea_level": sim["sea_level"], "water_depth_index": sim["water_depth"],
            "phase": sim["phase"], "height_above_base": sim["height_ft"] * f,
        })
        tpath = out / "truth" / f"{w['name']}.csv"
        write_csv(tpath, truth, dec)
        files.append(tpath)
        col = sim["col"]
        for k in range(len(col.sb_height_ft)):
            for surf, hgt in (("SB", col.sb_height_ft[k]), ("MFS", col.mfs_height_ft[k])):
                if not np.isfinite(hgt):
                    continue
                d = round((base_edge - hgt) * f, dec)
                # observable only strictly inside the log, one sample step from either end
                if depth[0] + step - 1e-9 <= d <= depth[-1] - step + 1e-9:
                    surfaces.append({"well": w["name"], "surface": surf, "depth": d,
                                     "sequence": k + 1, "depth_unit": w["unit"]})
        # --- core ---
        core_meta: dict[str, Any] = {}
        if w["role"] == "cored":
            cored_no += 1
            core_meta = _core(w, cored_no, depth, step, f, sim, cfg, seed, idx, core_rows,
                              gamma_rows, plug_rows)
        meta.append(_well_meta(w, depth, step, n, sim, core_meta, dec))
        if extras:
            meta[-1].update(_extra_meta(sim, depth, step, erosion.get(idx), dec))
    write_csv(out / "truth" / "surfaces.csv",
              pd.DataFrame(surfaces, columns=["well", "surface", "depth", "sequence",
                                              "depth_unit"]), dec)
    write_csv(out / "core_intervals.csv",
              pd.DataFrame(core_rows, columns=["well", "top", "base", "lithofacies",
                                               "systems_tract", "sequence"]), dec)
    write_csv(out / "core_gamma.csv",
              pd.DataFrame(gamma_rows, columns=["well", "depth", "core_gr_api"]), dec)
    write_csv(out / "core_geochem.csv", pd.DataFrame(plug_rows, columns=GEOCHEM_COLUMNS), dec)
    basin = {
        "generator": "facies_ml.synthetic", "generator_version": str(cfg["generator_version"]),
        "seed": seed, "basin": cfg["basin"], "formation": cfg["formation"], "invented": True,
        "n_sequences": int(cfg["sea_level"]["n_sequences"]),
        "core_shift_convention": "log depth = core depth + core_shift (well's depth unit)",
        "position_convention": "0 = most proximal, 1 = most distal",
        "wells": meta,
    }
    if extras:
        basin["preset"] = str(cfg["preset"])
    write_json(out / "basin.json", basin)
    (out / "README.md").write_text(_readme(cfg, seed, plan, extras), newline="\n")
    files += [out / "truth" / "surfaces.csv", out / "core_intervals.csv", out / "core_gamma.csv",
              out / "core_geochem.csv", out / "basin.json", out / "README.md"]
    return BasinSummary(out_dir=out, wells={w["name"]: w["role"] for w in plan}, files=files)


def _core(w: dict[str, Any], cored_no: int, depth: np.ndarray, step: float, f: float,
          sim: dict[str, Any], cfg: dict[str, Any], seed: int, idx: int,
          core_rows: list[dict[str, Any]], gamma_rows: list[dict[str, Any]],
          plug_rows: list[dict[str, Any]]) -> dict[str, Any]:
    """Core intervals, core gamma and core-plug geochemistry of one cored well (appended in
    core depth)."""
    cc = cfg["core"]
    dec = int(cfg["logging"]["rounding"])
    n = len(depth)
    shift = round(float(cc["shift_ft"][(cored_no - 1) % len(cc["shift_ft"])]) * f, dec)
    i0, i1 = int(round(cc["cored_fraction"][0] * n)), int(round(cc["cored_fraction"][1] * n))
    keep = np.zeros(n, bool)
    keep[i0:i1] = True
    lost: list[float] = []
    if cored_no == int(cc["lost_core_well"]):
        g0 = i0 + int(0.45 * (i1 - i0))
        g1 = g0 + int(round(float(cc["lost_core_ft"]) * f / step))
        keep[g0:g1] = False
        lost = [round(depth[g0] - step / 2 - shift, dec), round(depth[g1 - 1] + step / 2 - shift,
                                                                 dec)]
    lab = np.char.add(np.char.add(sim["lithofacies"].astype(str), "|"), sim["tract"].astype(str))
    lab = np.char.add(np.char.add(lab, "|"), sim["sequence"].astype(str))
    i = 0
    while i < n:
        if not keep[i]:
            i += 1
            continue
        j = i
        while j + 1 < n and keep[j + 1] and lab[j + 1] == lab[i]:
            j += 1
        core_rows.append({"well": w["name"], "top": round(depth[i] - step / 2 - shift, dec),
                          "base": round(depth[j] + step / 2 - shift, dec),
                          "lithofacies": sim["lithofacies"][i], "systems_tract": sim["tract"][i],
                          "sequence": f"S{int(sim['sequence'][i])}"})
        i = j + 1
    rng = np.random.default_rng([seed, 4, idx])
    g = tools.tool_response(sim["truth"]["gr_api"], float(cc["gamma_sigma_samples"]))
    g = float(cc["gamma_scale"]) * g + float(cc["gamma_noise_api"]) * rng.standard_normal(n)
    for k in np.flatnonzero(keep):
        gamma_rows.append({"well": w["name"], "depth": round(depth[k] - shift, dec),
                           "core_gr_api": round(float(g[k]), 2)})
    plug_rows += _plugs(w["name"], depth, step, f, shift, keep, sim["truth"], cfg,
                        np.random.default_rng([seed, 9, idx]))
    return {"core_shift": shift, "core_top": round(depth[i0] - step / 2 - shift, dec),
            "core_base": round(depth[i1 - 1] + step / 2 - shift, dec), "lost_core": lost}


def _plugs(name: str, depth: np.ndarray, step: float, f: float, shift: float,
           keep: np.ndarray, truth: dict[str, np.ndarray], cfg: dict[str, Any],
           rng: np.random.Generator) -> list[dict[str, Any]]:
    """Core-plug TOC and XRD rows of one cored well (core depth, the well's unit).

    Plugs are taken along the recovered core (``keep``, log order; lost core has none), one
    every ``core.plugs.spacing_ft`` on average (each gap 0.75-1.25 times it). A plug sits at a
    core depth within 0.4 step of a log sample (log depth = core depth + ``shift``) and
    measures that sample's true composition plus lab noise: TOC (wt % of the bulk rock) with
    sigma = abs + rel * TOC; quartz, carbonate (calcite) and clay as wt % of the crystalline
    fraction (XRD, common practice) with ``xrd_noise_wt_pct`` each, then re-closed to 100.
    Its own random stream (``rng``), so the other files do not change.
    """
    pc = cfg["core"]["plugs"]
    where = np.flatnonzero(keep)
    if where.size == 0:
        return []
    spacing = float(pc["spacing_ft"]) * f          # in the well's unit
    chosen: list[int] = []
    pos = float(depth[where[0]]) + float(rng.uniform(0.0, spacing))
    last = float(depth[where[-1]])
    while pos <= last:
        k = int(np.argmin(np.abs(depth[where] - pos)))
        if not chosen or where[k] != chosen[-1]:
            chosen.append(int(where[k]))
        pos += spacing * float(rng.uniform(0.75, 1.25))
    ks = np.asarray(chosen, dtype=int)
    n = ks.size
    dens = cfg["petrophysics"]["density_g_cc"]
    wt = mineral_weight_percent({"quartz": truth["vquartz_v_v"][ks],
                                 "carbonate": truth["vcalcite_v_v"][ks],
                                 "clay": truth["vclay_v_v"][ks]},
                                {"quartz": dens["quartz"], "carbonate": dens["calcite"],
                                 "clay": dens["clay"]})
    toc = truth["toc_wt_pct"][ks]
    toc = toc + (float(pc["toc_noise_abs_wt_pct"]) + float(pc["toc_noise_rel"]) * toc) * \
        rng.standard_normal(n)
    xrd = np.vstack([wt[k] for k in ("quartz", "carbonate", "clay")])
    xrd = np.clip(xrd + float(pc["xrd_noise_wt_pct"]) * rng.standard_normal(xrd.shape), 0.0, None)
    xrd = 100.0 * xrd / xrd.sum(axis=0)
    offset = rng.uniform(-0.4, 0.4, n) * step
    rows = []
    for j, k in enumerate(ks):
        rows.append({"well": name, "depth": round(float(depth[k] + offset[j] - shift), 2),
                     "toc_wt_pct": f"{max(float(toc[j]), 0.0):.2f}",
                     "quartz_wt_pct": f"{xrd[0, j]:.1f}", "carbonate_wt_pct": f"{xrd[1, j]:.1f}",
                     "clay_wt_pct": f"{xrd[2, j]:.1f}"})
    return rows


def _extra_meta(sim: dict[str, Any], depth: np.ndarray, step: float,
                eroded: tuple[int, float] | None, dec: int) -> dict[str, Any]:
    """basin.json additions of the presets beyond the demo (log depth, the well's unit)."""
    half = step / 2
    drift = sim["drift"]
    return {
        "logged_sequences": sorted({int(k) for k in sim["sequence"]}),
        "log_window_cut_sequences": {"base": sim["cut_base"], "top": sim["cut_top"]},
        "eroded_sequences": [] if eroded is None else [eroded[0]],
        "eroded_tst_kept": None if eroded is None else eroded[1],
        "gr_drift_api": None if drift is None else {
            "top": round(float(drift[0]), 2), "base": round(float(drift[-1]), 2),
            "max_abs": round(float(np.abs(drift).max()), 2)},
        "hot_stringers": [{"top": round(float(depth[a]) - half, dec),
                           "base": round(float(depth[b - 1]) + half, dec), "gr_added_api": g}
                          for a, b, g in sim["hot"]],
    }


def _well_meta(w: dict[str, Any], depth: np.ndarray, step: float, n: int, sim: dict[str, Any],
               core: dict[str, Any], dec: int) -> dict[str, Any]:
    """The basin.json entry of one well (depths in the well's unit, log depth)."""
    from facies_ml.wells.model import ROLES

    present = {_ROLE_OF[k] for k in sim["logs"]} | ({"bs_in"} if w["has_bs_curve"] else set())
    curves = {_ROLE_OF[k]: _mnemonic(k, w) for k in
              ["gr", "k", "u", "th", "rt", "rhob", "nphi", "pe", "dt", "cali", "bs"]
              if _ROLE_OF[k] in present}
    half = step / 2
    return {
        "name": w["name"], "role": w["role"], "position": w["position"],
        "depth_unit": w["unit"], "step": step, "n_samples": n,
        "top": float(depth[0]), "base": float(depth[-1]),
        "curves": curves, "missing_curves": [r for r in ROLES if r not in present],
        "nphi_unit": w["nphi_unit"], "bit_size_in": sim["bs"],
        "lst_present": bool((sim["tract"] == "LST").any()),
        "maturity_factor": round(sim["maturity"], 4),
        "gr_scale": sim["gr_scale"], "gr_offset_api": sim["gr_offset"],
        "washouts": [{"top": round(float(depth[a]) - half, dec),
                      "base": round(float(depth[b - 1]) + half, dec),
                      "enlargement_in": round(e, 2)} for a, b, e in sim["washouts"]],
        "spikes": [{"curve": _mnemonic(k, w), "depth": float(depth[i])} for k, i in sim["spikes"]],
        "null_gaps": [{"curve": _mnemonic(k, w), "top": float(depth[a]),
                       "base": float(depth[b - 1])} for k, a, b in sim["gaps"]],
        "core_shift": core.get("core_shift"), "core_top": core.get("core_top"),
        "core_base": core.get("core_base"), "lost_core": core.get("lost_core", []),
    }
