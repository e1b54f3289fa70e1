"""A self-contained HTML report: images embedded as base64, tables inline, caution on top."""

from __future__ import annotations

import base64
import html
from pathlib import Path

import pandas as pd

from facies_ml import CAUTION, __version__
from facies_ml.report.outputs import atomic_write

_CSS = """body{font-family:sans-serif;max-width:1200px;margin:2em auto;color:#222}
.caution{border:2px solid #c2271b;padding:.6em 1em;background:#fff4f2}
table{border-collapse:collapse;font-size:12px;margin:.5em 0}
td,th{border:1px solid #ccc;padding:2px 6px;text-align:right}
th{background:#eee} img{max-width:100%;border:1px solid #ddd;margin:.4em 0}"""


def image_tag(path: str | Path, alt: str) -> str:
    data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def table_html(frame: pd.DataFrame, float_format: str = "{:.3f}") -> str:
    def fmt(v: object) -> str:
        return float_format.format(v) if isinstance(v, float) else str(v)

    return frame.to_html(index=False, border=0, na_rep="-", formatters={
        c: fmt for c in frame.columns}, escape=True)


def write_report(path: str | Path, title: str, sections: list[tuple[str, list[str]]]) -> Path:
    """``sections``: (heading, [html fragments]) in order; fragments from ``image_tag`` /
    ``table_html`` or escaped text."""
    parts = [f"<!doctype html><html><head><meta charset='utf-8'><title>{html.escape(title)}"
             f"</title><style>{_CSS}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>",
             f"<p class='caution'><b>{html.escape(CAUTION)}</b></p>"]
    for heading, fragments in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>")
        parts.extend(fragments)
    parts.append(f"<p><small>facies_ml {__version__}</small></p></body></html>")
    text = "\n".join(parts)
    return atomic_write(path, lambda tmp: tmp.write_text(text))
