"""All or nothing on disk (facies_ml.report.run_folder): a run is staged beside --out and
replaces it as one set; a failed, full-disk or interrupted run leaves the previous results
byte-identical and no stray files; leftovers of killed runs are removed by the next run.

Hashes are checked against Python's own ``hashlib.sha256`` (the FIPS 180-4 reference the
standard library implements)."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from facies_ml.errors import InputError
from facies_ml.report.outputs import atomic_write, write_json
from facies_ml.report.run_folder import MANIFEST_NAME, RunFolder, read_run_manifest


def _snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` (relative POSIX name -> bytes)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _run(out: Path, files: dict[str, str], inputs: dict[str, Path] | None = None,
         **kw: object) -> RunFolder:
    with RunFolder(out, inputs=inputs or {}, stale_hours=24.0, **kw) as run:  # type: ignore[arg-type]
        for name, text in files.items():
            write_json(run.path / name, {"text": text})
    return run


def _dead_pid() -> int:
    """The pid of a process that has already exited (and been reaped)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_commit_writes_set_and_manifest_with_hashes(tmp_path):
    wells = tmp_path / "wells"
    wells.mkdir()
    (wells / "A-1.las").write_text("~Version\n")
    (wells / "B-2.csv").write_text("well,depth\n")
    (wells / "notes.txt").write_text("not a well file")
    core = tmp_path / "core.csv"
    core.write_text("well,top,base,lithofacies\n")
    out = tmp_path / "out"
    _run(out, {"a.json": "1", "sub/b.json": "2"}, inputs={"wells": wells, "core": core})
    assert sorted(_snapshot(out)) == ["a.json", MANIFEST_NAME, "sub/b.json"]
    manifest = read_run_manifest(out)
    assert manifest["tool"] == "facies_ml" and manifest["tool_version"]
    assert manifest["finished_utc"].endswith("+00:00")  # UTC
    for name, digest in manifest["outputs"].items():
        assert digest == hashlib.sha256((out / name).read_bytes()).hexdigest()
    assert MANIFEST_NAME not in manifest["outputs"]
    got = {(r["role"], r["file"]): r["sha256"] for r in manifest["inputs"]}
    want = {("wells", "A-1.las"): wells / "A-1.las", ("wells", "B-2.csv"): wells / "B-2.csv",
            ("core", "core.csv"): core}
    assert got == {k: hashlib.sha256(p.read_bytes()).hexdigest() for k, p in want.items()}
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_rerun_replaces_whole_set(tmp_path):
    out = tmp_path / "out"
    _run(out, {"a.json": "old", "b.json": "old"})
    _run(out, {"a.json": "new"})
    assert sorted(_snapshot(out)) == ["a.json", MANIFEST_NAME]  # b.json of the old run gone
    assert json.loads((out / "a.json").read_text()) == {"text": "new"}
    assert [p.name for p in tmp_path.iterdir()] == ["out"]


@pytest.mark.parametrize("failure", [RuntimeError("boom"), KeyboardInterrupt(),
                                     OSError(errno.ENOSPC, "No space left on device")])
def test_failed_run_leaves_previous_results_byte_identical(tmp_path, failure):
    out = tmp_path / "out"
    _run(out, {"a.json": "old", "b.json": "old"})
    before = _snapshot(out)
    expected = InputError if isinstance(failure, OSError) else type(failure)
    with pytest.raises(expected) as info:
        with RunFolder(out, inputs={}, stale_hours=24.0) as run:
            write_json(run.path / "a.json", {"text": "new"})
            raise failure
    if isinstance(failure, OSError):
        assert "disk is full" in str(info.value) and "untouched" in str(info.value)
    assert _snapshot(out) == before
    assert [p.name for p in tmp_path.iterdir()] == ["out"]  # no staging folder left


