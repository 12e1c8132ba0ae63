"""A cohort folder: one store a slide, the manifest, and lazy access to every tile."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from tilewright.errors import StoreError

__all__ = ["MANIFEST_COLUMNS", "manifest_frame", "write_manifest", "read_manifest", "stores_manifest", "Cohort", "open_cohort"]

MANIFEST_COLUMNS = ["slide_id", "source", "status", "error", "n_tiles", "mpp_source", "objective",
                    "source_level", "seconds", "colour_profile", "warnings", "tissue_mm2"]


def manifest_frame(rows: list[dict]):
    """Manifest rows as the manifest's DataFrame: its columns (:data:`MANIFEST_COLUMNS`) in order,
    their types, sorted by slide id."""
    import pandas as pd

    df = pd.DataFrame.from_records([{c: r.get(c) for c in MANIFEST_COLUMNS} for r in rows], columns=MANIFEST_COLUMNS)
    df["slide_id"] = df["slide_id"].astype(str)
    for col in ("error", "colour_profile", "warnings"):  # warnings: "; "-joined "code: reason" messages
        df[col] = df[col].fillna("").astype(str)
    df["n_tiles"] = pd.to_numeric(df["n_tiles"], errors="coerce").fillna(0).astype("int64")
    for col in ("mpp_source", "objective", "seconds", "tissue_mm2"):
        df[col] = pd.to_numeric(df[col], errors="coerce").astype("float64")
    df["source_level"] = pd.to_numeric(df["source_level"], errors="coerce").astype("Int64")
    return df.sort_values("slide_id", kind="stable").reset_index(drop=True)


def write_manifest(out_dir: str | os.PathLike, rows: list[dict]) -> "object":
    """Write ``manifest.csv`` and ``manifest.parquet``, each replaced atomically (a temporary file,
    then a rename); returns the DataFrame written."""
    import io

    from tilewright.store.journal import replace_bytes

    out_dir = Path(out_dir)
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

    out_dir = Path(out_dir)
    journal = read_rows(out_dir)  # before the manifest: a folding in between then loses nothing
    pq = out_dir / "manifest.parquet"
    csv = out_dir / "manifest.csv"
    if pq.exists():
        df = pd.read_parquet(pq)
    elif csv.exists():  # ids and texts stay strings ("001" is not the number 1)
        df = pd.read_csv(csv, keep_default_na=False, na_values=[""],
                         dtype={"slide_id": str, "source": str, "status": str, "error": str})
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

    from tilewright.run.ledger import kept_row
    from tilewright.store.metadata import stores_attrs

    out_dir = Path(out_dir)
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
        Complete stores of the manifest's slides, by slide id: those whose status is ``ok``, and
        those whose latest run failed while an earlier complete store was kept (for example a
        re-run with other settings, refused without ``--overwrite``; the row says why).
        Slides ``skipped`` for lack of tissue have no tiles and are left out.
    """

    def __init__(self, path: str | os.PathLike):
        from tilewright.store.journal import journal_path
        from tilewright.store.layout import store_path
        from tilewright.store.metadata import stores_attrs
        from tilewright.store.reader import TileStore

        self.path = Path(path)
        has_manifest = any(p.exists() for p in (self.path / "manifest.parquet", self.path / "manifest.csv",
                                                 journal_path(self.path)))
        self.manifest = read_manifest(self.path) if has_manifest else stores_manifest(self.path)
        ids = [str(sid) for sid, status in zip(self.manifest["slide_id"], self.manifest["status"])
               if status != "skipped"]
        paths = [store_path(self.path, sid) for sid in ids]
        # one metadata read a store, on a few threads; the stores open nothing more until used
        self.stores = {sid: TileStore(p, attrs) for sid, p, attrs in zip(ids, paths, stores_attrs(paths))
                       if attrs is not None}

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


def open_cohort(out_dir: str | os.PathLike) -> Cohort:
    """Open a folder of tile stores: a ``tile-out`` / ``tile_cohort`` output folder, or stores
    written by ``tile_slide`` (no manifest; see :func:`stores_manifest`)."""
    return Cohort(out_dir)
