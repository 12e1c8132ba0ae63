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
    """The same cohort with Macenko-normalized tiles (thumbnails raw): (folder, metadata)."""
    out = tmp_path_factory.mktemp("normalized-cohort")
    return out, make_cohort(out, seed=3, normalize=True)


@pytest.fixture(scope="session")
def audits(normalized_cohort):
    """Raw-colour (thumbnail) and normalized-tile audits of the normalized cohort."""
    from tilewright.audit.cohort import audit_cohort

    out, meta = normalized_cohort
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        before = audit_cohort(out, metadata=meta, source="thumbnail")
        after = audit_cohort(out, metadata=meta, source="tiles")
    return before, after
