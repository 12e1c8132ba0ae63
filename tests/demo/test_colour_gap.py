"""The demo's between-site colour gap, with the scanners' profiles ignored and applied."""

from __future__ import annotations

import pytest

from tilewright.demo.cohort import SITES, _slide_variation, device_renderer
from tilewright.demo.colour_gap import site_colour_gap
from tilewright.demo.icc import matrix_trc_profile
from tilewright.demo.pyramid import write_pyramid
from tilewright.demo.synth import random_layout


@pytest.mark.timeout(300)
def test_profiles_close_the_scanner_part_of_the_gap(tmp_path):
    """Site-south written twice: as scanner-B's device RGB with its profile, and as the sRGB the
    renderer drew (ground truth: what a perfectly colour-managed scanner would store)."""
    sites = {"site-north": [], "site-south": [], "site-south-srgb": []}
    for k in range(2):
        for site in ("site-north", "site-south"):
            spec = SITES[site]
            seed = 300 + 10 * k + (site == "site-south")
            lay = random_layout(900.0, 1100.0, seed=seed, n_islands=2, **_slide_variation(spec, seed))
            mpp = 1.0  # small files: the measurement reads 8 µm/px thumbnails
            render = lay.renderer(mpp)
            kw = dict(shape=lay.shape_at(mpp), mpp=mpp, tile=256, compression="zlib")
            if site == "site-south":
                profile = matrix_trc_profile(**spec["profile"])
                write_pyramid(tmp_path / f"s{k}.tif", device_renderer(render, profile), icc_profile=profile, **kw)
                write_pyramid(tmp_path / f"t{k}.tif", render, **kw)
                sites["site-south"].append(tmp_path / f"s{k}.tif")
                sites["site-south-srgb"].append(tmp_path / f"t{k}.tif")
            else:
                write_pyramid(tmp_path / f"n{k}.tif", render, **kw)
                sites["site-north"].append(tmp_path / f"n{k}.tif")
    managed = site_colour_gap({s: sites[s] for s in ("site-north", "site-south")})
    truth = site_colour_gap({"site-north": sites["site-north"], "site-south": sites["site-south-srgb"]})
    assert truth.ignored == pytest.approx(truth.applied)  # no profiles there: both readings equal
    # applied, the gap is the stain/glass gap of the sRGB rendering (ground truth), within 8-bit rounding
    assert managed.applied == pytest.approx(truth.applied, abs=0.5)
    # ignored, the wide-gamut device encoding adds to it: colour management closes a real share
    assert managed.ignored > managed.applied + 1.0 and 0.1 < managed.closed < 1.0
    assert "closes" in managed.sentence()
