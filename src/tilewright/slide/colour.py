"""Colour management: a slide's embedded ICC profile, checked, and its conversion to sRGB.

A scanner records colour in its own device RGB; many embed an ICC profile that maps that RGB to
the profile connection space (TIFF tag InterColorProfile, 34675; OpenSlide exposes the profile of
every format it reads, DICOM included). With ``colour_profile="apply"`` (the default) every pixel
leaving a slide is converted from that profile to sRGB (IEC 61966-2-1), before a tissue mask,
stain estimate, stored tile or picture sees it; ``"ignore"`` returns the file's raw pixels.

Rendering intent
----------------
Relative colorimetric, without black-point compensation, for every profile: colours inside the
sRGB gamut keep their colorimetry relative to the media white (the scanner's white becomes sRGB
white), colours outside it are clipped channel by channel. The profile part that maps device
colour to the connection space is the one LittleCMS chooses for that intent:

- matrix/TRC profiles (``rXYZ gXYZ bXYZ`` + ``rTRC gTRC bTRC``): the matrix and curves;
- LUT profiles: the colorimetric table (``D2B1``, else ``A2B1``) when the profile has one.
  A LUT profile whose only table is the perceptual ``A2B0`` (the table ICC.1 requires every
  LUT-based input profile to carry) is applied through that table: it is the only mapping the
  vendor provides, and it may include the vendor's own gamut rendering. The store records which
  table was used (:attr:`ColourInfo.table`), so such slides can be told apart.

A profile that is truncated, fails to parse, describes other data than RGB (a grey or CMYK
profile), is not a device profile (device link, abstract, named colour), or maps device grey to
implausible lightness is refused with :class:`~tilewright.errors.ColourProfileError`: wrong
colour is never used silently. ``colour_profile="ignore"`` reads such a slide as its raw pixels.

References
----------
.. [1] International Color Consortium. ICC.1:2001-04, File Format for Color Profiles (v2), and
   ICC.1:2022 (v4): header fields, tag table, required tags of input and display profiles.
.. [2] IEC 61966-2-1:1999, Multimedia systems and equipment - Colour measurement and management -
   Part 2-1: Default RGB colour space - sRGB.
.. [3] CIE 15:2004, Colorimetry, 3rd ed.: CIE 1976 lightness L*.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import asdict, dataclass

import numpy as np

from tilewright.slide.colour_icc import MODES, ProfileFacts, check_profile, profile_error

__all__ = ["ICC_TAG", "MODES", "SRGB", "ColourInfo", "ColourTransform", "ProfileFacts", "check_profile",
           "colour_transform", "slide_colour", "colour_label", "tiff_profile", "openslide_profile"]

#: TIFF tag InterColorProfile (TIFF/EP, ICC.1 annex B).
ICC_TAG = 34675
#: What applied profiles convert to.
SRGB = "sRGB (IEC 61966-2-1)"
INTENT = "relative colorimetric"


@dataclass(frozen=True)
class ColourInfo:
    """Provenance of a slide's colour: which profile it embeds and whether it was applied.

    Attributes
    ----------
    embedded : bool
        The file carries an ICC profile.
    applied : bool
        Pixels were converted from it to sRGB.
    description : str or None
        The profile's own description (``desc``/``mluc`` tag).
    sha256 : str or None
        SHA-256 of the profile bytes as stored in the file.
    size : int
        Profile bytes.
    version, device_class, table : str or None
        ICC version, device class, and the profile part mapping device colour (see module notes).
    intent, target : str or None
        Rendering intent and output space when applied.
    """

    embedded: bool = False
    applied: bool = False
    description: str | None = None
    sha256: str | None = None
    size: int = 0
    version: str | None = None
    device_class: str | None = None
    table: str | None = None
    intent: str | None = None
    target: str | None = None

    def to_dict(self) -> dict:
        """JSON-safe dictionary (the store's ``colour_profile`` attribute)."""
        return asdict(self)

    @property
    def label(self) -> str:
        """One short text for the manifest and the audit: ``none``, the description, or the
        description followed by ``(ignored)``."""
        if not self.embedded:
            return "none"
        name = self.description or f"unnamed profile {self.sha256[:12]}"
        return name if self.applied else f"{name} (ignored)"


class ColourTransform:
    """Conversion of one profile's device RGB to sRGB. Made by :func:`colour_transform`.

    Attributes
    ----------
    info : ColourInfo
        Provenance (applied).

    Notes
    -----
    :meth:`apply` goes through a table of every 8-bit colour (:mod:`tilewright.slide.colour_lut`),
    built on first use and shared by every slide with the same profile in the process.
    """

    def __init__(self, info: ColourInfo, lcms_transform):
        from tilewright.slide.colour_lut import table_for

        self.info = info
        self._table = table_for(f"{info.sha256}:{INTENT}", lcms_transform)

    @property
    def identity(self) -> bool:
        """Whether the profile is sRGB up to LittleCMS's rounding (pixels are then kept as they are)."""
        return self._table.identity

    def apply(self, rgb: np.ndarray) -> np.ndarray:
        """Convert uint8 ``(..., 3)`` device RGB to sRGB in place; returns ``rgb``."""
        return self._table.apply(rgb)

    def provenance(self) -> dict:
        """:attr:`info` as a dictionary, plus ``srgb_equivalent`` (pixels were kept as they are)."""
        return {**self.info.to_dict(), "srgb_equivalent": bool(self.identity)}

    def __repr__(self) -> str:
        return f"ColourTransform({self.info.description!r} -> {SRGB})"


def colour_transform(profile: bytes, *, path=None) -> ColourTransform:
    """The conversion of RGB pixels from an ICC profile to sRGB, checked before use.

    This is the entry point for every reader that finds a profile (TIFF tag, OpenSlide, the
    ICC Profile of a DICOM optical path): profile bytes in, transform out.

    Parameters
    ----------
    profile : bytes
        The ICC profile as stored.
    path : str, optional
        The slide, named in errors.

    Returns
    -------
    ColourTransform

    Raises
    ------
    ColourProfileError
        The profile is damaged, does not describe RGB device colour, LittleCMS cannot build the
        conversion, or device grey converts to non-monotonic or implausible lightness.
    """
    from PIL import ImageCms

    profile = bytes(profile)
    facts = check_profile(profile, path)
    try:
        source = ImageCms.ImageCmsProfile(io.BytesIO(profile[:facts.size]))
        lcms = ImageCms.buildTransform(source, ImageCms.createProfile("sRGB"), "RGB", "RGB",
                                       renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC)
    except Exception as exc:  # noqa: BLE001 - LittleCMS reports damage through several types
        raise profile_error(f"cannot be used by LittleCMS ({' '.join(str(exc).split())[:120]})", path) from None
    _check_grey(lcms, path)
    info = ColourInfo(embedded=True, applied=True, description=_description(source), sha256=_sha256(profile),
                      size=len(profile), version=facts.version, device_class=facts.device_class,
                      table=facts.table, intent=INTENT, target=SRGB)
    return ColourTransform(info, lcms)


def _check_grey(lcms, path) -> None:
    """Refuse a transform under which device grey does not become a plausible grey ramp.

    Device grey ``(k, k, k)``, k = 0..255, must convert to CIE L* (CIE 15, of the sRGB output
    decoded per IEC 61966-2-1) that never falls by more than 1 as k grows, with white above L* 80
    and at least 30 L* between black and white: every real device profile maps its grey axis
    monotonically (all the RGB profiles of Debian's icc-profiles-free, colord-data and
    libgs-common do). A damaged curve or matrix that still parses fails this check.
    """
    from PIL import Image, ImageCms

    ramp = np.repeat(np.arange(256, dtype=np.uint8)[:, None], 3, axis=1).reshape(1, 256, 3)
    try:
        out = np.asarray(ImageCms.applyTransform(Image.fromarray(ramp), lcms))[0]
    except Exception as exc:  # noqa: BLE001
        raise profile_error(f"cannot be applied by LittleCMS ({exc})", path) from None
    lightness = _lightness(out)
    if np.diff(lightness).min() < -1.0 or lightness[-1] < 80.0 or lightness[-1] - lightness[0] < 30.0:
        raise profile_error(f"maps device grey to implausible lightness (L* from {lightness[0]:.0f} to {lightness[-1]:.0f}, "
                   "not increasing): it is probably damaged", path)


def _lightness(srgb8: np.ndarray) -> np.ndarray:
    """CIE 1976 L* of 8-bit sRGB colours (IEC 61966-2-1 decoding, D65 luminance weights)."""
    c = srgb8.astype(np.float64) / 255.0
    linear = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    y = linear @ np.array([0.2126, 0.7152, 0.0722])
    f = np.where(y > (6 / 29) ** 3, np.cbrt(y), y / (3 * (6 / 29) ** 2) + 4 / 29)
    return 116.0 * f - 16.0


def _description(source) -> str | None:
    from PIL import ImageCms

    try:
        text = " ".join(str(ImageCms.getProfileDescription(source)).split())
    except Exception:  # noqa: BLE001 - a missing or odd description tag is not damage
        return None
    return text[:200] or None


def _sha256(profile: bytes) -> str:
    return hashlib.sha256(profile).hexdigest()


def slide_colour(profile: bytes | None, mode: str, path=None) -> tuple[ColourInfo, ColourTransform | None]:
    """A slide's colour provenance and the transform its reads apply (None: raw pixels).

    Parameters
    ----------
    profile : bytes or None
        The embedded profile found by the backend.
    mode : {"apply", "ignore"}
    path : str, optional

    Raises
    ------
    ValueError
        ``mode`` is not one of :data:`MODES`.
    ColourProfileError
        ``mode="apply"`` and the profile cannot be used (see :func:`colour_transform`).
    """
    if mode not in MODES:
        raise ValueError(f"colour_profile must be one of {MODES}, got {mode!r}")
    if profile is None:
        return ColourInfo(), None
    if mode == "apply":
        transform = colour_transform(profile, path=path)
        return transform.info, transform
    profile = bytes(profile)
    description = None
    try:  # only for the record: an ignored profile may well be damaged
        description = _description(_parsed(profile))
    except Exception:  # noqa: BLE001
        pass
    return ColourInfo(embedded=True, applied=False, description=description, sha256=_sha256(profile),
                      size=len(profile)), None


def _parsed(profile: bytes):
    from PIL import ImageCms

    check_profile(profile)
    return ImageCms.ImageCmsProfile(io.BytesIO(profile))


def colour_label(recorded) -> str:
    """The manifest's ``colour_profile`` text from a store's ``colour_profile`` attribute
    (``""`` for a store made before colour management)."""
    if not isinstance(recorded, dict):
        return ""
    return ColourInfo(**{k: v for k, v in recorded.items() if k in ColourInfo.__dataclass_fields__}).label


def tiff_profile(page) -> bytes | None:
    """The InterColorProfile of a TIFF page (the slide's level-0 page, as pyramid discovery found it).

    Returns None without the tag; a tag whose value is not a byte string returns its bytes as
    stored, or ``b""`` (which :func:`check_profile` refuses as truncated).
    """
    tag = page.tags.get(ICC_TAG)
    if tag is None:
        return None
    value = tag.value
    if isinstance(value, (bytes, bytearray, memoryview)):
        return bytes(value)
    if isinstance(value, np.ndarray) and value.dtype.itemsize == 1:
        return value.tobytes()
    return b""


def openslide_profile(slide) -> bytes | None:
    """The ICC profile OpenSlide found for the slide (every format it reads), as stored.

    openslide-python keeps the bytes it read (``OpenSlide.color_profile`` re-serializes them
    through LittleCMS, which changes their digest and fails on damaged profiles); those bytes are
    used when present, else the serialized profile.
    """
    raw = getattr(slide, "_profile", None)
    if isinstance(raw, (bytes, bytearray)):
        return bytes(raw)
    try:
        profile = slide.color_profile
    except Exception:  # noqa: BLE001 - unreadable: report it as damaged when applied
        return b""
    return None if profile is None else profile.tobytes()
