"""A cohort folder: one store a slide, the manifest, and lazy access to every tile."""

from __future__ import annotations

import io
import os

import numpy as np

from tilewright.errors import StoreError
from tilewright.location.objpath import ObjectPath, as_path, replace_bytes

__all__ = ["MANIFEST_COLUMNS", "manifest_frame", "write_manifest", "read_manifest", "stores_manifest", "Cohort", "open_cohort"]

MANIFEST_COLUMNS = ["slide_id", "source", "status", "error", "n_tiles", "mpp_source", "mpp_origin", "objective",
                    "source_level", "seconds", "colour_profile", "warnings", "source_sha256", "tissue_mm2",
                    # the stain outcome check (tilewright.run.stain_bind): ok / off-target / not-normalized, and
                    # the CIEDE2000 of the slide's sample's mean tissue colour to the target's, raw and stored
                    "stain_check", "stain_delta_e_raw", "stain_delta_e"]

#: Text columns ("" for none): warnings are "; "-joined "code: reason" messages; source_sha256 is ""
#: unless source_digest = "full"; mpp_origin says where mpp_source (a number) was read.
_TEXT = ("error", "colour_profile", "warnings", "source_sha256", "mpp_origin", "stain_check")


def manifest_frame(rows: list[dict]):
    """Manifest rows as the manifest's DataFrame: its columns (:data:`MANIFEST_COLUMNS`) in order,
    their types, sorted by slide id."""
    import pandas as pd

    df = pd.DataFrame.from_records([{c: r.get(c) for c in MANIFEST_COLUMNS} for r in rows], columns=MANIFEST_COLUMNS)
    df["slide_id"] = df["slide_id"].astype(str)
    for col in _TEXT:
        df[col] = df[col].fillna("").astype(str)
    df["n_tiles"] = pd.to_numeric(df["n_tiles"], errors="coerce").fillna(0).astype("int64")
    for col in ("mpp_source", "objective", "seconds", "tissue_mm2", "stain_delta_e_raw", "stain_delta_e"):
        df[col] = pd.to_numeric(df[col], errors="coerce").astype("float64")
    df["source_level"] = pd.to_numeric(df["source_level"], errors="coerce").astype("Int64")
    return df.sort_values("slide_id", kind="stable").reset_index(drop=True)


def write_manifest(out_dir: str | os.PathLike, rows: list[dict]) -> "object":
    """Write ``manifest.csv`` and ``manifest.parquet``, each replaced atomically (a local folder: a
    temporary file, then a rename; a bucket: one request each, which replaces the object whole);
    returns the DataFrame written."""
    out_dir = as_path(out_dir)
    df = manifest_frame(rows)
    parquet = io.BytesIO()
    df.to_parquet(parquet, index=False)
    replace_bytes(out_dir / "manifest.csv", df.to_csv(index=False).encode("utf-8"))
    replace_bytes(out_dir / "manifest.parquet", parquet.getvalue())
    return df


def read_manifest(out_dir: str | os.PathLike):
    """The manifest of a cohort folder as a DataFrame (Parquet preferred, CSV as fallback), with
    the rows of its journal (slides a running or killed run finished since it last wrote the
    manifest; :mod:`tilewright.store.journal`) in place of their older rows."""
    import pandas as pd

    from tilewright.store.journal import read_rows

    out_dir = as_path(out_dir)
    journal = read_rows(out_dir)  # before the manifest: a folding in between then loses nothing
    pq = out_dir / "manifest.parquet"
    csv = out_dir / "manifest.csv"
    if pq.is_file():
        df = pd.read_parquet(io.BytesIO(pq.read_bytes()) if isinstance(pq, ObjectPath) else pq)
    elif csv.is_file():  # ids and texts stay strings ("001" is not the number 1)
        df = pd.read_csv(io.BytesIO(csv.read_bytes()) if isinstance(csv, ObjectPath) else csv,
                         keep_default_na=False, na_values=[""],
                         dtype={"slide_id": str, "source": str, "status": str, "error": str,
                                "source_sha256": str, "mpp_origin": str})
    elif journal:
        df = None
    else:
        raise StoreError("no manifest.csv or manifest.parquet; is this a tile-out output folder?", out_dir)
    if not journal:
        return df
    newer = {str(r["slide_id"]): r for r in journal}
    rows = [] if df is None else [r for r in df.to_dict("records") if str(r["slide_id"]) not in newer]
    return manifest_frame(rows + list(newer.values()))


