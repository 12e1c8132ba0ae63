"""Minimal ICC v2 matrix/TRC profiles, written from published primaries and white points.

The demo cohort's "scanner-B" embeds one (an invented wide-gamut device RGB); the benchmarks and
tests build Adobe RGB (1998) and sRGB profiles the same way, from their published definitions,
as references independent of any profile file.

A profile holds the ICC.1:2001-04 header and the tags a v2 RGB matrix/TRC display or input
profile requires: ``desc`` (textDescriptionType), ``cprt`` (textType), ``wtpt``, ``rXYZ gXYZ
bXYZ`` (XYZType) and ``rTRC gTRC bTRC`` (curveType). The colorants are the columns of the
RGB -> XYZ matrix of the primaries, chromatically adapted from the device white to the D50
connection space with the linear Bradford transform, as ICC.1 prescribes; ``wtpt`` then holds
D50 (the adapted device white).

References
----------
.. [1] International Color Consortium. ICC.1:2001-04, File Format for Color Profiles: section 6
   (header, tag table, required tags, tag types) and the connection-space illuminant D50 =
   (0.9642, 1.0, 0.8249).
.. [2] ICC.1:2010 (v4.3), Annex E: the linear Bradford chromatic adaptation matrix.
.. [3] Adobe Systems (2005). Adobe RGB (1998) Color Image Encoding, version 2005-05: primaries
   R (0.6400, 0.3300), G (0.2100, 0.7100), B (0.1500, 0.0600), white D65 (0.3127, 0.3290),
   gamma 563/256.
.. [4] IEC 61966-2-1:1999, sRGB: primaries R (0.64, 0.33), G (0.30, 0.60), B (0.15, 0.06), white
   D65, and the piecewise encoding (linear below 0.04045 / 0.0031308, 2.4 exponent above).
"""

from __future__ import annotations

import struct

import numpy as np

__all__ = ["matrix_trc_profile", "assemble", "desc_tag", "text_tag", "xyz_tag", "curve_tag", "primaries_matrix",
           "bradford", "xy_to_xyz", "srgb_curve", "D50", "ADOBE_RGB_1998", "SRGB_IEC", "SCANNER_B"]

#: ICC connection-space white, XYZ (ICC.1).
D50 = (0.9642, 1.0, 0.8249)
#: Adobe RGB (1998) as published by Adobe: primaries, white, gamma.
ADOBE_RGB_1998 = dict(primaries=((0.6400, 0.3300), (0.2100, 0.7100), (0.1500, 0.0600)),
                      white=(0.3127, 0.3290), trc=563 / 256,
                      description="Adobe RGB (1998), from its published primaries")
#: sRGB per IEC 61966-2-1 (the TRC as a 4096-entry table of the piecewise curve).
SRGB_IEC = dict(primaries=((0.64, 0.33), (0.30, 0.60), (0.15, 0.06)), white=(0.3127, 0.3290),
                trc="srgb", description="sRGB, from IEC 61966-2-1 primaries and curve")
#: The demo's "scanner-B": an invented wide-gamut device RGB (primaries beyond sRGB's, gamma 1.8).
SCANNER_B = dict(primaries=((0.700, 0.295), (0.165, 0.780), (0.135, 0.045)), white=(0.3127, 0.3290),
                 trc=1.8, description="scanner-B device RGB (invented wide-gamut demo profile)")

_BRADFORD = np.array([[0.8951, 0.2664, -0.1614],
                      [-0.7502, 1.7135, 0.0367],
                      [0.0389, -0.0685, 1.0296]])


def xy_to_xyz(xy) -> np.ndarray:
    """XYZ with Y = 1 of a chromaticity ``(x, y)``."""
    x, y = xy
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


def primaries_matrix(primaries, white) -> np.ndarray:
    """3x3 matrix from linear RGB to XYZ (columns: the primaries), RGB (1, 1, 1) -> the white, Y = 1."""
    p = np.stack([xy_to_xyz(c) for c in primaries], axis=1)
    scale = np.linalg.solve(p, xy_to_xyz(white))
    return p * scale[None, :]


def bradford(src_white_xyz, dst_white_xyz) -> np.ndarray:
    """Linear Bradford chromatic adaptation matrix from one white (XYZ) to another (ICC.1:2010 Annex E)."""
    src = _BRADFORD @ np.asarray(src_white_xyz, float)
    dst = _BRADFORD @ np.asarray(dst_white_xyz, float)
    return np.linalg.inv(_BRADFORD) @ np.diag(dst / src) @ _BRADFORD


