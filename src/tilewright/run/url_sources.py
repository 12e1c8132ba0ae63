"""A ``tile-out`` SOURCE given as an object-store URL: one slide, a prefix (searched recursively), or a list.

The same rules as a local SOURCE (:func:`tilewright.run.sources.find_slides`), read through the
bucket's listing (one listing request a thousand objects, no request a file):

- a URL naming an object with a slide suffix is that slide; one naming a ``.dcm`` object is its
  DICOM series;
- a list file (``.txt``, ``.csv``, ...) names slides one a line, or in a ``path`` column: URLs,
  or keys relative to the list's own prefix;
- a prefix is searched recursively: objects with a slide suffix, hidden names and ``*.zarr``
  outputs skipped; DICOM files are grouped by series (one slide a series, named by its prefix
  with a trailing ``/`` when the series is alone there).

``https://`` URLs cannot be listed: they name single slides or list files.
"""

from __future__ import annotations

from tilewright.errors import ConfigError, ObjectNotFoundError
from tilewright.location import objects
from tilewright.location.url import LISTABLE, split_url, url_join, url_parent

__all__ = ["find_url_slides"]

_LIST_SUFFIXES = (".txt", ".csv", ".lst", ".list", ".tsv")


def find_url_slides(source: str) -> list[str]:
    """Slide URLs of a SOURCE URL (see the module docstring), sorted for a prefix.

    Raises
    ------
    ConfigError
        Nothing at the URL, or a prefix holding no slide.
    ObjectStoreError
        The bucket cannot be read (credentials, access, missing bucket, connection), one line.
    """
    from tilewright.store.layout import is_slide_name

    source = str(source)
    scheme = split_url(source)[0]
    name = source.rstrip("/").rsplit("/", 1)[-1].lower()
    if not source.endswith("/"):
        if name.endswith(_LIST_SUFFIXES) and not is_slide_name(name):
            return _read_list(source)
        if name.endswith(".dcm"):
            from tilewright.slide.dicom_series import find_series

            return [find_series(source).name]
        if is_slide_name(name) or scheme not in LISTABLE:
            try:
                objects.head(source)
            except ObjectNotFoundError:
                if scheme not in LISTABLE or not objects.is_prefix(source):
                    raise ConfigError("SOURCE does not exist; give a slide, a prefix of slides or a list file",
                                      source) from None
            else:
                return [source]
    if scheme not in LISTABLE:
        raise ConfigError(f"{scheme}:// URLs cannot be listed; name each slide in a list file", source)
    return _search(source.rstrip("/"))


def _search(prefix: str) -> list[str]:
    """Slides under ``prefix``: slide-suffixed objects and one entry a DICOM series."""
    from tilewright.store.layout import is_slide_name
    from tilewright.slide.dicom_series import series_in_folder

    listed = objects.list_prefix(prefix)
    if not listed:
        raise ConfigError("SOURCE does not exist (no object under this prefix); give a slide, a prefix "
                          "of slides or a list file", prefix)
    found, dicom_folders = [], []
    for url, _ in listed:
        rel = url[len(prefix) + 1:].split("/")
        if any(p.startswith(".") or p.endswith(".zarr") for p in rel[:-1]) or rel[-1].startswith("."):
            continue
        leaf = rel[-1]
        folder = url_parent(url)
        if leaf.lower().endswith(".dcm") or "." not in leaf:  # DICOM exports often have no suffix
            if folder not in dicom_folders:
                dicom_folders.append(folder)
        elif is_slide_name(leaf):
            found.append(url)
    for folder in dicom_folders:
        found.extend(series.name for series in series_in_folder(folder))
    return sorted(set(found))


def _read_list(url: str) -> list[str]:
    """Entries of a list file in a bucket: URLs, or keys relative to the list's prefix."""
    import csv

    from tilewright.location.url import is_url
    from tilewright.store.layout import is_slide_name

    try:
        text = objects.get_bytes(url).decode("utf-8-sig")
    except ObjectNotFoundError:
        raise ConfigError("SOURCE does not exist; give a slide, a prefix of slides or a list file", url) from None
    lines = [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.strip().startswith("#")]
    if not lines:
        raise ConfigError("the list file names no slides", url)
    header = [h.strip().lower() for h in next(csv.reader([lines[0]]))]
    column = next((c for c in ("path", "source", "slide") if c in header), None)
    if column is not None:
        entries = [r[column].strip() for r in list(csv.DictReader(lines, fieldnames=header))[1:] if r.get(column)]
    elif is_url(lines[0]) or is_slide_name(lines[0]):
        entries = lines
    else:
        raise ConfigError(f"the list has no 'path' column and its first line is not a slide; add a 'path' "
                          "column holding each slide's URL, or give one slide a line", url)
    out, seen = [], set()
    for e in entries:
        full = e if is_url(e) else url_join(url_parent(url), e)
        if full not in seen:
            seen.add(full)
            out.append(full)
    return out
