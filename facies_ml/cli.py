"""Command-line shell over :mod:`facies_ml.api`. Bad input exits 2 with one ``error:`` line;
every exit status is an :class:`ExitCode`."""

from __future__ import annotations

import argparse
import errno
import json
import signal
import sys
import threading
import traceback
from enum import IntEnum
from pathlib import Path
from typing import Any

from facies_ml import CAUTION, __version__
from facies_ml.config import Config
from facies_ml.errors import InputError


class ExitCode(IntEnum):
    """What a script calling ``facies-ml`` can rely on (also in ``--help`` and README)."""

    OK = 0                #: every well done
    INTERNAL_ERROR = 1    #: a bug: rerun with --debug and report it
    BAD_INPUT = 2         #: bad input or --out (also an empty folder, a full disk); nothing changed
    SOME_WELLS_FAILED = 3  #: outputs written for the wells that worked; failures.csv says why
    NO_WELL_DONE = 4      #: every well failed; nothing written, the previous --out untouched
    INTERRUPTED = 130     #: Ctrl-C; nothing changed in --out


EXIT_CODES_HELP = """exit codes:
  0    every well done
  1    internal error (rerun with --debug and report it)
  2    bad input: a missing, empty or unreadable input, a bad setting, a refused --out, or a
       full disk; --out is left as it was
  3    some wells failed (listed on screen and in failures.csv); the others' outputs written
  4    no well could be done; nothing written, --out left as it was
  130  interrupted (Ctrl-C); --out left as it was

outputs: each run writes into a hidden staging folder beside --out and replaces --out as one
set only when it succeeds, with run_manifest.json (tool and model version, command, inputs and
outputs with SHA-256, time). --out must be new, empty or written by an earlier facies_ml run."""


def _wells_exit(done: int, failed: int) -> ExitCode:
    """Exit code of a run over wells: all done, some failed, or none done."""
    if done == 0 and failed > 0:
        return ExitCode.NO_WELL_DONE
    return ExitCode.SOME_WELLS_FAILED if failed else ExitCode.OK


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
        epilog=f"{EXIT_CODES_HELP}\n\n{CAUTION}",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"facies_ml {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = parser.add_subparsers(dest="command", required=True)
    _exit_help: dict[str, Any] = {"epilog": EXIT_CODES_HELP,
                                  "formatter_class": argparse.RawDescriptionHelpFormatter}

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

    p = sub.add_parser("evaluate", help="leave-one-well-out over the cored wells",
                       **_exit_help)
    p.add_argument("--wells", required=True)
    _add_core(p)
    p.add_argument("--out", required=True, help="folder for metrics.json")
    _add_config(p)
    _add_depth_unit(p)

    p = sub.add_parser("predict", help="predict offset wells with the serving model",
                       **_exit_help)
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

    p = sub.add_parser("learning-curve", help="held-out scores vs number of cored wells",
                       **_exit_help)
    p.add_argument("--wells", required=True)
    _add_core(p)
    p.add_argument("--out", required=True)
    p.add_argument("--repeats", type=int, help="random subsets per size (default from config)")
    _add_config(p)
    _add_depth_unit(p)

    p = sub.add_parser("rank-cores", help="rank uncored wells by what a core there would teach",
                       **_exit_help)
    p.add_argument("--model-dir", required=True)
    p.add_argument("--wells", required=True)
    p.add_argument("--out", help="folder for core_next_ranking.csv")

    p = sub.add_parser("demo", help="evaluate, train and predict on the bundled demo basin",
                       **_exit_help)
    p.add_argument("--out", default="demo_output")
    p.add_argument("--wells", help="demo basin folder (default: bundled synthetic_wells/)")
    return parser


def run(args: argparse.Namespace) -> int:
    """Carry out one parsed command; returns its :class:`ExitCode`."""
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
        if summary["written"]:
            print(f"predicted {len(summary['wells'])} wells with model "
                  f"{summary['model_version']}; {len(summary['failures'])} failed (see "
                  f"failures.csv); outputs in {args.out}")
        else:
            print(f"no well could be predicted with model {summary['model_version']}; nothing "
                  f"written, {args.out} left as it was")
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
        return _wells_exit(len(summary["wells"]), len(summary["failures"]))
    elif args.command == "retrain":
        result = api.retrain(args.model_dir, args.wells, args.core, args.config,
                             args.core_gamma, force=args.force, progress=_progress,
                             depth_unit=args.depth_unit)
        from facies_ml.champion import format_comparison

        print(format_comparison(result))
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
        failures = ranking.attrs.get("failures", [])
        for f in failures:
            print(f"  failed: {f.get('well') or f.get('file')}: {f.get('reason')}")
        if args.out and not ranking.empty:
            print(f"wrote {Path(args.out) / 'core_next_ranking.csv'}")
        elif ranking.empty:
            print("no well ranked (every well failed or was a training well)"
                  + (f"; nothing written, {args.out} left as it was" if args.out else ""))
        return _wells_exit(len(ranking), len(failures))
    elif args.command == "demo":
        from facies_ml.demo import run_demo

        result = run_demo(args.out, args.wells, progress=_progress)
        return _wells_exit(result["wells_done"], len(result["failures"]))
    return ExitCode.OK


def _os_error(exc: OSError) -> str:
    """One line for an operating-system error outside a run folder (e.g. a model folder)."""
    where = f" ({exc.filename})" if exc.filename else ""
    if exc.errno == errno.ENOSPC:
        return f"the disk is full (no space left on device){where}"
    if exc.errno == errno.EDQUOT:
        return f"the disk quota is exceeded{where}"
    return f"{exc.__class__.__name__}: {exc}"


def _interrupt(signum: int, frame: Any) -> None:
    raise KeyboardInterrupt(f"signal {signum}")


def _on_sigterm_interrupt() -> Any:
    """Make SIGTERM (``kill PID``) clean up like Ctrl-C: the run's staging folder is removed
    and ``--out`` is left as it was. Returns the previous handler (None off the main thread)."""
    if threading.current_thread() is not threading.main_thread():
        return None
    return signal.signal(signal.SIGTERM, _interrupt)


def main(argv: list[str] | None = None) -> int:
    """Run the command line ``argv``; returns an :class:`ExitCode` (argparse usage errors
    exit 2 too)."""
    from facies_ml.report.run_folder import run_command

    parser = build_parser()
    args = parser.parse_args(argv)
    token = run_command.set(["facies-ml", *(sys.argv[1:] if argv is None else argv)])
    previous = _on_sigterm_interrupt()
    try:
        return int(run(args))
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    except OSError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"error: {_os_error(exc)}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    except ValueError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    except KeyboardInterrupt:
        print("error: interrupted; --out left as it was", file=sys.stderr)
        return ExitCode.INTERRUPTED
    except Exception as exc:  # noqa: BLE001 - last resort: one line, not a traceback
        if args.debug:
            traceback.print_exc()
        print(f"error: internal error {exc.__class__.__name__}: {exc} (rerun with --debug)",
              file=sys.stderr)
        return ExitCode.INTERNAL_ERROR
    finally:
        run_command.reset(token)
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":
    raise SystemExit(main())
