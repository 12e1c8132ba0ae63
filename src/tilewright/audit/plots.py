"""PNG figures of a cohort audit (matplotlib, Agg backend, imported only when drawing)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["PALETTE", "file_name", "plot_embedding", "plot_associations", "plot_metric_levels", "plot_cluster_grid"]

#: tilewright's own categorical palette (ink-on-paper tones).
PALETTE = (
    "#1f6f78", "#d9822b", "#7b4f9d", "#3d8f4a", "#c2455d", "#2f5aa8",
    "#a68a2a", "#5b5b66", "#e0a3b5", "#79b7c4", "#9c6b3f", "#9fb86b",
)  # fmt: skip
INK = "#22252b"
GRID = "#d8d4cb"
PAPER = "#fbfaf7"
MAX_LEVELS = len(PALETTE) - 1


def file_name(prefix: str, factor: str) -> str:
    """A safe PNG file name for a factor."""
    safe = re.sub(r"[^A-Za-z0-9_.-]+", "-", str(factor)).strip("-") or "factor"
    return f"{prefix}_{safe}.png"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    plt.rcParams.update(
        {
            "figure.facecolor": PAPER,
            "axes.facecolor": PAPER,
            "axes.edgecolor": GRID,
            "axes.labelcolor": INK,
            "text.color": INK,
            "xtick.color": INK,
            "ytick.color": INK,
            "axes.spines.top": False,
            "axes.spines.right": False,
            "font.size": 9,
        }
    )
    return plt


def _levels(values: pd.Series) -> tuple[pd.Series, list]:
    """Level of every slide, folding rare levels into 'other' past ``MAX_LEVELS``."""
    values = values.astype(object).where(values.notna(), "(missing)").astype(str)
    counts = values.value_counts()
    if len(counts) > MAX_LEVELS:
        keep = set(counts.index[: MAX_LEVELS - 1])
        values = values.where(values.isin(keep), "other")
    order = sorted(values.unique(), key=lambda v: (v in ("other", "(missing)"), _natural(v)))
    return values, order


def _natural(text: str):
    return [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", text)]


def plot_embedding(coords: pd.DataFrame, values: pd.Series, title: str, path: Path) -> None:
    """t-SNE and PCA scatter of the slides coloured by the levels of ``values``."""
    plt = _pyplot()
    levels, order = _levels(values.reindex(coords.index))
    fig, axes = plt.subplots(1, 2, figsize=(9.0, 4.0), dpi=100)
    # without t-SNE coordinates (not asked, or too many slides) the first panel would repeat PCA
    same = np.allclose(coords["tsne1"], coords["pc1"]) and np.allclose(coords["tsne2"], coords.get("pc2", 0.0))
    first = ("tsne1", "tsne2", "PCA (no t-SNE)" if same else "t-SNE")
    for ax, (x, y, name) in zip(axes, (first, ("pc1", "pc2", "PCA"))):
        for i, level in enumerate(order):
            sel = (levels == level).to_numpy()
            ax.scatter(
                coords[x].to_numpy()[sel], coords[y].to_numpy()[sel], s=34, color=PALETTE[i % len(PALETTE)],
                edgecolor=INK, linewidth=0.4, label=level, alpha=0.9,
            )  # fmt: skip
        ax.set_title(name, loc="left", fontsize=10)
        ax.set_xlabel(f"{name} 1")
        ax.set_ylabel(f"{name} 2")
        ax.grid(color=GRID, linewidth=0.5)
    axes[1].legend(title=title, frameon=False, loc="center left", bbox_to_anchor=(1.0, 0.5), fontsize=8)
    fig.suptitle(f"Slides by colour metrics, coloured by {title}", x=0.02, ha="left", fontsize=11)
    fig.tight_layout()
    fig.savefig(path, facecolor=PAPER)
    plt.close(fig)


def plot_associations(associations: pd.DataFrame, path: Path, label: str | None) -> None:
    """Horizontal bars of Cramér's V per factor with the chi-square p-value."""
    plt = _pyplot()
    table = associations.dropna(subset=["cramers_v"]).iloc[::-1]
    fig, ax = plt.subplots(figsize=(7.0, 0.5 * max(len(table), 2) + 1.2), dpi=100)
    colours = [PALETTE[1] if f == label else (PALETTE[4] if v >= 0.5 else PALETTE[0]) for f, v in
               zip(table["factor"], table["cramers_v"])]  # fmt: skip
    ax.barh(table["factor"].astype(str), table["cramers_v"], color=colours, height=0.6)
    for y, (v, p) in enumerate(zip(table["cramers_v"], table["p_value"])):
        inside = v > 0.7
        ax.text(v - 0.02 if inside else v + 0.02, y, f"V = {v:.2f}, p = {p:.2g}", va="center", fontsize=8,
                ha="right" if inside else "left", color=PAPER if inside else INK)  # fmt: skip
    for x, style in ((0.3, ":"), (0.5, "--")):
        ax.axvline(x, color=INK, linewidth=0.7, linestyle=style)
    ax.set_xlim(0, 1.05)
    ax.set_xlabel("Cramér's V of colour clusters × factor (0 = independent, 1 = determined)")
    ax.set_title("How strongly colour clusters follow each factor", loc="left", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, facecolor=PAPER)
    plt.close(fig)


