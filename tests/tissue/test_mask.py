"""Tissue masks on synthetic slides whose true layout is known (tilewright.demo.synth)."""

import subprocess
import sys

import numpy as np
import pytest

from tilewright.demo.synth import Island, PenStroke, SlideLayout, random_layout
from tilewright.tissue.mask import TissueMask, tissue_mask

from tissue_fakes import FakeSlide, dice


@pytest.mark.parametrize("seed", [0, 1, 4])
def test_dice_against_ground_truth(seed):
    layout = random_layout(6000, 8000, seed=seed, n_islands=3)
    mask = tissue_mask(FakeSlide(layout, 0.5, direct=True), mpp=8.0)
    assert mask.array.shape == layout.shape_at(8.0)
    # ground truth: the layout's own tissue mask at the same pixel centres
    assert dice(mask.array, layout.tissue_truth(8.0)) >= 0.95


def test_pen_ink_excluded_and_rest_of_tissue_kept(he_layout, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    pen = he_layout.pen_truth(8.0)
    tissue = he_layout.tissue_truth(8.0)
    assert pen.sum() > 1000 and (pen & tissue).sum() > 500  # the fixture really has ink on tissue
    # ground truth: pen strokes drawn by the layout; >= 90 % of their pixels are not tissue
    assert (~mask.array[pen]).mean() >= 0.90
    assert mask.ink[pen].mean() >= 0.90  # and they are reported as ink
    # usable tissue (tissue not under ink) is still found
    assert dice(mask.array, tissue & ~pen) >= 0.95
    for ink in ("blue", "green", "black"):  # each marker colour on its own
        stroke = SlideLayout(6000, 8000, he_layout.islands, (PenStroke(1000, 500, 5000, 7500, 200.0, ink),))
        m = tissue_mask(stroke.render(8.0, 0, 0, *stroke.shape_at(8.0)), mpp=8.0)
        assert (~m.array[stroke.pen_truth(8.0)]).mean() >= 0.90, ink  # ground truth: the stroke


def test_ink_kept_when_asked(he_layout, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0, exclude_ink=False)
    pen_on_tissue = he_layout.pen_truth(8.0) & he_layout.tissue_truth(8.0)
    assert not mask.ink.any()
    assert mask.array[pen_on_tissue].mean() > 0.9  # ground truth: ink lies on real tissue there


def test_blank_slide_has_almost_no_tissue():
    blank = random_layout(6000, 8000, seed=3, n_islands=0)
    mask = tissue_mask(FakeSlide(blank, 0.5, direct=True), mpp=8.0)
    assert mask.tissue_fraction < 0.005  # issue 3: a blank slide yields < 0.5 % tissue
    noisy = random_layout(6000, 8000, seed=3, n_islands=0, noise=6.0)  # grainier glass
    assert tissue_mask(noisy.render(8.0, 0, 0, 750, 1000), mpp=8.0).tissue_fraction < 0.005


def test_view_covered_by_tissue_is_not_split(he_layout):
    isl = he_layout.islands[0]
    y, x = int(isl.cy / 8.0) - 20, int(isl.cx / 8.0) - 20
    crop = he_layout.render(8.0, y, x, 40, 40)
    truth = he_layout.tissue_truth(8.0, (y, x, 40, 40)) & ~he_layout.pen_truth(8.0, (y, x, 40, 40))
    assert truth.mean() > 0.95  # ground truth: the crop lies inside an island
    mask = tissue_mask(crop, mpp=8.0, min_component_um2=0)
    assert dice(mask.array, truth) >= 0.95


def test_faint_island_found(he_layout):
    faint = SlideLayout(6000, 8000, he_layout.islands[-1:])  # the pale island alone ...
    assert he_layout.islands[-1].strength == pytest.approx(0.35)
    truth = faint.tissue_truth(8.0)
    mask = tissue_mask(he_layout.render(8.0, 0, 0, 750, 1000), mpp=8.0)  # ... inside the full slide
    truth &= ~he_layout.pen_truth(8.0)
    # ground truth: the pale island's own pixels; most of it is recovered
    assert mask.array[truth].mean() >= 0.9


def test_scan_resolution_does_not_change_the_mask():
    layout = random_layout(1800, 2400, seed=5, n_islands=2, pens=1, faint=True)
    fine = tissue_mask(FakeSlide(layout, 0.25), mpp=8.0)   # a "40x" scan, area-downsampled
    coarse = tissue_mask(FakeSlide(layout, 0.5), mpp=8.0)  # a "20x" scan of the same layout
    assert fine.array.shape == coarse.array.shape == layout.shape_at(8.0)
    assert dice(fine.array, coarse.array) >= 0.95  # issue 3: the two scans agree
    assert dice(fine.array, layout.tissue_truth(8.0) & ~layout.pen_truth(8.0)) >= 0.95  # ground truth


def test_physical_parameters_make_mask_resolution_free(he_layout):
    m8 = tissue_mask(he_layout.render(8.0, 0, 0, 750, 1000), mpp=8.0)
    m16 = tissue_mask(he_layout.render(16.0, 0, 0, 375, 500), mpp=16.0)
    # the 16 µm/px mask, upsampled 2x, covers the same tissue as the 8 µm/px mask
    assert dice(m8.array, m16.array.repeat(2, 0).repeat(2, 1)) >= 0.95
    assert abs(m8.tissue_fraction - m16.tissue_fraction) < 0.01


def test_dark_debris_optional():
    islands = (Island(3000, 4000, 2000, 2500, 0.0, 1.0, 0.0),)
    layout = SlideLayout(6000, 8000, islands)
    rgb = layout.render(8.0, 0, 0, 750, 1000)
    fold = np.zeros(rgb.shape[:2], bool)
    fold[300:360, 400:520] = True  # a fold: four layers of the same tissue (Beer–Lambert: OD x 4)
    glass = np.array(layout.background)
    rgb[fold] = np.clip(glass * (rgb[fold] / glass) ** 4, 0, 255).astype(np.uint8)
    default = tissue_mask(rgb, mpp=8.0)
    assert default.array[fold].mean() > 0.95  # kept by default: ground truth constructed above
    assert not default.dark.any()
    dropped = tissue_mask(rgb, mpp=8.0, exclude_dark=True)
    assert (~dropped.array[fold]).mean() > 0.95 and dropped.dark[fold].mean() > 0.95
    assert dice(dropped.array, layout.tissue_truth(8.0) & ~fold) >= 0.95


@pytest.mark.parametrize("stains", [((0.5626, 0.7201, 0.4062), (0.2159, 0.8012, 0.5581)),
                                    ((0.55, 0.75, 0.40), (0.15, 0.95, 0.25))])
def test_hne_plane_follows_the_slide_stains(stains):
    from tilewright.tissue.density import optical_density
    from tilewright.tissue.ink import RUIFROK_PLANE_NORMAL, hne_plane_normal

    stains = np.array(stains) / np.linalg.norm(stains, axis=1, keepdims=True)
    layout = random_layout(6000, 8000, seed=0, n_islands=3, pens=3, stains=stains)
    rgb = layout.render(8.0, 0, 0, 750, 1000)
    normal = hne_plane_normal(optical_density(rgb))
    fitted = np.array(tissue_mask(rgb, mpp=8.0).params["hne_plane_normal"])  # ink removed first
    truth = np.cross(stains[0], stains[1])
    truth /= np.linalg.norm(truth)  # ground truth: the plane of the stains that made the image
    assert np.degrees(np.arccos(abs(normal @ truth))) < 3.5  # on every pixel, ink included
    assert np.degrees(np.arccos(abs(fitted @ truth))) < 2.0  # the mask's own fit, ink removed
    assert np.degrees(np.arccos(abs(RUIFROK_PLANE_NORMAL @ truth))) > 5.0  # so the refit mattered
    mask = tissue_mask(rgb, mpp=8.0)
    assert (~mask.array[layout.pen_truth(8.0)]).mean() >= 0.90  # ground truth: the pen strokes
    assert dice(mask.array, layout.tissue_truth(8.0) & ~layout.pen_truth(8.0)) >= 0.95


def test_small_specks_dropped_and_small_holes_filled():
    islands = (Island(3000, 4000, 1500, 1500, 0.0, 1.0, 0.0),)
    layout = SlideLayout(6000, 8000, islands)
    rgb = layout.render(8.0, 0, 0, 750, 1000)
    rgb[100:104, 100:104] = (150, 60, 180)   # dust: 4x4 px = 1024 µm² < 25 000 µm²
    rgb[370:376, 495:501] = (238, 236, 240)  # a 6x6 px hole (2304 µm²) inside the island
    rgb[330:360, 470:500] = (238, 236, 240)  # a 30x30 px hole (57 600 µm²), kept open
    mask = tissue_mask(rgb, mpp=8.0)
    assert not mask.array[100:104, 100:104].any()  # ground truth constructed above
    assert mask.array[370:376, 495:501].all()
    assert not mask.array[335:355, 475:495].any()


def test_fraction_matches_mask_pixels(he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    # a box aligned with mask pixels, given at 0.5 µm/px (16 target px per mask px)
    y, x, h, w = 200, 300, 40, 64
    want = mask.array[y:y + h, x:x + w].mean()  # ground truth: direct pixel count
    assert mask.fraction(y * 16, x * 16, h * 16, w * 16, 0.5) == pytest.approx(want, abs=1e-6)
    fr = mask.fractions([[y * 16, x * 16], [0, 0]], h * 16, w * 16, 0.5)
    assert fr.dtype == np.float32 and fr.shape == (2,)
    assert fr[1] == pytest.approx(mask.array[:h, :w].mean(), abs=1e-6)
    assert mask.tissue_fraction == pytest.approx(mask.array.mean())


def test_provenance_and_repr(he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    d = mask.to_dict()
    import json

    json.dumps(d)  # JSON-safe
    assert d["method"] == "od-noise" and d["mpp"] == 8.0 and d["source"] == "fake/slide-a.tif"
    assert d["tissue_fraction"] == pytest.approx(mask.tissue_fraction)
    # glass estimate near the layout's background (ground truth: 238, 236, 240 plus noise)
    np.testing.assert_allclose(d["glass"], (238, 236, 240), atol=4)
    assert "TissueMask" in repr(mask)


def test_bad_input_is_refused():
    with pytest.raises(ValueError):
        tissue_mask(np.zeros((10, 10, 3), np.uint8), mpp=0)
    with pytest.raises(ValueError):
        tissue_mask(np.zeros((10, 10), np.uint8), mpp=8.0)
    with pytest.raises(ValueError):
        tissue_mask(np.zeros((10, 10, 3), np.float32), mpp=8.0)
    with pytest.raises(ValueError):
        tissue_mask(np.zeros((10, 10, 3), np.uint8), mpp=8.0, method="nope")
    with pytest.raises(TypeError):
        tissue_mask("not a slide", mpp=8.0)
    with pytest.raises(ValueError):
        TissueMask(np.zeros((0, 3), bool), 8.0)
    with pytest.raises(ValueError):
        TissueMask(np.zeros((3, 3), bool), 8.0, ink=np.zeros((2, 2), bool))


def test_rgba_input_accepted(he_layout):
    rgb = he_layout.render(8.0, 0, 0, 750, 1000)
    rgba = np.concatenate([rgb, np.full(rgb.shape[:2] + (1,), 255, np.uint8)], axis=2)
    np.testing.assert_array_equal(tissue_mask(rgba, mpp=8.0).array, tissue_mask(rgb, mpp=8.0).array)


def test_import_does_no_heavy_work():
    code = ("import sys, tilewright as tw; tw.tissue_mask; tw.plan_tiles; tw.render_overlay;"
            "import tilewright.tissue.sharpness;"
            "bad = [m for m in ('matplotlib', 'openslide', 'dask.distributed', 'torch') if m in sys.modules];"
            "print(bad); sys.exit(1 if bad else 0)")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0  # CONVENTIONS.md
