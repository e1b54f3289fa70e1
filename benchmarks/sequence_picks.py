"""Offset-well sequence picks on wells the model never saw: train on the cored wells of a
generated basin, predict its offset wells, compare with the generator's truth.

    .venv/bin/python benchmarks/sequence_picks.py                      # demo-like + hard basin
    .venv/bin/python benchmarks/sequence_picks.py --preset hard --seed 7 --keep /tmp/hard

For each basin it prints, over the offset wells: systems-tract accuracy (against the per-sample
truth), SB and MFS picked within 5 ft (share of the true surfaces), missed and extra picks per
true surface, median depth error, p10-p90 coverage of matched picks, the share of matched
surfaces carrying the right basin-wide sequence name, rule violations and the run time. Picks
are scored by facies_ml.evaluation.score_tops, which follows the matching rule of
``../shared/tools/score_picks.py``; when that script exists beside the checkout it is run too
and its lines printed, as a cross-check. Figures only; nothing is asserted.

The generated basins are invented (facies_ml.synthetic); the figures show how the method
behaves on data it was not tuned on, not how it will score on a real field.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from facies_ml import api
from facies_ml.config import CONFIG_DIR, load_config
from facies_ml.demo import score_against_truth
from facies_ml.evaluation import score_tops
from facies_ml.synthetic import generate_basin

SCORER = Path(__file__).resolve().parents[1].parent / "shared" / "tools" / "score_picks.py"
PRESETS = {"demo": CONFIG_DIR / "synthetic_basin.yaml", "hard": CONFIG_DIR / "synthetic_hard.yaml"}


def run_basin(preset: str, seed: int, folder: Path, config: str | None = None) -> dict:
    """Generate, train, predict and score one basin; returns the figures."""
    cfg = load_config(config)
    basin = folder / f"{preset}_seed{seed}"
    summary = generate_basin(basin, n_wells=10, n_cored=5, seed=seed,
                             config_path=PRESETS[preset])
    t0 = time.perf_counter()
    _, pipe = api.train(basin, basin / "core_intervals.csv", folder / f"models_{preset}", cfg,
                        basin / "core_gamma.csv")
    t_train = time.perf_counter() - t0
    offset = [basin / f"{w}.las" for w, role in summary.wells.items() if role == "offset"]
    project = api.load_project(basin, None, cfg)
    wells = [w for w in project.wells if w.source in {str(f) for f in offset}]
    t0 = time.perf_counter()
    failures: list = []
    preds = api.predict_wells(pipe, wells, failures)
    out = folder / f"pred_{preset}"
    api.write_predictions(pipe, preds, failures, out)
    t_pred = time.perf_counter() - t0
    tops = pd.read_csv(out / "tops.csv", comment="#")
    truth = pd.read_csv(basin / "truth" / "surfaces.csv")
    truth = truth[truth["well"].isin([p.well.name for p in preds])]
    truth_path = folder / f"truth_{preset}.csv"
    truth.to_csv(truth_path, index=False)
    ev = cfg.section("evaluation")
    scores = score_tops(tops, truth, float(ev["surface_match_tolerance"]),
                        float(ev["surface_close_tolerance"]))
    acc = [score_against_truth(p, basin / "truth" / f"{p.well.name}.csv", cfg.facies.labels,
                               pipe.tract_names_)["systems_tract_accuracy"] for p in preds]
    scores.update(tract_accuracy=float(np.mean(acc)), tract_accuracy_per_well=acc,
                  violations=int(sum(p.rule_violations for p in preds)),
                  train_s=t_train, predict_s=t_pred, failures=failures,
                  evidence_weight=pipe.sequence_model_.params_.evidence_weight,
                  path_weight=pipe.sequence_model_.params_.path_weight,
                  tops=str(out / "tops.csv"), truth=str(truth_path))
    return scores


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--preset", choices=["demo", "hard", "both"], default="both")
    ap.add_argument("--seed", type=int, action="append",
                    help="basin seed (repeatable; default 11 for demo, 7 for hard)")
    ap.add_argument("--keep", help="folder for the generated basins and outputs (default: temp)")
    ap.add_argument("--config", help="project settings file overriding configs/default.yaml")
    a = ap.parse_args()
    presets = ["demo", "hard"] if a.preset == "both" else [a.preset]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(a.keep) if a.keep else Path(tmp)
        for preset in presets:
            for seed in a.seed or [11 if preset == "demo" else 7]:
                s = run_basin(preset, seed, folder, a.config)
                print(f"\n== {preset} basin, seed {seed}: trained on 5 cored wells, "
                      f"5 offset wells never seen (evidence weights: path {s['path_weight']:g}, "
                      f"ranges {s['evidence_weight']:g}; "
                      f"train {s['train_s']:.0f} s, predict {s['predict_s']:.0f} s)")
                print(f"systems-tract accuracy {s['tract_accuracy']:.3f} (per well "
                      + ", ".join(f"{x:.3f}" for x in s["tract_accuracy_per_well"])
                      + f"); rule violations {s['violations']}")
                for kind in ("MFS", "SB"):
                    k = s[kind]
                    print(f"{kind:4s} true {k['true']:3d}  within 5 ft {k['within_close']:.3f}  "
                          f"missed {k['missed']:3d}  extra per true {k['extra']:.3f}  "
                          f"median error {k['median_error_ft'] or float('nan'):.2f} ft")
                print(f"p10-p90 coverage {s['coverage']:.3f}  basin-wide names right "
                      f"{s['names'] if s['names'] is not None else float('nan'):.3f}")
                if s["failures"]:
                    print(f"failures: {s['failures']}")
                if SCORER.is_file():
                    print("cross-check, ../shared/tools/score_picks.py:")
                    subprocess.run([sys.executable, str(SCORER), "--tops", s["tops"],
                                    "--truth", s["truth"]], check=False)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
