"""Entry points: read one LAS well, a multi-well table, or a folder of well files."""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

from facies_ml.config import Config
from facies_ml.errors import InputError
from facies_ml.wells.build import build_well
from facies_ml.wells.las import read_las_raw
from facies_ml.wells.model import Well
from facies_ml.wells.table import TABLE_SUFFIXES, table_kind, table_raw_wells

WELL_SUFFIXES = (".las",) + TABLE_SUFFIXES
log = logging.getLogger("facies_ml.wells")


def read_well(path: str | Path, config: Config) -> Well:
    """Read and condition one LAS file onto the working depth grid (depth increasing downward).

    Raises :class:`InputError` naming the file/well/curve/depth on bad input.
    """
    return build_well(read_las_raw(path, config), config)


def _table_wells(path: str | Path, config: Config, well_column: str | None,
                 depth_column: str | None, depth_unit: str | None,
                 failures: list[dict[str, Any]] | None) -> list[Well]:
    wells = []
    for raw in table_raw_wells(path, config, well_column, depth_column, depth_unit):
        try:
            wells.append(build_well(raw, config))
        except InputError as err:
            if failures is None:
                raise
            failures.append({"file": str(path), "well": raw.name, "reason": str(err)})
    return wells


def read_table(path: str | Path, config: Config, well_column: str | None = None,
               depth_column: str | None = None, depth_unit: str | None = None) -> list[Well]:
    """Read a CSV/Parquet table of one or many wells (defaults from ``intake.table``).

    Each well goes through the same conditioning as a LAS well. The first bad well raises.
    """
    return _table_wells(path, config, well_column, depth_column, depth_unit, None)


def read_wells(path: str | Path, config: Config,
               on_error: str = "raise") -> tuple[list[Well], list[dict]]:
    """Read a folder (``*.las``, ``*.csv``, ``*.parquet``, sorted by file name) or one file.

    Returns (wells, problems). With ``on_error="collect"`` a bad well is skipped and listed in
    ``problems`` as ``{"file", "well", "reason"}``; with ``"raise"`` the first error propagates.
    Tables that are not well logs (no depth column, or no curve known to the alias table,
    e.g. ``core_intervals.csv``) are never read as wells and are not failures: each is noted
    on the ``facies_ml.wells`` logger; if no file at all is a well file, that is an error
    naming the skipped files. A well name seen twice is an error naming both files
    (with ``"collect"``: a failure of the second file's well, with ``"duplicate_of"`` naming
    the first file; the other wells of that file are still read).
    """
    if on_error not in ("raise", "collect"):
        raise InputError(f"on_error must be 'raise' or 'collect', not {on_error!r}")
    path = Path(path)
    if path.is_dir():
        files = sorted((p for p in path.iterdir()
                        if p.is_file() and p.suffix.lower() in WELL_SUFFIXES),
                       key=lambda p: p.name)
        if not files:
            raise InputError("no *.las, *.csv or *.parquet files in the folder", file=str(path))
    elif path.is_file():
        files = [path]
    else:
        raise InputError("well file or folder not found", file=str(path))
    failures: list[dict[str, Any]] | None = [] if on_error == "collect" else None
    wells: list[Well] = []
    seen: dict[str, str] = {}
    skipped: list[str] = []
    for f in files:
        try:
            if f.suffix.lower() == ".las":
                got = [read_well(f, config)]
            else:
                ok, why = table_kind(f, config)
                if not ok:
                    log.info("skipped %s: not a well table (%s)", f, why)
                    skipped.append(f"{f.name} ({why})")
                    continue
                got = _table_wells(f, config, None, None, None, failures)
        except InputError as err:
            if failures is None:
                raise
            failures.append({"file": str(f), "well": err.well, "reason": str(err)})
            continue
        for w in got:   # each well on its own: a repeated name never hides the file's others
            if w.name in seen:
                err = InputError(f"well name used by both {Path(seen[w.name]).name} and "
                                 f"{f.name}; rename one (~Well WELL or the well column)",
                                 file=str(f), well=w.name)
                if failures is None:
                    raise err
                failures.append({"file": str(f), "well": w.name, "reason": str(err),
                                 "duplicate_of": seen[w.name]})
                continue
            seen[w.name] = str(f)
            wells.append(w)
    if not wells and not failures and skipped:
        raise InputError("no well file: " + "; ".join(skipped[:3])
                         + (f" and {len(skipped) - 3} more" if len(skipped) > 3 else ""),
                         file=str(path))
    return wells, failures or []


def intake_summary(well: Well) -> str:
    """One-line human summary of a well's intake report."""
    i = well.intake
    roles = ", ".join(f"{r}<-{v.get('mnemonic')}" for r, v in i.get("roles", {}).items())
    parts = [
        f"{well.name}: {len(well.curves)} samples {i.get('top', float('nan')):g}-"
        f"{i.get('base', float('nan')):g} {well.depth_unit} every {well.step:g}"
        f" (file in {well.original_depth_unit})",
        f"roles {roles}",
    ]
    dropped = i.get("dropped") or {}
    if dropped:
        parts.append("dropped " + ", ".join(f"{k} {v}" for k, v in dropped.items()))
    for key, label in (("despiked", "spikes"), ("out_of_range", "out of range")):
        total = sum((i.get(key) or {}).values())
        if total:
            parts.append(f"{label} {total}")
    if i.get("bad_hole_samples"):
        parts.append(f"bad hole {i['bad_hole_samples']}")
    if "gr_normalization" in i:
        g = i["gr_normalization"]
        parts.append(f"GR normalized x{g['scale']:.3g} {g['shift']:+.3g}")
    if "depth_shift" in i:
        ds = i["depth_shift"]
        parts.append(f"core shift {ds['shift']:+g}{' applied' if ds['applied'] else ' not applied'}")
    if i.get("notes"):
        parts.append(f"{len(i['notes'])} note(s)")
    if i.get("warnings"):
        parts.append(f"{len(i['warnings'])} warning(s)")
    return "; ".join(parts)
