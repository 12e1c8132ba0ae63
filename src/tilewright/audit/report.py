"""Report folder of a cohort audit: tables, PNG plots and a static offline ``report.html``.

Every file is first written into a private temporary folder inside the report folder and then
moved into place (``report.html`` last), so a failure never leaves a half-written file.
"""

from __future__ import annotations

import html
import os
import shutil
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from tilewright.location.objpath import as_path
from tilewright.location.url import is_url
from tilewright.audit import plots
from tilewright.audit.compare import before_after_table, compare_audits, compare_gaps, gap_findings
from tilewright.audit.findings import comparison_findings
from tilewright.errors import StoreError

__all__ = ["write_report", "CAUTION"]

CAUTION = (
    "Research use only: not for diagnosis or clinical decisions; results need validation under "
    "local regulations and licensed pathology practice."
)

STYLE = """
body{margin:0;background:#f3f1ec;color:#22252b;font:15px/1.5 system-ui,-apple-system,"Segoe UI",sans-serif}
header{background:#1f3b40;color:#f3f1ec;padding:22px 32px 18px}
header h1{margin:0;font-size:22px;font-weight:600;letter-spacing:.02em}
header p{margin:4px 0 0;color:#b9d3cf;font-size:13px}
main{max-width:1100px;margin:0 auto;padding:12px 32px 40px}
section{background:#fbfaf7;border:1px solid #ddd8cc;border-radius:6px;margin:18px 0;padding:14px 20px}
h2{font-size:17px;margin:4px 0 10px;color:#1f3b40;border-bottom:2px solid #d9822b;display:inline-block}
.caution{background:#fff4e0;border-left:5px solid #d9822b;padding:10px 16px;margin:18px 0;border-radius:4px}
ol.findings li{margin:4px 0}
table{border-collapse:collapse;font-size:13px;margin:6px 0}
th,td{padding:4px 10px;border-bottom:1px solid #e4e0d6;text-align:right}
th{background:#ece8de;color:#1f3b40}td:first-child,th:first-child{text-align:left}
img{max-width:100%;height:auto;display:block;margin:8px 0;border-radius:4px}
.muted{color:#6b6f78;font-size:13px}
"""


def _table(frame: pd.DataFrame, digits: int = 3) -> str:
    if frame.empty:
        return '<p class="muted">(none)</p>'
    return frame.to_html(index=False, border=0, float_format=lambda v: f"{v:.{digits}g}", na_rep="–", escape=True)


def _colour_rows(kruskal: pd.DataFrame) -> pd.DataFrame:
    from tilewright.audit.metrics import QUALITY_METRICS

    return kruskal[~kruskal["metric"].isin(QUALITY_METRICS)].dropna(subset=["p_value"])


def _quality_rows(kruskal: pd.DataFrame) -> pd.DataFrame:
    from tilewright.audit.metrics import QUALITY_METRICS

    return kruskal[kruskal["metric"].isin(QUALITY_METRICS)].dropna(subset=["p_value"])


def _img(name: str, alt: str) -> str:
    return f'<img src="{html.escape(name)}" alt="{html.escape(alt)}">'


def _draw(audit, tmp: Path) -> dict:
    """Draw every figure into ``tmp``; return section -> list of (file name, alt text)."""
    figures: dict[str, list] = {"associations": [], "embedding": [], "metrics": [], "clusters": []}
    if not audit.associations.dropna(subset=["cramers_v"]).empty:
        plots.plot_associations(audit.associations, tmp / "associations.png", audit.label)
        figures["associations"].append(("associations.png", "Cramér's V per factor"))
    coords = audit.embedding.coords
    clusters = audit.clusters.map(lambda c: f"cluster {c}")
    plots.plot_embedding(coords, clusters, "cluster", tmp / "embedding_cluster.png")
    figures["embedding"].append(("embedding_cluster.png", "embedding coloured by cluster"))
    for factor in audit.factors.columns:
        name = plots.file_name("embedding", factor)
        plots.plot_embedding(coords, audit.factors[factor], factor, tmp / name)
        figures["embedding"].append((name, f"embedding coloured by {factor}"))
        ranked = audit.kruskal[audit.kruskal["factor"] == factor].dropna(subset=["p_value"])["metric"].tolist()
        if ranked:
            name = plots.file_name("metrics", factor)
            plots.plot_metric_levels(audit.metrics, audit.factors[factor], ranked, factor, tmp / name)
            figures["metrics"].append((name, f"metric distributions by {factor}"))
    if audit.previews:
        plots.plot_cluster_grid(audit.clusters, audit.previews, tmp / "clusters.png")
        figures["clusters"].append(("clusters.png", "slide previews per cluster"))
    return figures


