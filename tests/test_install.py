"""Install anywhere: a built wheel carries the default settings and the demo wells, and the
installed ``facies-ml`` runs from a folder outside the repository.

The wheel is built offline from a copy of the source tree by way of an sdist (so the sdist is
checked too) with this environment's build backend (the test extra brings setuptools>=77), and
installed with ``--no-deps`` into a temporary virtual environment. That environment's own
site-packages come first; the dependencies (numpy, LightGBM, ...) come from the environment
running the tests: ``--system-site-packages`` covers a base interpreter, and a ``.pth`` line adds
this environment's site-packages when the tests run inside a venv (whose packages
``--system-site-packages`` does not see). A plain path line in a ``.pth`` does not run the
``.pth`` files of that folder, so an editable install of facies_ml there is not even seen.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
import sysconfig
import tarfile
import venv
import zipfile
from importlib.metadata import version
from pathlib import Path

import pytest

pytestmark = pytest.mark.install

REPO = Path(__file__).resolve().parents[1]
SOURCES = ("pyproject.toml", "README.md", "facies_ml", "configs", "synthetic_wells")
DATA_DIRS = ("configs", "synthetic_wells")  # top-level folders shipped as facies_ml/<name>/
BIN = "Scripts" if os.name == "nt" else "bin"


def _env() -> dict[str, str]:
    """This environment without anything that would put the repository on the import path."""
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME", "PYTHONSTARTUP")}
    env["MPLBACKEND"] = "Agg"
    return env


def _run(cmd: list[str | Path], cwd: Path) -> subprocess.CompletedProcess:
    proc = subprocess.run([str(c) for c in cmd], cwd=cwd, env=_env(), capture_output=True, text=True,
                          timeout=600)
    assert proc.returncode == 0, (f"{' '.join(map(str, cmd))} exited {proc.returncode}\n"
                                  f"{proc.stdout[-2000:]}\n{proc.stderr[-3000:]}")
    return proc


def _repo_files(name: str) -> list[Path]:
    """Files of a repository folder, relative to the repository root (no byte-code)."""
    return sorted(p.relative_to(REPO) for p in (REPO / name).rglob("*")
                  if p.is_file() and "__pycache__" not in p.parts and p.suffix != ".pyc")


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> dict[str, Path]:
    """sdist and wheel built offline from a copy of the source tree (no stale build/ folder)."""
    if int(version("setuptools").split(".")[0]) < 77:
        pytest.skip("building the wheel offline needs setuptools>=77 here: pip install -e '.[test]'")
    root = tmp_path_factory.mktemp("build")
    src = root / "src"
    src.mkdir()
    for name in SOURCES:
        if (REPO / name).is_dir():
            shutil.copytree(REPO / name, src / name,
                            ignore=shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info"))
        else:
            shutil.copy2(REPO / name, src / name)
    _run([sys.executable, "-c", "import sys; from setuptools import build_meta as b; "
          "b.build_sdist(sys.argv[1])", root / "sdist"], cwd=src)
    (sdist,) = (root / "sdist").glob("facies_ml-*.tar.gz")
    _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "--no-index", "-q",
          "-w", root / "dist", sdist], cwd=root)
    (wheel,) = (root / "dist").glob("facies_ml-*.whl")
    return {"sdist": sdist, "wheel": wheel}


def test_wheel_and_sdist_carry_all_code_settings_and_demo_wells(built: dict[str, Path]) -> None:
    with zipfile.ZipFile(built["wheel"]) as z:
        names = set(z.namelist())
        for rel in _repo_files("facies_ml"):
            if rel.suffix == ".py":  # a new subpackage must be listed in pyproject.toml
                assert rel.as_posix() in names, f"{rel} is not in the wheel"
        for name in DATA_DIRS:
            for rel in _repo_files(name):
                inside = f"facies_ml/{rel.as_posix()}"
                assert inside in names, f"{rel} is not in the wheel as {inside}"
                assert z.read(inside) == (REPO / rel).read_bytes(), inside
        for must in ("facies_ml/configs/default.yaml", "facies_ml/synthetic_wells/core_intervals.csv",
                     "facies_ml/synthetic_wells/QM-O4.las", "facies_ml/synthetic_wells/truth/surfaces.csv"):
            assert must in names
        entry_points = z.read(next(n for n in names if n.endswith(".dist-info/entry_points.txt")))
        assert b"facies-ml = facies_ml.cli:main" in entry_points
    with tarfile.open(built["sdist"]) as t:
        top = built["sdist"].name.removesuffix(".tar.gz")
        members = {m.name.removeprefix(top + "/") for m in t.getmembers()}
    assert {"configs/default.yaml", "synthetic_wells/basin.json", "synthetic_wells/truth/QM-K1.csv",
            "facies_ml/resources.py"} <= members


def test_installed_wheel_runs_from_a_folder_outside_the_repo(built: dict[str, Path], tiny_basin: Path,
                                                           tmp_path: Path) -> None:
    env_dir = tmp_path / "venv"
    venv.EnvBuilder(system_site_packages=True, with_pip=True, clear=True).create(env_dir)
    py = env_dir / BIN / ("python.exe" if os.name == "nt" else "python")
    site = Path(_run([py, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                     cwd=tmp_path).stdout.strip())
    if sys.prefix != sys.base_prefix:  # tests run in a venv: lend its packages, after the wheel's
        outer = dict.fromkeys(sysconfig.get_paths()[k] for k in ("purelib", "platlib"))
        (site / "_outer_environment.pth").write_text("".join(f"{p}\n" for p in outer))
    _run([py, "-m", "pip", "install", "--no-deps", "--no-index", "-q", built["wheel"]], cwd=tmp_path)

    work = tmp_path / "elsewhere"
    work.mkdir()
    where = json.loads(_run([py, "-c", "import json, facies_ml, facies_ml.resources as r; print(json.dumps("
                             "[facies_ml.__file__, str(r.config_dir()), str(r.demo_wells_dir())]))"],
                            cwd=work).stdout)
    for path in map(Path, where):
        assert path.is_relative_to(site), f"{path} is not inside the temporary venv {site}"
        assert not path.resolve().is_relative_to(REPO)
    assert (Path(where[1]) / "default.yaml").is_file()
    assert (Path(where[2]) / "truth" / "surfaces.csv").is_file()

    cli = env_dir / BIN / "facies-ml"
    assert "synth" in _run([cli, "--help"], cwd=work).stdout
    # synth reads the bundled forward-model settings and facies scheme
    out = _run([cli, "synth", "--out", "basin", "--wells", "2", "--seed", "7"], cwd=work).stdout
    assert str(Path(where[1]) / "synthetic_basin.yaml") in out
    assert len(list((work / "basin").glob("*.las"))) == 2
    assert (work / "basin" / "core_intervals.csv").is_file()
    # train reads the bundled default.yaml under the user's overrides (kept small: a smoke test)
    (work / "small.yaml").write_text("lithofacies:\n  n_estimators: 20\n  early_stopping_rounds: 5\n"
                                     "  n_jobs: 1\nsequence:\n  evidence_weight_grid: [0.05]\n")
    out = _run([cli, "train", "--wells", tiny_basin, "--core", tiny_basin / "core_intervals.csv",
                "--model-dir", "models", "--config", "small.yaml"], cwd=work).stdout
    assert "saved model v001" in out
    assert (work / "models" / "v001").is_dir()


def test_bundled_folders_are_copied_out_when_imported_from_a_zip(built: dict[str, Path],
                                                                tmp_path: Path) -> None:
    """A zip import (the wheel itself on sys.path) gives no real folders: they are copied out."""
    from facies_ml.config import load_config

    code = ("import hashlib, json, sys; sys.path.insert(0, sys.argv[1]); import facies_ml; "
            "from facies_ml.config import CONFIG_DIR, DEFAULT_CONFIG, load_config; "
            "from facies_ml.resources import demo_wells_dir; wells = demo_wells_dir(); "
            "print(json.dumps([facies_ml.__file__, str(CONFIG_DIR), str(wells), "
            "hashlib.sha256(DEFAULT_CONFIG.read_bytes()).hexdigest(), load_config().digest(), "
            "sorted(p.relative_to(wells).as_posix() for p in wells.rglob('*') if p.is_file())]))")
    module, configs, wells, default_sha, digest, well_files = json.loads(
        _run([sys.executable, "-c", code, built["wheel"]], cwd=tmp_path).stdout)
    assert Path(module).is_relative_to(built["wheel"])  # imported from inside the zip
    assert default_sha == hashlib.sha256((REPO / "configs" / "default.yaml").read_bytes()).hexdigest()
    assert digest == load_config().digest()  # same settings and the same files they point to
    assert well_files == [p.relative_to("synthetic_wells").as_posix() for p in _repo_files("synthetic_wells")]
    assert not Path(configs).exists() and not Path(wells).exists()  # removed when that Python exits
