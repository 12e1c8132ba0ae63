"""Tissue masks: where on a slide the usable H&E tissue is, at a coarse physical resolution.

The default method thresholds optical density against blank glass with Otsu's method plus a
floor, cleans the result morphologically, fills small holes, removes marker ink (and optionally
dark debris) and drops components smaller than a physical area. Every size is given in µm or µm²,
so the same settings give the same mask from a 0.25 and a 0.5 µm/px scan.

Tissue under a pen stroke is *not* tissue here: the ink hides it, so a tile cut there shows ink.
Such pixels are excluded from :attr:`TissueMask.array` and reported in :attr:`TissueMask.ink`.
"""

from __future__ import annotations

import math
import os

import numpy as np

from .density import find_glass, od_tables
from .exclusions import FILM_UM2, find_exclusions
from .crossings import strokes_over_tissue
from .films import on_plane_films
from .flatfield import flatten_light
from .membranes import fat_mesh
from .morphology import drop_small, enclosed, fill_holes, morph, px, touching
from .threshold import _LOG_FLOOR, METHODS, density_threshold, grey_level_od, tissue_feature  # noqa: F401 (_LOG_FLOOR re-exported)
from .raster import box_fractions, summed_area_table

__all__ = ["TissueMask", "tissue_mask", "tissue_feature", "thumbnail_rgb", "METHODS"]


#: Marker is looked for among what is left once ink is grown by this many margins (see
#: :func:`_cut_at_margin`); only the margin itself is cut from tissue.
RIM_WIDTH = 2.0
#: Warnings: marker ink (``high-ink``) or the dark-region filter (``dark-removed``) removed more
#: than this share of what the density threshold found (tissue, and ink lying on glass); less
#: tissue than this area (mm²) *and* than this share of the scanned area (a speck on a large scan,
#: or a mask that missed faint tissue; a small biopsy scanned tightly is not flagged).
HIGH_INK_FRACTION = 0.25
HIGH_DARK_FRACTION = 0.25
LITTLE_TISSUE_MM2 = 1.0
LITTLE_TISSUE_SHARE = 0.02
#: The line masks' noise on glass is never taken under this share of one grey level of the glass
#: (8-bit glass is often flat over many pixels: see :data:`.threshold.QUANT_NOISE_LEVELS`).
MESH_NOISE_LEVELS = 0.5