def _html(audit, figures: dict, before, names, table=None) -> str:
    """The page; ``table``: :func:`compare_audits` of ``before`` and ``audit`` (when ``before``)."""
    from tilewright import __version__

    when = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    source = {"tiles": "stored tiles (after any stain normalization)",
              "source": "sampled tiles read raw from the source slides"}.get(
        audit.source, "slide thumbnails under the tissue mask (raw colour)")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Cohort colour audit – {html.escape(audit.folder.name)}</title>",
        f"<style>{STYLE}</style></head><body>",
        "<header><h1>Cohort colour audit</h1>",
        f"<p>{html.escape(str(audit.folder))} · {len(audit.metrics)} slides · from {html.escape(source)} · "
        f"tilewright {html.escape(__version__)} · {when}</p></header><main>",
        f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</div>',
        '<section id="findings"><h2>Findings</h2><ol class="findings">',
        *[f"<li>{html.escape(s)}</li>" for s in audit.findings],
        "</ol></section>",
    ]
    if before is not None:
        table = compare_audits(before, audit) if table is None else table
        pairing = before.notes.get("_pairing") or (
            "Caution: these two audits were not computed from the same pixels; differences may come from "
            "resolution, pixels or clustering, not only from normalization.")
        parts += [
            f'<section id="before-after"><h2>Before / after: {html.escape(names[0])} → {html.escape(names[1])}</h2>',
            f'<p>{html.escape(pairing)}</p>',
            "<ol class=\"findings\">",
            *[f"<li>{html.escape(s)}</li>" for s in gap_findings(before, audit, names)],
            *[f"<li>{html.escape(s)}</li>" for s in comparison_findings(table, names, before.notes.get("_aliases"))],
            "</ol>",
            *[_img(n, a) for n, a in figures.get("before_after", [])],
            _table(table.rename(columns={"cramers_v_before": f"V {names[0]}", "cramers_v_after": f"V {names[1]}",
                                         "p_adjusted_before": f"adj. p {names[0]}",
                                         "p_adjusted_after": f"adj. p {names[1]}",
                                         "p_value_before": f"p {names[0]}", "p_value_after": f"p {names[1]}"})),
            "</section>",
        ]  # fmt: skip
    parts += ['<section id="associations"><h2>Colour clusters × factors</h2>']
    parts += [_img(n, a) for n, a in figures["associations"]]
    parts += [
        _table(audit.associations),
        '<p class="muted">Cramér\'s V of the colour-cluster × factor table, bias-corrected (Bergsma 2013); '
        "p-value of Pearson's statistic from every rearrangement of the factor over the slides when there are "
        "few (exact), otherwise from 10,000 or more seeded random ones; adjusted p: Benjamini–Hochberg (1995) "
        "over the factors. An association is stated only at adjusted p &lt; 0.05. Clusters are k-means on "
        "principal components of the standardized colour and stain metrics (tissue amount and sharpness are "
        "left out), k chosen by mean silhouette.</p></section>",
        *_gap_section(audit, before, names),
        '<section id="embedding"><h2>Embedding</h2>',
        *[_img(n, a) for n, a in figures["embedding"]],
        "</section>",
        '<section id="metrics"><h2>Metric distributions by factor</h2>',
        *[_img(n, a) for n, a in figures["metrics"]],
        "<p class=\"muted\">Strongest Kruskal–Wallis differences, exact or permutation p-values, "
        "Benjamini–Hochberg adjusted within each factor's colour metrics (all in kruskal.csv):</p>",
        _table(_colour_rows(audit.kruskal).groupby("factor", sort=False).head(5)),
        "</section>",
        '<section id="quality"><h2>Tissue amount and sharpness</h2>',
        '<ol class="findings">', *[f"<li>{html.escape(s)}</li>" for s in audit.quality_findings], "</ol>",
        _table(_quality_rows(audit.kruskal)),
        '<p class="muted">Not part of the colour clusters: a biopsy and a resection differ in tissue amount, '
        "not in colour.</p>",
        "<h3>Sharpness beside colour, by factor level</h3>",
        _table(audit.by_level, digits=4),
        '<p class="muted">Median sharpness (variance of the Laplacian of tissue tiles; quartiles) and its ratio to '
        "the other levels' slides; median tissue colour (CIELAB) and its CIEDE2000 distance from the other levels' "
        "median. A site whose tiles are softer or whose colour differs offers a shortcut either way (also in "
        "by_level.csv).</p></section>",
        '<section id="clusters"><h2>Slides in each cluster</h2>',
        *[_img(n, a) for n, a in figures["clusters"]],
        "</section>",
        '<section id="skipped"><h2>Skipped slides</h2>',
        _table(audit.skipped),
        "</section>",
        '<p class="muted">Files: audit.parquet (metrics, cluster, coordinates), associations.csv, kruskal.csv, '
        "by_level.csv, gaps.csv, findings.txt and the PNG figures beside this page.</p>",
        "</main></body></html>",
    ]
    return "\n".join(parts)