def stores_manifest(out_dir: str | os.PathLike):
    """Manifest rows made from the complete stores of a folder that has no manifest.

    ``tile_slide(path, "out/")`` writes a store but no manifest (only ``tile_cohort`` and
    ``tile-out`` write one); each complete ``*.zarr`` store of ``out_dir`` becomes one row, ``ok``
    when it holds tiles and ``skipped`` (with the reason) when it holds none. Unfinished stores
    are left out.

    Raises
    ------
    StoreError
        When the folder holds no manifest and no complete store.
    """
    import pandas as pd

    from tilewright.store.manifest_row import kept_row
    from tilewright.store.metadata import stores_attrs

    out_dir = as_path(out_dir)
    paths = sorted(out_dir.glob("*.zarr")) if out_dir.is_dir() else []
    rows = [kept_row(p, str(a.get("slide_id") or p.name[: -len(".zarr")]), str((a.get("source") or {}).get("path") or ""), a)
            for p, a in zip(paths, stores_attrs(paths)) if a is not None]  # unfinished stores: left out
    if not rows:
        raise StoreError("no manifest.csv, manifest.parquet or complete <slide_id>.zarr store here; give the "
                         "folder tile-out, tile_cohort or tile_slide wrote", out_dir)
    df = pd.DataFrame(rows, columns=MANIFEST_COLUMNS)
    df["seconds"] = df["seconds"].astype("float64")
    return df


class Cohort:
    """Every complete store of a cohort folder, read lazily.

    Attributes
    ----------
    path : Path
    manifest : DataFrame
        One row a slide (see :data:`MANIFEST_COLUMNS`); for a folder of stores without a
        manifest (``tile_slide`` output), rows made from its complete stores
        (:func:`stores_manifest`).
    stores : dict[str, TileStore]
        Complete stores of the manifest's slides made with the cohort's settings (see
        :func:`open_cohort`), by slide id: those whose status is ``ok``, and those whose latest
        run failed while an earlier complete store was kept (a store of the same settings, for
        example after a source file changed; the row says why). Slides ``skipped`` for lack of
        tissue have no tiles and are left out. A source file is served once: where two stores
        record the same source (a folder written by a version whose ids changed as slides were
        added), the one completed last.
    left_out : DataFrame
        Complete stores not served, with the reason (``slide_id``, ``reason``); also logged.
    settings : dict or None
        The settings every served store was made with (see :func:`open_cohort`), None when
        unchecked.
    normalization : dict or None
        With ``normalize=``: the method and the target's digest every store's reads apply.
    """

    def __init__(self, path: str | os.PathLike, settings="cohort", normalize: str | None = None, target="cohort"):
        from tilewright.store.journal import journal_path
        from tilewright.store.selection import LEFT_OUT_COLUMNS, select_stores

        import pandas as pd

        self.path = as_path(path)
        has_manifest = any(p.is_file() for p in (self.path / "manifest.parquet", self.path / "manifest.csv",
                                                  journal_path(self.path)))
        self.manifest = read_manifest(self.path) if has_manifest else stores_manifest(self.path)
        self.stores, left, self.settings = select_stores(self.path, self.manifest, settings)
        self.normalization = None
        if normalize is not None and self.stores:
            self.normalization = _normalize_stores(self.stores, left, str(normalize).lower(), target, self.path)
        self.left_out = pd.DataFrame(left, columns=LEFT_OUT_COLUMNS)
        if left:
            import logging

            logging.getLogger("tilewright").warning(
                "%s: %d complete store(s) left out: %s", self.path, len(left),
                "; ".join(f"{sid}: {why}" for sid, why in left[:5]) + (" ..." if len(left) > 5 else ""))

    @property
    def slide_ids(self) -> list[str]:
        return list(self.stores)

    def __len__(self) -> int:
        return sum(len(s) for s in self.stores.values())

    @property
    def tiles(self):
        """A dask array (N_total, T, T, 3) over every slide's tiles, in :attr:`index` order."""
        import dask.array as da

        parts = [s.to_dask() for s in self.stores.values() if len(s)]
        if not parts:
            raise StoreError("the cohort has no tiles", self.path)
        sizes = {p.shape[1:] for p in parts}
        if len(sizes) > 1:
            raise StoreError(f"stores have different tile shapes {sorted(sizes)}; tile them with one config",
                             self.path)
        return da.concatenate(parts, axis=0)

    @property
    def index(self):
        """DataFrame with one row a tile: slide, tile (index in its store), y, x, tissue."""
        import pandas as pd

        frames = []
        for sid, s in self.stores.items():
            n = len(s)
            frames.append(pd.DataFrame({"slide": sid, "tile": np.arange(n, dtype=np.int64),
                                        "y": s.yx[:, 0] if n else np.zeros(0, np.int64),
                                        "x": s.yx[:, 1] if n else np.zeros(0, np.int64),
                                        "tissue": s.tissue}))
        if not frames:
            return pd.DataFrame(columns=["slide", "tile", "y", "x", "tissue"])
        return pd.concat(frames, ignore_index=True)

    def __repr__(self) -> str:
        return f"Cohort({str(self.path)!r}, slides={len(self.stores)}, tiles={len(self)})"


