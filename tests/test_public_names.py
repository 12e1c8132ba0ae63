"""The public names of DESIGN.md resolve, and the renamed ones have no alias left behind."""

import pytest

import tilewright as tw

# The contract's names (shared/DESIGN.md, "Public API").
CONTRACT = ["open", "WholeSlide", "Level", "ResampledView", "tissue_mask", "TissueMask",
            "plan_tiles", "TilePlan", "RegionMap", "classify_regions", "MacenkoTransfer",
            "ReinhardTransfer", "estimate_stains", "StainJitter", "TilingConfig", "tile_slide",
            "SlideResult", "tile_cohort", "open_store", "TileStore", "open_cohort", "Cohort",
            "audit_cohort", "CohortAudit", "make_splits"]


@pytest.mark.parametrize("name", CONTRACT)
def test_contract_name_resolves(name):
    assert getattr(tw, name) is not None


@pytest.mark.parametrize("old", ["open_wsi", "StainAugmenter"])
def test_old_names_are_gone(old):
    with pytest.raises(AttributeError):
        getattr(tw, old)


def test_torch_dataset_renamed():
    torch_mod = pytest.importorskip("tilewright.torch")
    assert hasattr(torch_mod, "TileStoreDataset")
    assert not hasattr(torch_mod, "TileDataset")


# Renamed in issue 31 (the stain classes' names are the project's own); the old spellings warn for
# one release and hand back the same object (ground truth: the new name, read without a warning).
OLD_STAIN_NAMES = [
    ("tilewright", "MacenkoNormalizer", "tilewright", "MacenkoTransfer"),
    ("tilewright", "ReinhardNormalizer", "tilewright", "ReinhardTransfer"),
    ("tilewright.stain.macenko", "MacenkoNormalizer", "tilewright.stain.macenko", "MacenkoTransfer"),
    ("tilewright.stain.reinhard", "ReinhardNormalizer", "tilewright.stain.reinhard", "ReinhardTransfer"),
    ("tilewright.stain.normalizer", "StainNormalizer", "tilewright.stain.transfer", "StainTransfer"),
    ("tilewright.stain.registry", "make_normalizer", "tilewright.stain.registry", "make_transfer"),
    ("tilewright.stain.registry", "normalizer_from_dict", "tilewright.stain.registry", "transfer_from_dict"),
]


@pytest.mark.parametrize("module, old, home, new", OLD_STAIN_NAMES)
def test_old_stain_names_warn_and_alias_the_new(module, old, home, new):
    import importlib
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the new name is read without any warning
        expected = getattr(importlib.import_module(home), new)
    with pytest.warns(DeprecationWarning, match=rf"{old} is renamed .*{new}"):
        value = getattr(importlib.import_module(module), old)
    assert value is expected


def test_old_stain_names_are_not_advertised():
    import tilewright.stain.macenko as macenko

    for name in ("MacenkoNormalizer", "ReinhardNormalizer"):
        assert name not in tw.__all__ and name not in dir(tw)
    assert "MacenkoNormalizer" not in macenko.__all__
    with pytest.raises(AttributeError):
        tw.SomethingNeverNamed  # noqa: B018 - a missing name is still a plain AttributeError


def test_an_old_subclass_still_fits_and_transforms():
    """Code written against the old names keeps working: the old factory builds a Macenko transfer
    whose output equals the new class's, and an old-name isinstance check still holds."""
    import numpy as np

    from tilewright.stain.registry import make_transfer

    rng = np.random.default_rng(31)
    h, e = np.array([0.65, 0.70, 0.29]), np.array([0.07, 0.99, 0.11])  # Ruifrok & Johnston (2001)
    c = rng.uniform(0, 1.2, size=(64, 64, 2))
    rgb = (255 * 10 ** -(c[..., :1] * h / np.linalg.norm(h) + c[..., 1:] * e / np.linalg.norm(e))).astype(np.uint8)
    with pytest.warns(DeprecationWarning):
        from tilewright.stain.registry import make_normalizer
    old = make_normalizer("macenko").fit(rgb)
    new = make_transfer("macenko").fit(rgb)
    np.testing.assert_array_equal(old.transform(rgb), new.transform(rgb))
    with pytest.warns(DeprecationWarning):
        assert isinstance(new, tw.MacenkoNormalizer)
