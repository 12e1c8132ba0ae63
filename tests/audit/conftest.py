import warnings

import pytest

from .synthetic import make_cohort


@pytest.fixture(scope="session")
def raw_cohort(tmp_path_factory):
    """Two-site generated cohort with un-normalized tiles: (folder, metadata)."""
    out = tmp_path_factory.mktemp("raw-cohort")
    return out, make_cohort(out, seed=3)


@pytest.fixture(scope="session")
def normalized_cohort(tmp_path_factory):
    """The same cohort with Macenko-normalized tiles (thumbnails raw, no source slides): (folder, metadata)."""
    out = tmp_path_factory.mktemp("normalized-cohort")
    return out, make_cohort(out, seed=3, normalize=True)


@pytest.fixture(scope="session")
def real_cohort(tmp_path_factory):
    """Ten real TIFF slides of two sites tiled with Macenko normalization: (tiles folder, metadata)."""
    from .real_cohort import make_real_cohort

    return make_real_cohort(tmp_path_factory.mktemp("real-cohort"), per_site=5)


@pytest.fixture(scope="session")
def audits(real_cohort):
    """Before (the sampled tiles read raw from the slides) and after (as stored, normalized)."""
    from tilewright.audit.before_after import audit_before_after

    out, meta = real_cohort
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return audit_before_after(out, metadata=meta, tsne=False, max_tiles=16)
