"""Fat found as a mesh of thin membranes round closed cells (tilewright.tissue.membranes), on a small
family of slides drawn here: Voronoi cells (fat cells 60-130 µm across) walled by eosin membranes
2-3 µm wide, Beer-Lambert with the Ruifrok & Johnston (2001) eosin vector, rendered at 2 µm/px and
averaged down to odd thumbnail µm/px (7.3-10.7), with sensor noise, an off-centre fall-off of the
light, a dense piece of ordinary tissue, and the things on glass that are lines but not fat: a
fibre, a bubble's rim and a coverslip edge. Ground truth is the region the cells were drawn in."""

import math

import numpy as np
import pytest
from scipy.spatial import cKDTree

from tilewright.tissue.mask import tissue_mask
from tilewright.tissue.membranes import fat_mesh, line_masks, line_pixels

E_RJ = np.array([0.072, 0.990, 0.105])  # eosin, Ruifrok & Johnston 2001
H_RJ = np.array([0.650, 0.704, 0.286])  # hematoxylin, idem
FINE = 2.0  # µm/px of the drawing


def _ellipse(shape, cy, cx, ry, rx):
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    return ((yy - cy) / ry) ** 2 + ((xx - cx) / rx) ** 2 <= 1.0


def _curve(shape, rng, y0, x0, steps, width):
    """A fibre: a slowly turning random walk of ``steps`` pixels, ``width`` pixels wide."""
    out = np.zeros(shape, bool)
    y, x, a = float(y0), float(x0), rng.uniform(0, 2 * np.pi)
    for _ in range(steps):
        a += rng.normal(0, 0.08)
        y, x = y + math.sin(a), x + math.cos(a)
        iy, ix = int(y), int(x)
        if width // 2 <= iy < shape[0] - width // 2 - 1 and width // 2 <= ix < shape[1] - width // 2 - 1:
            out[iy - width // 2:iy + width // 2 + 1, ix - width // 2:ix + width // 2 + 1] = True
    return out


def scene(seed):
    """One slide drawn at FINE µm/px: (RGB float, fat region, every tissue, the bubble's rim and the
    coverslip edge, the generator left at the draw's thumbnail µm/px)."""
    rng = np.random.default_rng(seed)
    h, w = 1400, 1800  # 2.8 x 3.6 mm
    cell_um = rng.uniform(60, 130)
    wall_um = rng.uniform(2.0, 3.0)
    wall_od = rng.uniform(0.12, 0.4)  # eosin concentration (OD in green ~ 0.99 x this)
    fat = _ellipse((h, w), 0.35 * h, 0.3 * w, 0.22 * h, 0.2 * w)
    # Voronoi walls: pixels about as far from their nearest seed as from the second nearest
    step = cell_um / FINE
    gy, gx = np.mgrid[0:h:step, 0:w:step]
    seeds = np.c_[gy.ravel(), gx.ravel()] + rng.uniform(-0.35, 0.35, (gy.size, 2)) * step
    yy, xx = np.mgrid[0:h, 0:w]
    dist, _ = cKDTree(seeds).query(np.c_[yy.ravel(), xx.ravel()], k=2)
    walls = ((dist[:, 1] - dist[:, 0]) < wall_um / FINE).reshape(h, w) & fat
    import cv2

    rim = cv2.morphologyEx(fat.astype(np.uint8), cv2.MORPH_GRADIENT, np.ones((2, 2), np.uint8)).astype(bool)
    walls |= rim & fat  # the lobule's own membrane closes the cells at its edge
    solid = _ellipse((h, w), 0.65 * h, 0.72 * w, 0.2 * h, 0.16 * w)
    conc_e = np.where(walls, wall_od, 0.0) + np.where(solid, 0.5, 0.0)
    nuclei = cv2.GaussianBlur(rng.random((h, w)).astype(np.float32), (0, 0), 3.0)  # ~10 µm blotches
    nuclei = (nuclei - nuclei.mean()) / nuclei.std()
    conc_h = np.where(solid, np.clip(0.45 + 0.3 * nuclei, 0.05, None), 0.0)
    fibre = _curve((h, w), rng, 0.8 * h, 0.15 * w, 700, 2)
    ring = _ellipse((h, w), 0.25 * h, 0.72 * w, 70, 80) & ~_ellipse((h, w), 0.25 * h, 0.72 * w, 67, 77)
    edge = np.zeros((h, w), bool)
    edge[:, int(0.93 * w):int(0.93 * w) + 2] = True  # a coverslip's edge
    grey = np.where(fibre | ring | edge, 0.35, 0.0)
    od = conc_e[..., None] * E_RJ + conc_h[..., None] * H_RJ + grey[..., None] * np.array([1.0, 1.0, 1.0])
    glass = np.array([236.0, 233.0, 238.0]) + rng.uniform(-6, 6, 3)
    cy, cx = rng.uniform(0.3, 0.7) * h, rng.uniform(0.3, 0.7) * w
    light = 1.0 - rng.uniform(0.03, 0.12) * (((yy - cy) / h) ** 2 + ((xx - cx) / w) ** 2) / 0.5
    fine = glass * light[..., None] * 10.0 ** (-od)
    return fine, fat, fat | solid, ring | edge, rng


def draw(seed):
    """One slide: (thumbnail RGB, its µm/px, truth fat region, truth of every tissue, the bubble's rim
    and the coverslip edge). The fibre starts at random and may run into the fat."""
    import cv2

    fine, fat, tissue, things, rng = scene(seed)
    h, w = fat.shape
    mpp = rng.uniform(7.3, 10.7)
    size = (int(w * FINE / mpp), int(h * FINE / mpp))
    thumb = cv2.resize(fine.astype(np.float32), size, interpolation=cv2.INTER_AREA)
    thumb = np.clip(thumb + rng.normal(0, rng.uniform(1.0, 3.5), thumb.shape) + 0.5, 0, 255).astype(np.uint8)
    down = lambda m: cv2.resize(m.astype(np.float32), size, interpolation=cv2.INTER_AREA) >= 0.5
    things = cv2.resize(things.astype(np.float32), size, interpolation=cv2.INTER_AREA) > 0  # never near fat
    return thumb, mpp, down(fat), down(tissue), things


SEEDS = range(16)


@pytest.fixture(scope="module")
def family():
    """Each draw with its mask, and its mask without the mesh step (``mesh_um=0``)."""
    out = []
    for seed in SEEDS:
        rgb, mpp, fat, tissue, things = draw(seed)
        out.append((rgb, mpp, fat, tissue, things, tissue_mask(rgb, mpp=mpp).array,
                    tissue_mask(rgb, mpp=mpp, mesh_um=0).array))
    return out


def test_line_masks_sum_to_zero_and_find_a_line_in_its_own_direction():
    # ground truth: a one-pixel line drawn at each mask's angle is found, in about that direction
    masks = line_masks()
    assert all(abs(float(m.sum())) < 1e-6 for m in masks)
    from tilewright.tissue.density import od_tables

    tables = od_tables((230.0, 230.0, 230.0))
    for k in range(len(masks)):
        t = math.pi * k / len(masks)
        img = np.full((41, 41, 3), 230, np.uint8)
        for s in np.linspace(-18, 18, 200):
            img[int(round(20 + s * math.sin(t))), int(round(20 + s * math.cos(t)))] = 200
        lines, which = line_pixels(img, tables, np.zeros((41, 41), bool), 0.001)
        # a rasterized line is jagged: the best mask is its own or a neighbour (22.5 degrees apart)
        gap = (int(which[20, 20]) - k) % len(masks)
        assert lines[20, 20] and gap in (0, 1, len(masks) - 1), (k, which[18:23, 18:23])


def test_the_family_is_hard_for_density_alone(family):
    # without the mesh step (and the enclosed cells), most of the fat is lost in most draws
    lost = sum(without[fat].mean() < 0.6 for _, _, fat, _, _, _, without in family)
    assert lost >= len(family) / 2


def test_fat_is_kept_as_tissue(family):
    # ground truth: the region the cells were drawn in; aim of issue 28, tissue kept >= 0.9.
    # Measured: 15 of 16 draws (the one left has walls of 0.13 OD, 2.3 µm wide, at 9.3 µm/px:
    # about 2.5 grey levels); the mask without the mesh step of the membranes module kept 12
    kept = [mask[fat].mean() for _, _, fat, _, _, mask, _ in family]
    assert sum(k >= 0.9 for k in kept) >= 14, np.round(kept, 2)
    assert all(mask[tissue & ~fat].mean() >= 0.9 for _, _, fat, tissue, _, mask, _ in family)


def test_the_mesh_step_adds_nothing_away_from_tissue(family):
    # a fibre, a bubble's rim and a coverslip edge are single lines (a bubble one cell): what the
    # mesh step adds beyond 40 µm of the tissue drawn (the density window is 30 µm; a fibre that
    # runs into the fat drags a little of the window along) is under 1 % of the mask
    import cv2

    for rgb, mpp, _, tissue, things, mask, without in family:
        r = int(math.ceil(40.0 / mpp))
        near = cv2.dilate(tissue.astype(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * r + 1, 2 * r + 1))).astype(bool)
        assert (mask & ~without & ~near).sum() <= 0.01 * mask.sum()


def test_no_fat_along_a_bubble_rim_or_a_coverslip_edge(family):
    # single lines on glass, away from the fat: never a region of mesh
    import cv2
    from tilewright.tissue.density import find_glass, od_tables
    from tilewright.tissue.threshold import grey_level_od

    for rgb, mpp, fat, tissue, things, _, _ in family:
        survey = find_glass(rgb)
        mesh = fat_mesh(rgb, od_tables(survey.colour), mpp, tissue & ~fat, survey.candidates,
                        0.5 * grey_level_od(survey.colour))
        near = cv2.dilate(tissue.astype(np.uint8), np.ones((7, 7), np.uint8)).astype(bool)
        assert not (mesh & cv2.dilate(things.astype(np.uint8), np.ones((15, 15), np.uint8)).astype(bool) & ~near).any()
