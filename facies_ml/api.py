"""Library entry points a notebook user (or the CLI) calls: train, evaluate, predict, retrain.

All depths are handled in the project working unit (``configs/default.yaml``); outputs also
carry each well's original depth. Predictions are probabilistic and must be reviewed by a
qualified geoscientist before any decision.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from facies_ml import CAUTION
from facies_ml.batch import (
    WellResult,
    draw_well_section,
    list_well_files,
    run_batch,
    well_result,
    write_well_outputs,
)
from facies_ml.config import Config, load_config
from facies_ml.core import align_core_labels, read_core_gamma, read_core_intervals
from facies_ml.errors import InputError
from facies_ml.evaluation import leave_one_well_out
from facies_ml.pipeline import FaciesPipeline, WellPrediction
from facies_ml.report.landing import landing_summary
from facies_ml.report.outputs import (
    tops_frame,
    write_json,
    write_table,
    write_tops,
)
from facies_ml.store import load_version, read_registry, save_version
from facies_ml.wells import Well, read_wells
from facies_ml.wells.table import with_table_depth_unit

Progress = Callable[[str], None] | None


@dataclass
class CoredProject:
    """Conditioned wells plus per-sample core labels of the cored ones."""

    wells: list[Well]
    labels: dict[str, pd.DataFrame]
    failures: list[dict[str, Any]]

    @property
    def cored(self) -> list[Well]:
        return [w for w in self.wells if w.name in self.labels]

    @property
    def uncored(self) -> list[Well]:
        return [w for w in self.wells if w.name not in self.labels]


def _config(config: Config | str | Path | None) -> Config:
    return config if isinstance(config, Config) else load_config(config)


def load_project(wells_path: str | Path, core_path: str | Path | None, config: Config,
                 core_gamma_path: str | Path | None = None, on_error: str = "raise") -> CoredProject:
    """Read and condition every well under ``wells_path`` and align the core labels to them.

    Refuses (:class:`InputError`) two files giving the same well name (naming both files, even
    with ``on_error="collect"``), and a cored well whose core intervals all lie outside its
    logged depths (see :func:`facies_ml.core.check_core_overlap`). A training well with a
    curve that is logged but unusable (all null or constant) is a console warning: the model
    keeps that curve's features and this well has missing values for them.
    """
    from facies_ml.wells.build import emit_warnings, where_text

    wells_path = Path(wells_path)
    if not wells_path.exists():
        raise InputError("wells folder or file not found", file=str(wells_path))
    wells, failures = read_wells(wells_path, config, on_error=on_error)
    dup = next((f for f in failures if f.get("duplicate_of")), None)
    if dup is not None:
        raise InputError(dup["reason"])
    if not wells:
        raise InputError("no readable well found", file=str(wells_path))
    names = [w.name for w in wells]
    labels: dict[str, pd.DataFrame] = {}
    if core_path is not None:
        core_path = Path(core_path)
        intervals = read_core_intervals(core_path, config.facies, known_wells=names)
        gamma = read_core_gamma(core_gamma_path) if core_gamma_path else None
        cored = [w for w in wells if w.name in set(intervals["well"])]
        labels = align_core_labels(cored, intervals, gamma, config)
        for w in cored:
            bad = w.intake.get("unusable_curves") or {}
            if bad:
                what = ", ".join(f"{v['mnemonic']} ({role}: {v['reason']})"
                                 for role, v in bad.items())
                msg = (f"{where_text(w.name, w.source)}: training well without usable {what}; "
                       "the model keeps these curves' features (trained on the other wells), "
                       "this well has missing values for them")
                w.intake.setdefault("warnings", []).append(msg)
                emit_warnings([msg])
    return CoredProject(wells=wells, labels=labels, failures=failures)


def evaluate(wells_path: str | Path, core_path: str | Path, out_dir: str | Path,
             config: Config | str | Path | None = None, core_gamma_path: str | Path | None = None,
             progress: Progress = None) -> dict[str, Any]:
    """Leave-one-well-out over the cored wells; writes ``metrics.json`` and the held-out
    figures (``confusion_matrix.png``, ``reliability.png``) in ``out_dir``."""
    from facies_ml.report.plots import Style, evaluation_figures

    cfg = _config(config)
    project = load_project(wells_path, core_path, cfg, core_gamma_path)
    metrics, _ = leave_one_well_out(project.cored, project.labels, cfg, progress=progress)
    metrics["intake"] = {w.name: w.intake for w in project.cored}
    write_json(Path(out_dir) / "metrics.json", metrics)
    evaluation_figures(metrics, cfg.facies.labels, Style(cfg.path("plot_style")), out_dir)
    return metrics


def train(wells_path: str | Path, core_path: str | Path, model_dir: str | Path,
          config: Config | str | Path | None = None, core_gamma_path: str | Path | None = None,
          held_out_metrics: dict[str, Any] | None = None, progress: Progress = None,
          promote: bool = True, notes: str = "") -> tuple[str, FaciesPipeline]:
    """Fit on all cored wells and save a new model version (champion by default)."""
    cfg = _config(config)
    project = load_project(wells_path, core_path, cfg, core_gamma_path)
    if progress:
        progress(f"training on {len(project.cored)} cored wells")
    pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
    version = save_version(
        pipe, model_dir,
        training_files={w.name: w.source for w in project.cored},
        config_raw=cfg.raw, config_hash=cfg.digest(), metrics=held_out_metrics,
        notes=notes, promote=promote)
    return version, pipe


def predict(model_dir: str | Path, wells_path: str | Path, out_dir: str | Path,
            version: str | None = None, n_jobs: int = 1, scheduler: str | None = None,
            plots: bool = False, progress: bool = True, panel_wells: list[str] | None = None,
            datum_mfs: str | None = None, depth_unit: str | None = None) -> dict[str, Any]:
    """Predict every well under ``wells_path`` with the champion (or ``version``).

    One bad well never aborts the batch: it is listed in ``failures.csv`` with the reason.
    Writes per well ``<well>.las|.csv|.parquet``; for all wells ``tops.csv``,
    ``landing_zones.csv``, ``failures.csv``, ``summary.json`` (and with ``plots`` a well
    section per well in ``figures/``, a correlation panel and ``report.html``). ``n_jobs`` > 1
    uses local cores (joblib); ``scheduler`` sends the work to a Dask cluster at that address.

    The correlation panel (and the sections embedded in the report) show ``panel_wells`` in
    that order, else the wells of the first ``report.panel_max_wells`` files; the panel is hung
    on the MFS of basin-wide sequence ``datum_mfs`` (default ``report.datum_sequence``; null =
    the named MFS most panel wells share).
    Only those wells' predictions are held in memory.
    """
    pipe, manifest = load_version(model_dir, version)
    pipe.config = with_table_depth_unit(pipe.config, depth_unit)   # --depth-unit (tables)
    out_dir = Path(out_dir)
    report = pipe.config.section("report")
    datum = datum_mfs if datum_mfs is not None else report["datum_sequence"]
    correlator = getattr(pipe, "correlator_", None)
    known = list(getattr(correlator, "sequence_names_", []))
    if datum is not None and str(datum) not in known:
        raise InputError(f"datum MFS {datum!r} is not a basin sequence of this model (known: "
                         f"{', '.join(known) or 'none'})")
    files = list_well_files(wells_path)
    keep: bool | frozenset[str] = False
    if plots:
        first = files[:max(1, int(report.get("panel_max_wells", 12)))]
        keep = frozenset(panel_wells) if panel_wells else frozenset(str(f) for f in first)
    rows = run_batch(pipe, files, out_dir, n_jobs=n_jobs, scheduler=scheduler,
                     progress=progress, keep_predictions=keep,
                     section_dir=out_dir / "figures" if plots else None)
    preds = [r[1] for r in rows if isinstance(r, tuple)]
    results = [r[0] if isinstance(r, tuple) else r for r in rows]
    summary = write_batch_tables(results, out_dir)
    summary["model_version"] = manifest["version"]
    if panel_wells:
        by_name = {p.well.name: p for p in preds}
        summary["panel_wells_not_predicted"] = [w for w in panel_wells if w not in by_name]
        preds = [by_name[w] for w in panel_wells if w in by_name]
    if plots and preds:
        summary["figures"] = write_figures(pipe, preds, out_dir, datum=datum,
                                           sections_drawn=True,
                                           n_wells_total=len(summary["wells"]))
    write_json(out_dir / "summary.json", summary)
    return summary


def write_batch_tables(results: list[WellResult], out_dir: Path) -> dict[str, Any]:
    """tops.csv, landing_zones.csv, failures.csv from the batch results; returns the summary."""
    ok = [r for r in results if r.failure is None]
    failures = [{"well": r.well, "file": r.file, "reason": r.failure}
                for r in results if r.failure is not None]
    write_tops([(r.well, r.depth_unit, r.surfaces) for r in ok], out_dir / "tops.csv")
    landing = pd.DataFrame([row for r in ok for row in r.landing])
    write_table(landing, out_dir / "landing_zones.csv", f"facies_ml landing-zone summary. {CAUTION}")
    write_table(pd.DataFrame(failures, columns=["well", "file", "reason"]),
                out_dir / "failures.csv")
    return {
        "wells": {r.well: {"file": r.file, "model_used": r.model_used,
                           "out_of_range_fraction": round(r.out_of_range_fraction, 4),
                           "surfaces": len(r.surfaces), "rule_violations": r.rule_violations,
                           "picks_to_review": [
                               f"{x.kind} {x.sequence or '(unnamed)'} at {x.depth:.2f} "
                               f"{r.depth_unit}: {'; '.join(x.flags)}"
                               for x in r.surfaces if x.flags],
                           "notes": r.notes, "intake": r.intake} for r in ok},
        "failures": failures,
        "caution": CAUTION,
    }


def write_figures(pipe: FaciesPipeline, preds: list[WellPrediction], out_dir: Path,
                  core_labels: dict[str, pd.DataFrame] | None = None,
                  extra_sections: list[tuple[str, list[str]]] | None = None,
                  datum: str | None = None, sections_drawn: bool = False,
                  n_wells_total: int | None = None) -> dict[str, str]:
    """Well sections of ``preds`` (drawn here unless ``sections_drawn``), one correlation panel
    of ``preds`` hung on the MFS of sequence ``datum`` (None: the one most wells share), and
    the self-contained
    report.html embedding them (``n_wells_total``: wells predicted in all, for its notes)."""
    from facies_ml.report.html import image_tag, table_html, write_report
    from facies_ml.report.plots import Style, correlation_panel

    cfg = pipe.config
    style = Style(cfg.path("plot_style"))
    fig_dir = out_dir / "figures"
    tracts = list(getattr(pipe, "tract_names_", []))
    figures: dict[str, str] = {}
    sections: list[tuple[str, list[str]]] = list(extra_sections or [])
    well_imgs = []
    for p in preds:
        path = fig_dir / f"{p.well.name}_section.png"
        if not sections_drawn:
            path = draw_well_section(pipe, p, fig_dir, (core_labels or {}).get(p.well.name))
        if path.is_file():  # a worker that could not draw it noted why in summary.json
            figures[p.well.name] = str(path)
            well_imgs.append(image_tag(path, f"well section {p.well.name}"))
    others = (n_wells_total or len(preds)) - len(preds)
    if others > 0:
        well_imgs.insert(0, f"<p>{others} more well sections are in <code>figures/</code>; "
                            "the report embeds the panel wells only.</p>")
    panel = correlation_panel(preds, tracts, style, fig_dir / "correlation_panel.png",
                              datum=datum)
    figures["correlation_panel"] = str(panel)
    landing = pd.concat([landing_summary(p, cfg.section("landing")) for p in preds],
                        ignore_index=True)
    tops = tops_frame([(p.well.name, p.well.depth_unit, p.surfaces) for p in preds])
    scope = (" (panel wells; all wells in the CSV files)" if others > 0 else "")
    names = ", ".join(p.well.name for p in preds)
    sections += [(f"Correlation panel: {names}", [image_tag(panel, "correlation panel")]),
                 ("Landing-zone summary (TST + EHST target)" + scope, [table_html(landing)]),
                 ("Predicted surfaces" + scope, [table_html(tops)]),
                 ("Well sections", well_imgs)]
    write_report(out_dir / "report.html", "facies_ml prediction report", sections)
    figures["report"] = str(out_dir / "report.html")
    return figures


def predict_wells(pipe: FaciesPipeline, wells: list[Well], failures: list[dict[str, Any]],
                  progress: Progress = None) -> list[WellPrediction]:
    """Predict in-memory wells; an :class:`InputError` moves the well to ``failures``."""
    preds = []
    for w in wells:
        if progress:
            progress(f"predicting {w.name}")
        try:
            preds.append(pipe.predict_well(w))
        except InputError as exc:
            failures.append({"well": w.name, "file": w.source, "reason": str(exc)})
    return preds


def write_predictions(pipe: FaciesPipeline, preds: list[WellPrediction],
                      failures: list[dict[str, Any]], out_dir: Path) -> dict[str, Any]:
    """Per-well files and the batch tables for in-memory predictions (used by the demo)."""
    results = []
    for p in preds:
        write_well_outputs(pipe, p, out_dir)
        results.append(well_result(pipe, p, p.well.source))
    results += [WellResult(well=f.get("well") or "", file=f.get("file") or "",
                           failure=f.get("reason")) for f in failures]
    return write_batch_tables(results, out_dir)


def retrain(model_dir: str | Path, wells_path: str | Path, core_path: str | Path,
            config: Config | str | Path | None = None, core_gamma_path: str | Path | None = None,
            force: bool = False, progress: Progress = None,
            depth_unit: str | None = None) -> dict[str, Any]:
    """Champion/challenger: fit a challenger on all cored wells and promote it only if it is
    not worse than the champion by ``evaluation.promote_margin`` (macro-F1), unless ``force``.

    Comparison: (1) held-out (leave-one-well-out) scores on the champion's training wells, the
    challenger's folds against the champion's recorded folds; (2) the new cored wells, which the
    champion never saw: champion applied directly vs the challenger's held-out fold.
    """
    champion, manifest = load_version(model_dir)
    cfg = _config(config) if config is not None else champion.config
    cfg = with_table_depth_unit(cfg, depth_unit)                  # --depth-unit (tables)
    project = load_project(wells_path, core_path, cfg, core_gamma_path)
    old_wells = set(manifest.get("training_wells", {}))
    new_wells = [w for w in project.cored if w.name not in old_wells]
    metrics, held_preds = leave_one_well_out(project.cored, project.labels, cfg, progress=progress)
    from facies_ml.evaluation import score_well

    champ_folds = (manifest.get("metrics") or {}).get("wells", {})
    old_cored = [w for w in project.cored if w.name in old_wells]
    if len(old_cored) >= 2 and any(w.name not in champ_folds for w in old_cored):
        # the champion's own held-out folds were not recorded: recompute them with the
        # champion's settings on the champion's training wells
        champ_metrics, _ = leave_one_well_out(old_cored, project.labels, champion.config,
                                              progress=progress)
        champ_folds = champ_metrics["wells"]
    rows = []
    for w in project.cored:
        chal = metrics["wells"][w.name]
        if w.name in old_wells:
            champ_f1 = (champ_folds.get(w.name) or {}).get("lithofacies_f1_macro")
            basis = "same held-out fold (well left out of both)"
        else:
            champ_f1 = score_well(champion.predict_well(w), project.labels[w.name],
                                  champion)["lithofacies_f1_macro"]
            basis = "new well, champion never saw it"
        rows.append({"well": w.name, "champion_f1": champ_f1,
                     "challenger_f1": chal["lithofacies_f1_macro"], "basis": basis})
    pairs = [(r["champion_f1"], r["challenger_f1"]) for r in rows
             if r["champion_f1"] is not None and r["challenger_f1"] is not None]
    margin = float(cfg.section("evaluation").get("promote_margin", 0.01))
    champ_mean = sum(p[0] for p in pairs) / len(pairs) if pairs else None
    chal_mean = sum(p[1] for p in pairs) / len(pairs) if pairs else None
    better = champ_mean is None or (chal_mean is not None and chal_mean >= champ_mean - margin)
    promote = bool(force or better)
    if force and not better:
        reason = "forced promotion (--force) although the challenger scored lower"
    elif better:
        reason = (f"challenger mean macro-F1 {chal_mean:.3f} vs champion {champ_mean:.3f}"
                  f" (margin {margin})" if champ_mean is not None else "no champion scores")
    else:
        reason = (f"kept champion: challenger mean macro-F1 {chal_mean:.3f} is worse than "
                  f"{champ_mean:.3f} by more than the margin {margin}")
    pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
    version = save_version(
        pipe, model_dir, training_files={w.name: w.source for w in project.cored},
        config_raw=cfg.raw, config_hash=cfg.digest(), metrics=metrics, promote=promote,
        notes=f"retrain with new wells {[w.name for w in new_wells]}: {reason}")
    return {"challenger": version, "champion_before": manifest["version"],
            "champion_after": read_registry(model_dir)["champion"], "promoted": promote,
            "reason": reason, "comparison": rows, "new_wells": [w.name for w in new_wells],
            "champion_mean_f1": champ_mean, "challenger_mean_f1": chal_mean}


def learning_curve_report(wells_path: str | Path, core_path: str | Path, out_dir: str | Path,
                          config: Config | str | Path | None = None,
                          core_gamma_path: str | Path | None = None, repeats: int | None = None,
                          progress: Progress = None) -> pd.DataFrame:
    """Held-out scores vs number of cored training wells; writes learning_curve.csv/.png."""
    from facies_ml.evaluation import learning_curve
    from facies_ml.report.plots import Style, learning_curve_plot

    cfg = _config(config)
    project = load_project(wells_path, core_path, cfg, core_gamma_path)
    curve = learning_curve(project.cored, project.labels, cfg, repeats=repeats, progress=progress)
    out_dir = Path(out_dir)
    write_table(curve, out_dir / "learning_curve.csv")
    learning_curve_plot(curve, Style(cfg.path("plot_style")), out_dir / "learning_curve.png")
    return curve


def rank_cores(model_dir: str | Path, wells_path: str | Path, out_dir: str | Path | None = None,
               exclude: list[str] | None = None) -> pd.DataFrame:
    """Rank uncored wells by what a core would teach the serving model (core_next_ranking.csv)."""
    from facies_ml.evaluation import rank_core_candidates

    pipe, _ = load_version(model_dir)
    wells, failures = read_wells(Path(wells_path), pipe.config, on_error="collect")
    skip = set(exclude or []) | set(getattr(pipe, "training_wells_", []))
    preds = predict_wells(pipe, [w for w in wells if w.name not in skip], failures)
    ranking = rank_core_candidates(preds, pipe.config.facies.labels)
    if out_dir is not None:
        write_table(ranking, Path(out_dir) / "core_next_ranking.csv")
    return ranking
