"""Turning a ``tile-out`` SOURCE (a slide, a folder, or a list file) into slide paths."""

from __future__ import annotations

import csv
import os
from dataclasses import dataclass
from pathlib import Path

from tilewright.errors import ConfigError
from tilewright.store.layout import is_slide_name  # noqa: F401 - public here too

__all__ = ["find_slides", "slide_list", "SlideList", "read_mpp_table", "mpp_for", "is_slide_name", "unique_paths"]

_LIST_SUFFIXES = (".txt", ".csv", ".lst", ".list", ".tsv")


def unique_paths(paths) -> list[Path]:
    """``paths`` in their order with repeats dropped: a file named twice (even as ``a/../b.svs``
    and ``b.svs``, or through a symbolic link) is one slide, tiled once."""
    from tilewright.location.url import is_url

    seen: set = set()
    out = []
    for p in paths:
        if is_url(p):  # a URL names its object: kept as text
            if str(p) not in seen:
                seen.add(str(p))
                out.append(str(p))
            continue
        p = Path(p)
        key = os.path.realpath(p)
        if key not in seen:
            seen.add(key)
            out.append(p)
    return out


def find_slides(source: str | os.PathLike) -> list[Path]:
    """Slide paths from a slide file, a folder (recursive), or a text/CSV list of paths.

    A list file holds one path a line (``#`` starts a comment), or a CSV with a ``path`` column
    (``source`` and ``slide`` also accepted; a first line that is neither a slide path nor such a
    header is an error, so a metadata table given by mistake is refused, not read line by line);
    relative paths are relative to the list file, and a file listed twice is one slide.
    Folder searches skip hidden folders and ``*.zarr`` outputs and return paths sorted. DICOM
    files found there are grouped by series (see :func:`dicom_sources`): one path a series.
    An object-store URL (``s3://bucket/prefix/``) is searched the same way (see
    :func:`tilewright.run.url_sources.find_url_slides`); slides in a bucket are URLs (text).
    """
    from tilewright.location.url import is_url

    if is_url(source):
        from tilewright.run.url_sources import find_url_slides

        return find_url_slides(source)
    source = Path(source)
    if not source.exists():
        raise ConfigError("SOURCE does not exist; give a slide file, a folder of slides or a list file", source)
    if source.is_dir():
        found, unsuffixed = [], []
        for root, dirs, files in os.walk(source):
            dirs[:] = sorted(d for d in dirs if not d.startswith(".") and not d.endswith(".zarr"))
            found.extend(Path(root) / f for f in files if is_slide_name(f) and not f.startswith("."))
            if any(not Path(f).suffix and not f.startswith(".") for f in files):
                unsuffixed.append(Path(root))  # may hold DICOM files without a suffix
        return sorted(set(dicom_sources(found, unsuffixed)))
    if source.is_file() and (source.suffix.lower() == ".dcm" or not source.suffix) and _is_dicom(source):
        from tilewright.slide.dicom_series import find_series

        return [find_series(source).source]  # one file of a series: the series is the slide
    if source.suffix.lower() in _LIST_SUFFIXES and not is_slide_name(source):
        return _read_list(source)[0]
    return [source]


@dataclass
class SlideList:
    """A SOURCE's slides: ``paths``; ``ids`` given by the user (a list CSV's ``slide_id`` column,
    None where not given) or None; ``root``, the folder slide paths are taken relative to when
    ids are derived from them (a folder SOURCE itself, a list file's folder, a file's folder)."""

    paths: list
    ids: list | None
    root: Path


def slide_list(source: str | os.PathLike) -> SlideList:
    """:func:`find_slides` with the ids a list CSV gives (``slide_id`` column) and the root that
    derived ids are relative to (see :func:`tilewright.store.layout.slide_ids`). In a bucket the
    root is the SOURCE prefix (a list file's or a slide's own prefix) and lists give no ids."""
    from tilewright.location.url import is_url, url_parent

    if is_url(source):
        paths = find_slides(source)
        text = str(source)
        root = text if text.endswith("/") and not (len(paths) == 1 and paths[0] == text) else url_parent(text)
        return SlideList(paths, None, root)
    source = Path(source)
    if source.is_file() and source.suffix.lower() in _LIST_SUFFIXES and not is_slide_name(source):
        paths, ids = _read_list(source)
        return SlideList(paths, ids, source.parent)
    paths = find_slides(source)
    root = source if source.is_dir() else source.parent
    if len(paths) == 1 and Path(paths[0]) == source:  # a DICOM series folder given itself
        root = source.parent
    return SlideList(paths, None, root)


def _is_dicom(path: Path) -> bool:
    from tilewright.slide.dicom_series import is_dicom_file

    return is_dicom_file(path)