class TissueMask:
    """A boolean tissue mask at a known µm/px, answering tissue fractions of boxes at any µm/px.

    Parameters
    ----------
    array : array_like (H, W) bool
        True where there is usable tissue; pixel ``(i, j)`` covers the slide area
        ``[i, i+1) x [j, j+1)`` pixels at ``mpp`` from the slide origin.
    mpp : float
        µm per mask pixel.
    ink, dark : array_like (H, W) bool, optional
        Excluded marker ink and dark debris (all False when omitted).
    threshold : float, optional
        The threshold that was applied (units of the method's feature).
    params : dict, optional
        Parameters that made the mask, for provenance.
    warnings : sequence of str, optional
        What the user should know about this mask (``code: reason``).

    Raises
    ------
    ValueError
        If ``array`` is not a non-empty 2-D array or ``mpp`` is not positive.
    """

    def __init__(self, array, mpp: float, *, ink=None, dark=None, threshold: float = math.nan,
                 params: dict | None = None, warnings=()):
        array = np.asarray(array, dtype=bool)
        if array.ndim != 2 or array.size == 0:
            raise ValueError(f"a tissue mask must be a non-empty 2-D array, got shape {array.shape}")
        if not (mpp > 0 and math.isfinite(mpp)):
            raise ValueError(f"mask mpp must be a positive number of µm/px, got {mpp!r}")
        self.array = array
        self.mpp = float(mpp)
        self.ink = np.zeros_like(array) if ink is None else np.asarray(ink, dtype=bool)
        self.dark = np.zeros_like(array) if dark is None else np.asarray(dark, dtype=bool)
        for name, extra in (("ink", self.ink), ("dark", self.dark)):
            if extra.shape != array.shape:
                raise ValueError(f"{name} has shape {extra.shape}, the mask {array.shape}")
        self.threshold = float(threshold)
        self.params = dict(params or {})
        #: Short messages, each starting with a code (``no-glass: ...``), for the user.
        self.warnings = list(warnings)
        self._sat = None

    @property
    def shape(self) -> tuple[int, int]:
        """(height, width) of the mask in pixels."""
        return self.array.shape

    @property
    def tissue_fraction(self) -> float:
        """Fraction of the whole slide area that is tissue."""
        return float(self.array.mean())

    def fractions(self, yx, h: float, w: float, mpp: float) -> np.ndarray:
        """Tissue fraction of many equal boxes given in pixels at ``mpp`` µm/px.

        Parameters
        ----------
        yx : array_like (N, 2)
            Top-left corners of the boxes, pixels at ``mpp``, from the slide origin.
        h, w : float
            Box size in pixels at ``mpp``.
        mpp : float
            µm/px of ``yx``, ``h`` and ``w``.

        Returns
        -------
        ndarray (N,) float32
            Exact covered area over box area (the mask is piecewise constant); area past the
            slide edge counts as no tissue.
        """
        if self._sat is None:
            self._sat = summed_area_table(self.array)
        return box_fractions(self._sat, self.mpp, yx, h, w, mpp)

    def clear_cache(self) -> None:
        """Drop the summed-area table :meth:`fractions` keeps (4 bytes a mask pixel)."""
        self._sat = None

    def fraction(self, y: float, x: float, h: float, w: float, mpp: float) -> float:
        """Tissue fraction of one box ``(y, x, h, w)`` given in pixels at ``mpp`` µm/px."""
        return float(self.fractions([[y, x]], h, w, mpp)[0])

    def to_dict(self) -> dict:
        """JSON-safe parameters and summary figures of the mask (not the pixels), for provenance."""
        out = {"mpp": self.mpp, "shape": list(self.shape),
               "threshold": None if math.isnan(self.threshold) else self.threshold,
               "tissue_fraction": self.tissue_fraction, "ink_fraction": float(self.ink.mean()),
               "dark_fraction": float(self.dark.mean())}
        out.update(self.params)
        out["warnings"] = list(self.warnings)
        return out

    @property
    def attrs(self) -> dict:
        """Same as :meth:`to_dict`."""
        return self.to_dict()

    def __repr__(self) -> str:
        return (f"TissueMask(shape={self.shape}, mpp={self.mpp:g}, "
                f"tissue_fraction={self.tissue_fraction:.3f})")


def thumbnail_rgb(slide, mpp, who: str = "tissue_mask"):
    """RGB uint8 thumbnail at about ``mpp``, the true µm/px of its pixels, and the source path:
    the first step of the tissue mask and of its QC picture (:mod:`tilewright.tissue.overlay`).

    A slide's thumbnail (and any array with an ``mpp`` attribute, such as
    :class:`tilewright.slide.thumbnail.Thumbnail`) carries the µm/px of its pixels, which may
    differ from the request by the thumbnail tolerance: that value is the mask's. ``who`` names
    the caller in the error for a wrong argument.
    """
    if isinstance(slide, np.ndarray):
        rgb, path = slide, None
    elif hasattr(slide, "thumbnail"):
        path = getattr(slide, "path", None)
        rgb = slide.thumbnail(mpp=mpp)
    else:
        raise TypeError(f"{who} needs a slide (with .thumbnail) or an RGB ndarray, got {type(slide).__name__}")
    mpp = float(getattr(rgb, "mpp", None) or mpp)
    rgb = np.asarray(rgb)
    if rgb.ndim == 3 and rgb.shape[2] == 4:
        rgb = rgb[..., :3]
    if rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.size == 0:
        raise ValueError(f"expected an RGB image (H, W, 3), got shape {rgb.shape}")
    if rgb.dtype != np.uint8:
        raise ValueError(f"expected uint8 RGB, got {rgb.dtype}; convert with skimage.util.img_as_ubyte")
    return np.ascontiguousarray(rgb), mpp, None if path is None else os.fspath(path)