def _level_tiles(before, after, tmp: Path) -> list:
    """Raw and normalized tiles of each level of the batch factor with the widest raw colour gap."""
    from tilewright.audit.gaps import gap_summary
    from tilewright.audit.level_tiles import level_tiles_picture

    gaps = compare_gaps(before, after)
    hidden = {m for members in (before.notes.get("_aliases") or {}).values() for m in members}
    summary = gap_summary(gaps)
    summary = summary[(summary["factor"] != before.label) & ~summary["factor"].isin(hidden)]
    if summary.empty:
        return []
    factor = str(summary.sort_values("gap_before", ascending=False).iloc[0]["factor"])
    name = plots.file_name("tiles", factor)
    if level_tiles_picture(before, after, factor, tmp / name, gaps=gaps) is None:
        return []
    return [(name, f"tiles of each {factor}, raw and normalized")]


def _gap_section(audit, before, names) -> list:
    """The colour gaps between each factor's levels (raw and normalized when ``before`` is given)."""
    if before is not None:
        table = compare_gaps(before, audit).rename(columns={
            "gap_before": f"gap {names[0]}", "gap_before_lo": "lo", "gap_before_hi": "hi",
            "gap_after": f"gap {names[1]}", "gap_after_lo": "lo ", "gap_after_hi": "hi "})
    else:
        table = audit.gaps
    return ['<section id="gaps"><h2>Colour gaps between factor levels</h2>', _table(table, digits=2),
            '<p class="muted">CIEDE2000 (Sharma et al. 2005) between the mean tissue CIELAB of the slides of each '
            "level; lo–hi: 95 % percentile bootstrap interval over slides (redrawn within each level, the same "
            "redraws on both sides). Below 1: not noticeable side by side; 1–3: noticeable on close comparison; "
            "above 3: visible at a glance (common practice). All pairs in gaps.csv.</p></section>"]


def _findings_text(audit, before, names, table=None) -> str:
    lines = list(audit.findings)
    lines += ["", "Tissue amount and sharpness:", *audit.quality_findings]
    if before is not None:
        table = compare_audits(before, audit) if table is None else table
        lines += ["", f"Before / after ({names[0]} -> {names[1]}):"]
        if before.notes.get("_pairing"):
            lines.append(before.notes["_pairing"])
        lines += gap_findings(before, audit, names)
        lines += comparison_findings(table, names, before.notes.get("_aliases"))
    return "\n".join(lines) + "\n"


def write_report(audit, folder, *, before=None, names=None) -> Path:
    """Write the report folder of ``audit`` (see :meth:`CohortAudit.write_report`).

    Parameters
    ----------
    audit : CohortAudit
    folder : str or os.PathLike
    before : CohortAudit, optional
        An audit of the same cohort before normalization; adds a before/after section with this
        audit as "after".
    names : (str, str), optional
        Names of ``before`` and ``audit`` in that section.

    Raises
    ------
    StoreError
        When the folder cannot be created or written.
    """
    if is_url(folder):  # a bucket: the report is made in a local folder, then each file written whole
        return _report_to_bucket(audit, as_path(folder), before, names)
    folder = Path(folder)
    if before is not None and names is None:
        names = (before.source_name, audit.source_name)
        if names[0] == names[1]:
            names = ("before", "after")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=".report-", dir=folder))
    except OSError as exc:
        raise StoreError(f"cannot create the report folder ({exc}); choose another with --report", folder) from exc
    try:
        table = audit.metrics.join(audit.embedding.coords).join(audit.factors)
        table.reset_index().to_parquet(tmp / "audit.parquet", index=False)
        audit.associations.to_csv(tmp / "associations.csv", index=False)
        audit.kruskal.to_csv(tmp / "kruskal.csv", index=False)
        audit.by_level.to_csv(tmp / "by_level.csv", index=False)
        compared = None if before is None else compare_audits(before, audit)  # once, for all three uses
        (tmp / "findings.txt").write_text(_findings_text(audit, before, names, compared), encoding="utf-8")
        figures = _draw(audit, tmp)
        if before is not None:
            figures["before_after"] = _level_tiles(before, audit, tmp)
        (tmp / "report.html").write_text(_html(audit, figures, before, names, compared), encoding="utf-8")
        gaps = audit.gaps if before is None else compare_gaps(before, audit)
        gaps.to_csv(tmp / "gaps.csv", index=False)
        if before is not None:
            before_after_table(before, audit, compared).to_csv(tmp / "before_after.csv", index=False)
        written = sorted(tmp.iterdir(), key=lambda p: p.name == "report.html")
        for path in written:
            os.replace(path, folder / path.name)
    except OSError as exc:
        raise StoreError(f"cannot write the report ({exc}); check free space and permissions", folder) from exc
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return folder / "report.html"


def _report_to_bucket(audit, folder, before, names):
    """:func:`write_report` into a prefix of a bucket (``report.html`` written last)."""
    from tilewright.location.objpath import replace_bytes

    local = Path(tempfile.mkdtemp(prefix="tilewright-report-"))
    try:
        write_report(audit, local / "report", before=before, names=names)
        files = sorted((local / "report").iterdir(), key=lambda p: p.name == "report.html")
        for path in files:
            replace_bytes(folder / path.name, path.read_bytes())
    finally:
        shutil.rmtree(local, ignore_errors=True)
    return folder / "report.html"
