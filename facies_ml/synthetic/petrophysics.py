"""Simple forward petrophysics: rock composition -> noise-free log responses.

All functions are pure and work sample by sample on arrays (any depth order). Volumes are
fractions of bulk volume (v/v); TOC is weight percent of the bulk rock.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

MINERALS: tuple[str, ...] = ("quartz", "calcite", "clay")


def kerogen_volume(toc_wt_pct: np.ndarray, phi: np.ndarray, rho_matrix: np.ndarray,
                   rho_kerogen: float, rho_fluid: float, kerogen_per_toc: float) -> np.ndarray:
    """Kerogen volume (v/v) that gives ``toc_wt_pct`` in a rock of porosity ``phi``.

    Kerogen mass fraction ``wk = kerogen_per_toc * TOC / 100`` of the bulk mass; solving
    ``wk * rho_b = Vk * rho_k`` with ``rho_b`` from volume mixing gives the closed form below.
    """
    wk = kerogen_per_toc * np.asarray(toc_wt_pct, dtype=float) / 100.0
    solid_fluid = (1.0 - phi) * rho_matrix + phi * rho_fluid
    return wk * solid_fluid / (rho_kerogen * (1.0 - wk) + wk * rho_matrix)


def bulk_density(volumes: Mapping[str, np.ndarray], densities: Mapping[str, float]) -> np.ndarray:
    """Bulk density (g/cc) by volume mixing: ``rho_b = sum_i V_i * rho_i``."""
    return sum(np.asarray(v, dtype=float) * densities[k] for k, v in volumes.items())


def photoelectric(volumes: Mapping[str, np.ndarray], densities: Mapping[str, float],
                  pe: Mapping[str, float]) -> np.ndarray:
    """PE (b/e) mixed by electron density (approximated by bulk density): sum V rho PE / rho_b."""
    num = sum(np.asarray(v, dtype=float) * densities[k] * pe[k] for k, v in volumes.items())
    return num / bulk_density(volumes, densities)


def wyllie_slowness(volumes: Mapping[str, np.ndarray], dt: Mapping[str, float]) -> np.ndarray:
    """Compressional slowness (us/ft) by the Wyllie time average: ``DT = sum_i V_i * DT_i``."""
    return sum(np.asarray(v, dtype=float) * dt[k] for k, v in volumes.items())


def neutron_porosity(volumes: Mapping[str, np.ndarray], hydrogen: Mapping[str, float]
                     ) -> np.ndarray:
    """Apparent neutron porosity (v/v, limestone units) as a linear mix of component responses."""
    return sum(np.asarray(v, dtype=float) * hydrogen[k] for k, v in volumes.items())


def gamma_ray_api(k_pct: np.ndarray, u_ppm: np.ndarray, th_ppm: np.ndarray,
                  coeff: Mapping[str, float]) -> np.ndarray:
    """Total GR (gAPI) from spectral components: ``GR = cK*K + cU*U + cTh*Th`` (16, 8, 4)."""
    return coeff["k_pct"] * k_pct + coeff["u_ppm"] * u_ppm + coeff["th_ppm"] * th_ppm


def simandoux_rt(phi: np.ndarray, sw: np.ndarray, vclay: np.ndarray, rw: float, rsh: float,
                 a: float = 1.0, m: float = 2.0, n: float = 2.0) -> np.ndarray:
    """Deep resistivity (ohm.m): ``1/Rt = phi^m Sw^n / (a Rw) + Vcl Sw / Rsh``.

    With ``vclay = 0`` this is Archie's equation ``Rt = a Rw / (phi^m Sw^n)``.
    """
    conductivity = phi ** m * sw ** n / (a * rw) + vclay * sw / rsh
    return 1.0 / conductivity


def rock_logs(clay: np.ndarray, quartz: np.ndarray, calcite: np.ndarray, phi: np.ndarray,
              toc: np.ndarray, maturity: float, petro: Mapping, kerogen_per_toc: float,
              u_extra_ppm: np.ndarray | float = 0.0) -> dict[str, np.ndarray]:
    """Noise-free logs and bulk volumes for mineral shares (of the mineral volume), porosity,
    TOC (wt%), a well maturity factor and authigenic uranium (ppm, e.g. in condensed sections).
    Returns arrays keyed by truth-column name."""
    dens = petro["density_g_cc"]
    shares = {"quartz": quartz, "calcite": calcite, "clay": clay}
    rho_ma = sum(shares[k] * dens[k] for k in MINERALS)
    vk = kerogen_volume(toc, phi, rho_ma, dens["kerogen"], dens["water"], kerogen_per_toc)
    solid = 1.0 - phi - vk
    vol = {k: shares[k] * solid for k in MINERALS}
    vol["kerogen"] = vk
    vol["water"] = phi
    rhob = bulk_density(vol, dens)
    pe = photoelectric(vol, dens, petro["pe_b_e"])
    dt = wyllie_slowness(vol, petro["dt_us_ft"])
    nphi = neutron_porosity(vol, petro["neutron_v_v"])
    th = petro["th_background_ppm"] + petro["th_ppm_per_clay"] * vol["clay"]
    k = petro["k_background_pct"] + petro["k_pct_per_clay"] * vol["clay"]
    u = petro["u_background_ppm"] + petro["u_ppm_per_toc"] * toc + u_extra_ppm
    gr = gamma_ray_api(k, u, th, petro["gr_api_coeff"])
    sw = np.clip(1.0 - petro["sw_drop_per_toc"] * toc * maturity, petro["sw_min"], 1.0)
    rt = simandoux_rt(phi, sw, vol["clay"], petro["rw_ohmm"], petro["rsh_ohmm"],
                      petro["archie_a"], petro["archie_m"], petro["archie_n"])
    return {
        "vclay_v_v": vol["clay"], "vquartz_v_v": vol["quartz"], "vcalcite_v_v": vol["calcite"],
        "vkerogen_v_v": vk, "phi_v_v": phi, "sw_v_v": sw,
        "gr_api": gr, "k_pct": k, "u_ppm": u, "th_ppm": th, "rt_ohmm": rt, "rhob_g_cc": rhob,
        "nphi_v_v": nphi, "pe_b_e": pe, "dtc_us_ft": dt,
    }


def mineral_weight_percent(volumes: Mapping[str, np.ndarray], densities: Mapping[str, float]
                           ) -> dict[str, np.ndarray]:
    """Weight % of each mineral in the CRYSTALLINE (mineral) fraction, as XRD reports it.

    ``volumes``: bulk volumes (v/v) of the minerals only (kerogen and pore fluid left out);
    ``densities``: grain densities (g/cc). Mass = volume * density (common practice), so
    ``wt%_i = 100 * V_i rho_i / sum_j V_j rho_j``; the shares sum to 100.
    """
    mass = {k: np.asarray(v, dtype=float) * float(densities[k]) for k, v in volumes.items()}
    total = sum(mass.values())
    return {k: 100.0 * m / total for k, m in mass.items()}