def _edges_at_half_step(feature: np.ndarray, tissue: np.ndarray, sigma: float, glassy: np.ndarray,
                        cut: np.ndarray | None = None) -> np.ndarray:
    """Put the edges of ``tissue`` where the smoothed density is half-way from glass to the tissue.

    The threshold is low so that pale tissue is found, but a Gaussian-blurred step crosses a
    level at fraction ``f`` of its height ``sigma * Phi^-1(1 - f)`` outside the true edge (1.3
    sigma at f = 0.1, the usual place of a log-scale Otsu threshold: 10 µm at the default 8 µm
    smoothing), which inflates every edge tile's tissue fraction. The step's edge lies where the
    blurred profile is at half its height (edge localization of a blurred step; e.g. Canny,
    IEEE TPAMI 8(6):679-698, 1986). So pixels within ``3 sigma`` of the mask's border are kept
    only where the density is at least half-way between the glass level (median density of the
    ``glassy`` pixels, those under the detection threshold) and the local tissue level: a
    normalized convolution (Knutsson & Westin, CVPR 1993) of
    the density over the mask's core (eroded by ``3 sigma``, where the blur has reached the
    plateau), or over the whole mask for pieces too thin to have a core. Which pieces are found
    does not change (it is applied last, after small pieces are dropped): a piece's core stays.
    Borders cut at ``cut`` (ink, dense regions) are left where the cut put them, but within
    ``3 sigma`` of glass.
    """
    if sigma < 0.5 or not tissue.any() or not glassy.any():
        return tissue
    import cv2

    r = int(math.ceil(3 * sigma))
    glass = float(np.median(feature[glassy]))
    inner = morph(tissue, "erode", r)
    band = tissue & ~inner
    if cut is not None and cut.any():
        # where ink or a dense region was cut out the border is no blurred step from glass, and
        # textured tissue's pale pixels beside it would be carved away: near a cut, only pixels
        # near glass are placed
        band &= morph(glassy & ~tissue, "dilate", r) | ~morph(cut, "dilate", r)
    if not band.any():
        return tissue
    f = np.ascontiguousarray(feature, dtype=np.float32)

    def local_mean(weights):
        w = weights.astype(np.float32)
        num = cv2.GaussianBlur(f * w, (0, 0), 3 * sigma)
        den = cv2.GaussianBlur(w, (0, 0), 3 * sigma)
        return num, den

    num, den = local_mean(inner)
    level = np.divide(num, den, out=np.zeros_like(num), where=den > 1e-3)
    thin = den <= 1e-3
    if thin[band].any():
        num, den = local_mean(tissue)
        level[thin] = (num / np.maximum(den, 1e-6))[thin]
    half = glass + 0.5 * (level - glass)
    return tissue & ~(band & (f < half))


def _cut_at_margin(tissue, wide, cut, dark, min_px):
    """The ink cut out of ``tissue``: ``cut`` (ink grown by the margin), and the pixels between
    ``cut`` and ``wide`` (ink grown by :data:`RIM_WIDTH` margins) whose piece of the tissue left
    touches no piece of at least ``min_px`` left outside ``wide``. Tissue beside a stroke keeps
    the pixels of its own up to the margin; a thin line's rim (a coverslip's edge, a pen's
    outline) left on both sides of it, with no tissue beyond, stays cut."""
    left = tissue & ~cut
    beyond = drop_small(tissue & ~wide & ~dark, min_px)
    return cut | (left & wide & ~touching(left, beyond, grow=1))


