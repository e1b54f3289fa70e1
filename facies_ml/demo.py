"""The demo: evaluate, train and predict on the bundled synthetic Quillmere Basin wells.

The demo basin is invented; its ``truth/`` files exist only so the demo can score the offset
wells. Real offset wells have no truth: their predictions need review by a geoscientist.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from facies_ml import CAUTION, api
from facies_ml.config import load_config
from facies_ml.evaluation import (
    format_table,
    learning_curve,
    leave_one_well_out,
    rank_core_candidates,
    score_tops,
)
from facies_ml.pipeline import FaciesPipeline, WellPrediction
from facies_ml.report.outputs import write_json, write_table
from facies_ml.report.run_folder import RunFolder
from facies_ml.resources import demo_wells_dir
from facies_ml.store import save_version
from facies_ml.wells.clean import nearest_samples

CORE_ROLES = ("gr_api", "rt_ohmm", "rhob_g_cc", "nphi_v_v", "pe_b_e", "dtc_us_ft", "cali_in",
              "bs_in")


def intake_line(well: Any) -> str:
    """Compact intake summary: depth unit handling, missing roles, unit conversions, bad hole,
    despiked/out-of-range counts and the core depth shift."""
    i = well.intake
    parts = [f"{well.name}: {i.get('n_samples', len(well.curves))} samples, file in "
             f"{well.original_depth_unit}" + (f" -> converted to {well.depth_unit}"
                                               if well.original_depth_unit != well.depth_unit else "")]
    missing = [r for r in CORE_ROLES if r not in well.roles]
    if missing:
        parts.append("missing " + ", ".join(missing))
    conv = [f"{v['mnemonic']} {v['converted'].split(' (')[0]}" for v in i.get("roles", {}).values()
            if "(none)" not in v.get("converted", "(none)")]
    if conv:
        parts.append("converted " + ", ".join(conv))
    if i.get("bad_hole_samples"):
        parts.append(f"washout: {i['bad_hole_samples']} bad-hole samples "
                     f"({i.get('bad_hole_reference', 'caliper')}), density/neutron/PE nulled there")
    spikes = sum((i.get("despiked") or {}).values())
    oor = sum((i.get("out_of_range") or {}).values())
    if spikes or oor:
        parts.append(f"{spikes} spikes removed, {oor} out-of-range values nulled")
    if "depth_shift" in i:
        d = i["depth_shift"]
        parts.append(f"core-to-log shift {d['shift']:+.2f} {d.get('unit', well.depth_unit)} "
                     f"(r={d['correlation']:.2f}, {'applied' if d['applied'] else 'NOT applied'})")
    return "; ".join(parts)


def score_against_truth(pred: WellPrediction, truth_path: Path, facies_labels: list[str],
                        tract_names: list[str]) -> dict[str, Any]:
    """Demo only: compare a prediction with the generator's true answer for that well."""
    truth = pd.read_csv(truth_path)
    depth_work = np.asarray(pred.well.from_original_depth(truth["depth"].to_numpy(float)))
    table = pred.table
    idx = nearest_samples(table.index.to_numpy(float), depth_work, pred.well.step / 2)
    ok = idx >= 0
    out: dict[str, Any] = {}
    lab_true = truth["lithofacies"].astype(str).to_numpy()[ok]
    lab_pred = table["lithofacies_label"].to_numpy()[idx[ok]]
    out["lithofacies_accuracy"] = float(np.mean(lab_true == lab_pred)) if ok.any() else None
    if "systems_tract_label" in table and "systems_tract" in truth:
        t_true = truth["systems_tract"].astype(str).to_numpy()[ok]
        t_pred = table["systems_tract_label"].to_numpy()[idx[ok]]
        out["systems_tract_accuracy"] = float(np.mean(t_true == t_pred))
    return out


