"""Measure systems-tract evidence settings by leave-one-well-out on the demo basin.

Variants (settings under ``sequence:`` in configs/default.yaml): the evidence weight calibrated
on held-out training wells from ``sequence.evidence_weight_grid`` (the default) vs fixed weights
(a one-value grid means no calibration), each with ``sequence.duration.model`` ``explicit``
(log-normal thickness, the default) and ``minimum_geometric`` (hard minimum plus geometric
tail). Prints pooled tract accuracy raw vs decoded, rule violations, median MFS / SB depth
errors, missed / extra surfaces and the p10-p90 coverage. Not a test: it only prints figures
(slow: one full pipeline fit per well per variant).

    python benchmarks/emission_variants.py
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from facies_ml.api import load_project
from facies_ml.config import load_config
from facies_ml.evaluation import leave_one_well_out

REPO = Path(__file__).resolve().parents[1]


def variants(default_weight: float) -> dict[str, dict[str, Any]]:
    """name -> overrides of the ``sequence:`` section."""
    out: dict[str, dict[str, Any]] = {}
    for model in ("explicit", "minimum_geometric"):
        dur = {"duration": {"model": model}}
        out[f"{model}, calibrated weight"] = dict(dur)
        for w in sorted({default_weight, 1.0}):
            out[f"{model}, fixed weight {w:g}"] = {**dur, "evidence_weight": w,
                                                   "evidence_weight_grid": [w]}
    return out


def _fmt(value: Any, spec: str, width: int) -> str:
    return f"{'-':>{width}}" if value is None else f"{value:>{width}{spec}}"


def main() -> None:
    demo = REPO / "synthetic_wells"
    base = load_config()
    seq = base.section("sequence")
    print(f"default sequence.evidence_weight {seq['evidence_weight']}, grid "
          f"{seq['evidence_weight_grid']}, duration.model {seq['duration']['model']}")
    project = load_project(demo, demo / "core_intervals.csv", base, demo / "core_gamma.csv")
    print(f"{'variant':<36}{'tract_raw':>10}{'tract_dec':>10}{'viol_raw':>9}{'viol':>6}"
          f"{'MFS_err':>9}{'SB_err':>8}{'MFS miss/extra':>16}{'SB miss/extra':>15}"
          f"{'p10-p90':>9}", flush=True)
    for name, over in variants(float(seq["evidence_weight"])).items():
        cfg = load_config(overrides={"sequence": over})
        metrics, _ = leave_one_well_out(project.cored, project.labels, cfg)
        o = metrics["overall"]
        print(f"{name:<36}{_fmt(o.get('systems_tract_accuracy_raw'), '.3f', 10)}"
              f"{_fmt(o.get('systems_tract_accuracy'), '.3f', 10)}"
              f"{_fmt(o.get('rule_violations_raw'), 'd', 9)}{_fmt(o.get('rule_violations'), 'd', 6)}"
              f"{_fmt(o.get('mfs_depth_error'), '.2f', 9)}{_fmt(o.get('sb_depth_error'), '.2f', 8)}"
              f"{_fmt(o.get('mfs_missed'), 'd', 8)}/{o.get('mfs_extra')!s:<7}"
              f"{_fmt(o.get('sb_missed'), 'd', 7)}/{o.get('sb_extra')!s:<7}"
              f"{_fmt(o.get('p10_p90_coverage'), '.2f', 9)}", flush=True)


if __name__ == "__main__":
    main()