def tissue_mask(slide, *, mpp: float = 8.0, method: str = "od-noise", sensitivity: float = 1.0,
                min_od_floor: float | None = None, max_od_ceiling: float = 0.15,
                min_saturation: float = 0.08, smooth_um: float = 8.0, close_um: float = 24.0,
                open_um: float = 16.0, fill_holes_um2: float = 20_000.0,
                min_component_um2: float = 25_000.0, exclude_ink: bool = True,
                ink_residual: float = 0.04, ink_margin_um: float = 8.0, min_stroke_um: float = 100.0,
                exclude_dark: bool = False, dark_od: float = 0.9, glass=None,
                glass_fallback=None, mesh_um: float = 80.0) -> TissueMask:
    """Find usable H&E tissue on a slide thumbnail.

    Steps: (1) a thumbnail at ``mpp`` µm/px; (2) the glass: bright, nearly grey pixels
    (:func:`~tilewright.tissue.density.find_glass`); a slide without any is covered by tissue
    edge to edge, and its glass colour is ``glass_fallback`` (white when None), never a tissue
    colour; (3) the feature of ``method`` (default: mean optical density relative to the glass
    colour, Gaussian-smoothed); (4) a threshold that clears the glass's own density noise
    (:func:`~tilewright.tissue.threshold.density_threshold`: the glass level plus six robust
    standard deviations, so faint tissue is found; ``"od-otsu"`` uses Otsu's threshold above
    that floor instead); (5) closing then opening with discs of ``close_um`` and ``open_um``;
    (6) holes smaller than ``fill_holes_um2`` filled; (7) marker ink, over glass and over tissue,
    grown by ``ink_margin_um`` (:mod:`~tilewright.tissue.exclusions` and
    :mod:`~tilewright.tissue.pieces`: black and grey, blue and green by colour, red by shape,
    texture and context so that blood stays tissue; compact "ink" over most of the stained
    area is read as tissue of an unusual colour; strokes found on glass followed into the tissue
    they cross, :mod:`~tilewright.tissue.crossings`), and optionally dense debris, removed; (8)
    pieces smaller than ``min_component_um2`` dropped; (9) their edges placed half-way up the
    density step.

    Parameters
    ----------
    slide : slide object or ndarray (H, W, 3) uint8
        An object with ``.thumbnail(mpp=...)`` (and optionally ``.path``), or an RGB image whose
        pixel size is ``mpp`` (or its own ``.mpp``, as a slide's thumbnail carries).
    mpp : float
        µm/px asked of the mask (and of ``slide`` when it is an array without ``.mpp``).
        Default 8. The mask takes the true µm/px of the thumbnail's pixels, which may differ
        from this by the thumbnail tolerance (a pyramid level reused as is).
    method : {"od-noise", "od-otsu", "saturation-otsu"}
        How tissue is told from glass: mean optical density over the glass's noise floor
        (default), Otsu's threshold on its log10 kept between that floor and ``max_od_ceiling``
        (drops tissue fainter than Otsu's split on slides with much dense tissue), or Otsu on
        the HSV saturation (floor ``min_saturation``).
    sensitivity : float
        Unitless factor dividing the density threshold's floor and ceiling: 2 keeps tissue half
        as dense, 0.5 only tissue twice as dense. Default 1.
    min_od_floor : float, optional
        A fixed floor (mean OD above glass) instead of the one measured from the glass noise.
    max_od_ceiling : float
        Largest threshold Otsu may choose with ``"od-otsu"`` (mean OD): anything denser than this
        over glass is tissue (blank glass stays below an OD of about 0.15, common practice).
    min_saturation : float
        Floor of the saturation method.
    smooth_um : float
        Gaussian sigma in µm applied to the feature and to the OD used for ink.
    close_um, open_um : float
        Radii in µm of the morphological closing and opening (0 disables).
    fill_holes_um2 : float
        Holes inside tissue smaller than this area (µm²) are filled.
    min_component_um2 : float
        Tissue pieces smaller than this area (µm²) are dropped.
    exclude_ink : bool
        Remove marker ink (default True).
    ink_residual : float
        OD distance from the H&E plane above which a pixel is coloured (plus 3 % of its OD).
    ink_margin_um : float
        Ink is grown by this many µm before it is cut (the blurred rims of strokes and rings are
        ink too; the default is the smoothing's ``smooth_um``, over which the density that found
        the ink's edge was spread). Marker of other kinds is looked for among what lies beyond
        :data:`RIM_WIDTH` margins, and the rims of lines with no tissue beyond are cut there.
    min_stroke_um : float
        Narrowest red marker stroke, µm; narrower long red pieces (small vessels) stay tissue.
    exclude_dark : bool
        Also remove very dense pixels of any colour (folds, debris).
    dark_od : float
        Mean OD above which a pixel is dark debris when ``exclude_dark`` (a fold of two layers of
        ordinary tissue is about 0.3-0.6).
    glass : array_like (3,), optional
        RGB of blank glass; found on the thumbnail when omitted.
    glass_fallback : array_like (3,), optional
        Glass colour of a slide without visible glass (for example the cohort's median glass);
        white when None.
    mesh_um : float
        Fat: regions of glass-level density holding a mesh of thin lines in many directions round
        closed cells are tissue (:func:`~tilewright.tissue.membranes.fat_mesh`), and so is glass
        with a pixel of tissue within this many µm along each of 8 directions
        (:func:`~tilewright.tissue.morphology.enclosed`): the empty cells of fat, walled by
        membranes that the threshold finds only in part at a thumbnail's µm/px; 0 turns both off.

    Returns
    -------
    TissueMask
        With ``warnings`` (short codes with a reason): ``no-glass``, ``high-ink`` and
        ``dark-removed`` (the filters removed more than :data:`HIGH_INK_FRACTION` and
        :data:`HIGH_DARK_FRACTION` of what was found), ``unusual-stain`` (tissue off the H&E
        plane read as tissue, not ink), ``little-tissue``, ``plane-fallback``; ``params`` hold
        ``ink_share``, ``dark_share`` and ``removed_share`` (their sum).

    Raises
    ------
    TypeError
        If ``slide`` is neither a slide object nor an ndarray.
    ValueError
        If the thumbnail is not RGB uint8, ``mpp`` or ``sensitivity`` is not positive or
        ``method`` is unknown.

    References
    ----------
    .. [1] N. Otsu, "A threshold selection method from gray-level histograms", IEEE Transactions
           on Systems, Man, and Cybernetics 9(1):62-66, 1979.
    .. [2] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
           deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
    .. [3] M. Macenko et al., "A method for normalizing histology slides for quantitative
           analysis", IEEE ISBI, 1107-1110, 2009.

    Examples
    --------
    >>> from tilewright.demo.synth import random_layout
    >>> layout = random_layout(3000, 4000, seed=1)
    >>> mask = tissue_mask(layout.render(8.0, 0, 0, *layout.shape_at(8.0)), mpp=8.0)
    >>> 0.05 < mask.tissue_fraction < 0.6
    True
    """
    for name, value in (("mpp", mpp), ("sensitivity", sensitivity)):
        if not (isinstance(value, (int, float)) and value > 0 and math.isfinite(value)):
            raise ValueError(f"{name} must be a positive number, got {value!r}")
    if method not in METHODS:
        raise ValueError(f"unknown tissue method {method!r}; choose one of {METHODS}")
    rgb, mpp, path = thumbnail_rgb(slide, mpp)  # mpp: the true µm/px of the thumbnail's pixels
    survey = find_glass(rgb, fallback=glass_fallback)
    light = 0.0
    if glass is None and survey.found:  # uneven light divided out, measured on the glass itself
        flat, light = flatten_light(rgb, survey.candidates)
        if flat is not rgb:
            rgb = flat
            survey = find_glass(rgb, fallback=glass_fallback)
    warnings = []
    glass_given = glass
    if glass is not None:
        glass = np.asarray(glass, dtype=np.float64)
    else:
        glass = survey.colour
        if not survey.found:
            warnings.append(f"no-glass: no blank glass seen on the slide; glass colour taken as "
                            f"{tuple(int(round(v)) for v in glass)} ({'given fallback' if glass_fallback is not None else 'white'})")
    feature = tissue_feature(rgb, mpp, method=method, smooth_um=smooth_um, glass=glass)
    threshold, otsu, floor, noise = density_threshold(
        feature, survey if glass_given is None else survey._replace(found=True), method=method,
        sensitivity=sensitivity, min_od_floor=min_od_floor, max_od_ceiling=max_od_ceiling,
        min_saturation=min_saturation)
    raw = feature > threshold
    if mesh_um > 0:  # fat: a mesh of membranes round empty cells, which the threshold finds in part
        if survey.found:
            raw |= fat_mesh(rgb, od_tables(glass), mpp, raw, survey.candidates, MESH_NOISE_LEVELS * grey_level_od(glass))
        raw |= enclosed(raw, px(mesh_um, mpp))
    glassy = ~raw
    survey = survey._replace(candidates=None)  # not needed past the threshold
    raw = morph(raw, "close", px(close_um, mpp))
    raw = morph(raw, "open", px(open_um, mpp))
    area = mpp * mpp
    tissue = fill_holes(raw, fill_holes_um2 / area)
    del raw

    # the glass's pixel-to-pixel noise in one channel's OD, from that of the smoothed mean density
    # (a mean of 3 channels, smoothed by a Gaussian of sigma px: white noise falls by sqrt(3) and
    # by 2 sqrt(pi) sigma)
    sigma = smooth_um / mpp
    pixel_noise = 0.0 if math.isnan(noise) else noise * math.sqrt(3.0) * 2.0 * math.sqrt(math.pi) * max(sigma, 0.5)
    found = find_exclusions(rgb, glass, sigma, mpp, glassy, exclude_ink=exclude_ink,
                            ink_residual=ink_residual, exclude_dark=exclude_dark, dark_od=dark_od,
                            stroke_kw={"min_stroke_um": min_stroke_um}, noise_od=pixel_noise)
    ink, dark = found.ink, found.dark
    film_share = crossed_share = 0.0
    if exclude_ink:
        # the margin covers the stroke's blurred rim below the off-plane limit; a limit narrowed
        # to the slide's own scatter already reaches into that rim, so the margin shrinks with it
        narrow = min(1.0, found.residual / ink_residual)
        cut = morph(ink, "dilate", px(ink_margin_um * narrow, mpp))
        # what comes next looks for marker among what is left: a stroke's faint outer rim left in
        # would be a smooth piece on glass, the seed of a "film" that grows into the tissue beside
        # it. It looks with the ink grown by RIM_WIDTH margins
        ink = morph(ink, "dilate", px(RIM_WIDTH * ink_margin_um * narrow, mpp))
        # marker whose colour lies on the H&E plane (violet, pink): by texture and shape
        films = on_plane_films(rgb, tissue & ~ink & ~dark, glassy | ink, od_tables(glass), mpp, blood=found.blood,
                               noise_od=pixel_noise, min_px=FILM_UM2 / (mpp * mpp), min_stroke_um=min_stroke_um)
        films_cut = morph(films, "dilate", 1)
        ink |= films_cut
        film_share = float(films.sum()) / max(1, int(tissue.sum()))
        # strokes found on the glass, followed into the tissue they cross (optical densities add)
        crossed = strokes_over_tissue(rgb, od_tables(glass), sigma, ink, tissue & ~ink & ~dark, found.blood)
        ink |= crossed
        ink = _cut_at_margin(tissue, ink, cut | films_cut | crossed, dark, min_component_um2 / area)
        crossed_share = float(crossed.sum()) / max(1, int(tissue.sum()))
    covered = tissue | ink  # what the density threshold found, and ink beyond it
    tissue = drop_small(tissue & ~ink & ~dark, min_component_um2 / area)
    # the pieces are decided at the detection threshold; only then are their edges placed
    tissue = _edges_at_half_step(feature, tissue, smooth_um / mpp, glassy, ink | dark)
    del feature, glassy
    plane = found.plane
    if plane is not None and not plane.fitted and plane.n_pixels >= 200:
        warnings.append(f"plane-fallback: implausible H&E plane fit ({plane.reason}); the Ruifrok & "
                        "Johnston plane was used for ink")
    if found.reread:
        tilt = f", the H&E plane refitted {plane.tilt_deg:.0f} degrees off it" if plane is not None and plane.fitted else ""
        warnings.append(f"unusual-stain: {found.reread:.0%} of the stained area lies off the Ruifrok & Johnston H&E "
                        f"plane where marker ink would (not in strokes); read as tissue of an unusual colour{tilt} "
                        "(a phloxine-rich eosin, or a scanner's colour?): check the QC picture")
    n_covered = max(1, int(covered.sum()))
    ink_share = float((ink & covered).sum()) / n_covered
    dark_share = float((dark & covered & ~ink).sum()) / n_covered
    if ink_share > HIGH_INK_FRACTION:
        warnings.append(f"high-ink: marker ink removed {ink_share:.0%} of what was found on the slide (tissue, "
                        "and ink on glass): check the QC picture")
    if dark_share > HIGH_DARK_FRACTION:
        warnings.append(f"dark-removed: the dark-region filter (mean OD over {dark_od:g}) removed {dark_share:.0%} "
                        "of the tissue found: check the QC picture, or raise --dark-od")
    tissue_mm2 = float(tissue.sum()) * area / 1e6
    share = float(tissue.mean()) if tissue.size else 0.0
    if tissue_mm2 < LITTLE_TISSUE_MM2 and share < LITTLE_TISSUE_SHARE:
        warnings.append(f"little-tissue: only {tissue_mm2:.2f} mm² of tissue found, {share:.1%} of the scanned area")

    params = {"method": method, "source": path, "otsu": None if math.isnan(otsu) else float(otsu),
              "sensitivity": sensitivity, "floor": float(floor), "glass_noise_od": None if math.isnan(noise) else noise,
              "min_od_floor": min_od_floor, "max_od_ceiling": max_od_ceiling,
              "min_saturation": min_saturation, "smooth_um": smooth_um, "close_um": close_um, "mesh_um": mesh_um,
              "open_um": open_um, "fill_holes_um2": fill_holes_um2,
              "min_component_um2": min_component_um2, "exclude_ink": exclude_ink,
              "ink_residual": ink_residual, "ink_residual_used": float(found.residual), "ink_margin_um": ink_margin_um, "min_stroke_um": min_stroke_um,
              "exclude_dark": exclude_dark, "dark_od": dark_od,
              "glass": [float(v) for v in glass], "glass_found": bool(survey.found or glass is not survey.colour),
              "blood_fraction": float((found.blood & tissue).sum()) / max(1, int(tissue.sum())),
              "hne_plane_normal": None if plane is None else [float(v) for v in plane.normal],
              "hne_plane_fitted": None if plane is None else bool(plane.fitted),
              "ink_share": ink_share, "dark_share": dark_share, "removed_share": ink_share + dark_share,
              "reread_share": float(found.reread), "film_share": film_share, "crossed_share": crossed_share, "light_variation": light, "tissue_mm2": tissue_mm2}
    return TissueMask(tissue, mpp, ink=ink, dark=dark, threshold=threshold, params=params, warnings=warnings)