def plot_metric_levels(metrics: pd.DataFrame, values: pd.Series, ranked: list, factor: str, path: Path) -> None:
    """Per-level distributions (points + median bar) of the metrics that differ most across a factor."""
    plt = _pyplot()
    levels, order = _levels(values.reindex(metrics.index))
    ranked = list(ranked)[:8]
    ncols = 4
    nrows = max(1, int(np.ceil(len(ranked) / ncols)))
    fig, axes = plt.subplots(nrows, ncols, figsize=(11.0, 2.6 * nrows), dpi=100, squeeze=False)
    rng = np.random.default_rng(0)
    for ax, metric in zip(axes.flat, ranked):
        for i, level in enumerate(order):
            data = metrics.loc[(levels == level).to_numpy(), metric].dropna().to_numpy()
            if data.size == 0:
                continue
            jitter = rng.uniform(-0.18, 0.18, data.size)
            colour = PALETTE[i % len(PALETTE)]
            ax.scatter(np.full(data.size, i) + jitter, data, s=14, color=colour, alpha=0.85, linewidth=0)
            ax.hlines(np.median(data), i - 0.3, i + 0.3, color=INK, linewidth=1.6)
        ax.set_xticks(range(len(order)))
        ax.set_xticklabels(order, rotation=30 if len(order) > 3 else 0, ha="right" if len(order) > 3 else "center")
        ax.set_title(metric, loc="left", fontsize=9)
        ax.grid(axis="y", color=GRID, linewidth=0.5)
    for ax in list(axes.flat)[len(ranked) :]:
        ax.set_visible(False)
    fig.suptitle(f"Metrics that differ most across {factor} (Kruskal–Wallis order)", x=0.01, ha="left", fontsize=11)
    fig.tight_layout()
    fig.savefig(path, facecolor=PAPER)
    plt.close(fig)


def plot_cluster_grid(clusters: pd.Series, previews: dict, path: Path, per_cluster: int = 10) -> None:
    """One row per colour cluster showing up to ``per_cluster`` slide previews."""
    plt = _pyplot()
    ids = sorted(clusters.unique())
    fig, axes = plt.subplots(
        len(ids), per_cluster, figsize=(1.15 * per_cluster, 1.35 * len(ids) + 0.4), dpi=100, squeeze=False
    )
    for row, cluster in zip(axes, ids):
        members = [s for s in clusters.index[clusters == cluster] if s in previews][:per_cluster]
        for j, ax in enumerate(row):
            ax.set_xticks([])
            ax.set_yticks([])
            for spine in ax.spines.values():
                spine.set_visible(False)
            if j < len(members):
                ax.imshow(previews[members[j]], interpolation="bilinear")
                ax.set_xlabel(str(members[j])[:14], fontsize=6)
        total = int((clusters == cluster).sum())
        row[0].set_ylabel(f"cluster {cluster}\n{total} slides", fontsize=8, rotation=0, ha="right", va="center")
    fig.suptitle("Slides in each colour cluster", x=0.01, ha="left", fontsize=11)
    fig.tight_layout()
    fig.savefig(path, facecolor=PAPER)
    plt.close(fig)
