"""Damaged or mismatched embedded ICC profiles: the slide fails with a typed error naming the file
and the fix (``--colour-profile ignore``); with "ignore" it reads its raw pixels."""

from __future__ import annotations

import struct

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from colour_refs import debian_profile, write_profiled_slide
from tilewright.demo import icc
from tilewright.errors import ColourProfileError

pytestmark = pytest.mark.timeout(120)

GOOD = icc.matrix_trc_profile(**icc.ADOBE_RGB_1998)
_IMG = np.full((512, 640, 3), 232, np.uint8)
_IMG[80:400, 120:500] = (170, 80, 150)  # ground truth constructed here
_IMG[200:260, 200:300] = (90, 40, 110)


def _with(profile: bytes, offset: int, value: bytes) -> bytes:
    out = bytearray(profile)
    out[offset:offset + len(value)] = value
    return bytes(out)


def _tag_offset(profile: bytes, sig: bytes) -> int:
    n = struct.unpack_from(">I", profile, 128)[0]
    for i in range(n):
        s, off, _ = struct.unpack_from(">4sII", profile, 132 + 12 * i)
        if s == sig:
            return off
    raise KeyError(sig)


def _without_tag(profile: bytes, sig: bytes) -> bytes:
    """The profile with one tag-table entry renamed to an unknown signature (its data stays)."""
    n = struct.unpack_from(">I", profile, 128)[0]
    for i in range(n):
        if profile[132 + 12 * i:136 + 12 * i] == sig:
            return _with(profile, 132 + 12 * i, b"zzzz")
    raise KeyError(sig)


def _reversed_curve() -> bytes:
    # a TRC falling from 1 to 0: parses, but device grey would come out inverted (damaged profile)
    return icc.matrix_trc_profile(icc.ADOBE_RGB_1998["primaries"], icc.ADOBE_RGB_1998["white"],
                                  np.linspace(1.0, 0.0, 256), description="inverted curve")


BAD = {  # name -> (profile bytes, words the reason must contain)
    "truncated header": (lambda: GOOD[:100], "truncated"),
    "truncated tags": (lambda: GOOD[: len(GOOD) // 2], "truncated"),
    "not a profile": (lambda: _with(GOOD, 36, b"xxxx"), "acsp"),
    "grey colour space (header)": (lambda: _with(GOOD, 16, b"GRAY"), "grey data"),
    "CMYK colour space (header)": (lambda: _with(GOOD, 16, b"CMYK"), "CMYK data"),
    "device link": (lambda: _with(GOOD, 12, b"link"), "device-link"),
    "version 5": (lambda: _with(GOOD, 8, b"\x05"), "version 5"),
    "tag outside the profile": (lambda: _with(GOOD, 132 + 4, struct.pack(">I", 10 ** 6)), "outside"),
    "no blue curve": (lambda: _without_tag(GOOD, b"bTRC"), "neither matrix/TRC"),
    "garbage curve data": (lambda: _with(GOOD, _tag_offset(GOOD, b"rTRC"), b"junk"), "LittleCMS"),
    "inverted curve": (_reversed_curve, "implausible lightness"),
    "Debian grey profile (icc-profiles-free)": (lambda: debian_profile("Gray.icc"), "grey data"),
    "Debian CMYK profile (libgs-common)": (lambda: debian_profile("ghostscript/default_cmyk.icc"), "CMYK data"),
    "Debian Lab abstract profile (icc-profiles-free)": (lambda: debian_profile("CineLogCurve.icc"), "CIELAB data"),
}


@pytest.mark.parametrize("name", list(BAD))
def test_bad_profile_fails_with_the_fix_and_ignore_reads_raw(tmp_path, name):
    make, words = BAD[name]
    path = write_profiled_slide(tmp_path / "bad.tif", _IMG, make())
    with pytest.raises(ColourProfileError) as e:
        tw.open(path)
    assert e.value.path == str(path) and str(path) in str(e.value)
    assert words in str(e.value) and "--colour-profile ignore" in str(e.value)
    with tw.open(path, colour_profile="ignore") as s:
        assert s.colour.embedded and not s.colour.applied
        np.testing.assert_array_equal(s.read_level(0, 0, 0, 512, 640), _IMG)  # the raw pixels, as written


def test_openslide_backend_refuses_the_same_profile(tmp_path):
    path = write_profiled_slide(tmp_path / "grey.tif", _IMG, _with(GOOD, 16, b"GRAY"))
    with pytest.raises(ColourProfileError, match="grey data"):
        tw.open(path, backend="openslide")


def test_one_bad_profile_does_not_stop_the_cohort(tmp_path, fast_config):
    slides = tmp_path / "slides"
    slides.mkdir()
    big = np.repeat(np.repeat(_IMG, 4, axis=0), 4, axis=1)  # 0.5 x 0.6 mm, mostly "tissue"
    bad = write_profiled_slide(slides / "bad.tif", big, GOOD[:200], mpp=0.25, compression="jpeg")
    good = write_profiled_slide(slides / "good.tif", big, GOOD, mpp=0.25, compression="jpeg")
    res = tw.tile_cohort([bad, good], tmp_path / "out", fast_config, progress=False)
    status = {r.slide_id: r for r in res}
    assert status["bad"].status == "failed" and "--colour-profile ignore" in status["bad"].error
    assert status["good"].status == "ok" and status["good"].colour_profile == icc.ADOBE_RGB_1998["description"]
    assert not (tmp_path / "out" / "bad.zarr").exists()
    manifest = pd.read_csv(tmp_path / "out" / "manifest.csv", keep_default_na=False).set_index("slide_id")
    assert "truncated" in manifest.loc["bad", "error"]
    again = tw.tile_cohort([bad], tmp_path / "out2", fast_config.replace(colour_profile="ignore"), progress=False)
    assert again[0].status == "ok" and again[0].colour_profile.endswith("(ignored)")
