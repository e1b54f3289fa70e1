"""All or nothing on disk: each run writes into a staging folder beside ``--out`` and moves
it into place as one set when it finishes.

A run's outputs are written to ``.<out name>.staging-<pid>-<random>`` in the folder that
holds ``--out`` (same file system, so the final move is a rename). On success the staging
folder gets ``run_manifest.json`` (tool version, model version, command, every input file
with its SHA-256, every output file with its SHA-256, UTC times) and replaces ``--out``:
the old folder is renamed aside to ``.<out name>.previous-<pid>-<random>``, the staging
folder is renamed to ``--out`` and the old one is removed, so ``--out`` never holds a mix of
two runs. On any exception (bad input, full disk, Ctrl-C) the staging folder is removed and
``--out`` is left exactly as it was.

A run killed outright (SIGKILL, power loss) cannot clean up: the next run into the same
``--out`` removes staging folders whose process is gone (same host) or that are older than
``report.stale_staging_hours``, and puts back an old ``--out`` left aside by a run killed in
the middle of the final move.

``--out`` is refused when it is a non-empty folder without a ``run_manifest.json`` written by
facies_ml (it would be replaced as a whole), when it is a file, or when it holds one of the
run's inputs (wells, core file, settings file, model folder).
"""

from __future__ import annotations

import contextvars
import errno
import hashlib
import json
import os
import re
import shutil
import socket
import sys
import tempfile
import time
from collections.abc import Iterable, Mapping
from concurrent.futures import ThreadPoolExecutor
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any

from facies_ml import CAUTION, __version__
from facies_ml.errors import InputError

MANIFEST_NAME = "run_manifest.json"
MANIFEST_FORMAT = "facies_ml.run/1"
OWNER_NAME = ".run_owner.json"  # inside a staging folder only; removed before the move
PARTIAL_SUFFIX = ".partial"      # temporary files of report.outputs.atomic_write

#: The command line recorded in the manifest; the CLI sets it, library calls record the API.
run_command: contextvars.ContextVar[list[str] | None] = contextvars.ContextVar(
    "run_command", default=None)

_UMASK = os.umask(0)
os.umask(_UMASK)


