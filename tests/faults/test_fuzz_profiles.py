"""Property-based fuzzing of embedded ICC profiles: only typed errors.

Profile bytes (a matrix/TRC profile, a LUT profile, a real v4 profile when installed) are mutated
in their header fields, tag-table entries, tag data and length. Every example either gives a
usable transform or raises ColourProfileError naming the slide; never another exception, a crash
or a hang. With ``colour_profile="ignore"`` every example opens. Examples go through the library's
profile checks directly, and a share of them through ``tw.open`` of a TIFF carrying the profile.
"""

from __future__ import annotations

import struct

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

import tilewright as tw
from colour_refs import DEBIAN_ICC, adobe_lut_profile, write_profiled_slide
from tilewright.demo import icc
from tilewright.errors import ColourProfileError
from tilewright.slide.colour import colour_transform, slide_colour

pytestmark = pytest.mark.timeout(300)

_BASES = [icc.matrix_trc_profile(**icc.SCANNER_B), adobe_lut_profile()]
if (DEBIAN_ICC / "colord/WideGamutRGB.icc").exists():
    _BASES.append((DEBIAN_ICC / "colord/WideGamutRGB.icc").read_bytes())

_IMG = np.full((256, 256, 3), 225, np.uint8)
_IMG[64:192, 64:192] = (160, 70, 130)

mutation = st.one_of(
    # a header field: size, version, class, colour space, PCS, signature, tag count
    st.tuples(st.just("header"), st.sampled_from([0, 8, 12, 16, 20, 36, 128]),
              st.binary(min_size=4, max_size=4)),
    # one tag-table entry: its signature, offset or size
    st.tuples(st.just("entry"), st.integers(0, 30), st.sampled_from([0, 4, 8]),
              st.one_of(st.integers(0, 2**32 - 1), st.sampled_from([0, 1, 7, 8, 2**31, 2**32 - 1]))),
    # bytes anywhere (tag data: curves, XYZ numbers, CLUT entries, text)
    st.tuples(st.just("bytes"), st.integers(0, 2**20), st.binary(min_size=1, max_size=16)),
    # a cut
    st.tuples(st.just("cut"), st.floats(0.0, 1.0), st.just(None)),
)


def _apply(raw: bytearray, m) -> bytearray:
    kind = m[0]
    if kind == "header":
        raw[m[1]:m[1] + 4] = m[2]
    elif kind == "entry":
        count = max(1, (len(raw) - 132) // 12) if len(raw) >= 144 else 0
        if count:
            pos = 132 + 12 * (m[1] % min(count, 32)) + m[2]
            raw[pos:pos + 4] = struct.pack(">I", m[3])
    elif kind == "bytes":
        pos = m[1] % max(1, len(raw) - len(m[2]))
        raw[pos:pos + len(m[2])] = m[2]
    else:
        raw = raw[: int(len(raw) * m[1])]
    return raw


@settings(max_examples=200, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(base=st.integers(0, len(_BASES) - 1), mutations=st.lists(mutation, min_size=1, max_size=3),
       through_file=st.integers(0, 3))
def test_fuzzed_profiles_raise_only_typed_errors(tmp_path_factory, base, mutations, through_file):
    data = bytearray(_BASES[base])
    for m in mutations:
        data = _apply(data, m)
    data = bytes(data)
    name = "fuzzed.tif"
    try:
        xf = colour_transform(data, path=name)
    except ColourProfileError as exc:
        event("refused")
        assert name in str(exc) and "--colour-profile ignore" in str(exc)
    else:
        event("usable")
        assert xf.info.applied and xf.info.sha256
    info, transform = slide_colour(data, "ignore", name)  # never raises: raw pixels are always available
    assert transform is None and info.embedded and not info.applied
    if through_file == 0:  # a quarter of the examples through a real file and tw.open
        path = write_profiled_slide(tmp_path_factory.mktemp("fz") / name, _IMG, data)
        try:
            with tw.open(path) as s:
                assert s.colour.applied
        except ColourProfileError as exc:
            assert str(path) in str(exc)
        with tw.open(path, colour_profile="ignore") as s:
            np.testing.assert_array_equal(s.read_level(0, 0, 0, 256, 256), _IMG)