def evaluation_sections(metrics: dict[str, Any], curve: pd.DataFrame, cfg: Any,
                        out: Path) -> list[tuple[str, list[str]]]:
    """Held-out evaluation figures (confusion matrix, reliability, learning curve) for the
    HTML report."""
    from facies_ml.report.html import image_tag, table_html
    from facies_ml.report.plots import Style, evaluation_figures

    figures = evaluation_figures(metrics, cfg.facies.labels, Style(cfg.path("plot_style")),
                                 out / "evaluation", curve)
    keys = ("lithofacies_accuracy", "lithofacies_f1_macro", "systems_tract_accuracy_raw",
            "systems_tract_accuracy", "mfs_within_close_share", "mfs_missed", "mfs_extra",
            "mfs_depth_error", "sb_within_close_share", "sb_missed", "sb_extra",
            "sb_depth_error", "p10_p90_coverage", "names_right_share", "rule_violations")
    rows = [{"well": w, **{key: m.get(key) for key in keys}}
            for w, m in list(metrics["wells"].items()) + [("OVERALL", metrics["overall"])]]
    return [("Held-out evaluation (leave one well out)",
             [table_html(pd.DataFrame(rows))] + [image_tag(path, caption)
                                                 for caption, path in figures])]


def run_demo(out: str | Path = "demo_output", wells_dir: str | Path | None = None,
             progress: api.Progress = None) -> dict[str, Any]:
    """Run the whole job on the demo basin and print a summary; returns the figures."""
    t0 = time.perf_counter()
    wells_dir = Path(wells_dir) if wells_dir else demo_wells_dir()
    cfg = load_config()
    core = wells_dir / "core_intervals.csv"
    gamma = wells_dir / "core_gamma.csv"
    with RunFolder(out, inputs={"wells": wells_dir, "core": core,
                                "core_gamma": gamma if gamma.is_file() else None},
                   stale_hours=cfg.settings.report.stale_staging_hours) as run:
        result = _demo_steps(run, wells_dir, core, gamma, cfg, t0, progress)
    print(CAUTION)
    return result


