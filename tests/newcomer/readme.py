"""Reading the README and the documentation pages as a new user does: their code blocks and the
commands written in their text.

Parsing (not a fixed list) keeps the walk valid as the pages change: every fenced block and
every inline command is found again on each run, in the order a reader meets them. The pages are
the README, then the docs site's Getting started and user-guide pages in their table of contents'
order (``docs/guide/index.md``).
"""

from __future__ import annotations

import re
import shlex
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"
DOCS = ROOT / "docs"

SHELL = ("", "bash", "sh", "shell", "console")
PYTHON = ("python", "py", "python3")
OUR_COMMANDS = ("tile-out", "tilewright")

_FENCE = re.compile(r"^```([A-Za-z0-9_+-]*)[ \t]*\n(.*?)^```[ \t]*$", re.S | re.M)
_SPAN = re.compile(r"`([^`\n]+(?:\n[^`\n]+)*)`")


def pages() -> list[Path]:
    """The README, Getting started, then the user guide's pages in their table of contents' order."""
    index = (DOCS / "guide" / "index.md").read_text(encoding="utf-8")
    toc = re.search(r"```\{toctree\}\n(.*?)```", index, re.S).group(1)
    guide = [DOCS / "guide" / f"{ln.strip()}.md" for ln in toc.splitlines() if ln.strip() and not ln.startswith(":")]
    return [README, DOCS / "getting-started.md", *guide]


@dataclass
class Step:
    line: int           # line number in its page where the step starts
    kind: str           # "python" or "shell"
    text: str           # the code (python) or one command line (shell)
    inline: bool = False
    page: str = "README"

    def __str__(self):
        return f"{self.page} line {self.line}: {self.text.strip().splitlines()[0][:90]}"


def steps(text: str | None = None, path: Path = README) -> list[Step]:
    """Every python block, every shell command line and every inline command of one page (the
    README by default), in reading order."""
    text = path.read_text(encoding="utf-8") if text is None else text
    page = "README" if path == README else str(path.relative_to(ROOT))
    found, fenced = [], []
    for m in _FENCE.finditer(text):
        fenced.append(m.span())
        lang, body = m.group(1).lower(), m.group(2)
        first = text.count("\n", 0, m.start(2)) + 1
        if lang in PYTHON:
            found.append(Step(first, "python", body, page=page))
        elif lang in SHELL:
            for k, ln in enumerate(body.splitlines()):
                if ln.strip() and not ln.lstrip().startswith("#"):
                    found.append(Step(first + k, "shell", ln.strip(), page=page))
    prose = list(text)
    for a, b in fenced:  # inline commands are read from the prose only
        prose[a:b] = " " * (b - a)
    prose = "".join(prose)
    for m in _SPAN.finditer(prose):
        span = " ".join(m.group(1).split())
        if span.split(" ", 1)[0] in OUR_COMMANDS or span.startswith("make "):
            found.append(Step(text.count("\n", 0, m.start()) + 1, "shell", span, inline=True, page=page))
    return sorted(found, key=lambda s: s.line)


def words(command: str) -> list[str]:
    """Shell words of one command line, without a trailing comment or ``&``."""
    out = shlex.split(command, comments=True)
    return out[:-1] if out and out[-1] == "&" else out


def is_synopsis(argv: list[str]) -> bool:
    """A command shape rather than a command (``tilewright split META --folds K [--site COL]``):
    placeholders left in capitals, optional parts in brackets, alternatives."""
    return any(re.fullmatch(r"[A-Z][A-Z0-9_]*", w) or "[" in w or "|" in w or "..." in w for w in argv[1:])


#: The page that lists every tile-out option ("Options in plain words", "Every option and its default").
OPTIONS_PAGE = DOCS / "guide" / "tiling.md"


def option_list(text: str | None = None) -> list[str]:
    """The options the tiling page lists after "Options in plain words", up to the end of that sentence."""
    text = OPTIONS_PAGE.read_text(encoding="utf-8") if text is None else text
    start = re.search(r"Options\s+in\s+plain\s+words", text).start()
    options, pos = [], start
    for m in _SPAN.finditer(text, start):
        if "." in text[pos:m.start()].replace("e.g.", ""):  # the sentence ended before this span
            break
        pos = m.end()
        if not m.group(1).startswith(OUR_COMMANDS):  # `tile-out --help` is a command, not the list
            options += re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*", m.group(1))
    return options