def _normalize_stores(stores: dict, left: list, method: str, target, path) -> dict:
    """Replace each store by one whose reads normalize to ``target`` ("cohort": the median of the
    stores' own estimates); a store that cannot be normalized when read is left out, with why."""
    from tilewright.store.read_normalize import median_target, resolve_target
    from tilewright.store.settings import target_digest

    target = median_target(stores.values(), method) if target == "cohort" else resolve_target(target, method)
    for sid, store in list(stores.items()):
        try:
            stores[sid] = store.normalized(method, target)
        except StoreError as exc:
            left.append((sid, exc.reason if hasattr(exc, "reason") else str(exc)))
            del stores[sid]
    if not stores:
        raise StoreError(f"no store can be normalized when read ({left[-1][1] if left else 'none'})", path)
    return {"method": method, "target": target_digest(target), "target_dict": target}


def open_cohort(out_dir: str | os.PathLike, *, settings="cohort", normalize: str | None = None,
                target="cohort") -> Cohort:
    """Open a folder of tile stores: a ``tile-out`` / ``tile_cohort`` output folder, or stores
    written by ``tile_slide`` (no manifest; see :func:`stores_manifest`).

    Parameters
    ----------
    out_dir : path
    settings : "cohort", None, TilingConfig, dict or path
        Serve only stores made with these settings: the tiles' true µm/px (within the
        settings' tolerance), tile size and stride, normalization and its stain target, codec
        (lossless, or JPEG at a quality), and every other tile-changing setting both record.
        ``"cohort"`` (default): the folder's ``config.toml`` (its latest run's settings); a
        folder without one (``tile_slide`` output) must hold stores of one set of settings,
        else a :class:`StoreError` names the difference. A ``TilingConfig``, its dict or a TOML
        file: those settings. None: every complete store, unchecked. Stores left out are listed
        in ``Cohort.left_out`` with the reason, and logged.
    normalize : {"macenko", "reinhard"}, optional
        Normalize every tile read (stores tiled with ``estimate_stains``; see
        :mod:`tilewright.store.read_normalize`). None: tiles as stored.
    target : "cohort", normalizer, dict or path
        The target of ``normalize``: ``"cohort"`` (default) the median of the served stores' own
        estimates (what a normalizing run uses without ``--reference``), or a fitted normalizer,
        its dict, or a JSON file of one.
    """
    return Cohort(out_dir, settings=settings, normalize=normalize, target=target)
