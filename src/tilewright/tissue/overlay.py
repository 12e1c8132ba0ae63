"""Quality-control picture of a slide: tissue outline, excluded ink and the planned tiles.

Drawn with OpenCV straight onto a uint8 canvas (no plotting library): a slide's picture costs a
few tens of milliseconds and a few canvas-sized buffers, whatever the slide size.
"""

from __future__ import annotations

import os

import numpy as np

__all__ = ["render_overlay", "overlay_base", "overlay_png", "write_png", "OVERLAY_COLOURS", "MAX_SIDE"]

#: Our colour design: amber outline, ink struck through in white stripes with a black rim,
#: red debris, teal tile boxes.
OVERLAY_COLOURS = {"tissue": "#ffb000", "ink": "#ffffff", "ink_rim": "#111111", "dark": "#d62828",
                   "tile": "#2ec4b6"}

#: Longest side of the QC picture in pixels (larger thumbnails are area-averaged down).
MAX_SIDE = 1200
#: Narrowest picture: the caption needs room.
MIN_WIDTH = 640
#: Height of the caption strip below the slide, pixels.
CAPTION_HEIGHT = 70

_INK_ALPHA, _DARK_ALPHA, _TILE_FILL_ALPHA = 0.8, 0.45, 0.13
_TEXT = (20, 20, 20)
_BAND = 128  # rows blended at a time


def _on_picture(a: np.ndarray, a_mpp: float, mpp_yx, shape) -> np.ndarray:
    """A 2-D mask at ``a_mpp`` µm/px sampled onto a picture of ``shape`` whose pixels are
    ``mpp_yx`` µm (per axis): each picture pixel takes the mask pixel under its centre, by
    physical position from the slide origin (False past the mask's edge)."""
    (my, mx), (h, w) = mpp_yx, shape
    if a.shape == (h, w) and my == mx == a_mpp:
        return a
    iy = np.floor((np.arange(h) + 0.5) * (my / a_mpp)).astype(np.intp)
    ix = np.floor((np.arange(w) + 0.5) * (mx / a_mpp)).astype(np.intp)
    out = np.zeros((h, w), bool)
    ry, rx = iy < a.shape[0], ix < a.shape[1]
    out[np.ix_(ry, rx)] = a[np.ix_(iy[ry], ix[rx])]
    return out


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    """``"#rrggbb"`` as an (R, G, B) tuple of ints (the canvas is RGB)."""
    return tuple(int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))


def _blend(canvas: np.ndarray, where: np.ndarray, colour, alpha: float) -> None:
    """Paint ``colour`` with opacity ``alpha`` over ``canvas`` where ``where`` is True (in place),
    a band of rows at a time (float temporaries stay small whatever the picture size)."""
    paint = alpha * np.asarray(colour, np.float32)
    for r in range(0, canvas.shape[0], _BAND):
        rows, sel = canvas[r:r + _BAND], where[r:r + _BAND]
        if not sel.any():
            continue
        px = rows[sel].astype(np.float32)
        px *= 1.0 - alpha
        px += paint
        rows[sel] = np.round(px).astype(np.uint8)


def _outline(canvas: np.ndarray, mask: np.ndarray, colour, thickness: int) -> None:
    """Draw the boundaries of the True regions of ``mask`` (outer and hole contours)."""
    import cv2

    if not mask.any():
        return
    contours, _ = cv2.findContours(mask.astype(np.uint8), cv2.RETR_LIST, cv2.CHAIN_APPROX_SIMPLE)
    cv2.drawContours(canvas, contours, -1, colour, thickness, lineType=cv2.LINE_8)


def _tile_boxes(plan, mpp_yx, shape) -> np.ndarray:
    """Inclusive pixel boxes ``(x0, y0, x1, y1)`` of the planned tiles on a picture whose pixels
    are ``mpp_yx`` µm (per axis), by the plan's true µm/px."""
    fy, fx = plan.mpp / mpp_yx[0], plan.mpp / mpp_yx[1]
    y0 = np.floor(plan.yx[:, 0] * fy)
    x0 = np.floor(plan.yx[:, 1] * fx)
    y1 = np.minimum(np.ceil((plan.yx[:, 0] + plan.tile) * fy) - 1, shape[0] - 1)
    x1 = np.minimum(np.ceil((plan.yx[:, 1] + plan.tile) * fx) - 1, shape[1] - 1)
    return np.c_[x0, y0, np.maximum(x1, x0), np.maximum(y1, y0)].astype(np.int64)


def _ascii(text: str) -> str:
    """Hershey fonts draw ASCII only: µ becomes u, anything else outside ASCII becomes '?'."""
    return text.replace("µ", "u").encode("ascii", "replace").decode("ascii")


