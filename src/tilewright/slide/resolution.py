"""Level-0 resolution (µm/px) and objective power from slide metadata.

Sources, each parsed by one function here:

- TIFF ``XResolution``/``YResolution`` with ``ResolutionUnit`` (2 = inch, 3 = centimetre;
  1 = NONE means the values carry no physical unit, so the resolution is unknown);
- OME-XML ``Pixels/@PhysicalSizeX`` and ``@PhysicalSizeY`` with their unit attributes
  (default µm, as the OME schema says) and ``Objective/@NominalMagnification``;
- the Aperio-style ImageDescription (``MPP = 0.2500|AppMag = 40``);
- ImageJ-style TIFFs: ``ResolutionUnit`` NONE with the unit in the description (``unit=um``);
- OpenSlide properties (``openslide.mpp-x``/``-y``, ``openslide.objective-power``, or
  ``tiff.XResolution`` with ``tiff.ResolutionUnit``).

References
----------
.. [1] Adobe Developers Association (1992). TIFF Revision 6.0, section 8 "Baseline Fields":
   ResolutionUnit.
.. [2] Open Microscopy Environment. OME Data Model and File Formats, schema 2016-06:
   ``Pixels`` attributes ``PhysicalSizeX``, ``PhysicalSizeXUnit``.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping
from typing import NamedTuple

from tilewright.errors import ImplausibleResolutionError, MissingResolutionError, SlideGeometryError

__all__ = [
    "Resolution",
    "level_downsample",
    "resolution_from_xy",
    "MPP_RANGE",
    "mpp_from_tiff_tags",
    "mpp_from_ome",
    "objective_from_ome",
    "mpp_from_aperio",
    "mpp_xy_from_imagej",
    "mpp_xy_from_tiff_tags",
    "mpp_xy_from_ome",
    "ome_root",
    "ANISOTROPY_LIMIT",
    "mpp_from_openslide",
    "checked_mpp",
]

#: Plausible level-0 µm/px (inclusive). 0.05 is beyond any optical scanner; 20 is a macro photo.
MPP_RANGE = (0.05, 20.0)

#: Relative difference of x and y pixel size above which pixels are refused as not square.
ANISOTROPY_LIMIT = 0.01

_UM_PER_UNIT = {
    "pm": 1e-6, "Å": 1e-4, "nm": 1e-3, "µm": 1.0, "um": 1.0, "μm": 1.0, "mm": 1e3,
    "cm": 1e4, "dm": 1e5, "m": 1e6, "in": 25400.0, "inch": 25400.0,
}


class Resolution(NamedTuple):
    """Level-0 µm/px, objective power and where each came from."""

    mpp: float | None
    objective: float | None
    source: str | None
    #: (x, y) µm/px when the source records both, so non-square pixels can be refused.
    mpp_xy: tuple[float, float] | None = None


def resolution_from_xy(mpp_xy, objective, source) -> Resolution:
    """A Resolution whose ``mpp`` is the mean of the recorded x and y sizes."""
    x, y = mpp_xy
    if x is None or y is None:
        return Resolution(x if y is None else y, objective, source)
    return Resolution((x + y) / 2.0, objective, source, (x, y))


def _rational(value) -> float | None:
    try:
        if isinstance(value, tuple):
            num, den = value
            return float(num) / float(den) if den else None
        return float(value)
    except (TypeError, ValueError):
        return None


def _mean_xy(x: float | None, y: float | None) -> float | None:
    vals = [v for v in (x, y) if v is not None]
    return sum(vals) / len(vals) if vals else None


def mpp_from_tiff_tags(xres, yres, unit) -> float | None:
    """µm/px from TIFF resolution tags: the mean of :func:`mpp_xy_from_tiff_tags`."""
    x, y = mpp_xy_from_tiff_tags(xres, yres, unit)
    return _mean_xy(x, y)


def mpp_xy_from_tiff_tags(xres, yres, unit) -> tuple[float | None, float | None]:
    """µm/px from TIFF resolution tags.

    Parameters
    ----------
    xres, yres : tuple of int, float or None
        ``XResolution``/``YResolution``: pixels per unit (rational ``(num, den)`` or number).
    unit : int, str or None
        ``ResolutionUnit``: 2 or "INCH", 3 or "CENTIMETER"; 1/"NONE" means unknown.
        A missing tag (None) is treated as inch, the TIFF 6.0 default.

    Returns
    -------
    (float or None, float or None)
        µm per pixel along x and y (``mpp_from_tiff_tags``: their mean), None when unknown.
    """
    name = getattr(unit, "name", unit)
    name = {1: "NONE", 2: "INCH", 3: "CENTIMETER", None: "INCH"}.get(name, name)
    per_unit = {"INCH": 25400.0, "CENTIMETER": 1e4}.get(str(name).upper())
    if per_unit is None:
        return None, None
    return _per_unit_xy(xres, yres, per_unit)


def _per_unit_xy(xres, yres, per_unit: float) -> tuple[float | None, float | None]:
    out = []
    for r in (xres, yres):
        v = _rational(r) if r is not None else None
        if v is not None and v > 0 and math.isfinite(v):
            out.append(per_unit / v)
        else:
            out.append(None if v is None else float("nan"))
    x, y = out
    return (x, y) if x is not None else (y, None)


def _ome_ns(root) -> str:
    return root.tag[: root.tag.index("}") + 1] if root.tag.startswith("{") else ""


def ome_root(xml):
    """The parsed OME-XML (an ``ElementTree`` element), or None when it does not parse.

    The OME readers below take either the XML text or this element: a file's XML, which can run
    to megabytes with many images, is then parsed once for all of them."""
    if isinstance(xml, ET.Element):
        return xml
    try:
        return ET.fromstring(xml)
    except ET.ParseError:
        return None


def mpp_from_ome(xml: str, image_index: int = 0) -> float | None:
    """µm/px of one OME ``Image``: the mean of :func:`mpp_xy_from_ome`."""
    return _mean_xy(*mpp_xy_from_ome(xml, image_index))


def mpp_xy_from_ome(xml, image_index: int = 0) -> tuple[float | None, float | None]:
    """(x, y) µm/px of one OME ``Image`` (``PhysicalSizeX``/``Y`` converted from their units).

    (None, None) when the image records no physical size or uses an unknown unit; a single
    recorded axis is returned as x.
    """
    root = ome_root(xml)
    if root is None:
        return None, None
    ns = _ome_ns(root)
    images = root.findall(f"{ns}Image")
    if not images or image_index >= len(images):
        return None, None
    pixels = images[image_index].find(f"{ns}Pixels")
    if pixels is None:
        return None, None
    sizes = []
    for axis in ("X", "Y"):
        raw = pixels.get(f"PhysicalSize{axis}")
        if raw is None:
            continue
        unit = pixels.get(f"PhysicalSize{axis}Unit", "µm")
        factor = _UM_PER_UNIT.get(unit)
        value = _rational(raw)
        if factor is None or value is None:
            return None, None
        sizes.append(value * factor)
    return (sizes + [None, None])[0], (sizes + [None, None])[1]


def objective_from_ome(xml, image_index: int = 0) -> float | None:
    """Nominal magnification of the objective used by one OME ``Image`` (or the only one)."""
    root = ome_root(xml)
    if root is None:
        return None
    ns = _ome_ns(root)
    objectives = {o.get("ID"): o for o in root.iter(f"{ns}Objective")}
    images = root.findall(f"{ns}Image")
    chosen = None
    if images and image_index < len(images):
        ref = images[image_index].find(f"{ns}ObjectiveSettings")
        if ref is not None:
            chosen = objectives.get(ref.get("ID"))
    if chosen is None and len(objectives) == 1:
        chosen = next(iter(objectives.values()))
    if chosen is None:
        return None
    return _rational(chosen.get("NominalMagnification"))


_APERIO_FIELD = re.compile(r"^\s*([A-Za-z][\w .-]*?)\s*=\s*(.*?)\s*$")


def mpp_from_aperio(description: str) -> tuple[float | None, float | None]:
    """(µm/px, objective) from an Aperio-style ImageDescription (``|MPP = x|AppMag = y``)."""
    if not description or not description.startswith("Aperio"):
        return None, None
    fields = {}
    for part in description.split("|")[1:]:
        m = _APERIO_FIELD.match(part)
        if m:
            fields[m.group(1)] = m.group(2)
    return _rational(fields.get("MPP")), _rational(fields.get("AppMag"))


def mpp_from_openslide(props: Mapping[str, str]) -> Resolution:
    """Resolution from OpenSlide properties (``openslide.mpp-x/-y``, then the TIFF tags)."""
    objective = _rational(props.get("openslide.objective-power"))
    mx = _rational(props.get("openslide.mpp-x"))
    my = _rational(props.get("openslide.mpp-y"))
    if mx is not None or my is not None:
        return resolution_from_xy((mx, my) if mx is not None else (my, None), objective, "openslide")
    unit = props.get("tiff.ResolutionUnit")
    if unit is not None:
        unit = {"inch": "INCH", "centimeter": "CENTIMETER", "none": "NONE"}.get(
            unit.strip().lower(), unit)
        xy = mpp_xy_from_tiff_tags(props.get("tiff.XResolution"), props.get("tiff.YResolution"),
                                   unit)
        if xy[0] is not None:
            return resolution_from_xy(xy, objective, "tiff-tags")
    return Resolution(None, objective, None)


_IMAGEJ_UNITS = {"um": 1.0, "µm": 1.0, "μm": 1.0, "\\u00b5m": 1.0, "micron": 1.0, "microns": 1.0,
                 "micrometer": 1.0, "nm": 1e-3, "mm": 1e3, "cm": 1e4, "inch": 25400.0}


def mpp_xy_from_imagej(xres, yres, unit_text: str | None) -> tuple[float | None, float | None]:
    """(x, y) µm/px of an ImageJ-style TIFF: resolution tags in pixels per ``unit=`` of the description.

    ImageJ writes ``ResolutionUnit`` NONE and names the unit in its ImageDescription
    (``ImageJ=1.54f\\nunit=micron``, or ``unit=\\u00B5m`` escaped); an unknown unit gives
    (None, None).
    """
    factor = _IMAGEJ_UNITS.get((unit_text or "").strip().lower())
    if factor is None:
        return None, None
    return _per_unit_xy(xres, yres, factor)


def checked_mpp(found: Resolution, override: float | None, path) -> Resolution:
    """Apply an override and refuse unknown or implausible µm/px.

    Parameters
    ----------
    found : Resolution
        What the file records.
    override : float or None
        The ``mpp=`` given by the user; wins over the file.
    path : str
        The slide, named in errors.

    Returns
    -------
    Resolution

    Raises
    ------
    MissingResolutionError
        Neither the file nor ``override`` gives a µm/px.
    SlideGeometryError
        The file records x and y pixel sizes more than :data:`ANISOTROPY_LIMIT` apart (and no
        ``override`` was given).
    ImplausibleResolutionError
        The value is NaN, not positive, or outside :data:`MPP_RANGE`.
    """
    if override is not None:
        found = Resolution(_rational(override), found.objective, "override")
        hint = "check the mpp= value you passed"
    else:
        hint = ("the file misstates its resolution; pass the true level-0 µm/px with mpp= "
                "(tile-out: --source-mpp, or a per-slide --mpp-table CSV)")
    if found.mpp is None:
        raise MissingResolutionError(
            "the file records no physical resolution (µm per pixel); pass it with mpp= "
            "(tile-out: --source-mpp for all slides, or --mpp-table CSV with slide_id,mpp "
            "columns; --mpp sets the target resolution, not the file's)", path)
    if found.mpp_xy is not None and all(math.isfinite(v) and v > 0 for v in found.mpp_xy):
        x, y = found.mpp_xy
        if abs(x - y) > ANISOTROPY_LIMIT * min(x, y):
            raise SlideGeometryError(
                f"pixels are not square: {x:.4g} µm wide and {y:.4g} µm tall (from "
                f"{found.source}); tiles would be stretched. Resample the slide to square pixels, "
                "or, if the file misstates its resolution, pass the true level-0 µm/px with mpp= "
                "(tile-out: --source-mpp or --mpp-table)", path)
    lo, hi = MPP_RANGE
    if not (math.isfinite(found.mpp) and lo <= found.mpp <= hi):
        raise ImplausibleResolutionError(
            f"level-0 resolution {found.mpp!r} µm/px (from {found.source}) is outside the "
            f"plausible {lo}-{hi} µm/px; {hint}", path)
    objective = found.objective
    if objective is not None and not (math.isfinite(objective) and objective > 0):
        objective = None
    return Resolution(float(found.mpp), objective, found.source)


def level_downsample(h0: int, w0: int, h: int, w: int) -> float:
    """Level-0 pixels per level pixel, one number for both axes.

    When the level's size is the floor or ceiling of level 0's size over an integer ``k`` in
    both axes (how scanners build pyramids: only the last row and column are partial), the
    downsample is ``k`` exactly. Otherwise it is the mean of the two axes' ratios: for a level
    whose size was rounded from a non-whole downsample, the position error this leaves is about
    one level pixel at most, at the far edge of a slide up to 3:1; a view never reads past the
    level's own last row or column (see :class:`~tilewright.slide.view.ResampledView`).
    """
    ratio = (w0 / w + h0 / h) / 2.0
    k = round(ratio)
    if k >= 1 and w in (w0 // k, -(-w0 // k)) and h in (h0 // k, -(-h0 // k)):
        return float(k)
    return ratio
