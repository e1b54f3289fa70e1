"""End to end through the CLI on a tiny generated basin, and the bad-input contract:
a non-zero exit and one ``error:`` line naming the file/well/row, never a traceback."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import lasio
import numpy as np
import pandas as pd
import pytest

from facies_ml.cli import main
from facies_ml.config import load_config

REQUIRED_KEYS = ("lithofacies_accuracy", "lithofacies_f1_macro", "systems_tract_accuracy",
                 "systems_tract_accuracy_raw", "mfs_depth_error", "sb_depth_error",
                 "rule_violations")


def _core(basin: Path) -> Path:
    return basin / "core_intervals.csv"


def _err_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert err, "expected an error line on stderr"
    last = err[-1]
    assert last.startswith("error: ")
    assert "Traceback" not in "\n".join(err)
    return last


@pytest.fixture(scope="module")
def trained(tiny_basin, fast_config, tmp_path_factory):
    model_dir = tmp_path_factory.mktemp("models")
    rc = main(["train", "--wells", str(tiny_basin), "--core", str(_core(tiny_basin)),
               "--core-gamma", str(tiny_basin / "core_gamma.csv"),
               "--model-dir", str(model_dir), "--config", str(fast_config)])
    assert rc == 0
    return model_dir


def test_evaluate_writes_metrics_per_well(tiny_basin, fast_config, tmp_path, capsys):
    rc = main(["evaluate", "--wells", str(tiny_basin), "--core", str(_core(tiny_basin)),
               "--out", str(tmp_path), "--config", str(fast_config)])
    assert rc == 0
    printed = capsys.readouterr().out
    metrics = json.loads((tmp_path / "metrics.json").read_text())
    cored = sorted(pd.read_csv(_core(tiny_basin))["well"].unique())
    assert sorted(metrics["wells"]) == cored
    for name in cored:
        assert name in printed
        for key in REQUIRED_KEYS:
            assert key in metrics["wells"][name]
        assert metrics["wells"][name]["rule_violations"] == 0
        assert 0.0 <= metrics["wells"][name]["lithofacies_accuracy"] <= 1.0
    for key in REQUIRED_KEYS:
        assert key in metrics["overall"]
    # the forward model's facies are learnable from logs: well above the 1/6 chance level
    assert metrics["overall"]["lithofacies_accuracy"] > 0.4
    # pooled held-out reliability: every labelled held-out sample once per class
    n_labelled = sum(int(np.sum(m["lithofacies"]["confusion_matrix"]))
                     for m in metrics["wells"].values())
    rel = pd.DataFrame(metrics["reliability"])
    assert (rel.groupby("class")["n"].sum() == n_labelled).all()
    for name in ("confusion_matrix.png", "reliability.png"):
        assert (tmp_path / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature


def test_train_predict_outputs(trained, tiny_basin, tmp_path, capsys):
    out = tmp_path / "pred"
    rc = main(["predict", "--model-dir", str(trained), "--wells", str(tiny_basin),
               "--out", str(out), "--no-progress", "--plots"])
    assert rc == 0
    las_files = sorted(out.glob("*.las"))
    assert len(las_files) == 4
    las = lasio.read(las_files[0])
    assert "LITHO_CODE" in las.keys() and "TRACT_CODE" in las.keys()
    codes = set(np.unique(las["LITHO_CODE"][np.isfinite(las["LITHO_CODE"])]).astype(int))
    assert codes <= {1, 2, 3, 4, 5, 6}
    params = {p.mnemonic: p.descr for p in las.params}
    assert params["LITH1"] == "lithofacies code" and las.params["LITH1"].value == "ORSM"
    p_cols = [k for k in las.keys() if k.startswith("P_")]
    probs = np.column_stack([las[k] for k in p_cols[:6]])
    assert np.allclose(probs.sum(axis=1), 1.0, atol=1e-3)
    tops = pd.read_csv(out / "tops.csv", comment="#", keep_default_na=False)
    assert set(tops["surface"]) <= {"SB", "MFS"}
    assert (tops["depth_p10"] <= tops["depth_p90"]).all()
    assert (tops["depth_p10"] <= tops["depth"]).all() and (tops["depth"] <= tops["depth_p90"]).all()
    assert tops["confidence"].between(0.0, 1.0).all()
    # basin-wide names from the core file's S<k> names: one name per sequence and well, the
    # MFS of a sequence lying above its SB (common practice: the SB bounds the sequence at its
    # base; depth increases downward)
    named = tops[tops["sequence"] != ""]
    assert len(named) > 0 and named["sequence"].str.fullmatch(r"S\d+(\+\d+|-\d+)?").all()
    for (_, _), g in named.groupby(["well", "sequence"]):
        kinds = dict(zip(g["surface"], g["depth"], strict=False))
        if len(g) == 2 and set(kinds) == {"SB", "MFS"}:
            assert kinds["MFS"] < kinds["SB"]
    # a pick with low confidence carries a flag to review
    low = tops["confidence"] < load_config().section("sequence")["checks"]["low_confidence"]
    assert (tops.loc[low, "flags"] != "").all()
    out_text = capsys.readouterr().out
    assert all(f"review: {w}:" in out_text for w in tops.loc[tops["flags"] != "", "well"])
    assert (out / "report.html").stat().st_size > 10_000
    assert (out / "figures" / "correlation_panel.png").is_file()
    assert (out / "landing_zones.csv").is_file()


def test_predict_panel_wells_and_datum(trained, tiny_basin, tmp_path, capsys):
    # Every well gets its section file; only the chosen panel wells are held in memory,
    # drawn on the panel and embedded in the report; an unknown name is reported, not fatal.
    out = tmp_path / "pred"
    wells = sorted(p.stem for p in tiny_basin.glob("*.las"))
    rc = main(["predict", "--model-dir", str(trained), "--wells", str(tiny_basin),
               "--out", str(out), "--no-progress", "--plots", "--datum-mfs", "S3",
               "--panel-wells", f"{wells[2]},QM-NOWHERE,{wells[0]}"])
    assert rc == 0
    assert "QM-NOWHERE" in capsys.readouterr().out
    assert sorted(p.name for p in (out / "figures").glob("*_section.png")) == \
           [f"{w}_section.png" for w in wells]
    report = (out / "report.html").read_text()
    assert f"Correlation panel: {wells[2]}, {wells[0]}" in report
    assert report.count("data:image/png") == 1 + 2  # panel + the two panel wells' sections
    assert "more well sections are in" in report
    summary = json.loads((out / "summary.json").read_text())
    assert summary["panel_wells_not_predicted"] == ["QM-NOWHERE"]
    rc = main(["predict", "--model-dir", str(trained), "--wells", str(tiny_basin),
               "--out", str(tmp_path / "bad"), "--no-progress", "--plots", "--datum-mfs", "S99"])
    assert rc == 2
    assert "datum MFS 'S99' is not a basin sequence" in capsys.readouterr().err


def test_predict_one_bad_file_does_not_abort(trained, tiny_basin, tmp_path, capsys):
    wells = tmp_path / "wells"
    wells.mkdir()
    for f in sorted(tiny_basin.glob("*.las"))[:2]:
        shutil.copy(f, wells / f.name)
    (wells / "BROKEN.las").write_text("~Version\nVERS. 2.0:\n~Curve\n~A\n1 2 3\n")
    rc = main(["predict", "--model-dir", str(trained), "--wells", str(wells),
               "--out", str(tmp_path / "o"), "--no-progress"])
    assert rc == 3  # some wells failed, the others' outputs kept (ExitCode.SOME_WELLS_FAILED)
    fails = pd.read_csv(tmp_path / "o" / "failures.csv")
    assert len(fails) == 1 and "BROKEN" in fails["file"].iloc[0]
    assert len(list((tmp_path / "o").glob("*.las"))) == 2


def test_missing_folder(capsys, tmp_path):
    rc = main(["evaluate", "--wells", str(tmp_path / "nope"), "--core", "x.csv",
               "--out", str(tmp_path)])
    assert rc == 2
    assert "nope" in _err_line(capsys)


def test_las_without_depth_index(tmp_path, capsys, tiny_basin):
    bad = tmp_path / "w"
    bad.mkdir()
    (bad / "NODEPTH.las").write_text(
        "~Version\nVERS. 2.0 :\nWRAP. NO :\n~Well\nWELL. NODEPTH :\nNULL. -999.25 :\n"
        "~Curve\nGR .GAPI : gamma\nRHOB .G/C3 : density\n~A\n50 2.5\n60 2.4\n")
    rc = main(["train", "--wells", str(bad / "NODEPTH.las"), "--core", str(_core(tiny_basin)),
               "--model-dir", str(tmp_path / "m")])
    assert rc == 2
    line = _err_line(capsys)
    assert "NODEPTH" in line


def test_core_unknown_well_and_top_below_base(tiny_basin, tmp_path, capsys):
    core = pd.read_csv(_core(tiny_basin))
    unknown = core.copy()
    unknown.loc[3, "well"] = "QM-X9"
    p = tmp_path / "unknown.csv"
    unknown.to_csv(p, index=False)
    rc = main(["train", "--wells", str(tiny_basin), "--core", str(p),
               "--model-dir", str(tmp_path / "m")])
    assert rc == 2
    line = _err_line(capsys)
    assert "QM-X9" in line and "unknown.csv" in line
    flipped = core.copy()
    flipped.loc[5, ["top", "base"]] = [flipped.loc[5, "base"], flipped.loc[5, "top"]]
    p2 = tmp_path / "flipped.csv"
    flipped.to_csv(p2, index=False)
    rc = main(["train", "--wells", str(tiny_basin), "--core", str(p2),
               "--model-dir", str(tmp_path / "m")])
    assert rc == 2
    line = _err_line(capsys)
    assert "flipped.csv" in line and "row" in line


def test_module_entry_point_runs():
    # `python -m facies_ml` is the documented alternative to the console script
    res = subprocess.run([sys.executable, "-m", "facies_ml", "--help"], capture_output=True,
                         text=True, check=False)
    assert res.returncode == 0 and "evaluate" in res.stdout
    res = subprocess.run([sys.executable, "-m", "facies_ml", "predict", "--model-dir", "/nonexist",
                          "--wells", "/nonexist", "--out", "/tmp/x"], capture_output=True,
                         text=True, check=False)
    assert res.returncode == 2 and "Traceback" not in res.stderr and "error:" in res.stderr


def test_retrain_with_a_new_cored_well(tiny_basin, fast_config, tmp_path, capsys):
    core = pd.read_csv(_core(tiny_basin))
    wells = sorted(core["well"].unique())
    new_well = wells[-1]
    old = tmp_path / "core_old.csv"
    core[core["well"] != new_well].to_csv(old, index=False)
    model_dir = tmp_path / "models"
    assert main(["train", "--wells", str(tiny_basin), "--core", str(old), "--model-dir",
                 str(model_dir), "--config", str(fast_config)]) == 0
    capsys.readouterr()
    rc = main(["retrain", "--model-dir", str(model_dir), "--wells", str(tiny_basin), "--core",
               str(_core(tiny_basin)), "--config", str(fast_config)])
    assert rc == 0
    out = capsys.readouterr().out
    assert new_well in out and "new well, champion never saw it" in out
    assert out.count("same held-out fold") == len(wells) - 1
    # the table: per-metric mean difference with its interval and verdict, then the decision
    for metric in ("lithofacies_f1_macro", "systems_tract_accuracy", "surfaces_within_close"):
        line = next(x for x in out.splitlines() if x.startswith(metric))
        assert " .. " in line or "not scored" in line
    assert "90% interval" in out
    # 2 other cored wells: the core check says it was skipped rather than silently passing
    assert f"note: core check of {new_well}" in out and "skipped" in out
    verdict = [line for line in out.splitlines() if line.startswith(("PROMOTED", "KEPT CHAMPION"))]
    assert len(verdict) == 1
    registry = json.loads((model_dir / "registry.json").read_text())
    assert registry["versions"] == ["v001", "v002"]
    promoted = verdict[0].startswith("PROMOTED")
    assert registry["champion"] == ("v002" if promoted else "v001")
    # --force always promotes
    rc = main(["retrain", "--model-dir", str(model_dir), "--wells", str(tiny_basin), "--core",
               str(_core(tiny_basin)), "--config", str(fast_config), "--force"])
    assert rc == 0
    assert json.loads((model_dir / "registry.json").read_text())["champion"] == "v003"
    capsys.readouterr()
    assert main(["models", "--model-dir", str(model_dir), "--serve", "v001"]) == 0
    rows = [json.loads(x) for x in capsys.readouterr().out.splitlines()[1:]]
    assert [r["champion"] for r in rows] == [True, False, False]


# ---- exit codes a script can trust; all or nothing on disk -------------------------------
from facies_ml.cli import ExitCode  # noqa: E402
from facies_ml.report.run_folder import MANIFEST_NAME, read_run_manifest  # noqa: E402


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _hidden(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def _wells(tiny_basin: Path, folder: Path, n: int = 2) -> list[Path]:
    folder.mkdir()
    for f in sorted(tiny_basin.glob("*.las"))[:n]:
        shutil.copy(f, folder / f.name)
    return sorted(folder.glob("*.las"))


def _predict(trained: Path, wells: Path, out: Path) -> int:
    return main(["predict", "--model-dir", str(trained), "--wells", str(wells), "--out",
                 str(out), "--no-progress"])


def test_help_and_readme_list_the_exit_codes(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--help"])
    assert info.value.code == 0
    text = capsys.readouterr().out
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    section = readme.split("## Exit codes", 1)[1].split("\n## ", 1)[0]
    for code in ExitCode:
        assert f"\n  {int(code):<5}" in text
        assert f"| {int(code)} |" in section
    assert [int(c) for c in ExitCode] == [0, 1, 2, 3, 4, 130]


def test_predict_empty_input_is_bad_input(trained, tiny_basin, tmp_path, capsys):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert _predict(trained, empty, tmp_path / "out") == ExitCode.BAD_INPUT
    assert "empty" in _err_line(capsys)
    only_core = tmp_path / "only_core"
    only_core.mkdir()
    shutil.copy(_core(tiny_basin), only_core / "core_intervals.csv")  # a table, not a well log
    assert _predict(trained, only_core, tmp_path / "out") == ExitCode.BAD_INPUT
    assert "no well found" in _err_line(capsys)
    assert not (tmp_path / "out").exists() and _hidden(tmp_path) == []


def test_rerun_replaces_the_set_and_manifest_hashes_inputs(trained, tiny_basin, tmp_path, capsys):
    two = _wells(tiny_basin, tmp_path / "two")
    out = tmp_path / "pred"
    stale = tmp_path / f".pred.staging-{_dead_pid()}-k3j2"  # left by a killed run
    stale.mkdir()
    (stale / "QM-K1.las").write_text("half a file")
    assert _predict(trained, tmp_path / "two", out) == ExitCode.OK
    assert not stale.exists() and _hidden(tmp_path) == []
    first = read_run_manifest(out)
    assert first["model"]["version"] == "v001" and first["command"][:2] == ["facies-ml", "predict"]
    assert {r["file"]: r["sha256"] for r in first["inputs"]} == {
        f.name: hashlib.sha256(f.read_bytes()).hexdigest() for f in two}
    assert set(first["outputs"]) == set(_snapshot(out)) - {MANIFEST_NAME}
    for name, digest in first["outputs"].items():
        assert hashlib.sha256((out / name).read_bytes()).hexdigest() == digest
    summary = json.loads((out / "summary.json").read_text())
    assert ".staging-" not in json.dumps(summary)
    # a rerun on one well replaces the whole set: the other well's files are gone
    one = _wells(tiny_basin, tmp_path / "one", n=1)
    assert _predict(trained, tmp_path / "one", out) == ExitCode.OK
    names = {p.stem for p in out.glob("*.las")}
    assert names == {one[0].stem}
    assert [r["file"] for r in read_run_manifest(out)["inputs"]] == [one[0].name]
    assert _hidden(tmp_path) == []


def test_all_wells_fail_exits_4_and_keeps_previous_results(trained, tiny_basin, tmp_path, capsys):
    out = tmp_path / "pred"
    _wells(tiny_basin, tmp_path / "good", n=1)
    assert _predict(trained, tmp_path / "good", out) == ExitCode.OK
    before = _snapshot(out)
    bad = tmp_path / "bad"
    bad.mkdir()
    for name in ("BROKEN1.las", "BROKEN2.las"):
        (bad / name).write_text("~Version\nVERS. 2.0:\n~Curve\n~A\n1 2 3\n")
    capsys.readouterr()
    assert _predict(trained, bad, out) == ExitCode.NO_WELL_DONE
    printed = capsys.readouterr().out
    assert "BROKEN1" in printed and "BROKEN2" in printed and "nothing written" in printed
    assert _snapshot(out) == before and _hidden(tmp_path) == []


def test_some_wells_fail_exits_3_with_the_others_written(trained, tiny_basin, tmp_path):
    wells = _wells(tiny_basin, tmp_path / "w")
    (tmp_path / "w" / "BROKEN.las").write_text("~Version\nVERS. 2.0:\n~Curve\n~A\n1 2 3\n")
    out = tmp_path / "pred"
    assert _predict(trained, tmp_path / "w", out) == ExitCode.SOME_WELLS_FAILED
    assert {p.stem for p in out.glob("*.las")} == {f.stem for f in wells}
    fails = pd.read_csv(out / "failures.csv")
    assert list(fails["well"]) == ["BROKEN"]
    manifest = read_run_manifest(out)
    assert (manifest["wells_done"], manifest["wells_failed"]) == (2, 1)


@pytest.mark.parametrize("error", ["internal", "disk_full", "sigterm"])
def test_run_failing_midway_leaves_previous_results_byte_identical(
        trained, tiny_basin, tmp_path, capsys, monkeypatch, error):
    wells = tmp_path / "w"
    _wells(tiny_basin, wells)
    out = tmp_path / "pred"
    assert _predict(trained, wells, out) == ExitCode.OK
    before = _snapshot(out)
    import facies_ml.batch as batch

    real = batch.write_prediction_parquet
    calls = []

    def second_call_fails(pred, path, table=None):
        calls.append(path)
        if len(calls) == 2:  # the first well's files are already written
            if error == "disk_full":
                raise OSError(errno.ENOSPC, "No space left on device", str(path))
            if error == "sigterm":  # `kill PID` while writing: cleaned up like Ctrl-C
                os.kill(os.getpid(), signal.SIGTERM)
                time.sleep(5)  # the handler interrupts this sleep
            raise RuntimeError("writer broke")
        return real(pred, path, table)

    monkeypatch.setattr(batch, "write_prediction_parquet", second_call_fails)
    capsys.readouterr()
    rc = _predict(trained, wells, out)
    line = _err_line(capsys)
    if error == "disk_full":
        assert rc == ExitCode.BAD_INPUT and "disk is full" in line and "untouched" in line
    elif error == "sigterm":
        assert rc == ExitCode.INTERRUPTED and "interrupted" in line
        assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # handler restored
    else:
        assert rc == ExitCode.INTERNAL_ERROR and "writer broke" in line
    assert len(calls) == 2
    assert _snapshot(out) == before and _hidden(tmp_path) == []


def test_refused_out_folders(trained, tiny_basin, tmp_path, capsys):
    foreign = tmp_path / "documents"
    foreign.mkdir()
    (foreign / "report.docx").write_text("someone's work")
    wells = _wells(tiny_basin, tmp_path / "w", n=1)
    assert _predict(trained, tmp_path / "w", foreign) == ExitCode.BAD_INPUT
    assert "not written by a facies_ml run" in _err_line(capsys)
    assert _snapshot(foreign) == {"report.docx": b"someone's work"}
    # an --out that holds the wells (or the model) would be replaced with them
    assert _predict(trained, wells[0], tmp_path) == ExitCode.BAD_INPUT
    assert "holds the wells input" in _err_line(capsys)
    assert _predict(trained, tmp_path / "w", trained) == ExitCode.BAD_INPUT
    assert "holds the model input" in _err_line(capsys)
    assert _hidden(tmp_path) == []


def test_duplicate_well_names_refused_naming_both_files(trained, tiny_basin, tmp_path, capsys):
    wells = _wells(tiny_basin, tmp_path / "w")
    dup = tmp_path / "w" / "zz_copy.las"
    shutil.copy(wells[0], dup)  # same WELL item in the header, another file name
    name = lasio.read(wells[0]).well["WELL"].value
    out = tmp_path / "pred"
    assert _predict(trained, tmp_path / "w", out) == ExitCode.SOME_WELLS_FAILED
    fails = pd.read_csv(out / "failures.csv")
    assert sorted(Path(f).name for f in fails["file"]) == sorted([wells[0].name, dup.name])
    assert (fails["well"] == name).all()
    assert all(wells[0].name in r and dup.name in r for r in fails["reason"])
    assert not list(out.glob(f"{name}.*"))
    tops = pd.read_csv(out / "tops.csv", comment="#")
    assert name not in set(tops["well"]) and set(tops["well"]) == {wells[1].stem}
    printed = capsys.readouterr().out
    assert dup.name in printed and wells[0].name in printed


def test_rank_cores_out_is_a_run_folder(trained, tiny_basin, tmp_path, capsys):
    out = tmp_path / "rank"
    rc = main(["rank-cores", "--model-dir", str(trained), "--wells", str(tiny_basin),
               "--out", str(out)])
    assert rc == ExitCode.OK
    ranking = pd.read_csv(out / "core_next_ranking.csv")
    cored = set(pd.read_csv(_core(tiny_basin))["well"])
    assert len(ranking) >= 1 and not set(ranking["well"]) & cored
    assert read_run_manifest(out)["model"]["version"] == "v001"


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid
