"""The closing summary never cuts a reason mid-word, and a re-run reports the stores it kept as
"complete, kept" without overwriting their timing (issue 24, items 8 and 9)."""

import io
import re

import pandas as pd
import pytest

from helpers import write_slide
from tilewright.cli.summary import print_summary
from tilewright.cli.tile_out import main as tile_out

pytestmark = pytest.mark.timeout(600)

REASON = ("/data/cohort/site-north/scanner-A/batch 2024-03/N017.svs: a complete store made with other settings "
          "or another source exists (tile 256 -> 128, mpp 0.5 -> 0.2428, normalizer 'macenko' -> None); it is "
          "kept as it is; pass --overwrite to re-tile or choose another output folder")


@pytest.mark.parametrize("columns", [60, 100, 200])
def test_summary_wraps_reasons_at_word_boundaries_and_drops_nothing(monkeypatch, columns):
    monkeypatch.setenv("COLUMNS", str(columns))
    rows = [{"slide_id": "N017", "status": "failed", "error": REASON, "n_tiles": 0, "seconds": 0.2},
            {"slide_id": "N018", "status": "ok", "error": "", "n_tiles": 12, "seconds": 3.5}]
    out = io.StringIO()
    print_summary(rows, "out", stream=out)
    text = out.getvalue()
    row_lines = text[text.index("N017"):text.index("N018")].splitlines()
    note_col = row_lines[0].index("/data/")
    note = " ".join(line[note_col:].strip() for line in row_lines)
    assert note == REASON  # ground truth: the reason as written, every word, in order, none cut
    assert "..." not in text and "pass --overwrite to re-tile" in note
    # wrapped to the terminal, except a single word (a path) longer than the room left
    words = set(REASON.split())
    for line in row_lines:
        assert len(line) <= max(columns, note_col + 40) or line.split()[-1] in words


@pytest.fixture(scope="module")
def slide_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("slides")
    write_slide(folder / "k1.tif", mpp=0.2265, size_um=(600.0, 700.0), seed=8)
    return folder


def test_rerun_reports_kept_stores_and_keeps_their_timing(slide_folder, tmp_path, capsys):
    out = tmp_path / "out"
    args = [str(slide_folder), str(out), "--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3"]
    assert tile_out(args) == 0
    first = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    assert first.status[0] == "ok" and first.seconds[0] > 0
    capsys.readouterr()
    assert tile_out(args) == 0  # the same command again: the store is complete, kept
    printed = capsys.readouterr()
    second = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    # ground truth: the first run's manifest (the re-run spent no time on the slide)
    assert second.seconds[0] == pytest.approx(first.seconds[0]) and second.status[0] == "ok"
    assert re.search(r"k1\s+ok\s+\d+\s+-\s+complete, kept", printed.out)  # summary: no "0.0 s"
    assert "k1: complete, kept (" in (out / "tile-out.log").read_text()  # the per-slide line
