"""Measure systems-tract emission choices by leave-one-well-out on the demo basin.

Variants: the tract classifier's posterior divided by the tract prior (scaled likelihoods,
Bourlard & Morgan 1994; the default), the posterior used directly, and emission weights
(exponents) 0.5 and 2. Prints pooled tract accuracy raw vs decoded, rule violations and median
MFS / SB depth errors. Not a test: it only prints figures.

    python benchmarks/emission_variants.py
"""

from __future__ import annotations

from pathlib import Path

from facies_ml.api import load_project
from facies_ml.config import load_config
from facies_ml.evaluation import leave_one_well_out

REPO = Path(__file__).resolve().parents[1]
VARIANTS = {
    "scaled likelihood (default)": {"emission": "scaled_likelihood", "emission_weight": 1.0},
    "posterior as emission": {"emission": "posterior", "emission_weight": 1.0},
    "scaled likelihood, weight 0.5": {"emission": "scaled_likelihood", "emission_weight": 0.5},
    "scaled likelihood, weight 2": {"emission": "scaled_likelihood", "emission_weight": 2.0},
}


def main() -> None:
    demo = REPO / "synthetic_wells"
    base = load_config()
    project = load_project(demo, demo / "core_intervals.csv", base, demo / "core_gamma.csv")
    print(f"{'variant':<32}{'tract_raw':>10}{'tract_hmm':>10}{'viol_raw':>9}{'viol':>6}"
          f"{'MFS_err':>9}{'SB_err':>8}{'MFS miss/extra':>16}{'SB miss/extra':>15}")
    for name, seq in VARIANTS.items():
        cfg = load_config(overrides={"sequence": seq})
        metrics, _ = leave_one_well_out(project.cored, project.labels, cfg)
        o = metrics["overall"]
        print(f"{name:<32}{o['systems_tract_accuracy_raw']:>10.3f}{o['systems_tract_accuracy']:>10.3f}"
              f"{o['rule_violations_raw']:>9d}{o['rule_violations']:>6d}"
              f"{o['mfs_depth_error']:>9.2f}{o['sb_depth_error']:>8.2f}"
              f"{o['mfs_missed']:>8d}/{o['mfs_extra']:<7d}{o['sb_missed']:>7d}/{o['sb_extra']:<7d}")


if __name__ == "__main__":
    main()
