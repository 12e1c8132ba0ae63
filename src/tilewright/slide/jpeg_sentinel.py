"""A sentinel MCU row: checking a JPEG tile's entropy-coded stream in the decode that reads it.

A baseline JPEG has no checksum and libjpeg(-turbo) passes a desynchronized Huffman decoder
(the usual effect of a damaged byte) as a warning, returning garbage (see
:mod:`tilewright.slide.jpeg_check`). Here the tile's stream is rewritten to declare one more
MCU row, and entropy-coded data for that row, written with the tile's own Huffman tables, is
appended after the last real bits. The extra row is a *sentinel* of flat 8 x 8 blocks whose DC
differences draw vertical stripes 8 px wide in the first component: level ``p - 2a`` for the
first stripe, then ``p - a`` and ``p`` alternately, ``p`` being whatever DC value the decoder
reached; decoded, adjacent levels differ by an exact number of grey levels. A decoder in sync
reads the sentinel exactly and draws the stripes. One that ran out of data reads sentinel bits
as real blocks (the unique first stripe is lost) and zero-fills the end of the row; one that
finished with bytes to spare decodes real bits as sentinel blocks (the first stripe moves) or
reads the sentinel from misaligned bits. Either way the stripes break.

The padding at the end of the real data is not marked: the real data is taken to end with an
end-of-block code, as nearly every block of a natural image does. When it does not, or a stripe
is clamped at black, the sentinel fails on an intact tile; callers settle every failure with
:func:`tilewright.slide.jpeg_check.jpeg_in_sync`, so a failure costs time, never a false
alarm. Streams with restart markers (which resynchronize a damaged stream before the sentinel),
several scans, arithmetic coding or tables lacking the symbols needed get no plan.

With vertical chroma subsampling (YCbCr 4:2:0) decoders smooth chroma across MCU rows, so the
last real pixel row of an extended decode differs from a plain decode; there the pixels come
from a plain decode and :func:`reduced_sentinel_intact` checks the extended stream at 1/8
scale (a decode that costs little more than reading the Huffman codes).

References
----------
.. [1] ITU-T Recommendation T.81 (1992) | ISO/IEC 10918-1. Information technology — Digital
   compression and coding of continuous-tone still images: B.2.2 (frame header), F.1.2.1
   (DC difference coding), F.1.2.2 (AC coding, end of block), F.1.2.3 (byte stuffing),
   F.2.2.5 and B.1.1.5 (padding of the last byte with 1-bits), Annex K.3 (typical tables).
"""

from __future__ import annotations

import numpy as np

__all__ = ["SentinelPlan", "decode_with_sentinel", "header_length", "marker_segments", "reduced_sentinel_intact",
           "sentinel_intact", "sentinel_plan", "sentinel_stream"]

_STEP = 128  # least dequantized DC step between stripe levels (x 1/8 px): 16 grey levels


class SentinelPlan:
    """How to extend the tiles sharing one JPEG header by a sentinel MCU row.

    Attributes
    ----------
    height, width : int
        Declared size of the real image.
    real_rows : int
        Rows the real MCU rows cover (``height`` rounded up to the MCU height).
    ext_height : int
        Declared height of the extended stream (``real_rows`` + one MCU height).
    vertical : bool
        A component is subsampled vertically: decoders smooth chroma across MCU rows, so the
        last real pixel row of the extended decode differs from a plain decode (the caller
        must take the pixels from a plain decode and check the extension separately).
    grey_step : int
        Decoded levels (of the first component) between the sentinel's stripe levels.
    """

    __slots__ = ("height", "width", "real_rows", "ext_height", "vertical", "sof_height_at", "bits", "nbits",
                 "eob_ones", "grey_step")

    def __init__(self, height, width, real_rows, ext_height, vertical, sof_height_at, bits, nbits, eob_ones,
                 grey_step):
        self.height, self.width, self.real_rows, self.ext_height = height, width, real_rows, ext_height
        self.vertical, self.sof_height_at, self.bits, self.nbits = vertical, sof_height_at, bits, nbits
        self.eob_ones = eob_ones  # trailing 1-bits of the end-of-block code of the last block
        self.grey_step = grey_step  # decoded grey levels between adjacent stripe levels


