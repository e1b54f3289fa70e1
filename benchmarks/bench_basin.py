"""Basin-scale prediction benchmark: N generated wells x S samples, end to end.

Prints samples/s, a per-stage time breakdown (read + condition, predict, write), peak RSS
(this process and its worker processes) and, as a same-run reference, the cost per well and
core as a multiple of reading the file with lasio alone. Not a test: it only prints figures.

The generator's forward model is run for a few template wells of S samples; the remaining
wells are byte copies under new names (reading, conditioning, prediction and writing are
still done for every file). Usage::

    python benchmarks/bench_basin.py --wells 1000 --samples 10000 --jobs 2
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import shutil
import tempfile
import time
from pathlib import Path

from facies_ml.api import load_project
from facies_ml.batch import list_well_files, run_batch
from facies_ml.config import load_config
from facies_ml.pipeline import FaciesPipeline
from facies_ml.synthetic import generate_basin

REPO = Path(__file__).resolve().parents[1]


def worker_peak_rss_mb() -> float:
    """Largest VmHWM (peak resident set) among live child processes (joblib workers), MB."""
    me = str(os.getpid())
    peak = 0.0
    for status in Path("/proc").glob("[0-9]*/status"):
        try:
            text = status.read_text()
        except OSError:
            continue
        fields = dict(line.split(":\t", 1) for line in text.splitlines() if ":\t" in line)
        if fields.get("PPid", "").strip() == me and "VmHWM" in fields:
            peak = max(peak, float(fields["VmHWM"].split()[0]) / 1024)
    return peak


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--wells", type=int, default=1000)
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--templates", type=int, default=6)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--keep", action="store_true", help="keep the temporary folder")
    ap.add_argument("--reference-sample", type=int, default=50,
                    help="files read with lasio alone as the same-run reference")
    args = ap.parse_args()

    work = Path(tempfile.mkdtemp(prefix="facies_bench_"))
    try:
        t0 = time.perf_counter()
        cfg = load_config()
        demo = REPO / "synthetic_wells"
        project = load_project(demo, demo / "core_intervals.csv", cfg, demo / "core_gamma.csv")
        pipe = FaciesPipeline(cfg).fit(project.cored, project.labels)
        t_fit = time.perf_counter() - t0

        t0 = time.perf_counter()
        tpl = work / "templates"
        generate_basin(tpl, n_wells=max(2, args.templates), n_cored=1, seed=99,
                       samples_per_well=args.samples)
        templates = sorted(tpl.glob("*.las"))
        wells_dir = work / "wells"
        wells_dir.mkdir()
        for i in range(args.wells):
            src = templates[i % len(templates)]
            text = src.read_text()
            name = f"QM-B{i:04d}"
            text = re.sub(r"^(\s*WELL\s*\.)[^:]*:", rf"\g<1>  {name} :", text, count=1, flags=re.M)
            (wells_dir / f"{name}.las").write_text(text)
        t_gen = time.perf_counter() - t0

        files = list_well_files(wells_dir)
        # Same-run reference: lasio's own reader (numpy engine) on a sample of the files,
        # serial; our end-to-end cost per well and core is reported as a multiple of it.
        import lasio

        sample = files[:max(1, min(args.reference_sample, len(files)))]
        t0 = time.perf_counter()
        for f in sample:
            lasio.read(str(f))
        t_ref = (time.perf_counter() - t0) / len(sample)
        t0 = time.perf_counter()
        results = run_batch(pipe, files, work / "out", n_jobs=args.jobs, progress=False)
        wall = time.perf_counter() - t0
        ok = [r for r in results if r.failure is None]
        n_samples = sum(int(r.intake.get("n_samples", 0)) for r in ok)
        stages = {k: sum(r.timings.get(k, 0.0) for r in ok)
                  for k in ("read_condition_s", "predict_s", "write_s")}
        rss_self = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        rss_children = max(worker_peak_rss_mb(),
                           resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024)
        print(f"model fit on the demo cored wells: {t_fit:.1f} s; inputs generated in {t_gen:.1f} s")
        print(f"wells predicted: {len(ok)} of {len(files)} ({len(results) - len(ok)} failures)")
        print(f"samples: {n_samples:,}  wall: {wall:.1f} s  throughput: {n_samples / wall:,.0f} samples/s "
              f"({args.jobs} worker(s))")
        total = sum(stages.values())
        for k, v in stages.items():
            print(f"  {k:<18} {v:8.1f} s summed over workers ({v / max(total, 1e-9):.0%})")
        per_well_core = wall * args.jobs / max(1, len(ok))
        print(f"reference: lasio.read alone {t_ref * 1000:.0f} ms per file (serial, {len(sample)} "
              f"files); facies_ml end to end {per_well_core * 1000:.0f} ms per well per core = "
              f"{per_well_core / t_ref:.1f}x one lasio read")
        print(f"peak RSS: main process {rss_self:.0f} MB, largest worker {rss_children:.0f} MB")
        print(f"targets: wall < 300 s -> {'met' if wall < 300 else 'NOT met'}; "
              f"RSS < 1024 MB -> {'met' if max(rss_self, rss_children) < 1024 else 'NOT met'}")
    finally:
        if args.keep:
            print(f"kept {work}")
        else:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
