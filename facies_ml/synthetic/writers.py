"""Write the demo basin: LAS 2.0 files (via lasio), CSV tables and JSON, byte-stable on rerun."""

from __future__ import annotations

import io
import json
from pathlib import Path
from typing import Any

import lasio
import numpy as np
import pandas as pd

NULL = -999.25


def write_las(path: Path, depth: np.ndarray, depth_unit: str,
              curves: list[tuple[str, str, str, np.ndarray]], well: dict[str, str],
              params: list[tuple[str, str, Any, str]], other: str, decimals: int) -> None:
    """LAS 2.0, WRAP NO, depth index first (increasing), NaN written as NULL -999.25.

    ``curves``: (mnemonic, unit, description, values) in depth order, same length as ``depth``.
    """
    las = lasio.LASFile()
    if "DLM" in las.version:
        del las.version["DLM"]
    las.version["VERS"].value = 2.0
    las.version["WRAP"].value = "NO"
    for key in ("CNTY", "STAT", "CTRY", "API"):
        if key in las.well:
            del las.well[key]
    las.well["NULL"].value = NULL
    for key, value in well.items():
        if key in las.well:
            las.well[key].value = value
        else:
            las.well[key] = lasio.HeaderItem(key, "", value, "")
    las.append_curve("DEPT", np.round(depth, decimals), unit=depth_unit, descr="measured depth")
    for mnem, unit, descr, values in curves:
        las.append_curve(mnem, np.round(np.asarray(values, float), decimals), unit=unit,
                         descr=descr)
    for mnem, unit, value, descr in params:
        las.params[mnem] = lasio.HeaderItem(mnem, unit, value, descr)
    las.other = other
    buf = io.StringIO()
    step = round(float(depth[1] - depth[0]), decimals)
    las.write(buf, version=2.0, wrap=False, fmt=f"%.{decimals}f", STEP=step)
    path.write_text(buf.getvalue(), newline="\n")


def write_csv(path: Path, frame: pd.DataFrame, decimals: int) -> None:
    """CSV with a fixed float format and LF line ends."""
    path.write_text(frame.to_csv(index=False, float_format=f"%.{decimals}f", lineterminator="\n"),
                    newline="\n")


def write_json(path: Path, data: dict[str, Any]) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=False) + "\n", newline="\n")