def srgb_curve(n: int = 4096) -> np.ndarray:
    """The IEC 61966-2-1 decoding curve (encoded value -> linear) at ``n`` evenly spaced inputs."""
    v = np.linspace(0.0, 1.0, n)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _s15(v: float) -> bytes:
    return struct.pack(">i", int(round(v * 65536.0)))


def xyz_tag(xyz) -> bytes:
    """XYZType (``XYZ ``): one XYZ number, s15Fixed16."""
    return b"XYZ " + bytes(4) + b"".join(_s15(v) for v in xyz)


def curve_tag(trc) -> bytes:
    """curveType (``curv``): a gamma (u8Fixed8), a table of [0, 1] values, or ``"srgb"``."""
    if isinstance(trc, str) and trc == "srgb":
        trc = srgb_curve()
    if np.ndim(trc) == 0:  # a pure gamma, u8Fixed8Number
        return b"curv" + bytes(4) + struct.pack(">IH", 1, int(round(float(trc) * 256.0)))
    values = np.clip(np.rint(np.asarray(trc, float) * 65535.0), 0, 65535).astype(">u2")
    return b"curv" + bytes(4) + struct.pack(">I", len(values)) + values.tobytes()


def desc_tag(text: str) -> bytes:
    """textDescriptionType (``desc``, ICC v2): the ASCII text, empty Unicode and ScriptCode parts."""
    ascii_ = text.encode("ascii", "replace") + b"\0"
    return (b"desc" + bytes(4) + struct.pack(">I", len(ascii_)) + ascii_
            + struct.pack(">II", 0, 0) + struct.pack(">HB", 0, 0) + bytes(67))


def text_tag(text: str) -> bytes:
    """textType (``text``): NUL-terminated ASCII."""
    return b"text" + bytes(4) + text.encode("ascii", "replace") + b"\0"


def matrix_trc_profile(primaries, white, trc, *, description: str, device_class: bytes = b"scnr",
                       copyright: str = "No copyright; invented for tilewright") -> bytes:
    """An ICC v2 RGB matrix/TRC profile.

    Parameters
    ----------
    primaries : ((x, y), (x, y), (x, y))
        Chromaticities of the red, green and blue primaries.
    white : (x, y)
        Chromaticity of the device white (RGB = 1, 1, 1).
    trc : float, array or "srgb"
        The tone curve of all three channels (encoded -> linear): a gamma, a table of values in
        [0, 1] at evenly spaced inputs, or ``"srgb"`` for the IEC 61966-2-1 curve.
    description : str
        The ``desc`` tag (ASCII).
    device_class : bytes
        ``b"scnr"`` (input device, default) or ``b"mntr"`` (display).

    Returns
    -------
    bytes
        The profile, ready for the TIFF InterColorProfile tag.
    """
    matrix = bradford(xy_to_xyz(white), D50) @ primaries_matrix(primaries, white)
    tags = [(b"desc", desc_tag(description)), (b"cprt", text_tag(copyright)), (b"wtpt", xyz_tag(D50)),
            (b"rXYZ", xyz_tag(matrix[:, 0])), (b"gXYZ", xyz_tag(matrix[:, 1])), (b"bXYZ", xyz_tag(matrix[:, 2])),
            (b"rTRC", curve_tag(trc)), (b"gTRC", curve_tag(trc)), (b"bTRC", curve_tag(trc))]
    return assemble(tags, device_class=device_class)


def assemble(tags, *, device_class: bytes = b"scnr", colour_space: bytes = b"RGB ", pcs: bytes = b"XYZ ",
             version: int = 0x02100000) -> bytes:
    """An ICC profile from ``[(signature, tag data), ...]``: header, tag table, 4-byte aligned data."""
    offset = 128 + 4 + 12 * len(tags)
    table, body = b"", b""
    for sig, data in tags:
        table += struct.pack(">4sII", sig, offset + len(body), len(data))
        body += data + bytes(-len(data) % 4)
    size = offset + len(body)
    header = struct.pack(">I4sI4s4s4s6H4s4sI4s4s8sI", size, b"\0\0\0\0", version, device_class, colour_space, pcs,
                         2024, 1, 1, 0, 0, 0, b"acsp", b"\0\0\0\0", 0, b"\0\0\0\0", b"\0\0\0\0", bytes(8), 0)
    header += b"".join(_s15(v) for v in D50) + bytes(4)
    header += bytes(128 - len(header))
    return header + struct.pack(">I", len(tags)) + table + body
