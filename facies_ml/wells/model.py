"""The in-memory well: depth-indexed curves in canonical roles, plus metadata and intake report."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

FT_PER_M = 1.0 / 0.3048

# Canonical curve roles (units in the names). Every reader maps file curves onto these.
ROLES: tuple[str, ...] = (
    "gr_api",       # total gamma ray, API units
    "rt_ohmm",      # deep resistivity, ohm.m
    "rhob_g_cc",    # bulk density, g/cm3
    "nphi_v_v",     # neutron porosity, v/v (limestone units)
    "pe_b_e",       # photoelectric factor, barns/electron
    "dtc_us_ft",    # compressional slowness, us/ft
    "cali_in",      # caliper, inches
    "bs_in",        # bit size, inches
    "k_pct",        # spectral gamma potassium, %
    "u_ppm",        # spectral gamma uranium, ppm
    "th_ppm",       # spectral gamma thorium, ppm
)


def depth_factor(from_unit: str, to_unit: str) -> float:
    """Multiply a depth in ``from_unit`` by this to get ``to_unit`` (ft or m)."""
    if from_unit == to_unit:
        return 1.0
    if (from_unit, to_unit) == ("m", "ft"):
        return FT_PER_M
    if (from_unit, to_unit) == ("ft", "m"):
        return 1.0 / FT_PER_M
    raise ValueError(f"unknown depth units {from_unit!r} -> {to_unit!r}")


@dataclass
class Well:
    """One well after intake.

    ``curves``: DataFrame indexed by depth (working unit, strictly increasing = downward, regular
    ``step``), columns are canonical roles from :data:`ROLES` (a subset; missing roles absent).
    ``flags``: same index, boolean quality columns (e.g. ``bad_hole``).
    ``original_depth_unit``: unit of the source file's index; ``to_original_depth`` converts back.
    ``intake``: the per-well intake report (curves found, roles, conversions, drops, shifts).
    ``original``: the file's curves as read (numbers, NULL -> NaN, file mnemonics) on the
    file's own depths (``original_depth_unit``, sorted downward, duplicate depths dropped);
    ``original_units`` maps each of its columns and its index name to the file's unit text,
    ``original_descr`` each column to the file's description.
    ``None`` for a well built in code.
    """

    name: str
    curves: pd.DataFrame
    depth_unit: str = "ft"
    original_depth_unit: str = "ft"
    step: float = 0.5
    source: str = ""
    flags: pd.DataFrame | None = None
    header: dict[str, Any] = field(default_factory=dict)
    intake: dict[str, Any] = field(default_factory=dict)
    original: pd.DataFrame | None = None
    original_units: dict[str, str] = field(default_factory=dict)
    original_descr: dict[str, str] = field(default_factory=dict)

    @property
    def depth(self) -> np.ndarray:
        return self.curves.index.to_numpy(dtype=float)

    @property
    def roles(self) -> list[str]:
        return [c for c in self.curves.columns if c in ROLES]

    def to_original_depth(self, depth: np.ndarray | float) -> np.ndarray | float:
        return np.asarray(depth) * depth_factor(self.depth_unit, self.original_depth_unit)

    def from_original_depth(self, depth: np.ndarray | float) -> np.ndarray | float:
        return np.asarray(depth) * depth_factor(self.original_depth_unit, self.depth_unit)