def marker_segments(data: bytes):
    """(marker, payload start, payload end) of the marker segments before the entropy data."""
    n, i = len(data), 2
    if n < 4 or data[0] != 0xFF or data[1] != 0xD8:
        return
    while i + 4 <= n:
        if data[i] != 0xFF:
            return
        marker = data[i + 1]
        if marker == 0xFF:
            i += 1
            continue
        if marker in (0xD8, 0xD9):
            i += 2
            continue
        length = (data[i + 2] << 8) | data[i + 3]
        yield marker, i + 4, i + 2 + length
        if marker == 0xDA:
            return
        i += 2 + length


def _huffman_codes(payload: bytes, tables: dict) -> bool:
    """Add the (class, id) -> {symbol: (code, length)} maps of a DHT payload; False if malformed."""
    j = 0
    while j < len(payload):
        if j + 17 > len(payload):
            return False
        tc = payload[j]
        counts = payload[j + 1:j + 17]
        syms = payload[j + 17:j + 17 + sum(counts)]
        code, k, table = 0, 0, {}
        for length in range(1, 17):
            for _ in range(counts[length - 1]):
                if k >= len(syms):
                    return False
                table[syms[k]] = (code, length)
                k += 1
                code += 1
            code <<= 1
        tables[tc] = table
        j += 17 + len(syms)
    return True


