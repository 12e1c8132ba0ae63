"""The documentation site builds offline with warnings as errors (what ``make docs`` runs), and
its pages hold what they promise: the API reference from the numpydoc docstrings, the
Performance and Reliability pages from the repository's own files (included, not copied)."""

import html
import re
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("sphinx", reason="the docs extra is not installed (make test installs it)")

ROOT = Path(__file__).resolve().parents[2]


def _text(page: Path) -> str:
    raw = page.read_text(encoding="utf-8")
    raw = re.sub(r"<(script|style)\b.*?</\1>", " ", raw, flags=re.S)
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", raw)).split())


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    out = tmp_path_factory.mktemp("docs-html")
    done = subprocess.run([sys.executable, "-m", "sphinx", "-W", "--keep-going", "-q", "-b", "html",
                           str(ROOT / "docs"), str(out)], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, f"sphinx -W failed:\n{done.stdout[-3000:]}\n{done.stderr[-3000:]}"
    return out


def test_every_guide_page_is_built_and_linked(site):
    index = (ROOT / "docs" / "guide" / "index.md").read_text(encoding="utf-8")
    toc = re.search(r"```\{toctree\}\n(.*?)```", index, re.S).group(1)
    listed = [ln.strip() for ln in toc.splitlines() if ln.strip() and not ln.startswith(":")]
    on_disk = sorted(p.stem for p in (ROOT / "docs" / "guide").glob("*.md") if p.stem != "index")
    assert sorted(listed) == on_disk  # ground truth: the page files themselves
    for name in listed:
        assert (site / "guide" / f"{name}.html").exists(), name
    for page in ("index", "getting-started", "performance", "reliability", "api/index"):
        assert (site / f"{page}.html").exists(), page


def test_api_reference_is_generated_from_the_docstrings(site):
    import tilewright as tw

    page = _text(site / "api" / "generated" / "tilewright.MacenkoTransfer.html")
    # ground truth: the class's own docstring (numpydoc sections rendered, the paper cited)
    first = tw.MacenkoTransfer.__doc__.strip().splitlines()[0]
    assert " ".join(first.split()).replace("'", "’") in page
    assert "Parameters" in page and "References" in page and "Macenko M" in page
    listed = _text(site / "api" / "index.html")
    for name in ("tile_cohort", "open_store", "audit_cohort", "TileStoreDataset", "StainTransfer"):
        assert name in listed, name


@pytest.mark.parametrize("page, source", [("performance", "benchmarks/PERFORMANCE.md"),
                                          ("reliability", "tests/faults/RELIABILITY.md")])
def test_performance_and_reliability_pages_include_the_repository_files(site, page, source):
    """The pages include the files (one source of truth): every heading of the file is on the
    page, and the page's Markdown source holds an include directive rather than a copy."""
    text = (ROOT / source).read_text(encoding="utf-8")
    headings = [h.strip("# ").strip() for h in re.findall(r"^#{1,4} .+$", text, re.M)]
    assert headings
    built = re.sub(r"\s", "", _text(site / f"{page}.html")).replace("'", "’")
    for heading in headings:
        plain = re.sub(r"[`*\s]", "", heading).replace("'", "’")  # inline code is spaced apart in HTML
        assert plain in built, heading
    md = (ROOT / "docs" / f"{page}.md").read_text(encoding="utf-8")
    assert f"{{include}} ../{source}" in md and len(md.splitlines()) < 20