def sha256_of(path: Path) -> str:
    """SHA-256 (hex) of a file's bytes (FIPS 180-4, as ``hashlib.sha256``)."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def hash_files(paths: list[Path]) -> list[str]:
    """SHA-256 of many files, on a few threads (hashlib releases the GIL on large blocks)."""
    if len(paths) < 8:
        return [sha256_of(p) for p in paths]
    with ThreadPoolExecutor(max_workers=min(8, os.cpu_count() or 1)) as pool:
        return list(pool.map(sha256_of, paths))


def _inside(child: Path, parent: Path) -> bool:
    return child == parent or parent in child.parents


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True  # exists but belongs to someone else (or cannot tell): keep it
    return True


def _disk_error(exc: OSError, out: Path) -> InputError:
    """One clear line for an OS error during a run (full disk, quota, permissions)."""
    where = f" ({exc.filename})" if exc.filename else ""
    if exc.errno in (errno.ENOSPC, errno.EDQUOT):
        what = "the disk is full (no space left on device)" if exc.errno == errno.ENOSPC \
            else "the disk quota is exceeded"
    else:
        what = exc.strerror or exc.__class__.__name__
    return InputError(f"the run stopped: {what}{where}; the previous "
                      f"contents of {out} are untouched and no partial files were left")


class RunFolder:
    """Context manager giving a run its staging folder (``path``) and committing it to
    ``out`` as one set on success.

    ``inputs`` maps a role (``wells``, ``core``, ``config``, ...) to a file or folder (None =
    not given); every file (for a folder, every well file in it, not recursing) is hashed
    into the manifest. ``protect`` are further paths ``out`` must not contain (e.g. the model
    folder). ``stale_hours``: the setting ``report.stale_staging_hours`` (hours).

    Use ``note(**info)`` to add facts to the manifest (model version, wells done/failed) and
    ``discard()`` to end a run that produced nothing worth keeping without touching ``out``.
    """

    def __init__(self, out: str | Path, *, inputs: Mapping[str, str | Path | None],
                 stale_hours: float, protect: Iterable[str | Path | None] = (),
                 well_suffixes: tuple[str, ...] = (".las", ".csv", ".parquet", ".pq")) -> None:
        self.requested = Path(out)
        self.out = _real_out(self.requested)
        self.inputs = {k: Path(v) for k, v in inputs.items() if v is not None}
        self.protect = [Path(p) for p in protect if p is not None]
        self.stale_hours = float(stale_hours)
        self.well_suffixes = well_suffixes
        self.info: dict[str, Any] = {}
        self.path = self.out  # the staging folder once entered
        self._discarded = False
        self._started = ""

    # ------------------------------------------------------------------ checks and sweeps
    def check_out(self) -> None:
        """Refuse an ``out`` that is a file, a foreign non-empty folder, or holds an input."""
        out = self.out
        if out.exists() and not out.is_dir():
            raise InputError("--out is a file, not a folder", file=str(self.requested))
        for role, p in list(self.inputs.items()) + [("model", p) for p in self.protect]:
            if _inside(p.resolve(), out):
                raise InputError(f"--out {self.requested} holds the {role} input {p}; a run "
                                 "replaces --out as a whole, so write the outputs elsewhere")
        if out.is_dir() and any(out.iterdir()):
            manifest = out / MANIFEST_NAME
            ours = False
            if manifest.is_file():
                try:
                    ours = json.loads(manifest.read_text()).get("format") == MANIFEST_FORMAT
                except (ValueError, OSError, AttributeError):
                    ours = False
            if not ours:
                raise InputError(f"--out {self.requested} is a folder that holds files not "
                                 f"written by a facies_ml run (no {MANIFEST_NAME}); a run "
                                 "replaces --out as a whole, so give a new or empty folder")

    def _prefix(self, kind: str) -> str:
        return f".{self.out.name}.{kind}-"

    def sweep(self) -> list[Path]:
        """Remove staging folders of this ``out`` left by dead runs; put back an old ``out``
        left aside by a run killed during the final move. Returns what was removed."""
        parent = self.out.parent
        if not parent.is_dir():
            return []
        removed = []
        pattern = re.compile(re.escape(f".{self.out.name}.") + r"(staging|previous)-(\d+)-\w+$")
        now = time.time()
        host = socket.gethostname()
        for entry in sorted(parent.iterdir()):
            m = pattern.match(entry.name)
            if not m or not entry.is_dir() or entry.is_symlink():
                continue
            kind, pid = m.group(1), int(m.group(2))
            owner_host = host
            if kind == "staging":
                try:
                    owner_host = str(json.loads((entry / OWNER_NAME).read_text())["host"])
                except (OSError, ValueError, KeyError, TypeError):
                    owner_host = host
            try:
                age_h = (now - entry.stat().st_mtime) / 3600.0
            except OSError:
                continue
            dead = owner_host == host and pid != os.getpid() and not _pid_alive(pid)
            if not (dead or age_h > self.stale_hours):
                continue
            if kind == "previous" and not self.out.exists():
                os.rename(entry, self.out)  # killed between the two renames: restore
                print(f"warning: restored {self.out} from {entry.name} left by an interrupted "
                      "run", file=sys.stderr)
                continue
            shutil.rmtree(entry, ignore_errors=True)
            removed.append(entry)
        if removed:
            print(f"warning: removed {len(removed)} leftover staging folder(s) of {self.out} "
                  f"from interrupted runs", file=sys.stderr)
        return removed

    # ------------------------------------------------------------------ context manager
    def __enter__(self) -> RunFolder:
        self.check_out()
        self.sweep()
        self.out.parent.mkdir(parents=True, exist_ok=True)
        self._started = _utc_now()
        self.path = Path(tempfile.mkdtemp(prefix=f"{self._prefix('staging')}{os.getpid()}-",
                                          dir=self.out.parent))
        try:
            (self.path / OWNER_NAME).write_text(json.dumps(
                {"host": socket.gethostname(), "pid": os.getpid(), "started_utc": self._started}))
        except BaseException:
            shutil.rmtree(self.path, ignore_errors=True)
            raise
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        try:
            if exc is None and not self._discarded:
                self.commit()
                return
        except OSError as err:
            shutil.rmtree(self.path, ignore_errors=True)
            raise _disk_error(err, self.requested) from err
        except BaseException:
            shutil.rmtree(self.path, ignore_errors=True)
            raise
        shutil.rmtree(self.path, ignore_errors=True)
        if isinstance(exc, OSError):
            raise _disk_error(exc, self.requested) from exc

    # ------------------------------------------------------------------ helpers for a run
    def note(self, **info: Any) -> None:
        """Facts for the manifest (e.g. ``model={"version": "v002"}``, ``wells_done=4``)."""
        self.info.update(info)

    def discard(self) -> None:
        """End the run without writing ``out`` (the staging folder is removed on exit)."""
        self._discarded = True

    def final(self, path: str | Path) -> Path:
        """Where a file written in the staging folder will be once the run is committed."""
        p = Path(path)
        try:
            return self.requested / p.relative_to(self.path)
        except ValueError:
            return p

    def input_files(self) -> list[dict[str, Any]]:
        """Every input file with its SHA-256: file name, role and, for a folder, its name."""
        rows: list[dict[str, Any]] = []
        paths: list[Path] = []
        for role, p in self.inputs.items():
            if p.is_dir():
                files = sorted(f for f in p.iterdir()
                               if f.is_file() and f.suffix.lower() in self.well_suffixes)
                rows += [{"role": role, "folder": p.name, "file": f.name} for f in files]
                paths += files
            elif p.is_file():
                rows.append({"role": role, "file": p.name})
                paths.append(p)
        for row, digest in zip(rows, hash_files(paths), strict=True):
            row["sha256"] = digest
        return rows

    def commit(self) -> None:
        """Write the manifest and move the staging folder onto ``out`` as one set."""
        (self.path / OWNER_NAME).unlink(missing_ok=True)
        for stray in self.path.rglob(f".*{PARTIAL_SUFFIX}"):
            stray.unlink(missing_ok=True)  # a worker killed mid-write (its task was redone)
        files = [p for p in sorted(self.path.rglob("*")) if p.is_file()]
        outputs = {p.relative_to(self.path).as_posix(): digest
                   for p, digest in zip(files, hash_files(files), strict=True)}
        manifest = {
            "format": MANIFEST_FORMAT,
            "tool": "facies_ml",
            "tool_version": __version__,
            "command": run_command.get() or ["(facies_ml library call)"],
            "started_utc": self._started,
            "finished_utc": _utc_now(),
            **self.info,
            "inputs": self.input_files(),
            "outputs": outputs,
            "caution": CAUTION,
        }
        from facies_ml.report.outputs import write_json

        write_json(self.path / MANIFEST_NAME, manifest)
        for p in [self.path, *self.path.rglob("*")]:
            if p.is_dir() and not p.is_symlink():
                os.chmod(p, 0o777 & ~_UMASK)  # mkdtemp creates 0700; outputs get the usual mode
        self._swap()

    def _swap(self) -> None:
        out = self.out
        if not out.exists():
            os.rename(self.path, out)
            return
        if out.is_dir() and not any(out.iterdir()):
            os.rmdir(out)
            os.rename(self.path, out)
            return
        aside = Path(tempfile.mkdtemp(prefix=f"{self._prefix('previous')}{os.getpid()}-",
                                      dir=out.parent))
        os.rmdir(aside)  # only its unique name is wanted
        os.rename(out, aside)
        try:
            os.rename(self.path, out)
        except BaseException:
            if not out.exists():
                os.rename(aside, out)
            raise
        shutil.rmtree(aside, ignore_errors=True)


def _real_out(out: Path) -> Path:
    """``out`` with symlinks resolved (a symlinked ``--out`` keeps pointing at the results)."""
    return out.resolve() if out.exists() else out.parent.resolve() / out.name


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


def read_run_manifest(out: str | Path) -> dict[str, Any]:
    """The ``run_manifest.json`` of a committed run folder."""
    return json.loads((Path(out) / MANIFEST_NAME).read_text())