def _demo_steps(run: RunFolder, wells_dir: Path, core: Path, gamma: Path, cfg: Any, t0: float,
                progress: api.Progress) -> dict[str, Any]:
    """The demo's five steps, writing into the run's staging folder ``run.path``; paths
    printed are where the files will be once the run is moved onto ``--out``."""
    out = run.path
    final = run.requested
    project = api.load_project(wells_dir, core, cfg, gamma if gamma.is_file() else None)
    print(f"Demo basin: {len(project.cored)} cored key wells "
          f"({', '.join(w.name for w in project.cored)}), {len(project.uncored)} offset wells "
          f"({', '.join(w.name for w in project.uncored)})")
    for w in project.wells:
        print(f"  intake {intake_line(w)}")

    print("\n1) Leave-one-well-out evaluation over the cored wells (each well held out in turn):")
    metrics, _ = leave_one_well_out(project.cored, project.labels, cfg, progress=progress)
    metrics["intake"] = {w.name: w.intake for w in project.wells}
    write_json(out / "evaluation" / "metrics.json", metrics)
    print(format_table(metrics))

    print("\n2) Training on all cored wells and saving a model version:")
    pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
    version = save_version(pipe, out / "models",
                           training_files={w.name: w.source for w in project.cored},
                           config_raw=cfg.raw, config_hash=cfg.digest(), metrics=metrics,
                           notes="demo")
    print(f"  saved {version} in {final / 'models'}")

    print("\n3) Predicting the offset wells:")
    failures: list[dict[str, Any]] = list(project.failures)
    preds = api.predict_wells(pipe, project.uncored, failures, progress)
    summary = api.write_predictions(pipe, preds, failures, out / "predictions")
    truth_dir = wells_dir / "truth"
    scores: dict[str, Any] = {}
    for p in preds:
        tp = truth_dir / f"{p.well.name}.csv"
        s = score_against_truth(p, tp, cfg.facies.labels, pipe.tract_names_) if tp.is_file() else {}
        scores[p.well.name] = s
        acc = s.get("lithofacies_accuracy")
        tacc = s.get("systems_tract_accuracy")
        print(f"  {p.well.name:<8} model {p.model_used.split(' (')[0]:<24} out-of-range "
              f"{p.out_of_range_fraction:6.1%}  surfaces {len(p.surfaces):3d}  "
              f"violations {p.rule_violations}"
              + (f"  facies acc vs truth {acc:.3f}" if acc is not None else "")
              + (f"  tract acc vs truth {tacc:.3f}" if tacc is not None else ""))
    truth_surfaces = truth_dir / "surfaces.csv"
    if truth_surfaces.is_file():
        ev = cfg.section("evaluation")
        truth = pd.read_csv(truth_surfaces)
        truth = truth[truth["well"].isin([p.well.name for p in preds])]
        tops = pd.read_csv(out / "predictions" / "tops.csv", comment="#")
        picks = score_tops(tops, truth, float(ev["surface_match_tolerance"]),
                           float(ev["surface_close_tolerance"]))
        scores["picks"] = picks
        print("  surfaces against the generator's truth (offset wells):")
        for kind in ("MFS", "SB"):
            k = picks[kind]
            print(f"    {kind:<4} true {k['true']:3d}, within "
                  f"{float(ev['surface_close_tolerance']):g} ft {k['within_close']:.3f}, "
                  f"missed {k['missed']}, extra per true {k['extra']:.3f}, median error "
                  f"{k['median_error_ft'] if k['median_error_ft'] is not None else float('nan'):.2f} ft")
        print(f"    p10-p90 coverage {picks['coverage'] or float('nan'):.3f}, basin-wide sequence "
              f"names right {picks['names'] if picks['names'] is not None else float('nan'):.3f}")
    summary["truth_scores"] = scores
    summary["model_version"] = version

    explain = pd.concat([pipe.explain_well(w) for w in project.uncored], ignore_index=True)
    write_table(explain, out / "predictions" / "explanations.csv")
    top = explain.groupby("feature")["all"].mean().sort_values(ascending=False).head(5)
    print("  features driving the facies calls (mean |contribution|, offset wells): "
          + ", ".join(f"{k} {v:.2f}" for k, v in top.items()))

    print("\n4) Where to core next (uncored wells ranked by what a core would teach the model):")
    ranking = rank_core_candidates(preds, cfg.facies.labels)
    write_table(ranking, out / "predictions" / "core_next_ranking.csv")
    for row in ranking.itertuples():
        print(f"  {row.rank}. {row.well:<8} score {row.score:.3f}: {row.reasons}")

    print("\n5) Learning curve (held-out scores vs number of cored training wells):")
    curve = learning_curve(project.cored, project.labels, cfg, repeats=2, progress=progress)
    write_table(curve, out / "evaluation" / "learning_curve.csv")
    agg = curve.groupby("n_training_wells")[["lithofacies_f1_macro", "systems_tract_accuracy"]]
    for n, row in agg.mean().iterrows():
        print(f"  {n} wells: facies macro-F1 {row['lithofacies_f1_macro']:.3f}, "
              f"tract accuracy {row['systems_tract_accuracy']:.3f}")

    figures = api.write_figures(pipe, preds, out / "predictions",
                                extra_sections=evaluation_sections(metrics, curve, cfg, out))
    summary["figures"] = {k: str(run.final(v)) for k, v in figures.items()}
    write_json(out / "predictions" / "summary.json", summary)
    elapsed = time.perf_counter() - t0
    run.note(model={"folder": "models", "version": version}, wells_done=len(preds),
             wells_failed=len(failures))
    print(f"\nOutputs in {final}/: evaluation/ (metrics.json, learning_curve.csv, figures), "
          f"models/, predictions/ (<well>.las|csv|parquet, tops.csv, landing_zones.csv, "
          f"core_next_ranking.csv, figures/, report.html), run_manifest.json. "
          f"Finished in {elapsed:.1f} s.")
    return {"metrics": metrics, "truth_scores": scores, "elapsed_s": elapsed,
            "failures": failures, "wells_done": len(preds)}
