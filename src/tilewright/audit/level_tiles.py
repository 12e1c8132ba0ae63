"""A picture of what normalization did: each level's tiles raw and normalized, side by side.

For every level of a factor (each site, for instance), a few of its slides' sampled tiles are
shown as read raw from the source slides (left) and as stored (right), on the same tile
positions (the before/after audit's previews: a 2 x 2 mosaic of each slide's first sampled
tiles). A row a level, labelled with its colour gap to the other levels before and after.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["level_tiles_picture", "SLIDES_A_LEVEL"]

#: Slides shown a level (the first ones by slide id).
SLIDES_A_LEVEL = 3


def _strip(previews: list, side: int) -> np.ndarray:
    """Previews resized to ``side`` px and set in a row with a 4-px paper gap."""
    import cv2

    gap = np.full((side, 4, 3), 251, np.uint8)
    parts = []
    for p in previews:
        parts += [cv2.resize(np.asarray(p, np.uint8), (side, side), interpolation=cv2.INTER_AREA), gap]
    return np.concatenate(parts[:-1], axis=1) if parts else np.full((side, side, 3), 251, np.uint8)


def level_tiles_picture(before, after, factor: str, path, *, gaps=None, side: int = 128) -> Path | None:
    """Draw each level's raw and normalized tiles side by side into ``path`` (PNG).

    Parameters
    ----------
    before, after : tilewright.audit.cohort.CohortAudit
        The two sides of :func:`tilewright.audit.before_after.audit_before_after`.
    factor : str
        The factor whose levels make the rows (for example ``site``).
    path : path
        PNG to write.
    gaps : DataFrame, optional
        :func:`tilewright.audit.compare.compare_gaps` output, for the row labels.
    side : int
        Pixel side of each slide's picture.

    Returns
    -------
    Path or None
        The picture, or None when the factor is absent or has fewer than two levels.
    """
    from tilewright.audit.plots import _pyplot

    if factor not in before.factors.columns:
        return None
    values = before.factors[factor].dropna().astype(str)
    levels = sorted(values.unique())
    if len(levels) < 2:
        return None
    plt = _pyplot()
    fig, axes = plt.subplots(len(levels), 2, figsize=(2 * SLIDES_A_LEVEL * side / 100 + 1.0,
                                                      len(levels) * (side / 100 + 0.45) + 0.3), squeeze=False)
    for row, level in enumerate(levels):
        slides = sorted(s for s in values.index[values == level] if s in before.previews and s in after.previews)
        slides = slides[:SLIDES_A_LEVEL]
        for col, (audit, word) in enumerate(((before, "raw"), (after, "normalized"))):
            ax = axes[row, col]
            ax.imshow(_strip([audit.previews[s] for s in slides], side))
            ax.set_xticks([])
            ax.set_yticks([])
            for spine in ax.spines.values():
                spine.set_visible(False)
            ax.set_title(f"{level}: {word}" + _gap_note(gaps, factor, level, "gap_before" if col == 0 else "gap_after"),
                         fontsize=9, loc="left")
    fig.tight_layout()
    path = Path(path)
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path


def _gap_note(gaps, factor: str, level: str, column: str) -> str:
    """``, gap 5.6`` (its largest CIEDE2000 gap to another level) from a gaps table, or ""."""
    if gaps is None or len(gaps) == 0:
        return ""
    rows = gaps[(gaps["factor"] == factor) & ((gaps["level_a"].astype(str) == level) | (gaps["level_b"].astype(str) == level))]
    if rows.empty:
        return ""
    return f", gap {rows[column].max():.1f}"
