"""Property-based fuzzing of TIFF headers and tags through ``open``: only typed errors.

Every example either opens (and then reads a thumbnail and a region) or raises a subclass of
TilewrightError; never another exception, a crash or a hang (the test has a timeout; no
per-example deadline, which a loaded CI machine can exceed on a sound example).
"""

from __future__ import annotations

import struct

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import tilewright as tw
from tilewright.errors import TilewrightError

pytestmark = pytest.mark.timeout(300)


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """A small two-level JPEG pyramid, its bytes, and the file offsets of every IFD entry."""
    folder = tmp_path_factory.mktemp("fuzz")
    img = np.full((384, 512, 3), 230, np.uint8)
    img[64:300, 80:400] = (160, 70, 130)
    path = folder / "base.tif"
    with tifffile.TiffWriter(path) as t:
        t.write(img, tile=(128, 128), photometric="rgb", compression="jpeg",
                resolution=(1e4 / 0.25, 1e4 / 0.25), resolutionunit="CENTIMETER")
        t.write(img[::2, ::2], tile=(128, 128), photometric="rgb", compression="jpeg")
    with tifffile.TiffFile(path) as tf:
        entries = [tag.offset for page in tf.pages for tag in page.tags.values()]
        order = tf.byteorder
    return folder, path.read_bytes(), entries, order


mutation = st.one_of(
    # rewrite one IFD entry: type, count, or value field
    st.tuples(st.just("entry"), st.integers(0, 10_000), st.sampled_from(["type", "count", "value"]),
              st.one_of(st.integers(0, 2**32 - 1), st.sampled_from([0, 1, 2**16 - 1, 2**31, 2**32 - 1]))),
    # overwrite bytes in the header or anywhere in the file
    st.tuples(st.just("bytes"), st.integers(0, 10_000), st.binary(min_size=1, max_size=8), st.booleans()),
    # truncate the file
    st.tuples(st.just("cut"), st.floats(0.0, 1.0), st.just(None), st.just(None)),
)


def _apply(raw: bytearray, entries, order, m) -> bytearray:
    kind = m[0]
    if kind == "entry":
        off = entries[m[1] % len(entries)]
        field = {"type": (2, "H", 0xFFFF), "count": (4, "I", 2**32 - 1), "value": (8, "I", 2**32 - 1)}[m[2]]
        pos, fmt, top = field
        raw[off + pos:off + pos + struct.calcsize(fmt)] = struct.pack(order + fmt, m[3] & top)
    elif kind == "bytes":
        span = 16 if m[3] else len(raw)
        pos = m[1] % max(1, span - len(m[2]))
        raw[pos:pos + len(m[2])] = m[2]
    else:
        raw = raw[: int(len(raw) * m[1])]
    return raw


@settings(max_examples=150, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(mutations=st.lists(mutation, min_size=1, max_size=4))
def test_fuzzed_tiffs_raise_only_typed_errors(base, mutations):
    folder, raw, entries, order = base
    data = bytearray(raw)
    for m in mutations:
        data = _apply(data, entries, order, m)
    path = folder / "fuzzed.tif"
    path.write_bytes(bytes(data))
    try:
        with tw.open(path) as s:
            s.thumbnail(4.0)
            lv = s.levels[0]
            s.read_level(0, lv.height // 3, lv.width // 3, 200, 200)
            s.at_mpp(max(s.mpp, 0.5)).read(0, 0, 64, 64)
    except TilewrightError as exc:
        assert str(path) in str(exc)  # names the file
