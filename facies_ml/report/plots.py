"""Figures: a well section, a multi-well correlation panel hung on an MFS, evaluation plots.

Depth axes increase downward (as logs are recorded). Colours come from
``configs/plot_style.yaml``. Every figure carries a short caution in its footer.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import NullFormatter  # noqa: E402

from facies_ml.config import read_yaml  # noqa: E402
from facies_ml.features import upsection_slope  # noqa: E402
from facies_ml.pipeline import WellPrediction  # noqa: E402
from facies_ml.sequence.runs import split_runs  # noqa: E402

FOOTER = ("Predictions are probabilistic; review by a qualified geoscientist is required "
          "(local regulations and licensed practice apply).")


class Style:
    """Colours for facies, tracts and surfaces, read from the plot-style YAML."""

    def __init__(self, path: str | Path) -> None:
        raw = read_yaml(path)
        self.facies = dict(raw.get("facies_colours") or {})
        self.tracts = dict(raw.get("tract_colours") or {})
        self.surfaces = dict(raw.get("surface_colours") or {})
        self.fallback = list(raw.get("fallback_colours") or ["#888888"])
        self.dpi = int(raw.get("figure_dpi", 110))

    def colour(self, table: dict[str, str], label: str, i: int) -> str:
        return table.get(label, self.fallback[i % len(self.fallback)])


def _column(ax: Any, depth: np.ndarray, codes: np.ndarray, colours: list[str]) -> None:
    """Fill a categorical column: ``codes`` are indices into ``colours`` (-1 = blank)."""
    if len(depth) == 0:
        return
    step = float(np.median(np.diff(depth))) if len(depth) > 1 else 1.0
    starts, lengths, values = split_runs(np.asarray(codes))
    stops = starts + lengths
    keep = values >= 0
    starts, stops = starts[keep], stops[keep]
    top, base = depth[starts] - step / 2, depth[stops - 1] + step / 2
    # one collection of rectangles (one per run), far faster than a patch per run
    verts = np.stack([np.column_stack([np.zeros_like(top), top]),
                      np.column_stack([np.ones_like(top), top]),
                      np.column_stack([np.ones_like(top), base]),
                      np.column_stack([np.zeros_like(top), base])], axis=1)
    ax.add_collection(PolyCollection(verts, facecolors=[colours[int(c)] for c in codes[starts]],
                                     linewidths=0, transform=ax.get_yaxis_transform()))
    ax.update_datalim([(0.0, float(depth.min() - step / 2)), (0.0, float(depth.max() + step / 2))],
                      updatex=False)
    ax.autoscale_view(scalex=False)
    ax.set_xticks([])


def well_section(pred: WellPrediction, facies_labels: list[str], tract_names: list[str],
                 style: Style, path: str | Path, core_labels: pd.DataFrame | None = None,
                 trend_window: float = 20.0) -> Path:
    """Well section: GR with up-section trend, resistivity, density/neutron, lithofacies
    column, stacked facies probabilities, systems-tract column with SB/MFS ticks and p10-p90
    bars, and core lithofacies beside where ``core_labels`` is given. Missing curves leave
    their track empty with a note."""
    well, table = pred.well, pred.table
    depth = table.index.to_numpy(float)
    curves = well.curves
    n_tracks = 7 if core_labels is not None else 6
    fig, axes = plt.subplots(1, n_tracks, figsize=(2.0 * n_tracks, 11), sharey=True,
                             gridspec_kw={"width_ratios": [2, 1.6, 1.6, 0.6, 1.6, 0.8]
                                          + ([0.6] if core_labels is not None else [])})
    ax = axes[0]
    if "gr_api" in curves:
        gr = curves["gr_api"].to_numpy(float)
        ax.plot(gr, depth, color="#333333", lw=0.6)
        ax.set_xlabel("GR (API)")
        slope = upsection_slope(gr, well.step, max(3, int(round(trend_window / well.step)) | 1))
        twin = ax.twiny()
        twin.plot(slope, depth, color="#c2571b", lw=0.8)
        twin.axvline(0, color="#c2571b", lw=0.4, ls=":")
        twin.set_xlabel(f"GR up-section trend (API/{well.depth_unit}, {trend_window:g} window)",
                        fontsize=7, color="#c2571b")
    else:
        ax.text(0.5, 0.5, "no GR", transform=ax.transAxes, ha="center")
    ax.set_ylabel(f"depth ({well.depth_unit})")
    ax = axes[1]
    if "rt_ohmm" in curves:
        ax.semilogx(np.clip(curves["rt_ohmm"].to_numpy(float), 1e-2, None), depth,
                    color="#1b4f72", lw=0.6)
        ax.xaxis.set_minor_formatter(NullFormatter())  # a narrow span labels minor ticks
        ax.set_xlabel("deep resistivity (ohm.m)")
    else:
        ax.text(0.5, 0.5, "no resistivity", transform=ax.transAxes, ha="center")
    ax = axes[2]
    drawn = False
    if "rhob_g_cc" in curves:
        ax.plot(curves["rhob_g_cc"].to_numpy(float), depth, color="#8b1a1a", lw=0.6)
        ax.set_xlim(1.95, 2.95)
        ax.set_xlabel("RHOB (g/cc)", color="#8b1a1a")
        drawn = True
    if "nphi_v_v" in curves:
        twin = ax.twiny()
        twin.plot(curves["nphi_v_v"].to_numpy(float), depth, color="#1f6f8b", lw=0.6, ls="--")
        twin.set_xlim(0.45, -0.15)
        twin.set_xlabel("NPHI (v/v)", color="#1f6f8b", fontsize=8)
        drawn = True
    if not drawn:
        ax.text(0.5, 0.5, "no density/neutron", transform=ax.transAxes, ha="center")
    fcols = [style.colour(style.facies, lab, i) for i, lab in enumerate(facies_labels)]
    _column(axes[3], depth, table["lithofacies"].to_numpy(int), fcols)
    axes[3].set_xlabel("facies")
    ax = axes[4]
    proba = table[[f"p_{lab}" for lab in facies_labels]].to_numpy(float)
    left = np.zeros(len(depth))
    for k in range(len(facies_labels)):
        ax.fill_betweenx(depth, left, left + proba[:, k], color=fcols[k], lw=0, step="mid")
        left = left + proba[:, k]
    ax.set_xlim(0, 1)
    ax.set_xlabel("facies probability")
    ax = axes[5]
    if "systems_tract" in table:
        tcols = [style.colour(style.tracts, t, i) for i, t in enumerate(tract_names)]
        _column(ax, depth, table["systems_tract"].to_numpy(int), tcols)
        for s in pred.surfaces:
            colour = style.surfaces.get(s.kind, "#000000")
            ax.axhline(s.depth, color=colour, lw=1.4)
            ax.plot([0.5, 0.5], [s.depth_p10, s.depth_p90], color=colour, lw=3, alpha=0.7,
                    transform=ax.get_yaxis_transform())
            label = f"{s.kind} {s.sequence}".strip() + (" (review)" if s.flags else "")
            ax.text(1.02, s.depth, label, transform=ax.get_yaxis_transform(), fontsize=6,
                    color=colour, va="center")
    ax.set_xlabel("systems tract")
    if core_labels is not None:
        lab = core_labels.reindex(table.index)["lithofacies"].fillna(-1).to_numpy(int)
        _column(axes[6], depth, lab, fcols)
        axes[6].set_xlabel("core")
    axes[0].set_ylim(depth.max(), depth.min())
    handles = [Patch(color=fcols[i], label=lab) for i, lab in enumerate(facies_labels)]
    if "systems_tract" in table:
        handles += [Patch(color=style.colour(style.tracts, t, i), label=t)
                    for i, t in enumerate(tract_names)]
    fig.legend(handles=handles, loc="lower center", ncol=min(len(handles), 10), fontsize=7)
    model = pred.model_used.split(" (")[0]
    fig.suptitle(f"{well.name} — predicted lithofacies and systems tracts (model {model})",
                 fontsize=10)
    fig.text(0.5, 0.035, FOOTER, ha="center", fontsize=7, style="italic")
    fig.subplots_adjust(bottom=0.09, top=0.91, wspace=0.08)
    return _save(fig, path, style)


def _panel_datum(preds: list[WellPrediction], datum: str | None) -> str | None:
    """The sequence whose MFS hangs the panel: ``datum`` or, when None, the named MFS that
    most panel wells have (the deepest of equals)."""
    if datum:
        return datum
    counts: dict[str, int] = {}
    depth_rank: dict[str, float] = {}
    for p in preds:
        for s in p.surfaces:
            if s.kind == "MFS" and s.sequence:
                counts[s.sequence] = counts.get(s.sequence, 0) + 1
                depth_rank[s.sequence] = max(depth_rank.get(s.sequence, -np.inf), s.depth)
    if not counts:
        return None
    return max(counts, key=lambda k: (counts[k], depth_rank[k]))


def correlation_panel(preds: list[WellPrediction], tract_names: list[str], style: Style,
                      path: str | Path, datum: str | None = None) -> Path:
    """Wells side by side, hung on the MFS of basin-wide sequence ``datum`` (depth relative to
    it; None = the named MFS most wells share). Tie lines join the same named surface in
    neighbouring wells; a well without the datum MFS is hung on its top and marked."""
    from matplotlib.patches import ConnectionPatch

    n = max(1, len(preds))
    fig, axes = plt.subplots(1, n, figsize=(1.9 * n + 1, 9), sharey=True, squeeze=False)
    tcols = [style.colour(style.tracts, t, i) for i, t in enumerate(tract_names)]
    name = _panel_datum(preds, datum)
    named: list[dict[tuple[str, str], float]] = []
    for ax, pred in zip(axes[0], preds, strict=False):
        table = pred.table
        depth = table.index.to_numpy(float)
        hit = [s.depth for s in pred.surfaces if s.kind == "MFS" and s.sequence == name]
        ref = hit[0] if hit else float(depth.min())
        rel = depth - ref
        if "systems_tract" in table:
            _column(ax, rel, table["systems_tract"].to_numpy(int), tcols)
        if "gr_api" in pred.well.curves:
            gr = pred.well.curves["gr_api"].to_numpy(float)
            ax.plot(np.clip(gr, 0, 200) / 200.0, rel, color="#222222", lw=0.5)
        mine: dict[tuple[str, str], float] = {}
        for s in pred.surfaces:
            y = s.depth - ref
            ax.axhline(y, color=style.surfaces.get(s.kind, "#000"), lw=1.2 if s.sequence else 0.6,
                       ls="-" if not s.flags else "--")
            if s.sequence:
                mine[(s.kind, s.sequence)] = y
                ax.text(0.98, y, f"{s.kind} {s.sequence}", fontsize=6, ha="right", va="bottom",
                        color=style.surfaces.get(s.kind, "#000"))
        named.append(mine)
        ax.set_xlim(0, 1)
        ax.set_xticks([0, 0.5, 1], ["0", "100", "200"], fontsize=6)
        ax.set_xlabel("GR (API)", fontsize=7)
        ax.set_title(pred.well.name + ("" if hit else "\n(no datum MFS: hung on top)"),
                     fontsize=8)
    for k in range(len(preds) - 1):             # tie lines between neighbouring wells
        for key, y in named[k].items():
            if key in named[k + 1]:
                fig.add_artist(ConnectionPatch(
                    xyA=(1, y), coordsA=axes[0][k].transData, xyB=(0, named[k + 1][key]),
                    coordsB=axes[0][k + 1].transData, color=style.surfaces.get(key[0], "#000"),
                    lw=0.8, ls=":"))
    axes[0][0].invert_yaxis()
    unit = preds[0].well.depth_unit if preds else ""
    axes[0][0].set_ylabel(f"depth relative to MFS {name} ({unit})" if name
                          else f"depth below the top of each well ({unit})")
    handles = [Patch(color=tcols[i], label=t) for i, t in enumerate(tract_names)]
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=7)
    fig.suptitle("Correlation panel hung on " + (f"MFS {name}" if name else "the well tops")
                 + "; dotted tie lines join the same named surface; dashed = flagged pick",
                 fontsize=9)
    fig.text(0.5, 0.03, FOOTER, ha="center", fontsize=7, style="italic")
    fig.subplots_adjust(bottom=0.1, top=0.92, wspace=0.25)
    return _save(fig, path, style)


def confusion_plot(cm: list[list[int]], labels: list[str], style: Style, path: str | Path,
                   title: str = "Held-out confusion matrix") -> Path:
    cm_arr = np.asarray(cm, dtype=float)
    norm = cm_arr / np.clip(cm_arr.sum(axis=1, keepdims=True), 1, None)
    fig, ax = plt.subplots(figsize=(5.5, 4.8))
    im = ax.imshow(norm, cmap="cividis", vmin=0, vmax=1)
    for i in range(len(labels)):
        for j in range(len(labels)):
            ax.text(j, i, f"{int(cm_arr[i, j])}", ha="center", va="center", fontsize=7,
                    color="white" if norm[i, j] < 0.5 else "black")
    ax.set_xticks(range(len(labels)), labels, rotation=45)
    ax.set_yticks(range(len(labels)), labels)
    ax.set_xlabel("predicted")
    ax.set_ylabel("core")
    ax.set_title(title, fontsize=9)
    fig.colorbar(im, ax=ax, label="share of core class")
    fig.tight_layout()
    return _save(fig, path, style)


def reliability_plot(table: pd.DataFrame, style: Style, path: str | Path) -> Path:
    """Pooled reliability curve from ``lithofacies.reliability_table`` (per-class bins are
    pooled by sample count)."""
    fig, ax = plt.subplots(figsize=(4.5, 4.5))
    ax.plot([0, 1], [0, 1], color="#999999", ls=":", label="perfectly calibrated")
    if len(table):
        t = table.assign(wp=table["mean_predicted"] * table["n"],
                         wo=table["observed_frequency"] * table["n"])
        g = t.groupby("bin")[["wp", "wo", "n"]].sum()
        ax.plot(g["wp"] / g["n"], g["wo"] / g["n"], "o-", color="#2b72ad", label="held-out")
    ax.set_xlabel("predicted probability")
    ax.set_ylabel("observed frequency")
    ax.set_title("Reliability (all facies pooled, one-vs-rest)", fontsize=9)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return _save(fig, path, style)


def learning_curve_plot(curve: pd.DataFrame, style: Style, path: str | Path) -> Path:
    fig, ax = plt.subplots(figsize=(5, 3.8))
    for col, colour in (("lithofacies_f1_macro", "#2b72ad"), ("systems_tract_accuracy", "#86479f")):
        if col in curve and curve[col].notna().any():
            g = curve.groupby("n_training_wells")[col]
            ax.errorbar(g.mean().index, g.mean().values, yerr=g.std().fillna(0).values, marker="o",
                        color=colour, capsize=3, label=col.replace("_", " "))
    ax.set_xlabel("number of cored training wells")
    ax.set_ylabel("held-out score")
    ax.set_title("Learning curve (mean ± sd over random subsets)", fontsize=9)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return _save(fig, path, style)


def evaluation_figures(metrics: dict[str, Any], labels: list[str], style: Style,
                       out_dir: str | Path, curve: pd.DataFrame | None = None
                       ) -> list[tuple[str, Path]]:
    """Held-out figures from leave-one-well-out ``metrics``: the confusion matrix summed over
    the held-out wells, the pooled reliability curve and (with ``curve``) the learning curve.
    Returns ``(caption, path)`` pairs; files are ``out_dir/<name>.png``."""
    out_dir = Path(out_dir)
    k = len(labels)
    cm = np.zeros((k, k), dtype=int)
    for m in metrics.get("wells", {}).values():
        cm += np.asarray(m["lithofacies"].get("confusion_matrix", np.zeros((k, k))), dtype=int)
    figures = [("confusion matrix", confusion_plot(cm.tolist(), labels, style,
                                                   out_dir / "confusion_matrix.png"))]
    if metrics.get("reliability"):
        figures.append(("reliability", reliability_plot(pd.DataFrame(metrics["reliability"]),
                                                        style, out_dir / "reliability.png")))
    if curve is not None and len(curve):
        figures.append(("learning curve", learning_curve_plot(curve, style,
                                                              out_dir / "learning_curve.png")))
    return figures


def _save(fig: Any, path: str | Path, style: Style) -> Path:
    from facies_ml.report.outputs import atomic_write

    path = Path(path)
    atomic_write(path, lambda tmp: fig.savefig(tmp, dpi=style.dpi, format="png"))
    plt.close(fig)
    return path
