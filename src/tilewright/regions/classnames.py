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

__all__ = ["class_key", "keep_names", "ClassNames"]


def class_key(name) -> str:
    """The comparison key of a class name: whitespace collapsed and stripped, case folded."""
    return " ".join(str(name).split()).casefold()


def keep_names(keep) -> tuple:
    """A keep list as a tuple of names (strings split on commas; blanks and repeats dropped).

    Parameters
    ----------
    keep : str or iterable of str or None

    Returns
    -------
    tuple of str
        Empty for None or an empty selection.

    Raises
    ------
    TypeError
        ``keep`` is neither a string nor an iterable.
    """
    if keep is None:
        return ()
    items = keep.split(",") if isinstance(keep, str) else [str(k) for k in keep]
    names = [" ".join(k.split()) for k in items]
    return tuple(dict.fromkeys(n for n in names if n))


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
