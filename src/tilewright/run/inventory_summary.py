"""A cohort inventory's tables: one row a slide, per-site summaries, cohort totals, a short text."""

from __future__ import annotations

import math
import os
from pathlib import Path

import pandas as pd

from tilewright.errors import ConfigError

__all__ = ["CohortPlan", "read_sites", "CODECS", "COLUMNS", "human_bytes"]

#: Codecs a plan estimates store bytes for (``bytes_<codec>`` columns; the lossy one at the
#: configuration's quality).
CODECS = ("lz4", "zstd", "zlib", "none", "webp", "jpeg")

#: Row columns, in order (the codec byte columns ``bytes_<codec>`` follow).
COLUMNS = ["slide_id", "source", "status", "error", "backend", "format", "file_bytes", "width", "height",
           "level0_mpp", "mpp_origin", "objective", "levels", "downsamples", "colour_profile", "source_level",
           "resampled", "tissue_mm2", "tissue_fraction", "planned_tiles", "warnings", "seconds"]

#: Files :meth:`CohortPlan.write` writes (``plan_sites.*`` only with sites).
PLAN_FILES = ("plan.csv", "plan.parquet", "plan_totals.csv", "plan_totals.parquet", "plan_sites.csv",
              "plan_sites.parquet")


def read_sites(sites, slide_ids, site_column: str = "site") -> dict:
    """slide id → site from a metadata table (path or DataFrame with ``slide_id`` and
    ``site_column``) or a dict. Ids written as file names (``N01.svs``) match the slide id
    (``N01``). Ids are text (``007`` stays ``007``)."""
    from tilewright.store.layout import slide_stem

    if sites is None:
        return {}
    if isinstance(sites, dict):
        return {str(k): v for k, v in sites.items()}
    if isinstance(sites, (str, os.PathLike)):
        path = Path(sites)
        try:
            if path.suffix.lower() == ".parquet":
                table = pd.read_parquet(path)
            else:
                table = pd.read_csv(path, sep=None if path.suffix.lower() == ".tsv" else ",", dtype=str,
                                    engine="python" if path.suffix.lower() == ".tsv" else "c")
        except FileNotFoundError:
            raise ConfigError("metadata table not found", path) from None
        except Exception as exc:  # noqa: BLE001 - any reading error names the file
            raise ConfigError(f"cannot read the metadata table ({exc})", path) from None
    else:
        table, path = sites, None
    for col in ("slide_id", site_column):
        if col not in table.columns:
            raise ConfigError(f"the metadata table has no {col!r} column (columns: {', '.join(map(str, table.columns))})",
                              path)
    known = set(slide_ids)
    out = {}
    for sid, site in zip(table["slide_id"].astype(str), table[site_column]):
        key = sid if sid in known or slide_stem(sid) not in known else slide_stem(sid)
        out[key] = None if pd.isna(site) else str(site)
    return out


