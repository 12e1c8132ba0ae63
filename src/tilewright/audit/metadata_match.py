"""Joining a metadata table to a cohort's slide ids, before any metric is computed.

Two mistakes are common when a metadata table is written by hand or exported from another
system: ids written as the slide's file name (``N01.svs`` for the store ``N01.zarr``), and rows
for slides that the cohort run skipped (a blank slide) or could not tile. The first is matched
(and said so); the second is told apart from an id that matches nothing at all.
"""

from __future__ import annotations

import os

import pandas as pd

from tilewright.errors import ConfigError

__all__ = ["MetadataMatch", "match_suffixed_ids", "match_metadata", "metadata_findings"]


class MetadataMatch:
    """The outcome of :func:`match_metadata`.

    Attributes
    ----------
    table : DataFrame
        Metadata indexed by slide id, ids matched to the cohort's, rows of slides not audited
        (skipped or failed in the manifest) left out.
    renamed : dict
        Metadata id as written -> the slide id it was matched to.
    not_audited : dict
        Slide id -> ``"<status>: <reason>"`` of metadata rows for slides the run skipped or failed.
    unmatched : list of str
        Metadata ids that name no slide of the cohort.
    """

    def __init__(self, table, renamed, not_audited, unmatched):
        self.table, self.renamed, self.not_audited, self.unmatched = table, renamed, not_audited, unmatched

    def notes(self) -> list[str]:
        """One plain sentence for each adjustment and each kind of mismatch."""
        lines = []
        if self.renamed:
            written, sid = next(iter(self.renamed.items()))
            lines.append(f"{_n(self.renamed, 'metadata id is', 'metadata ids are')} written as the slide file name "
                         f"(for example {written!r}); matched to the slide id without the extension ({sid!r}).")
        if self.not_audited:
            sid, why = next(iter(self.not_audited.items()))
            lines.append(f"{_n(self.not_audited, 'metadata row is', 'metadata rows are')} for slides the tiling run "
                         f"stored no tiles for, so not audited (for example {sid!r}, {why}).")
        if self.unmatched:
            lines.append(f"{_n(self.unmatched, 'metadata id names', 'metadata ids name')} no slide of this cohort "
                         f"(for example {self.unmatched[0]!r}); check the slide_id column against manifest.csv.")
        return lines


def _n(items, one: str, many: str) -> str:
    return f"1 {one}" if len(items) == 1 else f"{len(items)} {many}"


def _stem(text: str) -> str:
    from tilewright.store.layout import slide_stem

    return slide_stem(text.replace("\\", "/").rsplit("/", 1)[-1])


def match_suffixed_ids(table: pd.DataFrame, slide_ids) -> tuple[pd.DataFrame, dict]:
    """Re-key metadata ids written as slide file names (``N01.svs``, ``b.ome.tif``, a path) to
    the slide id (``N01``, ``b``) when only the latter is in ``slide_ids``.

    Parameters
    ----------
    table : DataFrame
        Metadata indexed by ``slide_id`` (see :func:`tilewright.store.tables.read_metadata`).
    slide_ids : iterable of str
        The cohort's slide ids.

    Returns
    -------
    (DataFrame, dict)
        The re-keyed table and ``{id as written: slide id}``.

    Raises
    ------
    ConfigError
        When two rows then name one slide (``N01`` and ``N01.svs``).
    """
    known = set(map(str, slide_ids))
    renamed = {}
    for written in table.index:
        if written not in known and _stem(written) != written and _stem(written) in known:
            renamed[written] = _stem(written)
    if not renamed:
        return table, {}
    out = table.rename(index=renamed)
    twice = out.index[out.index.duplicated()].unique()
    if len(twice):
        sid = twice[0]
        spellings = [w for w in table.index if renamed.get(w, w) == sid]
        raise ConfigError(f"metadata has two rows for slide {sid!r} ({', '.join(map(repr, spellings))}); "
                          "keep one row per slide")
    out.index.name = "slide_id"
    return out, renamed


def match_metadata(metadata, manifest: pd.DataFrame) -> MetadataMatch:
    """Read a metadata table and join its ids to a cohort's manifest, before any computing.

    Parameters
    ----------
    metadata : DataFrame, str or os.PathLike
        See :func:`tilewright.store.tables.read_metadata`.
    manifest : DataFrame
        The cohort manifest indexed by slide id, every status (``status`` and ``error`` columns).

    Returns
    -------
    MetadataMatch

    Raises
    ------
    ConfigError
        For a missing or unreadable table, a table without ``slide_id``, repeated ids, or a
        table none of whose ids names a slide of the cohort.
    """
    from tilewright.store.tables import read_metadata

    table = read_metadata(metadata)
    table, renamed = match_suffixed_ids(table, manifest.index)
    not_audited = {sid: _not_audited(manifest, sid) for sid in table.index
                   if sid in manifest.index and str(manifest.at[sid, "status"]).lower() != "ok"}
    unmatched = sorted(set(table.index) - set(manifest.index))
    if len(unmatched) == len(table) and len(table):
        raise ConfigError(
            f"no metadata slide_id names a slide of this cohort (metadata: {', '.join(map(repr, unmatched[:3]))}; "
            f"cohort: {', '.join(map(repr, list(manifest.index[:3])))}); the slide_id column must hold the "
            "store names without '.zarr' (the slide file names without extension)",
            metadata if isinstance(metadata, (str, os.PathLike)) else None)
    return MetadataMatch(table.drop(index=list(not_audited)), renamed, not_audited, unmatched)


def _not_audited(manifest: pd.DataFrame, sid: str) -> str:
    status = str(manifest.at[sid, "status"]).lower()
    error = manifest.at[sid, "error"] if "error" in manifest.columns else ""
    why = " ".join(str(error).split()) if pd.notna(error) else ""
    return f"{status}: {why}" if why else status


def metadata_findings(folder, notes: dict) -> list[str]:
    """The audit's sentences on how the metadata joined (see :meth:`MetadataMatch.notes`).

    ``notes`` are :func:`tilewright.audit.factors.cohort_factors`'s: ``"_renamed"`` (ids written
    as file names) and ``"_unmatched"`` (ids of no audited slide). The folder's manifest tells
    the unmatched ids of slides the run skipped or failed (the blank slide) from ids that name no
    slide at all.
    """
    from tilewright.audit.source import read_manifest

    unmatched = list(notes.get("_unmatched") or [])
    manifest = read_manifest(folder) if unmatched else None
    not_audited, unknown = {}, []
    for written in unmatched:
        sid = written if written in manifest.index else _stem(written)
        if sid in manifest.index:
            not_audited[sid] = _not_audited(manifest, sid)
        else:
            unknown.append(written)
    return MetadataMatch(None, dict(notes.get("_renamed") or {}), not_audited, unknown).notes()
