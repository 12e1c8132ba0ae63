"""The structure of an ICC profile meant for RGB pixels: header and tag table, checked.

Only what must hold before LittleCMS is given the bytes: the size, the ``acsp`` signature, a
version LittleCMS reads (2 or 4), an RGB data colour space, a device class (not a device link,
abstract or named-colour profile), an XYZ or Lab connection space, every tag inside the profile,
and a mapping from device colour to the connection space (matrix/TRC tags or an A2B table).

References
----------
.. [1] International Color Consortium. ICC.1:2001-04 (v2) and ICC.1:2022 (v4), File Format for
   Color Profiles: section 7.2 (header), 7.3 (tag table), 8 (required tags).
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

from tilewright.errors import ColourProfileError

__all__ = ["MODES", "ProfileFacts", "check_profile", "profile_error"]

#: Accepted values of ``colour_profile`` (here, a light module the settings and the command line
#: can import without the slide readers).
MODES = ("apply", "ignore")

_MAX_BYTES = 64 << 20  # a scanner profile is KB to a few MB
FIX = "; re-run with --colour-profile ignore (tw.open(..., colour_profile='ignore')) to use the file's raw pixels"
_SPACES = {b"GRAY": "grey", b"CMYK": "CMYK", b"CMY ": "CMY", b"Lab ": "CIELAB", b"XYZ ": "CIEXYZ",
           b"YCbr": "YCbCr", b"Luv ": "CIELUV", b"HSV ": "HSV", b"HLS ": "HLS"}
_CLASSES = {b"scnr": "input", b"mntr": "display", b"spac": "colour space", b"prtr": "output"}
_NOT_DEVICE = {b"link": "a device-link", b"abst": "an abstract", b"nmcl": "a named-colour"}
_MATRIX_TAGS = (b"rXYZ", b"gXYZ", b"bXYZ", b"rTRC", b"gTRC", b"bTRC")


@dataclass(frozen=True)
class ProfileFacts:
    """What the header and tag table of an ICC profile say (see :func:`check_profile`)."""

    size: int
    version: str
    device_class: str
    pcs: str
    table: str  # the device-to-PCS mapping used for the relative colorimetric intent
    tags: tuple


def profile_error(reason: str, path) -> ColourProfileError:
    """The typed error for a profile that cannot be used: what is wrong, the slide, and the fix."""
    return ColourProfileError(f"the embedded ICC profile {reason}{FIX}", path)


def check_profile(data: bytes, path=None) -> ProfileFacts:
    """Check the header and tag table of an ICC profile meant for RGB pixels.

    Parameters
    ----------
    data : bytes
        The profile as stored (bytes past the declared size are ignored).
    path : str, optional
        The slide, named in errors.

    Returns
    -------
    ProfileFacts

    Raises
    ------
    ColourProfileError
        Truncated, not an ICC profile, a version other than 2 or 4, a data colour space other
        than RGB, not a device profile, a tag outside the profile, or no device-to-PCS mapping.
    """
    n = len(data)
    if n < 132:
        raise profile_error(f"is truncated ({n} bytes; the header and tag count alone take 132)", path)
    if data[36:40] != b"acsp":
        raise profile_error("lacks the 'acsp' signature: it is damaged or not an ICC profile", path)
    size = struct.unpack_from(">I", data, 0)[0]
    if size > n:
        raise profile_error(f"is truncated: its header declares {size} bytes but the file holds {n}", path)
    if size < 132 or size > _MAX_BYTES:
        raise profile_error(f"declares an impossible size of {size} bytes", path)
    major, minor = data[8], data[9]
    if major not in (2, 4):
        raise profile_error(f"is ICC version {major}, which is not supported (versions 2 and 4 are)", path)
    space, cls, pcs = data[16:20], data[12:16], data[20:24]
    if space != b"RGB ":
        kind = _SPACES.get(space, repr(space.decode("latin-1")))
        raise profile_error(f"describes {kind} data, but the slide's pixels are RGB", path)
    if cls in _NOT_DEVICE:
        raise profile_error(f"is {_NOT_DEVICE[cls]} profile, not the profile of a device's colours", path)
    if cls not in _CLASSES:
        raise profile_error(f"has an unknown device class {cls!r}", path)
    if pcs not in (b"XYZ ", b"Lab "):
        raise profile_error(f"has an invalid connection space {pcs!r} (XYZ or Lab expected)", path)
    count = struct.unpack_from(">I", data, 128)[0]
    if count > (size - 132) // 12:
        raise profile_error(f"declares {count} tags, more than its {size} bytes can hold", path)
    tags = {}
    for i in range(count):
        sig, offset, length = struct.unpack_from(">4sII", data, 132 + 12 * i)
        if offset < 132 or length < 8 or offset + length > size:
            raise profile_error(f"has tag {sig.decode('latin-1')!r} outside the profile (offset {offset}, {length} bytes)",
                       path)
        tags[sig] = (offset, length)
    table = _device_table(tags)
    if table is None:
        raise profile_error("has neither matrix/TRC tags nor an A2B table: it cannot map RGB to colour", path)
    return ProfileFacts(size=size, version=f"{major}.{minor >> 4}.{minor & 15}", device_class=_CLASSES[cls],
                        pcs=pcs.decode("latin-1").strip(), table=table,
                        tags=tuple(sorted(s.decode("latin-1") for s in tags)))


def _device_table(tags) -> str | None:
    """The device-to-PCS mapping LittleCMS uses for the relative colorimetric intent."""
    if b"D2B1" in tags:
        return "D2B1 (colorimetric, floating point)"
    if b"A2B1" in tags:
        return "A2B1 (colorimetric table)"
    if b"A2B0" in tags:
        return "A2B0 (perceptual table; the profile has no colorimetric one)"
    if all(t in tags for t in _MATRIX_TAGS):
        return "matrix/TRC"
    return None
