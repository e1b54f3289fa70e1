"""Where the bundled files are: default settings (``configs/``) and the demo wells (``synthetic_wells/``).

The repository keeps both folders at its top level. A built wheel (``pip install .`` or a wheel
file) carries them inside the package as ``facies_ml/configs`` and ``facies_ml/synthetic_wells``
(mapped by ``pyproject.toml``), found here with :mod:`importlib.resources`. A source checkout or
an editable install (``pip install -e .``) has no such folders inside the package, so the
repository's own folders are used. This is the one place that knows either layout.
"""

from __future__ import annotations

import atexit
import functools
import shutil
import tempfile
from importlib import resources
from importlib.resources.abc import Traversable
from pathlib import Path

from facies_ml.errors import InputError

__all__ = ["config_dir", "demo_wells_dir"]

_CHECKOUT = Path(__file__).resolve().parent.parent


def config_dir() -> Path:
    """Folder of the bundled settings (``default.yaml``, facies schemes, rules, aliases...)."""
    return _bundled("configs", marker="default.yaml")


def demo_wells_dir() -> Path:
    """Folder of the bundled demo basin: LAS files, ``core_intervals.csv``, ``truth/``."""
    return _bundled("synthetic_wells", marker="core_intervals.csv")


@functools.cache
def _bundled(name: str, marker: str) -> Path:
    installed = resources.files("facies_ml").joinpath(name)
    if installed.joinpath(marker).is_file():
        if isinstance(installed, Path):  # a wheel installed by pip: real files on disk
            return installed
        return _extract(installed, name)  # e.g. imported from a zip: copy out once per process
    checkout = _CHECKOUT / name  # source checkout or editable install
    if (_CHECKOUT / "pyproject.toml").is_file() and (checkout / marker).is_file():
        return checkout
    raise InputError(f"bundled folder {name}/ not found inside the facies_ml package nor in a "
                     "source checkout; reinstall facies_ml", file=str(installed))


def _extract(tree: Traversable, name: str) -> Path:
    """Copy a non-filesystem resource folder to a temporary folder removed when Python exits."""
    root = Path(tempfile.mkdtemp(prefix="facies_ml_"))
    atexit.register(shutil.rmtree, root, ignore_errors=True)
    _copy_tree(tree, root / name)
    return root / name


def _copy_tree(tree: Traversable, dest: Path) -> None:
    dest.mkdir(parents=True, exist_ok=True)
    for item in tree.iterdir():
        if item.is_dir():
            _copy_tree(item, dest / item.name)
        else:
            (dest / item.name).write_bytes(item.read_bytes())
