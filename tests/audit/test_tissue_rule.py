"""One tissue-pixel rule for stain estimation and the audit (issue 19, item 5)."""

import numpy as np
import pandas as pd

from tilewright.audit.source import read_slide
from tilewright.stain.tissue_pixels import DEFAULT_BETA, tissue_mask, tissue_od

from .synthetic import RJ_E, RJ_H, unit, write_store

GLASS = np.array([228.0, 230.0, 222.0])  # a tinted glass (invented)


def graded_tile(side=32):
    """Pixels whose optical density lies along the H or E vector with norms from 0.02 to 0.6
    (Beer-Lambert: I = 255 * 10**-OD, Ruifrok & Johnston 2001 vectors), plus pure white."""
    norms = np.linspace(0.02, 0.6, side * side // 2)
    od = np.concatenate([norms[:, None] * unit(RJ_H), norms[:, None] * unit(RJ_E)])
    rgb = np.clip(np.rint(255.0 * 10.0 ** -od), 0, 255).astype(np.uint8)
    rgb[:8] = 255
    return rgb.reshape(side, side, 3)


def od_norm(rgb, glass=(255.0, 255.0, 255.0)):
    """Euclidean norm of the optical density against ``glass``, written out with numpy."""
    rgb = np.maximum(rgb.astype(np.float64), 1.0)
    return np.linalg.norm(np.maximum(np.log10(np.asarray(glass) / rgb), 0.0), axis=-1)


def test_the_rule_is_the_od_norm_against_macenko_beta():
    tile = graded_tile()
    # Macenko et al. (2009): pixels with optical density below beta = 0.15 are left out; the norm
    # of the OD vector is our reading of "optical density" (see stain/tissue_pixels.py)
    assert DEFAULT_BETA == 0.15
    expected = od_norm(tile) >= 0.15
    assert 0.2 < expected.mean() < 0.9  # the tile straddles the threshold
    np.testing.assert_array_equal(tissue_mask(tile), expected)
    expected_glass = od_norm(tile, GLASS) >= 0.15
    assert expected_glass.sum() < expected.sum()  # tinted glass: pale pixels are glass, not stain
    np.testing.assert_array_equal(tissue_mask(tile, glass=GLASS), expected_glass)


def test_stain_estimation_and_the_audit_select_the_same_pixels(tmp_path):
    tile = graded_tile()
    # stain estimation's pixels (tissue_od, used by tw.estimate_stains) ...
    _, estimation = tissue_od(tile, glass=GLASS)
    # ... and the audit's: a store whose thumbnail background is the tinted glass; the run did not
    # normalize, so the audit measures against the glass it estimates from that background
    thumbnail = np.empty((64, 64, 3), np.uint8)
    thumbnail[...] = GLASS.astype(np.uint8)
    mask = np.zeros((64, 64), bool)
    mask[20:40, 20:40] = True
    thumbnail[mask] = (150, 110, 170)
    write_store(tmp_path / "s.zarr", "s", thumbnail, mask, tile[None])
    pd.DataFrame([{"slide_id": "s", "status": "ok"}]).to_csv(tmp_path / "manifest.csv", index=False)
    audit = read_slide(tmp_path, "s", "tiles", max_tiles=1)
    expected = tile[od_norm(tile, GLASS) >= 0.15]  # numpy reference, constructed glass
    np.testing.assert_array_equal(np.sort(audit.tissue, axis=0), np.sort(expected, axis=0))
    np.testing.assert_array_equal(np.sort(estimation, axis=0), np.sort(expected, axis=0))
    assert audit.background.shape[0] == tile.shape[0] * tile.shape[1] - expected.shape[0]