def test_full_disk_inside_a_writer_leaves_no_partial_file(tmp_path):
    out = tmp_path / "out"

    def full(tmp: Path) -> None:
        tmp.write_bytes(b"half a file")
        raise OSError(errno.ENOSPC, "No space left on device", str(tmp))

    with pytest.raises(InputError, match="disk is full"):
        with RunFolder(out, inputs={}, stale_hours=24.0) as run:
            staging = run.path
            with pytest.raises(OSError):
                atomic_write(run.path / "x.csv", full)
            assert list(staging.iterdir()) == [staging / ".run_owner.json"]  # temp file removed
            atomic_write(run.path / "y.csv", full)
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_discard_leaves_out_untouched(tmp_path):
    out = tmp_path / "out"
    _run(out, {"a.json": "old"})
    before = _snapshot(out)
    with RunFolder(out, inputs={}, stale_hours=24.0) as run:
        write_json(run.path / "a.json", {"text": "new"})
        run.discard()
    assert _snapshot(out) == before and [p.name for p in tmp_path.iterdir()] == ["out"]


def test_stale_staging_folders_removed_live_ones_kept(tmp_path):
    out = tmp_path / "out"
    dead = tmp_path / f".out.staging-{_dead_pid()}-abc123"
    dead.mkdir()
    (dead / "half.las").write_text("partial")
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        live = tmp_path / f".out.staging-{sleeper.pid}-def456"
        live.mkdir()
        old = tmp_path / f".out.staging-{sleeper.pid}-old789"
        old.mkdir()
        past = time.time() - 25 * 3600  # older than stale_staging_hours = 24
        os.utime(old, (past, past))
        other = tmp_path / f".other.staging-{_dead_pid()}-abc"  # another --out's: not ours
        other.mkdir()
        _run(out, {"a.json": "1"})
        assert not dead.exists() and not old.exists()
        assert live.is_dir() and other.is_dir()
    finally:
        sleeper.kill()
        sleeper.wait()


def test_old_out_left_aside_by_a_killed_swap_is_restored(tmp_path):
    out = tmp_path / "out"
    _run(out, {"a.json": "old"})
    before = _snapshot(out)
    aside = tmp_path / f".out.previous-{_dead_pid()}-xyz"
    os.rename(out, aside)  # as if killed between the two renames of the final move
    with pytest.raises(RuntimeError):
        with RunFolder(out, inputs={}, stale_hours=24.0):
            assert _snapshot(out) == before  # restored before the run starts
            raise RuntimeError("stop")
    assert _snapshot(out) == before and not aside.exists()


def test_refuses_foreign_folder_file_and_inputs_inside(tmp_path):
    foreign = tmp_path / "home_stuff"
    foreign.mkdir()
    (foreign / "thesis.docx").write_text("precious")
    with pytest.raises(InputError, match="not written by a facies_ml run"):
        _run(foreign, {"a.json": "1"})
    assert _snapshot(foreign) == {"thesis.docx": b"precious"}
    fake = tmp_path / "fake"
    fake.mkdir()
    (fake / MANIFEST_NAME).write_text('{"format": "something else"}')
    with pytest.raises(InputError, match="not written by a facies_ml run"):
        _run(fake, {"a.json": "1"})
    afile = tmp_path / "afile"
    afile.write_text("x")
    with pytest.raises(InputError, match="is a file"):
        _run(afile, {"a.json": "1"})
    project = tmp_path / "project"
    (project / "wells").mkdir(parents=True)
    with pytest.raises(InputError, match="holds the wells input"):
        _run(project, {"a.json": "1"}, inputs={"wells": project / "wells"})
    with pytest.raises(InputError, match="holds the model input"):
        _run(project, {"a.json": "1"}, protect=[project])
    empty = tmp_path / "empty"
    empty.mkdir()
    _run(empty, {"a.json": "1"})  # an empty folder is fine
    assert (empty / MANIFEST_NAME).is_file()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_stray_partial_file_never_committed(tmp_path):
    out = tmp_path / "out"
    with RunFolder(out, inputs={}, stale_hours=24.0) as run:
        write_json(run.path / "a.json", {"text": "1"})
        (run.path / ".b.csv.k2j3.partial").write_text("worker killed mid-write")
    assert sorted(_snapshot(out)) == ["a.json", MANIFEST_NAME]


def test_symlinked_out_keeps_pointing_at_the_results(tmp_path):
    real = tmp_path / "real"
    _run(real, {"a.json": "old"})
    link = tmp_path / "link"
    link.symlink_to(real)
    _run(link, {"a.json": "new"})
    assert link.is_symlink() and json.loads((link / "a.json").read_text()) == {"text": "new"}
