"""Safe extraction of uploaded instrument folders: traversal, links and bombs are refused."""

from __future__ import annotations

import io
import stat
import zipfile

import pytest

from specmatch.errors import SpecmatchError
from specmatch.spectra import extract_archive


def _zip(entries: list[tuple[str, bytes]], *, mode: int | None = None) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in entries:
            info = zipfile.ZipInfo(name)
            info.compress_type = zipfile.ZIP_DEFLATED
            if mode is not None:
                info.external_attr = mode << 16
            zf.writestr(info, data)
    return buf.getvalue()


def test_ordinary_folder_extracts(tmp_path):
    data = _zip([("exp/1/acqus", b"##TITLE= x\n"), ("exp/1/pdata/1/procs", b"##END=\n")])
    files = extract_archive(data, tmp_path / "out", max_bytes=10_000, max_files=10)
    assert sorted(p.name for p in files) == ["acqus", "procs"]
    assert (tmp_path / "out" / "exp" / "1" / "pdata" / "1" / "procs").read_bytes() == b"##END=\n"


@pytest.mark.parametrize("name", ["../evil.txt", "a/../../evil.txt", "/etc/evil", "C:/evil.txt",
                                  "..\\evil.txt"])
def test_traversal_and_absolute_paths_are_refused(tmp_path, name):
    data = _zip([(name, b"x")])
    with pytest.raises(SpecmatchError, match="refusing to extract"):
        extract_archive(data, tmp_path / "out", max_bytes=10_000, max_files=10)
    assert not (tmp_path / "evil.txt").exists()
    assert not list((tmp_path).rglob("evil*"))


def test_symlink_entries_are_refused(tmp_path):
    data = _zip([("link", b"/etc/passwd")], mode=stat.S_IFLNK | 0o777)
    with pytest.raises(SpecmatchError, match="symbolic link"):
        extract_archive(data, tmp_path / "out", max_bytes=10_000, max_files=10)


def test_too_many_files_are_refused(tmp_path):
    data = _zip([(f"f{i}", b"x") for i in range(20)])
    with pytest.raises(SpecmatchError, match="20 entries, more than the limit of 10"):
        extract_archive(data, tmp_path / "out", max_bytes=10_000, max_files=10)


def test_total_size_bomb_is_refused(tmp_path):
    data = _zip([("a", b"0" * 6000), ("b", b"0" * 6000)])
    with pytest.raises(SpecmatchError, match="archive bomb"):
        extract_archive(data, tmp_path / "out", max_bytes=10_000, max_files=10)
    assert not (tmp_path / "out").exists()  # checked before anything is written


def test_compression_ratio_bomb_is_refused(tmp_path):
    data = _zip([("zeros", b"\0" * (8 << 20))])  # 8 MiB of zeros deflate ~1000-fold
    assert len(data) < 100_000
    with pytest.raises(SpecmatchError, match="expands .* times"):
        extract_archive(data, tmp_path / "out", max_bytes=1 << 30, max_files=10)


def test_forged_sizes_are_caught_while_extracting(tmp_path):
    data = bytearray(_zip([("a", b"0" * 5000)]))
    # Shrink the declared uncompressed size in the central directory (offset 24 of the record).
    cd = data.rindex(b"PK\x01\x02")
    data[cd + 24:cd + 28] = (100).to_bytes(4, "little")
    lh = data.index(b"PK\x03\x04")
    data[lh + 22:lh + 26] = (100).to_bytes(4, "little")
    with pytest.raises(SpecmatchError):
        extract_archive(bytes(data), tmp_path / "out", max_bytes=10_000, max_files=10)


def test_not_a_zip(tmp_path):
    with pytest.raises(SpecmatchError, match="cannot open the zip archive"):
        extract_archive(b"PK\x03\x04 not really", tmp_path / "out", max_bytes=10, max_files=1)


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_PART = st.sampled_from(["..", ".", "a", "b c", "pdata", "1r", "/", "\\", "C:", "~", "..."])


@settings(max_examples=80, deadline=3000)
@given(parts=st.lists(_PART, min_size=1, max_size=6))
def test_any_entry_name_stays_inside_the_destination(tmp_path_factory, parts):
    name = "/".join(parts)
    dest = tmp_path_factory.mktemp("x") / "out"
    try:
        files = extract_archive(_zip([(name, b"data")]), dest, max_bytes=10_000, max_files=10)
    except SpecmatchError:
        return
    root = dest.resolve()
    for f in files:
        assert root in f.resolve().parents