def dicom_sources(paths: list[Path], folders: list[Path] = ()) -> list[Path]:
    """Replace the DICOM files among ``paths`` by one path a whole-slide series.

    A series is one slide: its folder when no other series shares the folder, else its level-0
    file. Instances of series without a pyramid level (only a label, overview or thumbnail) and
    DICOM files that are not whole-slide images are dropped. ``folders`` are searched for series
    too (folders holding files without a suffix, which DICOM exports often are).
    """
    from tilewright.slide.dicom_series import series_in_folder

    folders, out = list(folders), []
    for p in paths:
        if p.suffix.lower() == ".dcm":
            if p.parent not in folders:
                folders.append(p.parent)
        else:
            out.append(p)
    for folder in folders:
        out.extend(series.source for series in series_in_folder(folder))
    return out


def _read_list(path: Path) -> tuple[list[Path], list | None]:
    text = path.read_text(encoding="utf-8-sig")
    lines = [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.strip().startswith("#")]
    if not lines:
        raise ConfigError("the list file names no slides", path)
    header = [h.strip().lower() for h in next(csv.reader([lines[0]]))]
    column = next((c for c in ("path", "source", "slide") if c in header), None)
    if column is None and not _names_a_slide(lines[0], path):
        raise ConfigError(
            f"the list has no 'path' column (columns: {', '.join(h for h in header if h)[:200] or 'none'}) and its "
            "first line is not a slide path; add a 'path' column holding each slide's file, or give a text file "
            "with one slide path a line, or the slides' folder", path)
    ids = None
    if column is not None:
        rows = [r for r in list(csv.DictReader(lines, fieldnames=header))[1:] if r.get(column)]
        entries = [r[column].strip() for r in rows]
        if "slide_id" in header:  # ids given by the user, taken as written ("" or absent: derived)
            ids = [(r.get("slide_id") or "").strip() or None for r in rows]
    else:
        entries = lines
    from tilewright.location.url import is_url

    full = [e if is_url(e) else (Path(e) if Path(e).is_absolute() else path.parent / e) for e in entries]
    paths = unique_paths(full)
    if ids is not None:
        ids = _ids_of_unique(full, ids, paths, path)
    return paths, ids


def _ids_of_unique(full: list[Path], ids: list, paths: list[Path], list_file: Path) -> list:
    """The given id of each of ``paths`` (a file listed twice must be given one id, or one left blank)."""
    from tilewright.run.naming import source_key

    by_file: dict = {}
    for p, sid in zip(full, ids):
        key = source_key(p)
        if sid is not None and by_file.get(key) not in (None, sid):
            raise ConfigError(f"{p} is listed twice with slide_id {by_file[key]!r} and {sid!r}; a file is one "
                              "slide: keep one row", list_file)
        if sid is not None or key not in by_file:
            by_file[key] = sid
    return [by_file.get(source_key(p)) for p in paths]


def _names_a_slide(line: str, list_file: Path) -> bool:
    """True when a list file's first line is itself an entry (a slide file name or an existing path),
    not a header: a header never becomes a slide."""
    entry = Path(line.strip())
    return is_slide_name(entry) or (entry if entry.is_absolute() else list_file.parent / entry).exists()


def read_mpp_table(path: str | os.PathLike) -> dict[str, float]:
    """Per-slide level-0 µm/px overrides from a CSV with columns ``slide_id`` (or ``path``) and ``mpp``."""
    import pandas as pd

    path = Path(path)
    try:
        df = pd.read_csv(path, dtype=str)  # ids as written: "00123" stays "00123"; mpp converted below
    except FileNotFoundError:
        raise ConfigError("mpp table not found", path) from None
    except Exception as exc:
        raise ConfigError(f"cannot read the mpp table as CSV ({exc})", path) from None
    cols = {c.lower().strip(): c for c in df.columns}
    key = cols.get("slide_id") or cols.get("path") or cols.get("source")
    if key is None or "mpp" not in cols:
        raise ConfigError("the mpp table needs a 'slide_id' (or 'path') column and an 'mpp' column", path)
    out = {}
    for k, v in zip(df[key], df[cols["mpp"]]):
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise ConfigError(f"mpp for {k!r} is not a number: {v!r}", path) from None
        if not (0.05 <= v <= 20):
            raise ConfigError(f"mpp for {k!r} is implausible ({v}); expected 0.05-20 µm/px", path)
        out[str(k)] = v
    return out


def mpp_for(mpp, path, slide_id):
    """The level-0 µm/px override of one slide: ``mpp`` itself when it is a number (or None), else
    its entry for the slide's id, path or file name in a per-slide table (``--mpp-table``,
    :func:`read_mpp_table`; a path key may be relative to the working folder); None without one."""
    if mpp is None or isinstance(mpp, (int, float)):
        return mpp
    for key in (slide_id, path, os.path.basename(path)):
        if key in mpp:
            return float(mpp[key])
    for key, value in mpp.items():  # a path given relative to the working folder
        if os.path.abspath(str(key)) == path:
            return float(value)
    return None