def _put(canvas, text, org, scale, thickness=1, colour=_TEXT, max_width=None):
    """Write ``text`` at ``org`` (baseline-left), shrunk to ``max_width`` if needed; returns its width."""
    import cv2

    font = cv2.FONT_HERSHEY_SIMPLEX
    text = _ascii(text)
    (tw, _), _ = cv2.getTextSize(text, font, scale, thickness)
    if max_width is not None and tw > max_width:
        scale *= max_width / tw
        (tw, _), _ = cv2.getTextSize(text, font, scale, thickness)
    cv2.putText(canvas, text, org, font, scale, colour, thickness, cv2.LINE_AA)
    return tw


def _legend(canvas, y: int, entries, width: int) -> None:
    """A row of swatches with labels, baseline ``y``."""
    import cv2

    x = 8
    for kind, label in entries:
        x0, y0, x1, y1 = x, y - 10, x + 22, y + 2
        if kind == "tissue":
            cv2.line(canvas, (x0, (y0 + y1) // 2), (x1, (y0 + y1) // 2), _rgb(OVERLAY_COLOURS["tissue"]), 2)
        elif kind == "ink":
            sw = canvas[y0:y1 + 1, x0:x1 + 1]
            sw[:] = 85
            for k in range(-(y1 - y0), x1 - x0 + 1, 4):  # white diagonal stripes, clipped to the box
                cv2.line(sw, (k, y1 - y0), (k + (y1 - y0), 0), _rgb(OVERLAY_COLOURS["ink"]), 1)
            cv2.rectangle(canvas, (x0, y0), (x1, y1), _rgb(OVERLAY_COLOURS["ink_rim"]), 1)
        elif kind == "tile":
            sw = canvas[y0:y1 + 1, x0:x1 + 1]
            _blend(sw, np.ones(sw.shape[:2], bool), _rgb(OVERLAY_COLOURS["tile"]), _TILE_FILL_ALPHA)
            cv2.rectangle(canvas, (x0, y0), (x1, y1), _rgb(OVERLAY_COLOURS["tile"]), 1)
        elif kind == "dark":
            sw = canvas[y0:y1 + 1, x0:x1 + 1]
            _blend(sw, np.ones(sw.shape[:2], bool), _rgb(OVERLAY_COLOURS["dark"]), _DARK_ALPHA)
        x = x1 + 6
        x += _put(canvas, label, (x, y), 0.4, max_width=max(20, width - x - 8)) + 18
        if x >= width:
            break


def render_overlay(slide, mask, plan, path, *, mpp: float | None = None, title: str | None = None) -> str:
    """Write a PNG showing what was cut from a slide (the picture of :func:`overlay_png`).

    Drawn over a thumbnail: the tissue outline (amber), excluded marker ink (white stripes, black
    rim), excluded dark debris (red), and a box for every planned tile (teal), with a caption
    (slide name, tissue and ink fractions, tile count, size and µm/px) and a legend in a strip
    below. The picture is at most :data:`MAX_SIDE` pixels on its longer side (larger thumbnails
    are area-averaged down by an integer factor) and at least :data:`MIN_WIDTH` wide.

    Parameters
    ----------
    slide : slide object or ndarray (H, W, 3) uint8
        Something with ``.thumbnail(mpp=...)``, or an RGB thumbnail at ``mpp`` (or at its own
        ``.mpp``, which a slide's thumbnail carries).
    mask : TissueMask
    plan : TilePlan or None
    path : str or os.PathLike
        Output PNG. Written to a temporary name first, then renamed, so a failure leaves no
        half-written picture.
    mpp : float, optional
        µm/px asked of the thumbnail; the mask's by default. The mask, ink and tile boxes are
        placed by the true µm/px of the thumbnail's pixels and of the mask.
    title : str, optional
        Heading; the slide's file name by default.

    Returns
    -------
    str
        The path written.

    Raises
    ------
    OSError
        If the picture cannot be written (nothing is left behind).
    """
    return write_png(path, overlay_png(slide, mask, plan, mpp=mpp, title=title))


def write_png(path, png: bytes) -> str:
    """Write PNG bytes to ``path`` under a temporary name, then rename: a failure leaves nothing.

    Returns the path written; raises OSError if it cannot be written.
    """
    from tilewright.location.url import is_url

    if is_url(path):  # one request writes the object whole: no temporary name needed
        from tilewright.location.objpath import replace_bytes

        replace_bytes(path, png)
        return str(path)
    path = os.fspath(path)
    tmp = path + ".part"
    try:
        with open(tmp, "wb") as fh:
            fh.write(png)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)
    return path


def overlay_base(rgb: np.ndarray, mpp: float) -> tuple[np.ndarray, float]:
    """The thumbnail the QC picture is drawn on, and its µm/px: at most :data:`MAX_SIDE` pixels
    on its longer side (area-averaged down by a whole factor, the last partial block of rows and
    columns left out so the picture's pixels are exactly ``factor`` thumbnail pixels; bounded
    memory whatever the slide size). Drawing from this equals drawing from the full thumbnail."""
    import cv2

    h, w = rgb.shape[:2]
    shrink = int(np.ceil(max(h, w) / MAX_SIDE))
    if shrink <= 1:
        return rgb, mpp
    oh, ow = max(1, h // shrink), max(1, w // shrink)
    small = cv2.resize(np.ascontiguousarray(rgb[: oh * shrink, : ow * shrink]), (ow, oh),
                       interpolation=cv2.INTER_AREA)
    return small, mpp * shrink


def overlay_png(slide, mask, plan, *, mpp: float | None = None, title: str | None = None) -> bytes:
    """The QC picture of :func:`render_overlay` as PNG bytes (nothing written).

    Lets a caller draw the picture while the thumbnail is at hand, free the thumbnail, and write
    the bytes later (``tile_slide`` writes them once the store is complete).
    """
    import cv2

    from tilewright.tissue.mask import thumbnail_rgb

    # the mask's own first step: a slide's thumbnail carries its true µm/px
    rgb, mpp, name = thumbnail_rgb(slide, float(mask.mpp if mpp is None else mpp), "render_overlay")
    rgb, mpp = overlay_base(rgb, mpp)
    h, w = rgb.shape[:2]
    mpp_yx = (mpp, mpp)
    grow = min(MIN_WIDTH / max(w, 1), MAX_SIDE / max(h, w, 1))
    if grow > 1:  # small thumbnails are enlarged to fill the picture width
        rgb = cv2.resize(np.ascontiguousarray(rgb), (int(round(w * grow)), int(round(h * grow))),
                         interpolation=cv2.INTER_LINEAR)
        mpp_yx = (mpp * h / rgb.shape[0], mpp * w / rgb.shape[1])  # rounding: per axis
        h, w = rgb.shape[:2]
    tissue = _on_picture(mask.array, mask.mpp, mpp_yx, (h, w))
    ink = _on_picture(mask.ink, mask.mpp, mpp_yx, (h, w))
    dark = _on_picture(mask.dark, mask.mpp, mpp_yx, (h, w))

    width = max(w, MIN_WIDTH)
    canvas = np.full((h + CAPTION_HEIGHT, width, 3), 255, np.uint8)
    canvas[:h, :w] = rgb
    del rgb
    view = canvas[:h, :w]
    _blend(view, dark, _rgb(OVERLAY_COLOURS["dark"]), _DARK_ALPHA)
    if ink.any():
        stripes = ((np.arange(h)[:, None] + np.arange(w)[None, :]) // 3) % 2 == 0
        _blend(view, ink & stripes, _rgb(OVERLAY_COLOURS["ink"]), _INK_ALPHA)
        del stripes
    n_tiles = 0 if plan is None else len(plan)
    if n_tiles:
        boxes = _tile_boxes(plan, mpp_yx, (h, w))
        inside = np.zeros((h, w), np.uint8)
        for x0, y0, x1, y1 in boxes:
            inside[y0:y1 + 1, x0:x1 + 1] = 1
        _blend(view, inside.view(bool), _rgb(OVERLAY_COLOURS["tile"]), _TILE_FILL_ALPHA)
        del inside
        teal = _rgb(OVERLAY_COLOURS["tile"])
        for x0, y0, x1, y1 in boxes.tolist():
            cv2.rectangle(view, (x0, y0), (x1, y1), teal, 1, lineType=cv2.LINE_8)
    _outline(view, ink, _rgb(OVERLAY_COLOURS["ink_rim"]), 1)
    _outline(view, tissue, _rgb(OVERLAY_COLOURS["tissue"]), 2)

    label = title or (os.path.basename(os.fspath(name)) if name is not None else "slide")
    line = f"tissue {mask.tissue_fraction:.1%} of slide  |  ink {float(np.mean(mask.ink)):.1%}"
    if plan is not None:
        line += f"  |  {n_tiles} tiles of {plan.tile} px at {plan.mpp:g} um/px"
    _put(canvas, label, (8, h + 18), 0.5, 1, max_width=width - 16)
    _put(canvas, line, (8, h + 38), 0.42, 1, max_width=width - 16)
    entries = [("tissue", "tissue outline"), ("ink", "ink (excluded)")]
    if plan is not None:
        entries.append(("tile", "planned tile"))
    if dark.any():
        entries.append(("dark", "dark debris (excluded)"))
    _legend(canvas, h + 60, entries, width)

    ok, png = cv2.imencode(".png", cv2.cvtColor(canvas, cv2.COLOR_RGB2BGR))
    if not ok:
        raise OSError(f"could not encode the QC picture of {label}")
    return png.tobytes()
