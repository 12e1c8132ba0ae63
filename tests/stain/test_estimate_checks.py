"""A slide's own Macenko estimate is accepted only when it is plausible H&E; otherwise it is
replaced by the target's stains (with the slide's own maxima) and the caller is told."""

import numpy as np
import pytest

from .synthetic import RJ_E, RJ_H, render, unit
from tilewright.stain.estimate import StainProfile, implausible
from tilewright.stain.macenko import MacenkoTransfer


def _profile(h, e, maxima=(1.5, 1.2), n=50_000):
    return StainProfile(unit(np.stack([h, e])), np.asarray(maxima, np.float32), n)


def test_plausible_pairs_pass():
    assert implausible(_profile(RJ_H, RJ_E)) == ""  # Ruifrok & Johnston (2001)
    # a widely used Macenko reference pair, 22 degrees apart
    assert implausible(_profile((0.5626, 0.7201, 0.4062), (0.2159, 0.8012, 0.5581))) == ""


@pytest.mark.parametrize("h, e, maxima, n, word", [
    ((0.12, 0.97, 0.20), RJ_E, (1.5, 1.2), 50_000, "apart"),  # both eosin-like, ~5 degrees
    (RJ_E, (0.45, 0.75, 0.48), (1.5, 1.2), 50_000, "bluer"),  # the "hematoxylin" is the pinker one
    (RJ_H, RJ_E, (1.5, 1.2), 300, "pixels"),
    (RJ_H, RJ_E, (9.0, 1.2), 50_000, "maxima"),
])
def test_implausible_estimates_are_named(h, e, maxima, n, word):
    assert word in implausible(_profile(h, e, maxima, n))


def test_failed_estimate_is_replaced_and_said():
    rng = np.random.default_rng(3)
    stains = unit(np.stack([RJ_H, RJ_E]))
    conc = rng.gamma(2.0, 0.3, (128, 128, 2))
    target = MacenkoTransfer().fit(render(stains, conc))
    # a sample with almost no hematoxylin: eosin plus noise (a small biopsy with few nuclei)
    pale = conc.copy()
    pale[..., 0] = rng.uniform(0, 0.02, pale.shape[:2])
    sample = render(stains, pale)
    bound, note = target.fit_source_checked(sample)
    assert "replaced" in note
    # the fallback: the target's own stain vectors, the slide's own maxima under them
    assert np.allclose(bound.source.stain_matrix, target.stain_matrix)
    out = bound.transform(sample)
    assert out.astype(np.float32).mean(-1).min() >= sample.astype(np.float32).mean(-1).min() - 24
    good, note = target.fit_source_checked(render(stains, conc))
    assert note == "" and good.source.n_tissue_pixels > 0
