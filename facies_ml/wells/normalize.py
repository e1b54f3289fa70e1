"""Two-point gamma-ray normalization (common practice), fitted on training (key) wells only.

gr_norm = ref_low + (gr - well_low) * (ref_high - ref_low) / (well_high - well_low), where the
``low``/``high`` values are percentiles of GR: ``ref_*`` pooled over the fitted wells,
``well_*`` of the well being transformed. Depth order does not matter (percentiles).
"""

from __future__ import annotations

import copy

import numpy as np

from facies_ml.errors import InputError
from facies_ml.wells.model import Well


class GRNormalizer:
    """Map each well's GR percentiles P_low/P_high onto the pooled key-well ones."""

    def __init__(self, low_percentile: float = 5, high_percentile: float = 95) -> None:
        if not 0 <= low_percentile < high_percentile <= 100:
            raise InputError("GR normalization needs 0 <= low_percentile < high_percentile <= 100")
        self.low_percentile = float(low_percentile)
        self.high_percentile = float(high_percentile)
        self.ref_low: float | None = None
        self.ref_high: float | None = None
        self.fitted_wells: list[str] = []

    def _percentiles(self, gr: np.ndarray) -> tuple[float, float]:
        lo, hi = np.percentile(gr, [self.low_percentile, self.high_percentile])
        return float(lo), float(hi)

    def fit(self, wells: list[Well]) -> GRNormalizer:
        """Reference P_low/P_high (API) from the pooled finite GR of ``wells``."""
        pooled = [w.curves["gr_api"].to_numpy(dtype=float) for w in wells if "gr_api" in w.curves]
        gr = np.concatenate(pooled) if pooled else np.empty(0)
        gr = gr[np.isfinite(gr)]
        if gr.size < 2:
            raise InputError("GR normalization: no gamma-ray samples in the training wells")
        lo, hi = self._percentiles(gr)
        if not hi > lo:
            raise InputError("GR normalization: training-well GR has no spread")
        self.ref_low, self.ref_high = lo, hi
        self.fitted_wells = [w.name for w in wells if "gr_api" in w.curves]
        return self

    def transform(self, well: Well) -> Well:
        """A new Well with ``gr_api`` normalized; shift/scale recorded in
        ``intake["gr_normalization"]``. A well without GR is returned unchanged (a copy)."""
        if self.ref_low is None or self.ref_high is None:
            raise RuntimeError("GRNormalizer.transform called before fit")
        out = copy.deepcopy(well)
        if "gr_api" not in out.curves or not out.curves["gr_api"].notna().any():
            out.intake.setdefault("notes", []).append("GR normalization skipped: no GR")
            return out
        gr = out.curves["gr_api"].to_numpy(dtype=float)
        lo, hi = self._percentiles(gr[np.isfinite(gr)])
        if not hi > lo:
            raise InputError(f"GR normalization: P{self.low_percentile:g} and "
                             f"P{self.high_percentile:g} of GR are equal ({lo:g} API)",
                             well=well.name, curve="gr_api")
        scale = (self.ref_high - self.ref_low) / (hi - lo)
        shift = self.ref_low - lo * scale
        out.curves["gr_api"] = gr * scale + shift
        out.intake["gr_normalization"] = {
            "low_percentile": self.low_percentile, "high_percentile": self.high_percentile,
            "well_low": lo, "well_high": hi, "ref_low": self.ref_low, "ref_high": self.ref_high,
            "scale": float(scale), "shift": float(shift), "fitted_on": list(self.fitted_wells),
        }
        return out
