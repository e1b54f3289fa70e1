"""Command-line shell over :mod:`facies_ml.api`. Bad input exits 2 with one ``error:`` line."""

from __future__ import annotations

import argparse
import json
import sys
import traceback
from pathlib import Path

from facies_ml import CAUTION, __version__
from facies_ml.config import Config
from facies_ml.errors import InputError


def _progress(msg: str) -> None:
    print(f"  .. {msg}", file=sys.stderr, flush=True)


def _add_config(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", help="project settings YAML (default: bundled configs/default.yaml)")


def _add_core(p: argparse.ArgumentParser, required: bool = True) -> None:
    p.add_argument("--core", required=required, help="core intervals CSV: well,top,base,lithofacies"
                   "[,systems_tract]; depths in each well's LAS depth unit")
    p.add_argument("--core-gamma", help="optional core gamma CSV (well,depth,core_gr_api) used to "
                   "estimate the core-to-log depth shift")


def _add_depth_unit(p: argparse.ArgumentParser) -> None:
    p.add_argument("--depth-unit", choices=["ft", "m"],
                   help="depth unit of CSV/Parquet well tables whose depth column name gives "
                        "none (e.g. plain 'depth'); sets intake.table.depth_unit")


def _settings(args: argparse.Namespace) -> Config | str | None:
    """``--config`` as given, or loaded with ``--depth-unit`` applied."""
    if getattr(args, "depth_unit", None) is None:
        return args.config
    from facies_ml.config import load_config
    from facies_ml.wells.table import with_table_depth_unit

    return with_table_depth_unit(load_config(args.config), args.depth_unit)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="facies-ml",
        description="Core-calibrated lithofacies and systems-tract prediction for shale wells.",
        epilog=CAUTION)
    parser.add_argument("--version", action="version", version=f"facies_ml {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("synth", help="generate a synthetic demo basin (LAS + core + truth)")
    p.add_argument("--out", required=True)
    p.add_argument("--wells", type=int, default=10)
    p.add_argument("--seed", type=int, default=20261202)
    g = p.add_mutually_exclusive_group()
    g.add_argument("--preset", choices=["demo", "hard"], default="demo",
                   help="bundled forward-model settings: demo (configs/synthetic_basin.yaml) or "
                        "hard (configs/synthetic_hard.yaml); default demo")
    g.add_argument("--config", help="any synth settings YAML (instead of --preset)")

    p = sub.add_parser("train", help="fit on cored key wells and save a model version")
    p.add_argument("--wells", required=True, help="folder of LAS/CSV/Parquet files, or one file")
    _add_core(p)
    p.add_argument("--model-dir", required=True)
    _add_config(p)
    _add_depth_unit(p)

    p = sub.add_parser("evaluate", help="leave-one-well-out over the cored wells")
    p.add_argument("--wells", required=True)
    _add_core(p)
    p.add_argument("--out", required=True, help="folder for metrics.json")
    _add_config(p)
    _add_depth_unit(p)

    p = sub.add_parser("predict", help="predict offset wells with the serving model")
    p.add_argument("--model-dir", required=True)
    p.add_argument("--wells", required=True, help="folder of wells or one LAS/CSV file")
    p.add_argument("--out", required=True)
    p.add_argument("--version", dest="model_version", help="model version (default: champion)")
    p.add_argument("--jobs", type=int, default=1, help="parallel processes on this machine")
    p.add_argument("--scheduler", help="Dask scheduler address (e.g. tcp://host:8786) to run on")
    p.add_argument("--plots", action="store_true",
                   help="also draw a well section per well, a correlation panel and report.html")
    p.add_argument("--panel-wells", help="comma-separated wells for the correlation panel, in "
                   "order (default: the first report.panel_max_wells files)")
    p.add_argument("--datum-mfs", help="hang the panel on the MFS of this basin-wide sequence "
                   "name, e.g. S3 (default report.datum_sequence; none = the MFS most wells share)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    _add_depth_unit(p)

    p = sub.add_parser("retrain", help="champion/challenger retrain with new cored wells")
    p.add_argument("--model-dir", required=True)
    p.add_argument("--wells", required=True)
    _add_core(p)
    _add_config(p)
    _add_depth_unit(p)
    p.add_argument("--force", action="store_true", help="promote the challenger regardless")

    p = sub.add_parser("models", help="list model versions, or roll back / promote one")
    p.add_argument("--model-dir", required=True)
    p.add_argument("--serve", metavar="VERSION", help="make VERSION the serving model")

    p = sub.add_parser("learning-curve", help="held-out scores vs number of cored wells")
    p.add_argument("--wells", required=True)
    _add_core(p)
    p.add_argument("--out", required=True)
    p.add_argument("--repeats", type=int, help="random subsets per size (default from config)")
    _add_config(p)
    _add_depth_unit(p)

    p = sub.add_parser("rank-cores", help="rank uncored wells by what a core there would teach")
    p.add_argument("--model-dir", required=True)
    p.add_argument("--wells", required=True)
    p.add_argument("--out", help="folder for core_next_ranking.csv")

    p = sub.add_parser("demo", help="evaluate, train and predict on the bundled demo basin")
    p.add_argument("--out", default="demo_output")
    p.add_argument("--wells", help="demo basin folder (default: bundled synthetic_wells/)")
    return parser


def run(args: argparse.Namespace) -> int:
    from facies_ml import api

    if args.command == "synth":
        from facies_ml.synthetic import PRESETS, generate_basin

        if args.wells < 2:
            raise InputError("--wells must be at least 2")
        settings = args.config or PRESETS[args.preset]
        generate_basin(args.out, n_wells=args.wells, n_cored=min(5, max(1, args.wells // 2)),
                       seed=args.seed, config_path=settings)
        print(f"wrote a synthetic basin of {args.wells} wells to {args.out} (settings {settings})")
    elif args.command == "evaluate":
        from facies_ml.evaluation import format_table

        metrics = api.evaluate(args.wells, args.core, args.out, _settings(args), args.core_gamma,
                               progress=_progress)
        print(format_table(metrics))
        print(f"wrote {Path(args.out) / 'metrics.json'}")
    elif args.command == "train":
        version, pipe = api.train(args.wells, args.core, args.model_dir, _settings(args),
                                  args.core_gamma, progress=_progress)
        print(f"saved model {version} trained on {', '.join(pipe.training_wells_)} "
              f"in {args.model_dir}")
    elif args.command == "predict":
        summary = api.predict(args.model_dir, args.wells, args.out, args.model_version,
                              n_jobs=args.jobs, scheduler=args.scheduler, plots=args.plots,
                              progress=not args.no_progress,
                              panel_wells=[w.strip() for w in args.panel_wells.split(",")
                                           if w.strip()] if args.panel_wells else None,
                              datum_mfs=args.datum_mfs, depth_unit=args.depth_unit)
        print(f"predicted {len(summary['wells'])} wells with model {summary['model_version']}; "
              f"{len(summary['failures'])} failed (see failures.csv); outputs in {args.out}")
        for f in summary["failures"]:
            print(f"  failed: {f['well'] or f['file']}: {f['reason']}")
        for name, info in summary["wells"].items():
            for note in info.get("notes", []):
                print(f"  note: {name}: {note}")
            for pick in info.get("picks_to_review", []):
                print(f"  review: {name}: {pick}")
        if summary.get("panel_wells_not_predicted"):
            print("  not on the panel (no such well predicted): "
                  + ", ".join(summary["panel_wells_not_predicted"]))
    elif args.command == "retrain":
        result = api.retrain(args.model_dir, args.wells, args.core, args.config,
                             args.core_gamma, force=args.force, progress=_progress,
                             depth_unit=args.depth_unit)
        print(f"{'well':<12}{'champion_F1':>13}{'challenger_F1':>15}  basis")
        for r in result["comparison"]:
            c = "-" if r["champion_f1"] is None else f"{r['champion_f1']:.3f}"
            n = "-" if r["challenger_f1"] is None else f"{r['challenger_f1']:.3f}"
            print(f"{r['well']:<12}{c:>13}{n:>15}  {r['basis']}")
        verdict = "PROMOTED" if result["promoted"] else "KEPT CHAMPION"
        print(f"{verdict}: {result['reason']}; serving {result['champion_after']}")
    elif args.command == "models":
        from facies_ml.store import list_versions, set_champion

        if args.serve:
            set_champion(args.model_dir, args.serve)
            print(f"now serving {args.serve}")
        for row in list_versions(args.model_dir):
            print(json.dumps(row))
    elif args.command == "learning-curve":
        curve = api.learning_curve_report(args.wells, args.core, args.out, _settings(args),
                                          args.core_gamma, args.repeats, progress=_progress)
        agg = curve.groupby("n_training_wells")[["lithofacies_f1_macro", "systems_tract_accuracy"]]
        print(f"{'training wells':>15}{'facies_F1':>12}{'sd':>8}{'tract_acc':>12}{'sd':>8}")
        mean, sd = agg.mean(), agg.std().fillna(0.0)
        for n in mean.index:
            print(f"{n:>15d}{mean.loc[n, 'lithofacies_f1_macro']:>12.3f}"
                  f"{sd.loc[n, 'lithofacies_f1_macro']:>8.3f}"
                  f"{mean.loc[n, 'systems_tract_accuracy']:>12.3f}"
                  f"{sd.loc[n, 'systems_tract_accuracy']:>8.3f}")
        print(f"wrote {Path(args.out) / 'learning_curve.csv'} and learning_curve.png")
    elif args.command == "rank-cores":
        ranking = api.rank_cores(args.model_dir, args.wells, args.out)
        for row in ranking.itertuples():
            print(f"{row.rank}. {row.well}: score {row.score:.3f} ({row.reasons})")
    elif args.command == "demo":
        from facies_ml.demo import run_demo

        run_demo(args.out, args.wells, progress=_progress)
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return run(args)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except (OSError, ValueError) as exc:
        if args.debug:
            traceback.print_exc()
        print(f"error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001 - last resort: one line, not a traceback
        if args.debug:
            traceback.print_exc()
        print(f"error: internal error {exc.__class__.__name__}: {exc} (rerun with --debug)",
              file=sys.stderr)
        return 1


if __name__ == "__main__":
    raise SystemExit(main())
