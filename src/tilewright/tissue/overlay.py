"""Quality-control picture of a slide: tissue outline, excluded ink and the planned tiles."""

from __future__ import annotations

import os

import numpy as np

__all__ = ["render_overlay", "OVERLAY_COLOURS"]

#: Our colour design: amber outline, ink struck through in white stripes with a black rim,
#: red debris, teal tile boxes.
OVERLAY_COLOURS = {"tissue": "#ffb000", "ink": "#ffffff", "ink_rim": "#111111", "dark": "#d62828",
                   "tile": "#2ec4b6"}


def _resize_nearest(a: np.ndarray, shape) -> np.ndarray:
    if a.shape == tuple(shape):
        return a
    iy = np.minimum((np.arange(shape[0]) + 0.5) * a.shape[0] / shape[0], a.shape[0] - 1).astype(int)
    ix = np.minimum((np.arange(shape[1]) + 0.5) * a.shape[1] / shape[1], a.shape[1] - 1).astype(int)
    return a[iy[:, None], ix[None, :]]


def _rgb(hex_colour: str) -> tuple[float, float, float]:
    return tuple(int(hex_colour[i:i + 2], 16) / 255.0 for i in (1, 3, 5))


#: Longest side of the QC picture in pixels (larger thumbnails are area-averaged down).
MAX_SIDE = 1200

def render_overlay(slide, mask, plan, path, *, mpp: float | None = None, title: str | None = None) -> str:
    """Write a PNG showing what was cut from a slide.

    Drawn over a thumbnail: the tissue outline (amber), excluded marker ink (white stripes, black rim),
    excluded dark debris (red), and a box for every planned tile (teal), with a legend and counts.

    Parameters
    ----------
    slide : slide object or ndarray (H, W, 3) uint8
        Something with ``.thumbnail(mpp=...)``, or an RGB thumbnail at ``mpp``.
    mask : TissueMask
    plan : TilePlan or None
    path : str or os.PathLike
        Output PNG. Written to a temporary name first, then renamed, so a failure leaves no
        half-written picture.
    mpp : float, optional
        µm/px of the picture; the mask's by default.
    title : str, optional
        Heading; the slide's file name by default.

    Returns
    -------
    str
        The path written.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import PolyCollection
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch
    from matplotlib.lines import Line2D

    mpp = float(mask.mpp if mpp is None else mpp)
    if isinstance(slide, np.ndarray):
        rgb, name = slide[..., :3], None
    else:
        rgb, name = np.asarray(slide.thumbnail(mpp=mpp))[..., :3], getattr(slide, "path", None)
    h, w = rgb.shape[:2]
    shrink = int(np.ceil(max(h, w) / MAX_SIDE))
    if shrink > 1:  # a bounded picture (and bounded memory) whatever the slide size
        import cv2

        rgb = cv2.resize(np.ascontiguousarray(rgb), (max(1, w // shrink), max(1, h // shrink)),
                         interpolation=cv2.INTER_AREA)
        h, w = rgb.shape[:2]
        mpp *= shrink
    tissue = _resize_nearest(mask.array, (h, w))
    ink = _resize_nearest(mask.ink, (h, w))
    dark = _resize_nearest(mask.dark, (h, w))

    dpi = 100
    fig = Figure(figsize=(max(w, 640) / dpi, (max(w, 640) * h / w + 90) / dpi), dpi=dpi)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 70 / (max(w, 640) * h / w + 90), 1, (max(w, 640) * h / w) / (max(w, 640) * h / w + 90)))
    ax.imshow(rgb, interpolation="nearest", extent=(0, w, h, 0))
    cy, cx = np.arange(h) + 0.5, np.arange(w) + 0.5
    layer = np.zeros((h, w, 4), dtype=np.uint8)
    stripes = ((np.arange(h)[:, None] + np.arange(w)[None, :]) // 3) % 2 == 0
    layer[ink & stripes] = np.round(np.array((*_rgb(OVERLAY_COLOURS["ink"]), 0.8)) * 255).astype(np.uint8)
    layer[dark] = np.round(np.array((*_rgb(OVERLAY_COLOURS["dark"]), 0.45)) * 255).astype(np.uint8)
    if layer[..., 3].any():
        ax.imshow(layer, interpolation="nearest", extent=(0, w, h, 0))
    if ink.any():
        ax.contour(cx, cy, ink.astype(np.float32), levels=[0.5], colors=OVERLAY_COLOURS["ink_rim"], linewidths=1.0)
    if tissue.any():
        ax.contour(cx, cy, tissue.astype(np.float32), levels=[0.5], colors=OVERLAY_COLOURS["tissue"],
                   linewidths=1.6)
    n_tiles = 0
    if plan is not None and len(plan):
        n_tiles = len(plan)
        f = plan.mpp / mpp
        y0 = plan.yx[:, 0] * f
        x0 = plan.yx[:, 1] * f
        s = plan.tile * f
        boxes = np.stack([np.c_[x0, y0], np.c_[x0 + s, y0], np.c_[x0 + s, y0 + s], np.c_[x0, y0 + s]], axis=1)
        ax.add_collection(PolyCollection(boxes, facecolors=OVERLAY_COLOURS["tile"] + "22",
                                         edgecolors=OVERLAY_COLOURS["tile"], linewidths=0.5))
    ax.set_xlim(0, w)
    ax.set_ylim(h, 0)
    ax.set_axis_off()

    label = title or (os.path.basename(os.fspath(name)) if name is not None else "slide")
    line = f"{label}\ntissue {mask.tissue_fraction:.1%} of slide  ·  ink {mask.ink.mean():.1%}"
    if plan is not None:
        line += f"  ·  {n_tiles} tiles of {plan.tile} px at {plan.mpp:g} µm/px"
    fig.text(0.01, 0.5 * 70 / (max(w, 640) * h / w + 90) + 0.02, line, fontsize=8, va="bottom")
    handles = [Line2D([0], [0], color=OVERLAY_COLOURS["tissue"], lw=2, label="tissue outline"),
               Patch(facecolor="#555555", edgecolor=OVERLAY_COLOURS["ink"], hatch="////", label="ink (excluded)")]
    if plan is not None:
        handles.append(Patch(facecolor=OVERLAY_COLOURS["tile"] + "22", edgecolor=OVERLAY_COLOURS["tile"],
                             label="planned tile"))
    if dark.any():
        handles.append(Patch(facecolor=OVERLAY_COLOURS["dark"], alpha=0.45, label="dark debris (excluded)"))
    fig.legend(handles=handles, loc="lower left", ncol=len(handles), fontsize=7, frameon=False,
               bbox_to_anchor=(0.0, 0.0))

    path = os.fspath(path)
    tmp = path + ".part"
    try:
        fig.savefig(tmp, dpi=dpi, format="png", facecolor="white")
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)
    return path