class CohortPlan:
    """What tiling a cohort at given settings would give, surveyed without tiling.

    Attributes
    ----------
    slides : DataFrame
        One row a slide (see :data:`COLUMNS`, then ``bytes_<codec>``
        and ``site`` when sites were given).
    sites : DataFrame or None
        Per site: slides, failed, planned tiles, tissue mm², level-0 µm/px values, backends,
        colour profiles, the share of slides whose tiles would be resampled from a finer level,
        bytes of the configured codec.
    totals : dict
        Cohort totals: slides, ok, failed, planned tiles, tissue mm², source bytes, bytes a codec.
    config : TilingConfig
    seconds : float
        Wall time of the survey.
    """

    def __init__(self, rows: list[dict], config, *, sites=None, site_column: str = "site", seconds: float = 0.0):

        self.config = config
        self.seconds = float(seconds)
        df = pd.DataFrame(rows)
        for col in COLUMNS + [f"bytes_{c}" for c in CODECS]:
            if col not in df.columns:
                df[col] = None
        df = df[COLUMNS + [f"bytes_{c}" for c in CODECS]].copy()
        df["planned_tiles"] = pd.to_numeric(df["planned_tiles"], errors="coerce").fillna(0).astype("int64")
        for col in ("error", "warnings", "colour_profile", "mpp_origin", "backend", "downsamples"):
            df[col] = df[col].fillna("").astype(str)
        for col in ("level0_mpp", "objective", "tissue_mm2", "tissue_fraction", "seconds"):
            df[col] = pd.to_numeric(df[col], errors="coerce").astype("float64")
        for col in ["file_bytes", "width", "height", "levels", "source_level"] + [f"bytes_{c}" for c in CODECS]:
            df[col] = pd.to_numeric(df[col], errors="coerce").astype("Int64")
        df["resampled"] = df["resampled"].astype("boolean")
        site_of = read_sites(sites, df["slide_id"], site_column)
        if site_of:
            df["site"] = [site_of.get(str(s)) for s in df["slide_id"]]
        self.slides = df.sort_values("slide_id", kind="stable").reset_index(drop=True)
        self.totals = self._totals()
        self.sites = self._sites() if site_of else None

    @property
    def codec(self) -> str:
        return str(self.config.compression)

    def _totals(self) -> dict:

        df, ok = self.slides, self.slides[self.slides["status"] == "ok"]
        out = {"slides": int(len(df)), "ok": int(len(ok)), "failed": int((df["status"] != "ok").sum()),
               "planned_tiles": int(ok["planned_tiles"].sum()), "tissue_mm2": float(ok["tissue_mm2"].sum()),
               "source_bytes": int(df["file_bytes"].fillna(0).sum()),
               "resampled_slides": int(ok["resampled"].fillna(False).sum()),
               "level0_mpp": sorted({round(float(v), 4) for v in ok["level0_mpp"].dropna()}),
               "backends": {str(k): int(v) for k, v in ok["backend"].value_counts().items()},
               "seconds": round(self.seconds, 2)}
        for c in CODECS:
            col = ok[f"bytes_{c}"]
            out[f"bytes_{c}"] = None if col.isna().any() or not len(col) else int(col.sum())
        return out

    def _sites(self) -> pd.DataFrame:
        df = self.slides.copy()
        df["site"] = df["site"].fillna("(no site)")
        codec = f"bytes_{self.codec}"
        rows = []
        for site, g in df.groupby("site", sort=True):
            ok = g[g["status"] == "ok"]
            rows.append({"site": site, "slides": len(g), "failed": int((g["status"] != "ok").sum()),
                         "planned_tiles": int(ok["planned_tiles"].sum()),
                         "median_tiles": float(ok["planned_tiles"].median()) if len(ok) else 0.0,
                         "tissue_mm2": float(ok["tissue_mm2"].sum()),
                         "level0_mpp": ", ".join(f"{v:g}" for v in sorted({round(float(v), 4) for v in ok["level0_mpp"].dropna()})),
                         "backends": ", ".join(sorted(set(ok["backend"]))),
                         "colour_profiles": ", ".join(sorted(set(ok["colour_profile"]))),
                         "resampled_share": float(ok["resampled"].fillna(False).mean()) if len(ok) else 0.0,
                         codec: None if ok[codec].isna().any() else int(ok[codec].sum())})
        return pd.DataFrame(rows)

    def write(self, folder) -> list[Path]:
        """Write ``plan.csv``/``plan.parquet``, ``plan_totals.*`` (one row) and, with sites,
        ``plan_sites.*`` into ``folder``, each atomically (temporary file, then rename). Returns the
        paths written."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        written = []
        totals = pd.DataFrame([{k: (", ".join(f"{a} {b}" for a, b in v.items()) if isinstance(v, dict) else
                                    ", ".join(f"{x:g}" for x in v) if isinstance(v, list) else v)
                                for k, v in self.totals.items()}])
        tables = [("plan", self.slides), ("plan_totals", totals)] + (
            [("plan_sites", self.sites)] if self.sites is not None else [])
        for name, table in tables:
            for ext in ("csv", "parquet"):
                final = folder / f"{name}.{ext}"
                tmp = folder / f".{name}.{ext}.{os.getpid()}.tmp"
                table.to_csv(tmp, index=False) if ext == "csv" else table.to_parquet(tmp, index=False)
                os.replace(tmp, final)
                written.append(final)
        return written

    def summary(self, width: int = 100) -> str:
        """A short text: settings, totals, bytes for each codec, per-site table, failures."""

        t, c = self.totals, self.config
        lines = [f"{t['slides']} slides ({t['ok']} read, {t['failed']} failed) surveyed in {t['seconds']:.1f} s at "
                 f"{c.mpp:g} µm/px, tile {c.tile}, stride {c.step}, min tissue {c.min_tissue:g}"
                 + (f", at most {c.max_tiles} tiles a slide" if c.max_tiles else ""),
                 f"{t['planned_tiles']:,} tiles planned on {t['tissue_mm2']:,.1f} mm² of tissue; "
                 f"{t['resampled_slides']} of {t['ok']} slides resampled from a finer level; "
                 f"level-0 µm/px {', '.join(f'{v:g}' for v in t['level0_mpp']) or '-'}; "
                 f"backends {', '.join(f'{k} {v}' for k, v in t['backends'].items()) or '-'}; "
                 f"sources {human_bytes(t['source_bytes'])}",
                 "estimated store bytes: " + ", ".join(
                     f"{k}{' (chosen)' if k == self.codec else ''} {human_bytes(t[f'bytes_{k}'])}"
                     + (f" q{c.quality}" if k == "jpeg" and t[f"bytes_{k}"] is not None else "")
                     for k in CODECS)]
        if self.sites is not None:
            codec = f"bytes_{self.codec}"
            lines.append("")
            lines.append(f"{'site':16s} {'slides':>6s} {'failed':>6s} {'tiles':>9s} {'tissue mm²':>11s} "
                         f"{'resampled':>9s}  {'µm/px':14s} {self.codec:>9s}")
            for _, r in self.sites.iterrows():
                lines.append(f"{str(r['site'])[:16]:16s} {r['slides']:6d} {r['failed']:6d} {r['planned_tiles']:9,d} "
                             f"{r['tissue_mm2']:11,.1f} {r['resampled_share']:9.0%}  {r['level0_mpp'][:14]:14s} "
                             f"{human_bytes(r[codec]):>9s}")
        failed = self.slides[self.slides["status"] != "ok"]
        for _, r in failed.head(5).iterrows():
            lines.append(f"failed {r['slide_id']}: {r['error']}"[:width * 2])
        if len(failed) > 5:
            lines.append(f"... and {len(failed) - 5} more failures (status column of plan.csv)")
        return "\n".join(lines)

    def __repr__(self) -> str:
        return f"CohortPlan(slides={self.totals['slides']}, planned_tiles={self.totals['planned_tiles']})"


def human_bytes(n: float | None) -> str:
    """``n`` bytes as B, kB, MB, GB, TB (powers of 1000)."""
    if n is None or (isinstance(n, float) and math.isnan(n)):
        return "-"
    for unit in ("B", "kB", "MB", "GB", "TB", "PB"):
        if abs(n) < 1000 or unit == "PB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
