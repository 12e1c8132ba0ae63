"""Tissue amount and sharpness stay out of the colour clusters and get their own section (issue 19, item 4)."""

import warnings

import pandas as pd

from tilewright.audit.cohort import audit_cohort, build_audit, ok_slides
from tilewright.audit.metrics import COLOUR_METRICS, QUALITY_METRICS

from .synthetic import make_one_site_cohort


def test_tissue_amount_changes_no_colour_cluster_and_is_reported_apart(tmp_path):
    ids = make_one_site_cohort(tmp_path, n_slides=12, seed=23)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first = audit_cohort(tmp_path, tsne=False)
    assert set(first.embedding.features) <= set(COLOUR_METRICS)
    assert not set(QUALITY_METRICS) & set(first.embedding.features)
    # the same slides with half of them turned into "resections": far more tissue and tiles, far
    # sharper, the same colour (ground truth constructed: only the quality metrics change)
    resections = ids[::2]
    rows = {}
    for slide_id, values in first.metrics.iterrows():
        values = values.to_dict()
        if slide_id in resections:
            values.update(tissue_fraction=0.9, n_tiles=values["n_tiles"] * 40, sharpness=values["sharpness"] * 9)
        rows[slide_id] = values
    meta = pd.DataFrame({"slide_id": ids, "procedure": ["resection" if s in resections else "biopsy" for s in ids]})
    folder, ok = ok_slides(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        second = build_audit(folder, ok, rows, first.previews, {}, [], source="tiles", metadata=meta, tsne=False)
    pd.testing.assert_series_equal(first.clusters, second.clusters)  # colour clusters unchanged
    assert first.embedding.best_silhouette == second.embedding.best_silhouette
    row = second.kruskal.set_index(["factor", "metric"]).loc[("procedure", "tissue_fraction")]
    # ground truth constructed: every resection has more tissue than every biopsy; exactly 2 of the
    # C(12, 6) = 924 splits are that extreme (Kruskal-Wallis, exact)
    assert row["section"] == "quality" and row["exact"] and abs(row["p_value"] - 2 / 924) < 1e-12
    assert row["p_adjusted"] < 0.05
    assert any(s.startswith("Tissue amount (tissue fraction) differs across procedure") for s in second.quality_findings)
    assert any(s.startswith("Sharpness differs across procedure") for s in second.quality_findings)
    # the colour findings neither mention tissue amount nor call it a colour effect
    assert not any("tissue" in s.lower() or "sharpness" in s for s in second.findings if "follow" in s)
    colour = second.kruskal[(second.kruskal["factor"] == "procedure") & (second.kruskal["section"] == "colour")]
    assert set(colour["metric"]) == set(COLOUR_METRICS)
