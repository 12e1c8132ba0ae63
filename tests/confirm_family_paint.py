"""Drawing primitives of the confirmation family (tests/confirm_family.py): smooth noise, tubes
along a polyline (tissue strips, needle cores, marker strokes), star-shaped pieces and small
supersampled stamps (nuclei, red cells) splatted onto the fine grid.

Everything here works on the FINE grid (a third of a thumbnail pixel or finer); coordinates are
(row, column) in fine pixels. Stamps are evaluated on a sub-grid ``SS`` times finer still and
area-averaged, so a 7 µm red cell two or three fine pixels wide keeps its physical amount of
absorber and its position to a fraction of a pixel.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

SS = 4  # sub-samples per fine pixel side for stamps (red cells); nuclei use 2


def smooth_noise(rng, shape, scale_px, lo=0.0, hi=1.0):
    """Gaussian-filtered white noise with features about ``scale_px`` fine pixels across, made on a
    coarse grid and zoomed up (cheap), stretched to span ``lo``..``hi``."""
    step = max(1, int(scale_px / 3))
    small = (shape[0] // step + 3, shape[1] // step + 3)
    n = ndi.gaussian_filter(rng.standard_normal(small).astype(np.float32), max(scale_px / step / 2, 0.7))
    big = ndi.zoom(n, step, order=1)[: shape[0], : shape[1]]
    big = np.pad(big, ((0, shape[0] - big.shape[0]), (0, shape[1] - big.shape[1])), mode="edge")
    span = big.max() - big.min()
    return (lo + (hi - lo) * (big - big.min()) / (span if span > 0 else 1)).astype(np.float32)


def star_piece(shape, centre, radius, rng, lobes=5, rough=0.18, aspect=1.0, angle=0.0):
    """A star-shaped piece (radius a sum of random harmonics of the angle), stretched by
    ``aspect`` along ``angle``. Returns a bool map."""
    amps = [rough / k ** 0.8 * rng.uniform(0.3, 1.0) for k in range(2, 2 + lobes)]
    phases = rng.uniform(0, 2 * np.pi, lobes)
    out = np.zeros(shape, bool)
    reach = radius * (1 + sum(amps)) * max(aspect, 1.0) + 2
    r0, r1 = max(0, int(centre[0] - reach)), min(shape[0], int(centre[0] + reach) + 1)
    c0, c1 = max(0, int(centre[1] - reach)), min(shape[1], int(centre[1] + reach) + 1)
    if r1 <= r0 or c1 <= c0:
        return out
    st = max(1, int(reach / 80))  # the smooth ratio r / edge on a coarse grid, interpolated
    yy, xx = np.mgrid[r0 : r1 + st : st, c0 : c1 + st : st].astype(np.float32)
    dy, dx = yy - centre[0], xx - centre[1]
    c, s = np.cos(angle), np.sin(angle)
    u, v = (dx * c + dy * s) / aspect, -dx * s + dy * c
    r, th = np.hypot(u, v), np.arctan2(v, u)
    edge = np.ones_like(r)
    for k, (a, p) in enumerate(zip(amps, phases), start=2):
        edge += a * np.cos(k * th + p)
    q = r / (radius * edge)
    if st > 1:
        q = ndi.zoom(q, st, order=1, grid_mode=False)
    out[r0:r1, c0:c1] = q[: r1 - r0, : c1 - c0] <= 1
    return out


def wander(rng, start, heading, length, step, turn=0.15):
    """A smooth random walk (a hand's or a knife's path): points every ``step`` fine pixels."""
    n = max(2, int(length / step))
    turns = ndi.gaussian_filter1d(rng.normal(0, turn, n), 3) * 3
    ang = heading + np.cumsum(turns)
    pts = np.cumsum(np.stack([np.sin(ang), np.cos(ang)], 1) * step, 0) + np.asarray(start, float)
    return pts


def resample(pts, step):
    """Points along a polyline every ``step`` fine pixels (and the arc length of each)."""
    pts = np.asarray(pts, float)
    seg = np.hypot(*np.diff(pts, axis=0).T)
    s = np.concatenate([[0], np.cumsum(seg)])
    if s[-1] <= 0:
        return pts[:1], np.zeros(1)
    t = np.arange(0, s[-1] + 1e-9, step)
    return np.stack([np.interp(t, s, pts[:, 0]), np.interp(t, s, pts[:, 1])], 1), t


def tube(shape, pts, half, pad=4):
    """Distance of every pixel (inside the polyline's box, grown by the widest half width) to a
    polyline, and the index of the nearest sample. ``half``: half width per sample.

    Returns (box slices, distance map, nearest-sample index map, inside map)."""
    pts = np.asarray(pts, float)
    hw = np.broadcast_to(np.asarray(half, float), (len(pts),))
    m = int(np.ceil(hw.max())) + pad
    r0, c0 = max(0, int(pts[:, 0].min()) - m), max(0, int(pts[:, 1].min()) - m)
    r1, c1 = min(shape[0], int(pts[:, 0].max()) + m + 1), min(shape[1], int(pts[:, 1].max()) + m + 1)
    if r1 <= r0 or c1 <= c0:
        return None
    box = (slice(r0, r1), slice(c0, c1))
    line = np.zeros((r1 - r0, c1 - c0), bool)
    idx = np.full(line.shape, -1, np.int64)
    rr = np.clip(np.round(pts[:, 0]).astype(int) - r0, 0, line.shape[0] - 1)
    cc = np.clip(np.round(pts[:, 1]).astype(int) - c0, 0, line.shape[1] - 1)
    line[rr, cc] = True
    idx[rr, cc] = np.arange(len(pts))
    dist, (ir, ic) = ndi.distance_transform_edt(~line, return_indices=True)
    near = idx[ir, ic]
    return box, dist.astype(np.float32), near, dist <= hw[near]


def splat(target, centres, stamp_fn, size, weights=None, batch=6000, ss=SS):
    """Add small stamps to ``target``. ``stamp_fn(y, x, i)`` gets sub-pixel offsets (arrays
    broadcasting to (n, size*ss, size*ss), in fine pixels from each centre) and the stamps' indices, and returns
    the stamps' values there; they are area-averaged to (n, size, size) and added in place."""
    centres = np.asarray(centres, float).reshape(-1, 2)
    if not len(centres):
        return target
    g = (np.arange(size * ss) + 0.5) / ss - size / 2
    for b0 in range(0, len(centres), batch):
        c = centres[b0 : b0 + batch]
        base = np.floor(c).astype(int)
        frac = c - base - 0.5
        y = g[None, :, None] - frac[:, 0, None, None]
        x = g[None, None, :] - frac[:, 1, None, None]
        vals = stamp_fn(y, x, np.arange(b0, b0 + len(c)))
        vals = np.broadcast_to(vals, (len(c), size * ss, size * ss)).reshape(len(c), size, ss, size, ss).mean(axis=(2, 4))
        if weights is not None:
            vals = vals * np.asarray(weights)[b0 : b0 + len(c), None, None]
        off = np.arange(size) - size // 2
        rr = base[:, 0, None, None] + off[None, :, None]
        cc = base[:, 1, None, None] + off[None, None, :]
        rr, cc = np.broadcast_to(rr, vals.shape), np.broadcast_to(cc, vals.shape)
        ok = (rr >= 0) & (rr < target.shape[0]) & (cc >= 0) & (cc < target.shape[1])
        np.add.at(target, (rr[ok], cc[ok]), vals[ok].astype(target.dtype))
    return target


def scatter(rng, density, per_px, mask=None):
    """Random points (fine pixel coordinates) with ``per_px`` expected points per pixel where
    ``density`` is 1 (a map 0..1), only inside ``mask``."""
    d = density if mask is None else np.where(mask, density, 0)
    n = rng.poisson(float(d.sum()) * per_px)
    if n == 0:
        return np.zeros((0, 2))
    flat = d.ravel() / d.sum()
    pick = rng.choice(flat.size, size=n, p=flat)
    return np.stack(np.unravel_index(pick, d.shape), 1) + rng.uniform(0, 1, (n, 2))
