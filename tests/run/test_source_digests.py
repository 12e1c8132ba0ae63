"""Source digests: the full SHA-256 equals ``sha256sum``'s, the sampled digest is named as what it
is (and what it misses is shown, not hidden)."""

from __future__ import annotations

import hashlib
import shutil
import subprocess

import numpy as np
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.store.provenance import file_sha256, sampled_digest, source_sha256

pytestmark = pytest.mark.timeout(300)


def _reference_sha256(path) -> str:
    """coreutils' sha256sum (an implementation independent of Python's hashlib), else hashlib over
    the whole file read at once."""
    exe = shutil.which("sha256sum")
    if exe:
        return subprocess.run([exe, str(path)], capture_output=True, text=True, check=True).stdout.split()[0]
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("size", [0, 1, 4095, 4096, 4097, 3 * 4096 + 17, 50_003])
def test_full_digest_streamed_in_blocks_equals_sha256sum(tmp_path, size):
    p = tmp_path / "f.bin"
    p.write_bytes(np.random.default_rng(size).integers(0, 256, size, dtype=np.uint8).tobytes())
    assert file_sha256(p, block=4096) == _reference_sha256(p)  # block edges: 4096 bytes a read


def test_series_folder_lists_each_file_s_sha256(tmp_path):
    folder = tmp_path / "series"
    folder.mkdir()
    for i, n in enumerate([10, 70_000, 3]):
        (folder / f"level_{i}.dcm").write_bytes(bytes(range(256)) * (n // 256) + b"x" * (n % 256))
    d = source_sha256(folder, threads=3)
    assert [f["name"] for f in d["files"]] == ["level_0.dcm", "level_1.dcm", "level_2.dcm"]
    for f in d["files"]:
        assert f["sha256"] == _reference_sha256(folder / f["name"])
        assert f["size"] == (folder / f["name"]).stat().st_size


def test_sampled_digest_is_not_the_file_s_checksum_and_misses_unsampled_bytes(tmp_path):
    """What the sampled digest can and cannot prove (docs/guide/formats.md, "Source digests", says the same)."""
    size = 17 * (1 << 20) + 12345  # over 16 MiB: sampled
    data = bytearray(np.random.default_rng(7).integers(0, 256, size, dtype=np.uint8).tobytes())
    p = tmp_path / "big.svs"
    p.write_bytes(data)
    d = sampled_digest(p)
    assert d.startswith("sha256s:")
    assert d.split(":", 1)[1] != _reference_sha256(p)  # never equal to an archive's checksum
    # a byte changed inside the first sample (offset 0 .. 1 MiB): seen
    data[100] ^= 0xFF
    p.write_bytes(data)
    assert sampled_digest(p) != d
    data[100] ^= 0xFF
    # a byte changed between two samples (sample k starts at (size - 1 MiB) * k // 15): not seen
    gap = ((1 << 20) + (size - (1 << 20)) // 15) // 2
    data[gap] ^= 0xFF
    p.write_bytes(data)
    assert sampled_digest(p) == d
    assert file_sha256(p) == _reference_sha256(p)
    # a file of at most 16 MiB is hashed whole: its digest is its sha256sum
    small = tmp_path / "small.tif"
    small.write_bytes(bytes(data[: 1 << 20]))
    assert sampled_digest(small) == "sha256:" + _reference_sha256(small)


def test_tile_out_records_the_full_sha256_when_asked(tmp_path):
    src, out = tmp_path / "slides", tmp_path / "out"
    for i, mpp in enumerate((0.2428, 0.4991)):
        write_slide(src / f"s{i}.tif", mpp=mpp, size_um=(512.0, 640.0), seed=i + 1)
    fast = ["--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]
    assert tile_out([str(src), str(out / "sampled"), *fast]) == 0
    cohort = tw.open_cohort(out / "sampled")
    assert (cohort.manifest["source_sha256"] == "").all()
    assert all("sha256" not in s.attrs["source"] for s in cohort.stores.values())

    assert tile_out([str(src), str(out / "full"), *fast, "--source-digest", "full"]) == 0
    cohort = tw.open_cohort(out / "full")
    for _, row in cohort.manifest.iterrows():
        truth = _reference_sha256(src / f"{row['slide_id']}.tif")
        assert row["source_sha256"] == truth
        attrs = cohort.stores[row["slide_id"]].attrs
        assert attrs["source"]["sha256"] == truth
        assert attrs["source"]["digest"] == sampled_digest(src / f"{row['slide_id']}.tif")  # the resume check
    # the option changes no tile: a re-run without it keeps every store
    assert tile_out([str(src), str(out / "full"), *fast]) == 0
    kept = tw.open_cohort(out / "full").manifest
    assert (kept["status"] == "ok").all()
    assert list(kept["source_sha256"]) == [_reference_sha256(src / f"{s}.tif") for s in kept["slide_id"]]
