"""Basin-scale prediction: many well files, one task per file, serial, joblib or Dask.

Each task reads and conditions one file, predicts every well in it and writes that well's
outputs (atomically). A bad file or well never aborts the batch: it comes back as a failure
row with the reason. Tasks return only small summaries (surfaces, fractions), so memory stays
flat however many wells there are.
"""

from __future__ import annotations

import time
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tqdm import tqdm

from facies_ml.errors import InputError
from facies_ml.pipeline import FaciesPipeline
from facies_ml.report.landing import landing_summary
from facies_ml.report.outputs import (
    write_prediction_csv,
    write_prediction_las,
    write_prediction_parquet,
)

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


def list_well_files(path: str | Path, exclude: Iterable[str] = ()) -> list[Path]:
    """Files under a folder that may hold wells (sorted), or the single file given."""
    path = Path(path)
    if path.is_file():
        return [path]
    if not path.is_dir():
        raise InputError("wells folder or file not found", file=str(path))
    skip = set(exclude)
    return sorted(p for p in path.iterdir()
                  if p.is_file() and p.suffix.lower() in WELL_SUFFIXES and p.name not in skip)


def predict_file(pipe: FaciesPipeline, path: str | Path, out_dir: str | Path | None,
                 write_files: bool = True, keep_predictions: bool = False) -> list[Any]:
    """Read, condition and predict every well in one file; write its outputs.

    Returns :class:`WellResult` rows (and the full predictions if ``keep_predictions``).
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
    tract_names = list(getattr(pipe, "tract_names_", []))
    for w in wells:
        t1 = time.perf_counter()
        try:
            pred = pipe.predict_well(w)
        except InputError as exc:
            results.append(WellResult(well=w.name, file=str(path), failure=str(exc)))
            continue
        t2 = time.perf_counter()
        if write_files and out_dir is not None:
            write_prediction_csv(pred, Path(out_dir) / f"{w.name}.csv")
            write_prediction_las(pred, Path(out_dir) / f"{w.name}.las", cfg.facies.codes,
                                 cfg.facies.labels, tract_names)
            write_prediction_parquet(pred, Path(out_dir) / f"{w.name}.parquet")
        landing = landing_summary(pred, cfg.section("landing")).to_dict("records")
        t3 = time.perf_counter()
        res = WellResult(
            well=w.name, file=str(path), model_used=pred.model_used,
            out_of_range_fraction=pred.out_of_range_fraction,
            rule_violations=pred.rule_violations, surfaces=pred.surfaces,
            depth_unit=w.depth_unit, intake=w.intake, landing=landing,
            timings={"read_condition_s": t_read / max(1, len(wells)), "predict_s": t2 - t1,
                     "write_s": t3 - t2})
        results.append((res, pred) if keep_predictions else res)
    return results


def run_batch(pipe: FaciesPipeline, files: list[Path], out_dir: str | Path | None,
              n_jobs: int = 1, scheduler: str | None = None, progress: bool = True,
              write_files: bool = True, keep_predictions: bool = False) -> list[Any]:
    """Predict ``files`` serially (n_jobs=1), on local cores (joblib) or on a Dask cluster
    (``scheduler`` = its address, e.g. ``tcp://127.0.0.1:8786``). Results in file order."""
    bar = tqdm(total=len(files), desc="wells", unit="file", disable=not progress)
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
            futures = [client.submit(predict_file, remote_pipe, str(f), out_dir, write_files,
                                     keep_predictions, pure=False) for f in files]
            for _ in as_completed(futures):
                bar.update(1)
            out = client.gather(futures)
        finally:
            client.close()
    elif n_jobs == 1:
        for f in files:
            out.append(predict_file(pipe, f, out_dir, write_files, keep_predictions))
            bar.update(1)
    else:
        from joblib import Parallel, delayed

        par = Parallel(n_jobs=n_jobs, return_as="generator")
        for res in par(delayed(predict_file)(pipe, f, out_dir, write_files, keep_predictions)
                       for f in files):
            out.append(res)
            bar.update(1)
    bar.close()
    return [r for rows in out for r in rows]