def sentinel_plan(header: bytes, tables: bytes | None = None) -> SentinelPlan | None:
    """Plan the sentinel extension of JPEG tiles with this header (SOI up to the SOS segment).

    Parameters
    ----------
    header : bytes
        The tile's bytes up to the end of its SOS segment (see :func:`entropy_bounds`).
    tables : bytes, optional
        Abbreviated table stream stored elsewhere (TIFF JPEGTables), read before ``header``.

    Returns
    -------
    SentinelPlan or None
        None when the tiles cannot be checked this way (not baseline Huffman, restart
        intervals, several scans, Huffman tables without the symbols needed): use
        :func:`jpeg_in_sync`.
    """
    dht, dqt, sof, sos, dri = {}, {}, None, None, 0
    for stream, own in ((tables, False), (header, True)):
        if not stream:
            continue
        for marker, a, b in marker_segments(stream):
            seg = stream[a:b]
            if marker == 0xC4:
                if not _huffman_codes(seg, dht):
                    return None
            elif marker == 0xDB:
                j = 0
                while j < len(seg):
                    pq, tq = seg[j] >> 4, seg[j] & 15
                    dqt[tq] = (seg[j + 1] << 8 | seg[j + 2]) if pq else seg[j + 1]
                    j += 1 + 64 * (2 if pq else 1)
            elif marker == 0xDD and len(seg) >= 2:
                dri = (seg[0] << 8) | seg[1]
            elif marker in (0xC0, 0xC1) and own:
                if seg[0] != 8 or len(seg) < 6 + 3 * seg[5]:
                    return None
                comps = {seg[6 + 3 * k]: (seg[7 + 3 * k] >> 4, seg[7 + 3 * k] & 15, seg[8 + 3 * k])
                         for k in range(seg[5])}
                sof = (a + 1, (seg[1] << 8) | seg[2], (seg[3] << 8) | seg[4], comps)
            elif (0xC2 <= marker <= 0xCF and marker not in (0xC4, 0xC8, 0xCC)) and own:
                return None  # progressive, lossless or arithmetic coding
            elif marker == 0xDA and own:
                sos = [(seg[1 + 2 * k], seg[2 + 2 * k] >> 4, seg[2 + 2 * k] & 15) for k in range(seg[0])]
    if sof is None or sos is None or dri:
        return None
    height_at, height, width, comps = sof
    if height == 0 or width == 0 or len(sos) != len(comps) or any(c not in comps for c, _, _ in sos):
        return None
    hmax = max(h for h, _, _ in comps.values())
    vmax = max(v for _, v, _ in comps.values())
    mcu_w, mcu_h = 8 * hmax, 8 * vmax
    first = sos[0][0]
    q0 = dqt.get(comps[first][2], 0)  # DC quantizer of the first component
    if not q0:
        return None
    step = -(-_STEP // q0)
    while step * q0 % 8:  # a whole number of grey levels: decoded levels then differ exactly
        step += 1
    if 2 * step > 2047:
        return None
    bits = nbits = 0
    level = 0
    for m in range(-(-width // mcu_w)):
        for cid, td, ta in sos:
            h, v, _ = comps[cid]
            dc, ac = dht.get(td), dht.get(0x10 | ta)
            if dc is None or ac is None or 0 not in ac:
                return None
            for blk in range(h * v):
                diff = 0
                if cid == first:
                    column = m * h + blk % h  # 8-px stripe of this block
                    target = -2 * step if column == 0 else -step if column % 2 else 0
                    diff, level = target - level, target
                cat = abs(diff).bit_length()
                if cat not in dc:
                    return None
                code, length = dc[cat]
                bits, nbits = (bits << length) | code, nbits + length
                if cat:
                    extra = diff if diff > 0 else diff + (1 << cat) - 1
                    bits, nbits = (bits << cat) | extra, nbits + cat
                code, length = ac[0]  # end of block
                bits, nbits = (bits << length) | code, nbits + length
    real_rows = -(-height // mcu_h) * mcu_h
    if real_rows + mcu_h > 65535:
        return None
    vertical = any(v != vmax for _, v, _ in comps.values())
    code, length = dht[0x10 | sos[-1][2]][0]  # EOB of the last block of an MCU
    eob_ones = 0
    while eob_ones < length and (code >> eob_ones) & 1:
        eob_ones += 1
    return SentinelPlan(height, width, real_rows, real_rows + mcu_h, vertical, height_at, bits, nbits, eob_ones,
                        step * q0 // 8)


def sentinel_stream(data, plan: SentinelPlan) -> bytes | None:
    """The tile's JPEG stream extended by the sentinel MCU row of ``plan``.

    The sentinel's bits replace the padding 1-bits of the last byte of entropy-coded data. Where
    the padding starts is not marked: the real data is taken to end with an end-of-block code
    (its last block's highest-frequency coefficient is zero, as in nearly every block of a
    natural image), so the padding is the last byte's trailing 1-bits less those ending that
    code. Otherwise the sentinel is misread and fails, to be settled by :func:`jpeg_in_sync`.

    Parameters
    ----------
    data : bytes-like
        One tile's JPEG stream whose header ``plan`` was made from.
    plan : SentinelPlan

    Returns
    -------
    bytes or None
        None when the stream does not end with its entropy-coded data and EOI.
    """
    end = len(data) - 2
    if end >= 5 and data[end + 1] in (0x00, 0xFF) and data[end - 1] == 0xFF and data[end] == 0xD9:
        end -= 1  # one byte padding the stream to an even length (DICOM fragments, PS3.5 A.4)
    if end < 4 or data[end] != 0xFF or data[end + 1] != 0xD9:
        return None
    last = data[end - 1]
    cut = end - 1
    if last == 0x00 and data[end - 2] == 0xFF:  # a stuffed 0xFF
        last, cut = 0xFF, end - 2
    ones = 0
    while ones < 8 and (last >> ones) & 1:
        ones += 1
    pad = ones - plan.eob_ones if ones < 8 else 7 - plan.eob_ones
    if pad < 0:
        return None
    keep = 8 - pad
    nbits = keep + plan.nbits
    fill = -nbits % 8
    bits = ((((last >> pad) << plan.nbits) | plan.bits) << fill) | ((1 << fill) - 1)
    tail = bits.to_bytes((nbits + fill) // 8, "big").replace(b"\xff", b"\xff\x00")
    at, view = plan.sof_height_at, memoryview(data)  # the tile's bytes copied once, by the join
    return b"".join((view[:at], plan.ext_height.to_bytes(2, "big"), view[at + 2:cut], tail, b"\xff\xd9"))


def sentinel_intact(rows: np.ndarray, stripe: int, grey_step: int) -> bool:
    """Whether decoded sentinel rows show the stripes an in-sync decoder draws.

    The sentinel's first component steps through levels ``p - 2s`` (first stripe only), then
    ``p - s`` and ``p`` alternately, ``p`` being the DC value the decoder had reached. Decoded,
    the stripes differ by exactly ``grey_step`` levels in each channel that carries the first
    component (all three for YCbCr output, the red one for RGB-coded JPEG) and not at all in
    the others (channels clamped at 0 or 255 excepted). The unique first stripe and the exact steps reject a sentinel decoded from a
    shifted position (whole blocks of real data taken for sentinel blocks, or the reverse).

    Parameters
    ----------
    rows : ndarray
        The decoded rows of the sentinel MCU row, (rows, width) or (rows, width, channels).
    stripe : int
        Stripe width in pixels: 8 at full scale, 1 for a decode at 1/8 scale.
    grey_step : int
        :attr:`SentinelPlan.grey_step`.

    Returns
    -------
    bool
        False also where clamping hides the steps in every channel (the caller then uses the
        probes); a channel clamped at white or black need only be ordered.
    """
    n, width = rows.shape[0], rows.shape[1]
    if n == 0 or width < 3 * stripe:
        return False
    raw = np.ascontiguousarray(rows).tobytes()  # comparing bytes: a few µs, numpy ops cost more
    c = len(raw) // (n * width)
    first, odd, even = raw[:c], raw[stripe * c:(stripe + 1) * c], raw[2 * stripe * c:(2 * stripe + 1) * c]
    exact = False
    for p, q, r in zip(first, odd, even):
        if q - p == r - q == grey_step:
            exact = True
        elif p == q == r:
            continue  # a channel without the first component (RGB-coded JPEG)
        elif not ((r == 255 or p == 0) and p <= q <= r):  # clamped at white or black
            return False
    if not exact:
        return False
    row = (first * stripe + (odd * stripe + even * stripe) * (width // (2 * stripe) + 1))[:width * c]
    return raw == row * n


def header_length(data) -> int | None:
    """Length of a JPEG stream's header (SOI up to the end of its first SOS segment), or None."""
    end = None
    for marker, _, stop in marker_segments(data):
        if marker == 0xDA:
            end = stop
    return end if end is not None and end <= len(data) else None


def reduced_sentinel_intact(ext: bytes, tables, plan: SentinelPlan) -> bool:
    """Check a sentinel-extended stream with a 1/8-scale grey decode (OpenCV's libjpeg-turbo).

    For tiles whose pixels come from a plain decode (vertical chroma subsampling, see
    :class:`SentinelPlan`). At 1/8 scale each 8 x 8 block decodes to its DC value alone, so
    the decode costs little more than reading the Huffman codes and the stripes are 1 px wide.

    Parameters
    ----------
    ext : bytes
        :func:`sentinel_stream` of the tile.
    tables : bytes or None
        The abbreviated table stream (TIFF JPEGTables), if the tile relies on one.
    plan : SentinelPlan

    Returns
    -------
    bool
    """
    import cv2

    stream = ext if not tables else b"".join((bytes(tables)[:-2], ext[2:]))
    small = cv2.imdecode(np.frombuffer(stream, np.uint8), cv2.IMREAD_REDUCED_GRAYSCALE_8)
    return small is not None and sentinel_intact(small[plan.real_rows // 8:], 1, plan.grey_step)


def decode_with_sentinel(ext: bytes, plan: SentinelPlan, out: np.ndarray, **decode_args) -> np.ndarray | None:
    """Decode a sentinel-extended tile (no vertical subsampling) and check its sentinel.

    Parameters
    ----------
    ext : bytes
        :func:`sentinel_stream` of the tile.
    plan : SentinelPlan
    out : ndarray
        (``plan.ext_height``, width, 3) uint8 buffer decoded into.
    **decode_args
        ``tables``, ``colorspace``, ``outcolorspace`` for ``imagecodecs.jpeg_decode``.

    Returns
    -------
    ndarray or None
        The real rows (a view of ``out``), equal to a plain decode of the tile, if the
        sentinel is intact; None if it is not or the decoder raised.
    """
    import imagecodecs

    try:
        img = imagecodecs.jpeg_decode(ext, shape=out.shape[:2], bitspersample=8, out=out, **decode_args)
    except Exception:  # noqa: BLE001 - settled by the probe check on the stored stream
        return None
    if not sentinel_intact(img[plan.real_rows:], 8, plan.grey_step):
        return None
    return img[:plan.height]
