"""Which pages of a TIFF are the slide's pyramid levels, and which are label, macro or thumbnail.

Rules (each guards against a layout seen in scanner or converter output):

- The slide is the largest image with a pyramid: in OME-TIFF the largest ``Image`` by pixel
  count (converters often put the overview first); elsewhere the largest page of the IFD chain
  and its SubIFDs that the tiff backend can serve as RGB. Pages it cannot serve (a grey label)
  are skipped, never fatal unless nothing servable is left.
- A page is a reduced level only if some downsample ``d > 1`` makes both its sides the floor or
  ceiling of level 0's side over ``d`` (so the aspect test is relative, not absolute: a 600 x 592
  label is no level of a 40 000 x 30 000 slide).
- Pages of another OME ``Image`` are never levels, except an ``Image`` recording the same
  physical extent as the slide (files storing one resolution per ``Image``): a second scene
  of the same scan has the slide's µm/px, hence another extent, and stays out.
- When level 0 is tiled, only tiled pages are levels (stripped pages are thumbnails, labels
  and macros, as in Aperio SVS). Pages whose description names them ``label``, ``macro`` or
  ``thumbnail`` are kept apart as associated images.

References
----------
.. [1] Adobe Developers Association (1992). TIFF Revision 6.0 (IFDs, NewSubfileType) and
   Adobe PageMaker 6.0 TIFF Technical Notes (1995), SubIFDs.
.. [2] Open Microscopy Environment. OME-TIFF specification (one ``Image`` per series; pyramids
   as SubIFDs since OME 6).
"""

from __future__ import annotations

import math
import re
from typing import NamedTuple

from tilewright.errors import SlideGeometryError, UnsupportedSlideError
from tilewright.slide.resolution import (
    Resolution,
    _mean_xy,
    mpp_from_aperio,
    mpp_xy_from_imagej,
    mpp_xy_from_ome,
    mpp_xy_from_tiff_tags,
    objective_from_ome,
    ome_root,
    resolution_from_xy,
)
from tilewright.slide.tiff_pixels import page_problem

__all__ = ["Pyramid", "discover", "fits_level"]

_ASSOCIATED = re.compile(r"\b(label|macro|thumbnail|overview)\b", re.IGNORECASE)


class Pyramid(NamedTuple):
    """The pages serving a slide: levels (finest first), associated images and the resolution."""

    levels: list
    associated: dict
    resolution: Resolution


def fits_level(h0: int, w0: int, h: int, w: int) -> bool:
    """Whether some downsample ``d > 1`` gives ``w`` and ``h`` as floor or ceil of ``w0/d``, ``h0/d``.

    ``w`` is floor or ceil of ``w0/d`` exactly when ``w0/(w+1) < d < w0/(w-1)``; the page is a
    reduced copy when the two intervals (x and y) overlap above 1.
    """
    if not (0 < h <= h0 and 0 < w <= w0) or (h, w) == (h0, w0):
        return False
    lo = max(w0 / (w + 1), h0 / (h + 1), 1.0)
    hi = min(w0 / (w - 1) if w > 1 else math.inf, h0 / (h - 1) if h > 1 else math.inf)
    return lo < hi


def _area(page) -> int:
    return int(page.imagelength) * int(page.imagewidth)


def _associated_name(page) -> str | None:
    """"label", "macro", "thumbnail" when the page's description (first lines) says so."""
    text = "\n".join((page.description or "").splitlines()[:2])[:300]
    if text.lstrip().startswith("<"):
        return None  # XML (OME): not a caption
    m = _ASSOCIATED.search(text)
    return None if m is None else m.group(1).lower().replace("overview", "macro")


def _chain_pages(tf) -> list:
    """Every page of the main IFD chain, each followed by its SubIFD pages."""
    import tifffile

    out = []
    for page in tf.pages:
        page = page.aspage() if hasattr(page, "aspage") else page
        out.append(page)
        if page.subifds:
            out.extend(p.aspage() if hasattr(p, "aspage") else p for p in tifffile.TiffPages(page))
    return out


def _levels_from(level0, candidates) -> list:
    h0, w0 = int(level0.imagelength), int(level0.imagewidth)
    levels, shapes = [level0], {(h0, w0)}
    for p in sorted(candidates, key=_area, reverse=True):
        shape = (int(p.imagelength), int(p.imagewidth))
        if shape not in shapes and fits_level(h0, w0, *shape) and page_problem(p) is None:
            levels.append(p)
            shapes.add(shape)
    return levels


def _check_orientation(page, path) -> None:
    orientation = page.tags.valueof(274, 1)  # Orientation
    if int(orientation) != 1:
        raise SlideGeometryError(
            f"TIFF Orientation is {int(orientation)} (1 = rows top to bottom, columns left to "
            "right); tiles would come out rotated or mirrored. Re-save the slide with its pixels "
            "in Orientation 1", path)


