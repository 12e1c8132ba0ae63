"""Identifier-like and duplicate (alias) metadata columns in the audit."""

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from tilewright.audit.cohort import audit_cohort
from tilewright.audit.factors import alias_groups, cohort_factors, identifier_columns
from tilewright.audit.findings import comparison_findings
from tilewright.errors import ConfigError


def constructed_metadata(n=8):
    """Metadata built here: which columns are identifiers or aliases is known by construction."""
    index = pd.Index([f"s{i:02d}" for i in range(n)], name="slide_id")
    site = np.array(["north", "south"] * (n // 2))
    return pd.DataFrame({
        "patient_id": [f"P-{1000 + 7 * i}" for i in range(n)],   # text, one a slide: identifier
        "case_number": 500 + np.arange(n),                        # whole numbers, id-like name
        "age": 40.0 + 3 * np.arange(n),                           # numeric measurement: a factor
        "purity": [0.5, 0.1, 0.8, 0.3, 0.9, 0.2, 0.7, 0.4][:n],  # fractional, one a slide: a factor
        "site": site,
        "scanner": np.where(site == "north", "scanner-A", "scanner-B"),  # alias of site
        "batch": np.where(site == "north", 1, 2),                 # numeric alias of site
        "block": ["b1", "b2", "b1", "b2", "b3", "b4", "b3", "b4"][:n],  # repeated: not an id
        "label": ["x", "x", "y", "y"] * (n // 4),
    }, index=index)  # fmt: skip


def test_identifier_columns_on_constructed_metadata():
    meta = constructed_metadata()
    # ground truth constructed above: one value a slide in a text column, or in a whole-number
    # column whose name says it is an identifier
    assert identifier_columns(meta) == ["patient_id", "case_number"]
    # two slides are too few to tell an identifier from a two-level factor
    assert identifier_columns(meta.iloc[:2]) == []
    # a missing value does not hide an identifier; a repeated value makes it a grouping
    with_gap = meta.assign(patient_id=meta["patient_id"].where(meta.index != "s03"))
    assert "patient_id" in identifier_columns(with_gap)
    repeated = meta.assign(patient_id=["P-1", "P-1"] + list(meta["patient_id"][2:]))
    assert "patient_id" not in identifier_columns(repeated)


def test_cohort_factors_drop_identifiers_and_put_metadata_first():
    meta = constructed_metadata()
    manifest = pd.DataFrame({"mpp_source": [0.25, 0.5] * 4}, index=meta.index)
    factors, notes = cohort_factors(manifest, meta.reset_index())
    assert notes["_identifiers"] == ["patient_id", "case_number"]  # constructed above
    assert "patient_id" not in factors and "case_number" not in factors
    # numeric, one value a slide, not an identifier: quartile bins (pandas.qcut), not 8 levels
    assert notes["age"] == "quartile bins" and notes["purity"] == "quartile bins"
    assert factors["age"].value_counts().tolist() == [2, 2, 2, 2]
    assert list(factors.columns)[-1] == "mpp_source"  # the user's columns lead, manifest last


def test_alias_groups_on_constructed_factors():
    meta = constructed_metadata()
    manifest = pd.DataFrame({"mpp_source": [0.25, 0.5] * 4}, index=meta.index)  # alias of site
    factors, _ = cohort_factors(manifest, meta.reset_index())
    # ground truth constructed above: scanner, batch and mpp_source split slides exactly as site
    assert alias_groups(factors) == {"site": ["scanner", "batch", "mpp_source"]}
    # the label is never folded into another name, even when it matches
    same = factors.assign(label=factors["site"].map({"north": "x", "south": "y"}))
    assert alias_groups(same, exclude=["label"]) == {"site": ["scanner", "batch", "mpp_source"]}
    assert "label" in alias_groups(same)["site"]
    # a finer split (three scanners at two sites) is not an alias; nor is a different gap
    finer = factors.assign(scanner=["A", "B", "C", "B", "A", "B", "C", "B"])
    assert "scanner" not in alias_groups(finer)["site"]
    gap = factors.assign(batch=factors["batch"].where(factors.index != "s00"))
    assert "batch" not in alias_groups(gap)["site"]


def test_comparison_findings_name_aliases_once():
    table = pd.DataFrame({
        "factor": ["site", "scanner", "pen", "label"],
        "cramers_v_before": [1.0, 1.0, 0.3, 0.1], "cramers_v_after": [0.2, 0.2, 0.2, 0.1],
        "p_adjusted_before": [0.01, 0.01, 0.5, 0.8], "p_adjusted_after": [0.5, 0.5, 0.5, 0.8],
        "p_value_before": [0.01, 0.01, 0.5, 0.8], "p_value_after": [0.5, 0.5, 0.5, 0.8],
    })  # fmt: skip
    lines = comparison_findings(table, ("raw tiles", "normalized tiles"), {"site": ["scanner"]})
    # constructed above: site (= scanner) significant before only; pen and label never significant
    assert lines[0].startswith("Colour clusters follow site (= scanner) in the raw tiles")
    assert "no evidence that they do" in lines[0]
    assert lines[1] == ("No evidence that colour clusters follow pen, label in either the raw tiles or the "
                        "normalized tiles (all adjusted p >= 0.05).")
    assert len(lines) == 2 and not any("scanner" in s for s in lines[1:])
    # without aliases scanner has its own sentence
    assert len(comparison_findings(table, ("raw", "normalized"))) == 3
    # an alias whose V differs in one audit (e.g. one audit lacks it) is reported on its own
    table.loc[1, "cramers_v_after"] = math.nan
    lines = comparison_findings(table, ("raw", "normalized"), {"site": ["scanner"]})
    assert lines[0].startswith("Colour clusters follow site in the raw")
    # a change between two non-significant values is never stated as a rise or fall
    noisy = table.assign(cramers_v_before=[0.24, 0.24, 0.24, 0.07], cramers_v_after=[0.52, 0.52, 0.52, 0.15],
                         p_adjusted_before=[0.4] * 4, p_adjusted_after=[0.09] * 4)
    lines = comparison_findings(noisy, ("raw", "normalized"))
    assert len(lines) == 1 and lines[0].startswith("No evidence") and "rose" not in lines[0] and "%" not in lines[0]


def test_audit_findings_skip_identifiers_and_group_aliases(raw_cohort):
    out, meta = raw_cohort
    table = meta.assign(
        patient_id=[f"P-{1000 + 7 * i}" for i in range(len(meta))],
        scanner=meta["site"].map({"site-north": "scanner-A", "site-south": "scanner-B"}),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        audit = audit_cohort(out, metadata=table, source="thumbnail", tsne=False)
    # constructed: one patient id a slide, scanner identical to site (tests/audit/synthetic.py)
    assert "patient_id" not in audit.factors and "patient_id" not in set(audit.associations["factor"])
    assert "patient_id looks like an identifier (one value a slide); not tested." in audit.findings
    assert not any("follow patient_id" in s for s in audit.findings)
    assert audit.notes["_aliases"] == {"site": ["scanner"]}
    assert any(s.startswith("Colour clusters follow site (= scanner) strongly (V = ") for s in audit.findings)
    assert not any(s.startswith("Across scanner") for s in audit.findings)
    # both keep their rows in the association table, with the same V (same partition)
    assert audit.association("scanner") == pytest.approx(audit.association("site"))
    with pytest.raises(ConfigError, match="identifier"):
        audit_cohort(out, metadata=table, source="thumbnail", tsne=False, label="patient_id")


def test_an_alias_group_is_tested_once():
    """site = scanner = batch (one scanner a site): one test, counted once when p-values are
    adjusted; the aliases repeat its row (ground truth: scipy's Benjamini-Hochberg over the two
    factors really tested)."""
    from scipy.stats import false_discovery_control

    from tilewright.audit.association import association_table
    from tilewright.audit.metric_tests import kruskal_table

    rng = np.random.default_rng(4)
    n = 24
    site = np.repeat(["north", "south"], n // 2)
    clusters = pd.Series(np.where(site == "north", 0, 1), index=[f"s{i}" for i in range(n)])
    clusters.iloc[[0, 13]] = 1 - clusters.iloc[[0, 13]]  # not a perfect split
    factors = pd.DataFrame({"site": site, "scanner": np.where(site == "north", "A", "B"),
                            "batch": np.where(site == "north", "7", "9"),
                            "stain_lot": rng.choice(["x", "y"], n)}, index=clusters.index)
    aliases = alias_groups(factors)
    assert aliases == {"site": ["scanner", "batch"]}
    table = association_table(clusters, factors, aliases=aliases, n_resamples=2000).set_index("factor")
    assert list(table.loc[["scanner", "batch"], "alias_of"]) == ["site", "site"]
    assert table.loc["site", "alias_of"] is None and table.loc["stain_lot", "alias_of"] is None
    tested = table.loc[["site", "stain_lot"], "p_value"].to_numpy()
    np.testing.assert_allclose(table.loc[["site", "stain_lot"], "p_adjusted"], false_discovery_control(tested))
    for col in ("cramers_v", "p_value", "p_adjusted"):
        assert table.loc["scanner", col] == table.loc["site", col] == table.loc["batch", col]
    metrics = pd.DataFrame({"lab_l_mean": rng.normal(size=n)}, index=clusters.index)
    k = kruskal_table(metrics, factors, aliases=aliases, n_resamples=500)
    assert sorted(k.loc[k["alias_of"].isna(), "factor"]) == ["site", "stain_lot"]
    assert set(k.loc[k["alias_of"] == "site", "factor"]) == {"scanner", "batch"}
