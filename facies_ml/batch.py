"""Basin-scale prediction: many well files, one task per file, serial, joblib or Dask.

Each task reads and conditions one file, predicts every well in it and writes that well's
outputs (atomically). A bad file or well never aborts the batch: it comes back as a failure
row with the reason. Tasks return only small summaries (surfaces, fractions), so memory stays
flat however many wells there are.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tqdm import tqdm

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.pipeline import FaciesPipeline, WellPrediction
from facies_ml.report.landing import landing_summary
from facies_ml.report.outputs import (
    prediction_arrow,
    write_prediction_csv,
    write_prediction_las,
    write_prediction_parquet,
)
from facies_ml.wells.las import one_line

log = logging.getLogger(__name__)

WELL_SUFFIXES = (".las", ".csv", ".parquet", ".pq")


@dataclass
class WellResult:
    """What a task sends back for one well (no sample arrays)."""

    well: str
    file: str
    model_used: str = ""
    out_of_range_fraction: float = 0.0
    rule_violations: int = 0
    surfaces: list[Any] = field(default_factory=list)
    depth_unit: str = ""
    intake: dict[str, Any] = field(default_factory=dict)
    landing: list[dict[str, Any]] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    failure: str | None = None
    notes: list[str] = field(default_factory=list)  # e.g. a figure that could not be drawn


def list_well_files(path: str | Path, exclude: Iterable[str] = (),
                    config: Config | None = None) -> list[Path]:
    """Files under a folder that may hold wells (sorted), or the single file given.

    With ``config``, tables in the folder that are not well tables (a core-interval, core-gamma
    or core-plug CSV kept beside the logs: no depth column or no known curve) are left out,
    as :func:`facies_ml.wells.read_wells` does for a folder, and logged at INFO."""
    path = Path(path)
    if path.is_file():
        return [path]
    if not path.is_dir():
        raise InputError("wells folder or file not found", file=str(path))
    skip = set(exclude)
    files = sorted(p for p in path.iterdir()
                   if p.is_file() and p.suffix.lower() in WELL_SUFFIXES and p.name not in skip)
    if config is None:
        return files
    from facies_ml.wells.table import table_kind

    kept = []
    for f in files:
        if f.suffix.lower() != ".las":
            try:
                ok, why = table_kind(f, config)
            except InputError:
                ok, why = True, ""          # unreadable: predict reports it as a failure
            if not ok:
                log.info("skipped %s: not a well table (%s)", f, why)
                continue
        kept.append(f)
    return kept


def write_well_outputs(pipe: FaciesPipeline, pred: WellPrediction, out_dir: str | Path) -> None:
    """``<well>.csv``, ``<well>.las`` and ``<well>.parquet`` for one prediction."""
    cfg = pipe.config
    out_dir = Path(out_dir)
    name = pred.well.name
    table = prediction_arrow(pred)
    write_prediction_csv(pred, out_dir / f"{name}.csv", table)
    write_prediction_las(pred, out_dir / f"{name}.las", cfg.facies.codes, cfg.facies.labels,
                         list(getattr(pipe, "tract_names_", [])))
    write_prediction_parquet(pred, out_dir / f"{name}.parquet", table)


def well_result(pipe: FaciesPipeline, pred: WellPrediction, file: str,
                timings: dict[str, float] | None = None) -> WellResult:
    """The small summary of one prediction sent back from a task (landing rows included)."""
    return WellResult(
        well=pred.well.name, file=file, model_used=pred.model_used,
        out_of_range_fraction=pred.out_of_range_fraction, rule_violations=pred.rule_violations,
        surfaces=pred.surfaces, depth_unit=pred.well.depth_unit, intake=pred.well.intake,
        landing=landing_summary(pred, pipe.config.section("landing")).to_dict("records"),
        timings=timings or {}, notes=list(pred.info.get("sequence_flags", [])))


_WORKER_PIPELINES: dict[str, FaciesPipeline] = {}


def _worker_pipeline(pipe: FaciesPipeline) -> FaciesPipeline:
    """The first copy of this fitted pipeline seen by this process: a worker unpickles a fresh
    copy per task, and reusing one keeps the reduced-curve models it trained lazily."""
    key = getattr(pipe, "fit_id_", None)
    if key is None:
        return pipe
    return _WORKER_PIPELINES.setdefault(key, pipe)


Keep = bool | frozenset[str]


def _kept(keep: Keep, well: str, file: str) -> bool:
    """``keep`` is True/False for every well, or a set of well names and/or file paths."""
    return keep if isinstance(keep, bool) else (well in keep or file in keep)


def draw_well_section(pipe: FaciesPipeline, pred: WellPrediction, fig_dir: str | Path,
                      core_labels: Any = None) -> Path:
    """``<fig_dir>/<well>_section.png`` for one prediction (style from the model's config)."""
    from facies_ml.report.plots import Style, well_section

    cfg = pipe.config
    return well_section(pred, cfg.facies.labels, list(getattr(pipe, "tract_names_", [])),
                        Style(cfg.path("plot_style")),
                        Path(fig_dir) / f"{pred.well.name}_section.png", core_labels=core_labels)


def predict_files(pipe: FaciesPipeline, paths: list[str], out_dir: str | Path | None,
                  write_files: bool = True, keep_predictions: Keep = False,
                  predict_threads: int | None = None, section_dir: str | Path | None = None
                  ) -> list[list[Any]]:
    """:func:`predict_file` over a chunk of files (one task), results per file.
    ``predict_threads``: LightGBM threads per prediction in this task (``None`` = as trained)."""
    pipe = _worker_pipeline(pipe)
    pipe.set_predict_threads(predict_threads)
    return [predict_file(pipe, p, out_dir, write_files, keep_predictions, section_dir)
            for p in paths]


def predict_file(pipe: FaciesPipeline, path: str | Path, out_dir: str | Path | None,
                 write_files: bool = True, keep_predictions: Keep = False,
                 section_dir: str | Path | None = None) -> list[Any]:
    """Read, condition and predict every well in one file; write its outputs (and, with
    ``section_dir``, its well-section figure).

    Returns :class:`WellResult` rows, as ``(row, prediction)`` pairs for the wells that
    ``keep_predictions`` selects (True = all; or a set of well names and/or file paths).
    """
    from facies_ml.wells import read_wells

    cfg = pipe.config
    t0 = time.perf_counter()
    try:
        wells, failures = read_wells(Path(path), cfg, on_error="collect")
    except InputError as exc:
        return [WellResult(well="", file=str(path), failure=str(exc))]
    t_read = time.perf_counter() - t0
    results: list[Any] = [WellResult(well=f.get("well") or "", file=f.get("file") or str(path),
                                     failure=f.get("reason")) for f in failures]
    for w in wells:
        t1 = time.perf_counter()
        try:
            pred = pipe.predict_well(w)
        except InputError as exc:
            results.append(WellResult(well=w.name, file=str(path), failure=str(exc)))
            continue
        t2 = time.perf_counter()
        if write_files and out_dir is not None:
            write_well_outputs(pipe, pred, out_dir)
        t3 = time.perf_counter()
        notes = []
        if section_dir is not None:
            try:
                draw_well_section(pipe, pred, section_dir)
            except Exception as exc:  # noqa: BLE001 - a figure never aborts the batch
                notes.append(f"well section not drawn ({one_line(exc)})")
        res = well_result(pipe, pred, str(path))
        res.notes = res.notes + notes
        res.timings = {"read_condition_s": t_read / max(1, len(wells)), "predict_s": t2 - t1,
                       "write_s": t3 - t2, "plot_s": time.perf_counter() - t3}
        results.append((res, pred) if _kept(keep_predictions, w.name, str(path)) else res)
    return results


def run_batch(pipe: FaciesPipeline, files: list[Path], out_dir: str | Path | None,
              n_jobs: int = 1, scheduler: str | None = None, progress: bool = True,
              write_files: bool = True, keep_predictions: Keep = False,
              section_dir: str | Path | None = None) -> list[Any]:
    """Predict ``files`` serially (n_jobs=1), on local cores (joblib) or on a Dask cluster
    (``scheduler`` = its address, e.g. ``tcp://127.0.0.1:8786``). Results in file order.

    Only the predictions ``keep_predictions`` selects come back whole (memory stays flat for
    thousands of wells); ``section_dir`` makes every task draw its wells' sections there."""
    bar = tqdm(total=len(files), desc="wells", unit="file", disable=not progress)
    workers = 1 if (n_jobs == 1 and not scheduler) else max(2, n_jobs)
    size = max(1, min(25, -(-len(files) // (workers * 4))))   # ~4 chunks per worker
    threads = None  # serial: the trained thread count
    if scheduler:
        threads = 1  # a Dask worker runs one task per thread; each takes one core
    elif n_jobs != 1:
        from joblib import cpu_count, effective_n_jobs

        threads = max(1, cpu_count() // max(1, effective_n_jobs(n_jobs)))
    chunks = [[str(f) for f in files[i:i + size]] for i in range(0, len(files), size)]
    out: list[list[Any]] = []
    if scheduler:
        try:
            from distributed import Client, as_completed
        except ImportError:
            raise InputError("a Dask scheduler was given but dask.distributed is not installed "
                             "(pip install 'facies_ml[dask]')") from None
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            raise InputError(f"cannot reach the Dask scheduler {scheduler}: {exc}") from None
        try:
            remote_pipe = client.scatter(pipe, broadcast=True)
            futures = [client.submit(predict_files, remote_pipe, chunk, out_dir, write_files,
                                     keep_predictions, threads, section_dir, pure=False)
                       for chunk in chunks]
            for fut in as_completed(futures):
                bar.update(len(chunks[futures.index(fut)]))
            out = [rows for chunk_rows in client.gather(futures) for rows in chunk_rows]
        finally:
            client.close()
    elif n_jobs == 1:
        for chunk in chunks:
            out.extend(predict_files(pipe, chunk, out_dir, write_files, keep_predictions,
                                     None, section_dir))
            bar.update(len(chunk))
    else:
        from joblib import Parallel, delayed

        par = Parallel(n_jobs=n_jobs, return_as="generator")
        tasks = (delayed(predict_files)(pipe, c, out_dir, write_files, keep_predictions, threads,
                                        section_dir) for c in chunks)
        for chunk, res in zip(chunks, par(tasks), strict=True):
            out.extend(res)
            bar.update(len(chunk))
    bar.close()
    return [r for rows in out for r in rows]