def discover(tf, path) -> Pyramid:
    """Levels, associated images and resolution of a parsed TIFF.

    Parameters
    ----------
    tf : tifffile.TiffFile
    path : str
        The file, named in errors.

    Raises
    ------
    UnsupportedSlideError
        No page can be served as RGB (the reason names what the largest page holds).
    SlideGeometryError
        Level 0 declares an Orientation other than 1.
    """
    if tf.is_ome and tf.ome_metadata:
        return _discover_ome(tf, path)
    pages = _chain_pages(tf)
    if not pages:
        raise UnsupportedSlideError("the TIFF holds no image", path)
    associated, rest = {}, []
    for i, p in enumerate(pages):
        name = _associated_name(p) if i else None
        if name is None and tf.is_svs and i == 1 and not p.is_tiled:
            name = "thumbnail"  # Aperio: the stripped page after level 0
        if name is not None:
            associated.setdefault(name, p)
        else:
            rest.append(p)
    servable = [p for p in rest if page_problem(p) is None]
    if not servable:
        big = max(rest or pages, key=_area)
        raise UnsupportedSlideError(f"the main image cannot be served: {page_problem(big)}", path)
    tiled = [p for p in servable if p.is_tiled]
    pool = tiled or servable
    level0 = max(pool, key=_area)
    big = max(rest, key=_area)
    if _area(big) > _area(level0) and page_problem(big) is not None:
        raise UnsupportedSlideError(f"the main image cannot be served: {page_problem(big)}", path)
    _check_orientation(level0, path)
    levels = _levels_from(level0, [p for p in pool if p is not level0])
    return Pyramid(levels, associated, _resolution(tf, level0, pages[0]))


def _ome_index(names: list, k: int, series) -> int:
    """Index of the OME ``Image`` behind a tifffile series (by unique name, else position);
    ``names``: the ``Name`` of every OME ``Image``, in order."""
    name = getattr(series, "name", None)
    if name and names.count(name) == 1:
        return names.index(name)
    return k


def _series_pages(series) -> list | None:
    """Keyframes of a series' levels, or None when a level holds several planes (not RGB)."""
    out = []
    for lv in series.levels:
        if len(lv.pages) != 1 or lv.keyframe is None:
            return None
        out.append(lv.keyframe)
    return out


def _discover_ome(tf, path) -> Pyramid:
    images, associated = [], {}
    for k, s in enumerate(tf.series):
        pages = _series_pages(s)
        name = (getattr(s, "name", "") or "").lower()
        kind = _ASSOCIATED.search(name)
        if kind is not None and pages:
            associated.setdefault(kind.group(1).replace("overview", "macro"), pages[0])
            continue
        if pages and page_problem(pages[0]) is None:
            images.append((k, s, pages))
    if not images:
        reasons = [page_problem(_series_pages(s)[0]) if _series_pages(s) else
                   "several planes (channels, z or time), not an RGB slide" for s in tf.series]
        raise UnsupportedSlideError(
            f"no OME image can be served as RGB ({'; '.join(r for r in reasons if r) or 'empty'})",
            path)
    k, series, pages = max(images, key=lambda item: _area(item[2][0]))
    level0 = pages[0]
    _check_orientation(level0, path)
    xml = tf.ome_metadata
    ome = ome_root(xml)  # parsed once for every image (was: once an image, and twice more)
    names = re.findall(r"<Image\b[^>]*?\bName=\"([^\"]*)\"", xml)
    resolution = _resolution(tf, level0, tf.pages[0], _ome_index(names, k, series), ome)
    candidates = list(pages[1:])
    h0, w0 = int(level0.imagelength), int(level0.imagewidth)
    for j, other, other_pages in images:
        if other is series or resolution.mpp is None:
            continue
        mpp = _mean_xy(*mpp_xy_from_ome(ome, _ome_index(names, j, other))) if ome is not None else None
        p = other_pages[0]
        if mpp is not None and abs(mpp * int(p.imagewidth) - resolution.mpp * w0) <= mpp and \
                abs(mpp * int(p.imagelength) - resolution.mpp * h0) <= mpp:
            candidates.append(p)  # same physical extent: a reduced copy stored as its own Image
    return Pyramid(_levels_from(level0, candidates), associated, resolution)


def _resolution(tf, level0, first, ome_image: int | None = None, ome=None) -> Resolution:
    """µm/px and objective: OME physical size, then Aperio MPP, then TIFF tags (ImageJ units);
    ``ome``: the parsed OME-XML (None: it does not parse)."""
    objective = None
    if ome_image is not None and ome is not None:
        objective = objective_from_ome(ome, ome_image)
        xy = mpp_xy_from_ome(ome, ome_image)
        if xy[0] is not None:
            return resolution_from_xy(xy, objective, "ome")
    for page in (level0, first):
        if (page.description or "").startswith("Aperio"):
            mpp, mag = mpp_from_aperio(page.description)
            objective = objective or mag
            if mpp is not None:
                return Resolution(mpp, objective, "aperio")
    tags = level0.tags
    xres, yres = tags.valueof("XResolution"), tags.valueof("YResolution")
    unit = tags.valueof("ResolutionUnit")
    if xres is not None:
        xy = mpp_xy_from_tiff_tags(xres, yres, unit)
        if xy[0] is None and tf.is_imagej and int(getattr(unit, "value", unit) or 1) == 1:
            xy = mpp_xy_from_imagej(xres, yres, (tf.imagej_metadata or {}).get("unit"))
            if xy[0] is not None:
                return resolution_from_xy(xy, objective, "imagej")
        if xy[0] is not None:
            return resolution_from_xy(xy, objective, "tiff-tags")
    return Resolution(None, objective, None)

