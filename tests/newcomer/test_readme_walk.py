"""Walk the README, then the docs site's Getting started and user-guide pages, top to bottom as a
new user would, on the demo cohort (issues 24 and 31).

Every fenced Python block runs as written; every ``tile-out`` / ``tilewright`` command, in a
block or in the text, runs with the README's placeholders pointing at the demo (or, when it
needs a cluster or is a fragment naming options, is parsed by tile-out's own parser). Any
traceback, or a command that does not succeed, fails the walk.
"""

import argparse
import re
import shutil
import sys
from pathlib import Path

import pytest

from . import readme
from .conftest import command, run
from tilewright.cli.tile_out import build_parser

#: README placeholders -> the demo's files (paths relative to the folder `make demo` ran in).
DEMO = {
    "SLIDE": "demo-out/slides/site-north/N01.svs",
    "SOURCE": "demo-out/slides", "/data/slides": "demo-out/slides", "slides/": "demo-out/slides",
    "/shared/slides": "demo-out/slides",
    "OUT": "demo-out/tiles", "/shared/out": "out/",
    "meta.csv": "demo-out/metadata.csv", "META": "demo-out/metadata.csv",
}


def _parses(args: list[str]) -> str | None:
    """None when tile-out's parser accepts ``args``; else what it said."""
    try:
        build_parser().parse_args(args)
    except SystemExit as stop:
        return f"tile-out's parser refused {' '.join(args)} (exit {stop.code})"
    return None


def _walk_shell(step, where) -> tuple[str, str | None]:
    """(what was done, problem or None) for one command line."""
    argv = readme.words(step.text)
    if not argv:
        return "empty", None
    if argv[0] == "make":
        if argv[1:2] == ["demo"]:
            return "done by the session's demo (tilewright demo demo-out)", None
        return "skipped: make target other than demo (the test suite, benchmarks)", None
    if argv[0] not in readme.OUR_COMMANDS:
        return f"skipped: {argv[0]} is not a tilewright command (cluster or shell set-up)", None
    if argv[0] == "tilewright" and argv[1:2] == ["demo"]:
        return "done by the session's demo", None
    argv = [DEMO.get(w, w) for w in argv]
    if any(re.match(r"(s3|gs|az)://", w) for w in argv[1:]):  # a bucket of the README's, not reachable here
        if argv[0] == "tile-out":  # its options must parse (buckets are tested in tests/location)
            return "parsed (needs a bucket)", _parses(argv[1:])
        return "skipped: needs a bucket (tested in tests/location)", None
    if argv[0] == "tile-out" and "--scheduler" in argv:  # needs a cluster: the options must parse
        return "parsed (needs a dask cluster)", _parses(argv[1:])
    if readme.is_synopsis(argv):
        return "skipped: a command shape with placeholders", None
    if argv[0] == "tile-out":
        positional = [w for w in argv[1:] if not w.startswith("-")]
        if not positional and not {"--help", "--print-config"} & set(argv):
            return "parsed (options named in the text)", _parses(argv[1:] + ["SRC", "OUT"])
    done = run(command(argv[0]) + argv[1:], where)
    output = done.stdout + done.stderr
    if "Traceback" in output or done.returncode != 0:
        return "ran", f"exit {done.returncode}:\n{output[-2500:]}"
    return "ran", None


def _walk_python(step, where) -> tuple[str, str | None]:
    done = run([sys.executable, "-c", step.text], where)
    if done.returncode != 0 or "Traceback" in done.stderr:
        return "ran", f"exit {done.returncode}:\n{(done.stdout + done.stderr)[-2500:]}"
    return "ran", None


@pytest.mark.timeout(2400)
def test_readme_walk_on_the_demo(demo_workspace):
    where, demo = demo_workspace
    assert demo.returncode == 0 and "Traceback" not in demo.stdout + demo.stderr, demo.stderr[-2500:]
    # `make demo` is `tilewright demo demo-out` (the Makefile, read here so the shortcut stays honest)
    makefile = (Path(readme.README).parent / "Makefile").read_text()
    assert re.search(r"^demo:.*\n\t.*tilewright demo demo-out\s*$", makefile, re.M)
    problems, log = [], []
    for k, page in enumerate(readme.pages()):
        # each page is walked as a reader who just ran `make demo` meets it: in a fresh copy of the
        # demo's folder, so what one page's examples wrote never decides another page's
        here = where.parent / f"{where.name}-page{k}"
        shutil.copytree(where / "demo-out", here / "demo-out", symlinks=True)
        for step in readme.steps(path=page):
            if step.kind == "shell" and step.inline and len(readme.words(step.text)) < 2:
                continue  # the command's name in a sentence
            what, problem = (_walk_python if step.kind == "python" else _walk_shell)(step, here)
            log.append(f"{what:<55} {step}")
            if problem:
                problems.append(f"{step}\n{problem}")
        shutil.rmtree(here, ignore_errors=True)
    print("\n".join(log))
    assert sum(line.startswith("ran") for line in log) >= 5  # the walk did run the README, not skip it all
    assert not problems, "\n\n".join(problems)


def test_readme_option_list_matches_tile_out_help():
    listed = readme.option_list()
    known, either = set(), {}
    for action in build_parser()._actions:
        if action.help == argparse.SUPPRESS:
            continue  # an old spelling kept for one release (--object-types), not advertised
        longs = [s for s in action.option_strings if s.startswith("--") and s != "--help"]
        for s in longs:
            either[s] = set(longs)  # --verify-jpeg / --no-verify-jpeg: one option, either spelling
        if longs:
            known.add(frozenset(longs))
    missing = sorted(min(o) for o in known if not o & set(listed))
    unknown = sorted(o for o in listed if o not in either)
    assert not missing, f"{readme.OPTIONS_PAGE.name}'s option list lacks {missing} (tile-out --help has them)"
    assert not unknown, f"{readme.OPTIONS_PAGE.name} lists {unknown}, which tile-out does not have"
    assert len(listed) == len(set(listed)), f"{readme.OPTIONS_PAGE.name} lists an option twice"


def test_demo_report_names_the_blank_slide_as_skipped(demo_workspace):
    """The demo's blank slide has a metadata row but no tiles: the audit says the run skipped it,
    not that its id matches nothing (issue 24, item 7)."""
    where, demo = demo_workspace
    assert demo.returncode == 0
    report = (where / "demo-out" / "audit" / "report.html").read_text(encoding="utf-8")
    # ground truth: the demo scenario's blank slide is the last of site-south (S02 with two a site)
    assert "&#x27;S02&#x27;, skipped: no tile met the tissue criteria" in report
    assert "check the slide_id column" not in report
