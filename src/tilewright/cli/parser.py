"""An argument parser whose errors fit in one line and suggest the option that was meant."""

from __future__ import annotations

import argparse
import difflib
import sys

__all__ = ["CommandParser", "suggest_options"]


def _option_strings(parser: argparse.ArgumentParser) -> list[str]:
    """Every long option of ``parser`` and of its sub-commands."""
    names = []
    for action in parser._actions:  # noqa: SLF001 - argparse keeps its actions here
        names.extend(s for s in action.option_strings if s.startswith("--"))
        if isinstance(action, argparse._SubParsersAction):  # noqa: SLF001
            for sub in dict.fromkeys(action.choices.values()):
                names.extend(_option_strings(sub))
    return [n for n in dict.fromkeys(names) if n not in ("--help", "--version")]


def suggest_options(unknown: str, known: list[str], n: int = 3) -> list[str]:
    """The valid options nearest to ``unknown`` (``difflib`` similarity), best first.

    Parameters
    ----------
    unknown : str
        The option as typed, e.g. ``--tiel`` or ``--min_tissue=0.3``.
    known : list of str
        Valid option strings.
    n : int
        At most this many suggestions.
    """
    typed = unknown.split("=", 1)[0]
    near = difflib.get_close_matches(typed, known, n=n, cutoff=0.7)
    if not near:  # "--tissue" for "--min-tissue": a known option that contains what was typed
        stem = typed.lstrip("-").replace("_", "-")
        near = [k for k in known if stem and stem in k][:n]
    return near


class CommandParser(argparse.ArgumentParser):
    """``argparse.ArgumentParser`` whose error for an unknown option is one line naming the
    nearest valid options, printed before the (short) usage; exit code 2 as argparse's."""

    def error(self, message: str):  # noqa: D401 - argparse's signature
        prefix = "unrecognized arguments: "
        if message.startswith(prefix):
            known = _option_strings(self)
            parts = []  # values after an unknown option are its own: only the options are named
            for token in message[len(prefix):].split():
                option = token.split("=", 1)[0]
                if option.startswith("--") and option not in known:
                    near = suggest_options(option, known)
                    parts.append(f"{option} (did you mean {' or '.join(near)}?)" if near
                                 else f"{option} (see {self.prog} --help)")
                elif token.startswith("-") and len(token) > 1 and not _is_number(token):
                    parts.append(f"{token} (see {self.prog} --help)")
            if parts:
                message = f"unknown option{'s' if len(parts) > 1 else ''} " + ", ".join(parts)
        sys.stderr.write(f"{self.prog}: error: {message}\n")
        self.print_usage(sys.stderr)
        self.exit(2)


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True
