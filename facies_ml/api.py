"""Library entry points a notebook user (or the CLI) calls: train, evaluate, predict, retrain.

All depths are handled in the project working unit (``configs/default.yaml``); outputs also
carry each well's original depth. Predictions are probabilistic and must be reviewed by a
qualified geoscientist before any decision.
"""

from __future__ import annotations

import contextlib
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
from facies_ml.report.run_folder import RunFolder
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


def _run_folder(out_dir: str | Path, cfg: Config, protect: list[Any] | None = None,
                **inputs: Any) -> RunFolder:
    """The staging folder of a run writing ``out_dir`` (see :mod:`facies_ml.report.run_folder`);
    ``inputs`` name the run's input files/folders (``None`` = not given), hashed into the
    run manifest; a ``Config`` object given as ``config`` is recorded by its file only."""
    files = {k: (v if isinstance(v, (str, Path)) else None) for k, v in inputs.items()}
    return RunFolder(out_dir, inputs=files, protect=protect or [],
                     stale_hours=cfg.settings.report.stale_staging_hours)


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
    figures (``confusion_matrix.png``, ``reliability.png``) in ``out_dir``, all or nothing
    (staged, then moved onto ``out_dir`` with ``run_manifest.json``)."""
    from facies_ml.report.plots import Style, evaluation_figures

    cfg = _config(config)
    with _run_folder(out_dir, cfg, wells=wells_path, core=core_path,
                     core_gamma=core_gamma_path, config=config) as run:
        project = load_project(wells_path, core_path, cfg, core_gamma_path)
        metrics, _ = leave_one_well_out(project.cored, project.labels, cfg, progress=progress)
        metrics["intake"] = {w.name: w.intake for w in project.cored}
        write_json(run.path / "metrics.json", metrics)
        evaluation_figures(metrics, cfg.facies.labels, Style(cfg.path("plot_style")), run.path)
        run.note(wells_done=len(project.cored))
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

    One bad well never aborts the batch: it is listed in ``failures.csv`` with the reason
    (wells sharing a name across files are all refused, naming the files). The run is all or
    nothing on disk: outputs are staged beside ``out_dir`` and replace it as one set with a
    ``run_manifest.json`` (:mod:`facies_ml.report.run_folder`); when no well could be
    predicted nothing is written (``summary["written"]`` is False) and ``out_dir`` is left as
    it was. An empty folder is an :class:`InputError`.
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
    files = list_well_files(wells_path, config=pipe.config)
    if not files:
        tables = list_well_files(wells_path)
        raise InputError("no well found: " + (
            f"the table(s) {', '.join(f.name for f in tables[:3])} are not well logs (no depth "
            "column or no known curve)" if tables else
            "the folder is empty of *.las, *.csv, *.parquet files"), file=str(wells_path))
    keep: bool | frozenset[str] = False
    if plots:
        first = files[:max(1, int(report.get("panel_max_wells", 12)))]
        keep = frozenset(panel_wells) if panel_wells else frozenset(str(f) for f in first)
    with _run_folder(out_dir, pipe.config, protect=[model_dir], wells=wells_path) as run:
        stage = run.path
        rows = run_batch(pipe, files, stage, n_jobs=n_jobs, scheduler=scheduler,
                         progress=progress, keep_predictions=keep,
                         section_dir=stage / "figures" if plots else None)
        preds = [r[1] for r in rows if isinstance(r, tuple)]
        results = [r[0] if isinstance(r, tuple) else r for r in rows]
        results, refused = refuse_duplicate_names(results, stage)
        preds = [p for p in preds if p.well.name not in refused]
        summary = batch_summary(results)
        summary["model_version"] = manifest["version"]
        summary["out"] = str(out_dir)
        summary["written"] = bool(summary["wells"])
        if not summary["wells"]:  # no well could be done: keep the previous results as they are
            run.discard()
            return summary
        write_batch_tables(results, stage)
        if panel_wells:
            by_name = {p.well.name: p for p in preds}
            summary["panel_wells_not_predicted"] = [w for w in panel_wells if w not in by_name]
            preds = [by_name[w] for w in panel_wells if w in by_name]
        if plots and preds:
            figures = write_figures(pipe, preds, stage, datum=datum, sections_drawn=True,
                                    n_wells_total=len(summary["wells"]))
            summary["figures"] = {k: str(run.final(v)) for k, v in figures.items()}
        write_json(stage / "summary.json", summary)
        run.note(model={"folder": Path(model_dir).name, "version": manifest["version"]},
                 wells_done=len(summary["wells"]), wells_failed=len(summary["failures"]))
    return summary


def refuse_duplicate_names(results: list[WellResult], out_dir: Path
                           ) -> tuple[list[WellResult], set[str]]:
    """A well name read from more than one file: every row of that name becomes a failure
    naming all its files, and its outputs already written in ``out_dir`` (``<well>.las|.csv|
    .parquet``, ``figures/<well>_section.png``) are removed, so no table mixes two wells.
    Returns (results, the refused names)."""
    files: dict[str, list[str]] = {}
    for r in results:
        if r.well and r.file not in files.setdefault(r.well, []):
            files[r.well].append(r.file)
    refused = {name for name, f in files.items() if len(f) > 1}
    if not refused:
        return results, refused
    out = [r for r in results if r.well not in refused]
    for name in sorted(refused):
        names = ", ".join(Path(f).name for f in files[name])
        reason = (f"well name {name!r} is used by more than one file ({names}); none of them "
                  "was predicted: give each well its own WELL name")
        out += [WellResult(well=name, file=f, failure=reason) for f in files[name]]
        for path in [out_dir / f"{name}{ext}" for ext in (".las", ".csv", ".parquet")] + \
                [out_dir / "figures" / f"{name}_section.png"]:
            path.unlink(missing_ok=True)
    return out, refused


def batch_summary(results: list[WellResult]) -> dict[str, Any]:
    """The run summary (wells done with their notes and picks to review, failures)."""
    ok = [r for r in results if r.failure is None]
    failures = [{"well": r.well, "file": r.file, "reason": r.failure}
                for r in results if r.failure is not None]
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
    return batch_summary(results)


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
    """Champion/challenger: fit a challenger on all cored wells, save it as a new version and
    promote it only when :mod:`facies_ml.champion`'s rule allows (or ``force``).

    Each cored well is scored by both models without having trained them: a well of the
    champion's training set by the champion's recorded held-out fold (recomputed with the
    champion's settings when the manifest lacks it) and the challenger's fold; a new cored well
    by the champion applied directly and the challenger's fold. The per-well lithofacies
    macro-F1, systems-tract accuracy and share of surfaces within the close tolerance are
    compared pair by pair over wells (``evaluation.promotion``), and new wells whose core
    labels disagree with every model are flagged (``evaluation.core_check``). The promotion and
    core-check settings come from ``config`` (default settings when None), the challenger's
    training settings from ``config`` or else the champion's own. Returns the decision, the
    per-well rows, per-metric differences with intervals, flags and version names.
    """
    from facies_ml.champion import (
        PromotionRule,
        compare,
        has_recorded_scores,
        well_scores,
    )
    from facies_ml.evaluation import score_well

    champion, manifest = load_version(model_dir)
    rule_cfg = _config(config)
    evaluation = rule_cfg.settings.evaluation
    rule = PromotionRule.from_settings(evaluation.promotion, rule_cfg.seed)
    cfg = rule_cfg if config is not None else champion.config
    cfg = with_table_depth_unit(cfg, depth_unit)                  # --depth-unit (tables)
    project = load_project(wells_path, core_path, cfg, core_gamma_path)
    old_wells = set(manifest.get("training_wells", {}))
    new_wells = [w.name for w in project.cored if w.name not in old_wells]
    metrics, _ = leave_one_well_out(project.cored, project.labels, cfg, progress=progress)

    champ_folds = dict((manifest.get("metrics") or {}).get("wells", {}))
    old_cored = [w for w in project.cored if w.name in old_wells]
    if len(old_cored) >= 2 and not all(has_recorded_scores(champ_folds.get(w.name))
                                       for w in old_cored):
        # the champion's held-out folds were not (fully) recorded: recompute them with the
        # champion's settings on the champion's training wells
        if progress:
            progress("recomputing the champion's held-out folds")
        champ_metrics, _ = leave_one_well_out(old_cored, project.labels, champion.config,
                                              progress=progress)
        champ_folds = champ_metrics["wells"]
    champ_scores = {}
    for w in project.cored:
        if w.name in old_wells:
            if has_recorded_scores(champ_folds.get(w.name)):
                champ_scores[w.name] = well_scores(champ_folds[w.name])
        else:
            if progress:
                progress(f"champion on new well {w.name}")
            champ_scores[w.name] = well_scores(
                score_well(champion.predict_well(w), project.labels[w.name], champion))
    chal_scores = {w.name: well_scores(metrics["wells"][w.name]) for w in project.cored}
    comparison = compare(champ_scores, chal_scores, new_wells, rule, evaluation.core_check)
    promote = bool(force or comparison.promote)
    reason = comparison.reason
    if force and not comparison.promote:
        reason = f"forced promotion (--force); the rule would have kept the champion: {reason}"
    if progress:
        progress(f"training the challenger on {len(project.cored)} cored wells")
    pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
    comparison_dict = comparison.to_dict() | {"promoted": promote, "reason": reason}
    version = save_version(
        pipe, model_dir, training_files={w.name: w.source for w in project.cored},
        config_raw=cfg.raw, config_hash=cfg.digest(),
        metrics=metrics | {"champion_comparison": comparison_dict}, promote=promote,
        notes=f"retrain with new wells {new_wells}: {reason}")
    return {"challenger": version, "champion_before": manifest["version"],
            "champion_after": read_registry(model_dir)["champion"], "promoted": promote,
            "reason": reason, "comparison": comparison_dict, "new_wells": new_wells,
            "flagged_wells": sorted({f["well"] for f in comparison.flags})}


def learning_curve_report(wells_path: str | Path, core_path: str | Path, out_dir: str | Path,
                          config: Config | str | Path | None = None,
                          core_gamma_path: str | Path | None = None, repeats: int | None = None,
                          progress: Progress = None) -> pd.DataFrame:
    """Held-out scores vs number of cored training wells; writes learning_curve.csv/.png in
    ``out_dir`` (all or nothing, with ``run_manifest.json``)."""
    from facies_ml.evaluation import learning_curve
    from facies_ml.report.plots import Style, learning_curve_plot

    cfg = _config(config)
    with _run_folder(out_dir, cfg, wells=wells_path, core=core_path,
                     core_gamma=core_gamma_path, config=config) as run:
        project = load_project(wells_path, core_path, cfg, core_gamma_path)
        curve = learning_curve(project.cored, project.labels, cfg, repeats=repeats,
                               progress=progress)
        write_table(curve, run.path / "learning_curve.csv")
        learning_curve_plot(curve, Style(cfg.path("plot_style")), run.path / "learning_curve.png")
        run.note(wells_done=len(project.cored))
    return curve


def rank_cores(model_dir: str | Path, wells_path: str | Path, out_dir: str | Path | None = None,
               exclude: list[str] | None = None) -> pd.DataFrame:
    """Rank uncored wells by what a core would teach the serving model.

    With ``out_dir`` writes ``core_next_ranking.csv`` there (all or nothing, with
    ``run_manifest.json``; nothing when no well could be ranked). Wells that could not be
    read or predicted are in ``ranking.attrs["failures"]`` (well, file, reason)."""
    from facies_ml.evaluation import rank_core_candidates

    pipe, manifest = load_version(model_dir)
    run = None
    if out_dir is not None:
        run = _run_folder(out_dir, pipe.config, protect=[model_dir], wells=wells_path)
    with run or contextlib.nullcontext():
        wells, failures = read_wells(Path(wells_path), pipe.config, on_error="collect")
        skip = set(exclude or []) | set(getattr(pipe, "training_wells_", []))
        preds = predict_wells(pipe, [w for w in wells if w.name not in skip], failures)
        ranking = rank_core_candidates(preds, pipe.config.facies.labels)
        ranking.attrs["failures"] = failures
        if run is not None:
            if ranking.empty:
                run.discard()
            else:
                write_table(ranking, run.path / "core_next_ranking.csv")
                run.note(model={"folder": Path(model_dir).name, "version": manifest["version"]},
                         wells_done=len(preds), wells_failed=len(failures))
    return ranking
