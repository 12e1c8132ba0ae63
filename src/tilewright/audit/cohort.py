"""Cohort colour audit: per-slide metrics, colour clusters, and how they follow metadata.

Research use only: not for diagnosis or clinical decisions; results need validation under local
regulations and licensed pathology practice.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path


import pandas as pd

from tilewright.audit.association import association_table
from tilewright.audit.embedding import Embedding, embed_slides
from tilewright.audit.factors import alias_groups, cohort_factors
from tilewright.audit.findings import audit_findings, comparison_findings, guess_label, quality_findings
from tilewright.audit.gaps import colour_gaps, gap_sentence, gap_summary
from tilewright.audit.metric_tests import kruskal_table
from tilewright.audit.metrics import COLOUR_METRICS, METRICS, QUALITY_METRICS, slide_metrics
from tilewright.audit.permutation import N_RESAMPLES
from tilewright.audit.source import SOURCES, read_manifest, read_slide, resolve_folder
from tilewright.errors import ConfigError, StoreError

__all__ = ["audit_cohort", "CohortAudit", "build_audit", "ok_slides"]


@dataclass
class CohortAudit:
    """Result of :func:`audit_cohort`.

    Attributes
    ----------
    metrics : DataFrame
        One row per audited slide, indexed by ``slide_id``, one column per metric
        (:data:`tilewright.audit.metrics.METRICS`).
    associations : DataFrame
        ``factor, cramers_v, p_value, p_adjusted, cramers_v_uncorrected, exact,
        n_rearrangements, chi2, dof, n_slides, n_levels, n_clusters``: colour clusters × factor,
        strongest first; V bias-corrected (Bergsma 2013), p exact or by permutation,
        adjusted (Benjamini–Hochberg) over the factors.
    gaps : DataFrame
        ``factor, level_a, level_b, n_a, n_b, gap, gap_lo, gap_hi``: how far apart each pair of a
        factor's levels is in mean tissue colour (CIEDE2000, 95 % bootstrap interval over slides;
        :mod:`tilewright.audit.gaps`). A strong cluster association with a gap below 1 is a
        difference nobody sees; with a gap of 10 one a model will learn.
    kruskal : DataFrame
        ``factor, metric, section, h, p_value, p_adjusted, exact, n_groups, n_slides``: every
        metric across every factor (Kruskal–Wallis, exact or permutation p, Benjamini–Hochberg
        adjusted within each factor's colour metrics and within its quality metrics).
    findings : list of str
        Plain-language sentences on colour, most important first.
    quality_findings : list of str
        Sentences on tissue amount and sharpness (their own section: never clustered).
    factors : DataFrame
        The categorical factors used, indexed by slide id.
    embedding : Embedding
        PCA / t-SNE coordinates and clusters.
    skipped : DataFrame
        ``slide_id, reason`` of slides listed ok in the manifest that could not be read.
    source : str
        ``"tiles"``, ``"source"`` or ``"thumbnail"``.
    label : str or None
        The factor taken as the training label.
    folder : Path
        The cohort output folder.
    previews : dict
        slide id -> small uint8 RGB picture for the cluster grid.
    notes : dict
        How each factor was treated (column -> ``"categories"`` / ``"quartile bins"``) and
        ``"_identifiers"`` (columns with one value a slide, not tested), ``"_aliases"`` (first
        factor -> factors splitting the slides exactly like it), ``"_dropped"`` (one level),
        ``"_unmatched"``, ``"_missing"``, ``"_attrs"`` (store attributes by slide),
        ``"_metadata"`` (the metadata file, when given as one) and, for the two sides of
        :func:`tilewright.audit.before_after.audit_before_after`, ``"_pairing"`` (what the sides share
        and what differs).
    """

    metrics: pd.DataFrame
    associations: pd.DataFrame
    kruskal: pd.DataFrame
    factors: pd.DataFrame
    embedding: Embedding
    skipped: pd.DataFrame
    source: str
    label: str | None
    folder: Path
    gaps: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)
    previews: dict = field(repr=False, default_factory=dict)
    notes: dict = field(repr=False, default_factory=dict)
    findings: list = field(default_factory=list)
    quality_findings: list = field(default_factory=list)

    @property
    def by_level(self) -> pd.DataFrame:
        """Sharpness beside colour for every level of every factor: median sharpness (quartiles,
        ratio to the other levels) and median tissue CIELAB with its CIEDE2000 distance from the
        other levels' (see :func:`tilewright.audit.by_level.level_table`)."""
        from tilewright.audit.by_level import level_table

        return level_table(self.metrics, self.factors)

    @property
    def clusters(self) -> pd.Series:
        """Colour cluster of every slide."""
        return self.embedding.clusters

    @property
    def n_clusters(self) -> int:
        """Number of colour clusters chosen by silhouette."""
        return self.embedding.n_clusters

    def association(self, factor: str) -> float:
        """Bias-corrected Cramér's V of clusters × ``factor`` (NaN when the factor is absent)."""
        rows = self.associations[self.associations["factor"] == factor]
        return float(rows["cramers_v"].iloc[0]) if len(rows) else float("nan")

    def compare(self, other: "CohortAudit") -> pd.DataFrame:
        """This audit (before) against ``other`` (after): every factor's V and p-values
        (:func:`~tilewright.audit.compare.compare_audits`) and its largest colour gap before and
        after (:func:`~tilewright.audit.compare.before_after_table`)."""
        from tilewright.audit.compare import before_after_table

        return before_after_table(self, other)

    def write_report(self, folder, *, before: "CohortAudit | None" = None, names=None) -> Path:
        """Write ``audit.parquet``, ``associations.csv``, ``kruskal.csv``, PNG plots and
        ``report.html`` (a static page that works offline) into ``folder``.

        Parameters
        ----------
        folder : str or os.PathLike
            Report folder; created when missing, files in it replaced.
        before : CohortAudit, optional
            The "before" side of :func:`tilewright.audit.before_after.audit_before_after` (this audit
            being its "after"), shown as a before/after section; its table is also written as
            ``before_after.csv``.
        names : (str, str), optional
            Names of ``before`` and this audit in that section; default from their sources.

        Returns
        -------
        Path
            The written ``report.html``.
        """
        from tilewright.audit.report import write_report

        return write_report(self, folder, before=before, names=names)

    @property
    def normalized(self) -> bool:
        """Whether any audited slide's store holds stain-normalized tiles."""
        return any(bool(a.get("normalizer")) for a in self.notes.get("_attrs", {}).values())

    @property
    def source_name(self) -> str:
        """What this audit measured, in a report's words: raw thumbnails, raw tiles, tiles or
        normalized tiles."""
        if self.source == "thumbnail":
            return "raw thumbnails"
        if self.source == "source":
            return "raw tiles"
        return "normalized tiles" if self.normalized else "tiles"

    def comparison_findings(self, other: "CohortAudit", names=None) -> list[str]:
        """Sentences on how associations changed from this audit to ``other``."""
        names = names or (self.source_name, other.source_name)
        return comparison_findings(self.compare(other), tuple(names), self.notes.get("_aliases"))


def _with_gaps(findings: list, audit: CohortAudit) -> list:
    """The findings with each batch factor's largest colour gap said right after the cluster
    sentence (the label's gap is not a batch effect; aliases are named with their factor)."""
    hidden = {m for members in (audit.notes.get("_aliases") or {}).values() for m in members}
    summary = gap_summary(audit.gaps)
    lines = [gap_sentence(row, audit.notes.get("_aliases")) for _, row in summary.iterrows()
             if row["factor"] != audit.label and row["factor"] not in hidden]
    at = next((i + 1 for i, s in enumerate(findings) if "colour clusters follow" in s.lower()), len(findings))
    return findings[:at] + lines + findings[at:]


def normalized_run(cohort_or_dir) -> bool:
    """Whether any ok slide's complete store holds stain-normalized tiles, from the stores'
    attributes alone (no pixels read; stores that cannot be opened are left out, as the audit
    leaves them out)."""
    from tilewright.store.metadata import stores_attrs

    folder, ok = ok_slides(cohort_or_dir)
    attrs = stores_attrs([folder / f"{slide_id}.zarr" for slide_id in ok.index], any_format=True)  # missing: None
    return any(a.get("normalizer") for a in attrs if a is not None)


def ok_slides(cohort_or_dir):
    """The output folder and the manifest rows with status ``ok`` (indexed by slide id)."""
    folder = resolve_folder(cohort_or_dir)
    manifest = read_manifest(folder)
    return folder, manifest[manifest["status"].astype(str).str.lower() == "ok"]


def audit_cohort(
    cohort_or_dir,
    *,
    metadata=None,
    source: str = "tiles",
    label: str | None = None,
    max_tiles: int = 64,
    seed: int = 0,
    tsne: bool = True,
    n_clusters: int | None = None,
    n_resamples: int = N_RESAMPLES,
) -> CohortAudit:
    """Audit a tiled cohort for colour batch effects.

    Computes per-slide colour, stain and quality metrics; embeds the slides by their colour and
    stain metrics only (standardized, PCA) and clusters them (k-means, k by silhouette); tests
    how strongly the clusters follow each metadata factor (bias-corrected Cramér's V, exact or
    permutation p-value) and how each metric differs across factor levels (Kruskal–Wallis,
    exact or permutation p-value), adjusting p-values for multiple testing (Benjamini–Hochberg).
    Findings state an association only at adjusted p < 0.05. To compare colour before and after
    stain normalization, use :func:`tilewright.audit.before_after.audit_before_after`.

    Parameters
    ----------
    cohort_or_dir : str, os.PathLike or Cohort
        Output folder of ``tile-out`` / ``tile_cohort`` (``manifest.csv`` and one
        ``<slide_id>.zarr`` store per slide). Only slides with status ``ok`` are audited.
    metadata : DataFrame, str or os.PathLike, optional
        Per-slide factors joined on ``slide_id`` (site, scanner, label, ...). The manifest's
        source µm/px is added as factor ``mpp_source``.
    source : {"tiles", "source", "thumbnail"}
        ``"tiles"``: a seeded sample of stored tiles (colour after normalization, if any);
        ``"source"``: the same tile positions read raw from the source slides; ``"thumbnail"``:
        the raw thumbnail under the tissue mask (a rough look when the slides are gone).
    label : str, optional
        The factor that is the training label; default a column named ``label``, ``class``,
        ``target``, ``subtype``, ... when present.
    max_tiles : int
        Tiles sampled per slide for ``"tiles"`` and ``"source"``.
    seed : int
        Seed of the tile sample, k-means, t-SNE and random rearrangements.
    tsne : bool
        Compute t-SNE coordinates for the embedding plot.
    n_clusters : int, optional
        Fix the number of colour clusters instead of choosing it by silhouette.
    n_resamples : int
        Random rearrangements of a test when there are too many to enumerate (at least 10,000
        is advised).

    Returns
    -------
    CohortAudit

    Raises
    ------
    StoreError
        When the folder is not a tilewright output folder or no slide can be read.
    ConfigError
        For an unknown ``source``, a bad ``max_tiles``, an unreadable metadata table, or a
        ``label`` that is not a metadata column.

    References
    ----------
    Bergsma W (2013). A bias-correction for Cramér's V and Tschuprow's T. Journal of the Korean
    Statistical Society 42(3):323-328.
    Benjamini Y, Hochberg Y (1995). Journal of the Royal Statistical Society B 57(1):289-300.
    Kruskal WH, Wallis WA (1952). Journal of the American Statistical Association
    47(260):583-621.
    Macenko M, et al. (2009). A method for normalizing histology slides for quantitative
    analysis. IEEE ISBI, 1107-1110.

    Examples
    --------
    >>> audit = audit_cohort("out", metadata="meta.csv")            # doctest: +SKIP
    >>> audit.findings[2]                                            # doctest: +SKIP
    'Colour clusters follow site strongly (V = 0.92, adjusted p = 0.004); no evidence ...'
    >>> audit.write_report("out/audit")                              # doctest: +SKIP
    """
    if source not in SOURCES:
        raise ConfigError(f"source must be one of {', '.join(SOURCES)}, got {source!r}")
    if int(max_tiles) < 1:
        raise ConfigError(f"max_tiles must be at least 1, got {max_tiles}")
    folder, ok = ok_slides(cohort_or_dir)
    rows, previews, attrs, skipped = {}, {}, {}, []

    def measure(slide_id):  # each slide's sample is seeded by its id: the order of work changes nothing
        try:
            pixels = read_slide(folder, slide_id, source, max_tiles=int(max_tiles), seed=seed)
        except StoreError as exc:
            return slide_id, None, exc.one_line()
        return slide_id, (slide_metrics(pixels), pixels.preview, pixels.attrs), None

    from concurrent.futures import ThreadPoolExecutor

    # slides on a few threads (reads and numpy release the GIL), results taken in manifest order
    with ThreadPoolExecutor(max(1, min(4, os.cpu_count() or 1)), thread_name_prefix="tilewright-audit") as pool:
        for slide_id, measured, reason in pool.map(measure, ok.index):
            if measured is None:
                skipped.append({"slide_id": slide_id, "reason": reason})
                continue
            rows[slide_id], previews[slide_id], attrs[slide_id] = measured
    return build_audit(folder, ok, rows, previews, attrs, skipped, source=source, metadata=metadata, label=label,
                       seed=seed, tsne=tsne, n_clusters=n_clusters, n_resamples=n_resamples)


def build_audit(folder, ok, rows: dict, previews: dict, attrs: dict, skipped: list, *, source: str, metadata=None,
                label=None, seed: int = 0, tsne: bool = True, n_clusters: int | None = None,
                n_resamples: int = N_RESAMPLES) -> CohortAudit:
    """The audit of per-slide metrics already computed (``rows``: slide id -> metrics).

    Parameters are those of :func:`audit_cohort`; ``ok`` is the manifest's ok rows, ``skipped``
    a list of ``{"slide_id", "reason"}``.
    """
    if not rows:
        detail = f" ({skipped[0]['reason']})" if skipped else ""
        raise StoreError(f"no slide with status ok could be read{detail}; run tile-out first", folder)
    metrics = pd.DataFrame.from_dict(rows, orient="index", columns=list(METRICS))
    metrics.index.name = "slide_id"
    factors, notes = cohort_factors(ok.loc[metrics.index], metadata)
    if label is not None and label not in factors.columns:
        why = (" (it holds one value a slide, like an identifier)" if label in notes.get("_identifiers", [])
               else "")
        raise ConfigError(
            f"label {label!r} is not a metadata factor with two or more levels{why} "
            f"(factors: {', '.join(factors.columns) or 'none'})"
        )
    label = label if label is not None else guess_label(factors.columns)
    notes["_aliases"] = alias_groups(factors, exclude=[label])
    if isinstance(metadata, (str, os.PathLike)):
        notes["_metadata"] = str(metadata)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", category=FutureWarning)
        embedding = embed_slides(metrics[list(COLOUR_METRICS)], seed=seed, tsne=tsne, n_clusters=n_clusters)
    tests = {"seed": seed, "n_resamples": max(1, int(n_resamples))}
    # an alias group (site = scanner = µm/px ...) is one test: counted once when p-values are adjusted
    associations = association_table(embedding.clusters, factors, aliases=notes["_aliases"], **tests)
    sections = {**dict.fromkeys(COLOUR_METRICS, "colour"), **dict.fromkeys(QUALITY_METRICS, "quality")}
    kruskal = kruskal_table(metrics, factors, sections=sections, aliases=notes["_aliases"], **tests)
    notes["_attrs"] = attrs
    notes["_tests"] = tests
    audit = CohortAudit(
        metrics=metrics,
        associations=associations,
        kruskal=kruskal,
        factors=factors,
        embedding=embedding,
        skipped=pd.DataFrame(skipped, columns=["slide_id", "reason"]),
        source=source,
        label=label,
        folder=folder,
        previews=previews,
        notes=notes,
    )
    audit.gaps = colour_gaps(metrics, factors, seed=seed)
    audit.findings = _with_gaps(audit_findings(audit), audit)
    audit.quality_findings = quality_findings(audit)
    if metadata is None:
        audit.findings.append(
            "Only the manifest's source µm/px was tested: give metadata with site, scanner and label "
            "columns (--metadata meta.csv) to see whether colour follows them."
        )
    if metadata is not None:  # ids written as file names, rows of skipped slides, ids matching nothing
        from tilewright.audit.metadata_match import metadata_findings

        audit.findings.extend(metadata_findings(folder, notes))
    if notes.get("_missing"):
        audit.findings.append(f"{len(notes['_missing'])} audited slides have no metadata row.")
    return audit
