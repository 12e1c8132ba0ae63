"""Class names of region sources: one spelling rule, one way to read a keep list.

Annotators type the same tissue type in several spellings (``Tumor``, ``tumor``, ``Tumor ``).
Class names are therefore compared by a *key*: surrounding whitespace removed, inner runs of
whitespace collapsed to one space, and case folded (``str.casefold``). Spellings with the same
key are one class, shown under the first spelling met; the merge is reported (a
:class:`RegionRepairWarning` from the readers, a log line in a cohort run). Kept classes
(``keep=``, ``--keep``) are matched by the same key.

A keep list is a name, a comma-separated string of names (``"Tumor,Necrosis"``) or a sequence
of names; everywhere (``plan_tiles``, ``RegionMap.fractions``, ``TilingConfig.keep``,
``tile-out --keep``) a string is split on commas.
"""

from __future__ import annotations

from tilewright.errors import RegionError
from tilewright.tissue.plan import keep_names  # noqa: F401 - public here too (defined by plan_tiles' keep=)

__all__ = ["class_key", "keep_names", "match_keep", "none_kept", "ClassNames"]


def class_key(name) -> str:
    """The comparison key of a class name: whitespace collapsed and stripped, case folded."""
    return " ".join(str(name).split()).casefold()


def match_keep(classes, keep, path=None) -> tuple:
    """Split a keep list into the classes present and the names absent.

    Parameters
    ----------
    classes : sequence of str
        The classes a region source has.
    keep : str or sequence of str
        Kept names (a string is split on commas), matched by :func:`class_key`.
    path : str, optional
        The region file, for the error.

    Returns
    -------
    present : tuple of str
        Kept classes found, spelled as in ``classes``.
    absent : tuple of str
        Kept names with no class (they cover nothing).

    Raises
    ------
    RegionError
        ``keep`` is not names, or names nothing.
    """
    try:
        names = keep_names(keep)
    except TypeError:
        raise RegionError(f"keep must be a class name or a list of names, got {keep!r}") from None
    if not names:
        raise RegionError(f"no class chosen to keep; choose among {', '.join(classes)}", path)
    by_key = {class_key(c): c for c in classes}
    present = tuple(dict.fromkeys(by_key[class_key(n)] for n in names if class_key(n) in by_key))
    return present, tuple(n for n in names if class_key(n) not in by_key)


def none_kept(absent, classes, path=None) -> RegionError:
    """The error for a region source holding none of the kept classes (names the file and the fix)."""
    return RegionError(f"none of the kept classes ({', '.join(map(repr, absent))}) is in these regions; they "
                       f"have {', '.join(map(repr, classes))}; check --keep / keep= or the class property "
                       "(--class-property)", path)


class ClassNames:
    """Collects class names in order of first appearance, merging spellings with one key.

    Parameters
    ----------
    given : sequence of str, optional
        Names known beforehand (their spellings win).
    """

    def __init__(self, given=()):
        self._by_key: dict[str, str] = {}
        self.merged: dict[str, list] = {}  # shown spelling -> other spellings met
        for name in given:
            self.add(name)

    def add(self, name) -> str:
        """Record ``name``; return the spelling the class is shown under."""
        name = " ".join(str(name).split())
        key = class_key(name)
        shown = self._by_key.setdefault(key, name)
        if shown != name and name not in self.merged.setdefault(shown, []):
            self.merged[shown].append(name)
        return shown

    def lookup(self, name):
        """The shown spelling of ``name``'s class, or None when no such class was recorded."""
        return self._by_key.get(class_key(name))

    def notes(self) -> list:
        """One message per merged class (empty when every class had one spelling)."""
        return [f"class names {', '.join(map(repr, [shown] + others))} differ only in case or spacing; "
                f"merged as {shown!r}" for shown, others in self.merged.items() if others]
