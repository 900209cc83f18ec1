"""The guarded file reader: regular files only, bounded reads, documented limits, text decoding."""

from __future__ import annotations

import codecs
import os
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from specmatch import safeio
from specmatch.errors import SpecmatchError


def test_regular_file_reads(tmp_path):
    p = tmp_path / "a.csv"
    p.write_bytes(b"shift\n1.0\n")
    assert safeio.read_bytes(p, kind="peaklist") == b"shift\n1.0\n"
    assert safeio.read_text(p, kind="peaklist") == "shift\n1.0\n"


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_character_device_is_refused_by_name():
    with pytest.raises(SpecmatchError, match=r"'/dev/zero' is a character device, not a file"):
        safeio.read_bytes("/dev/zero", kind="spectrum")


def test_directory_fifo_and_socket_are_refused_by_name(tmp_path):
    with pytest.raises(SpecmatchError, match="is a directory, not a file"):
        safeio.read_bytes(tmp_path, kind="spectrum")
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    with pytest.raises(SpecmatchError, match=r"is a FIFO \(named pipe\), not a file"):
        safeio.read_bytes(fifo, kind="spectrum")  # must not block on the open
    sock_path = tmp_path / "s.sock"
    s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    try:
        s.bind(str(sock_path))
        with pytest.raises(SpecmatchError, match="is a socket, not a file"):
            safeio.read_text(sock_path, kind="peaklist")
    finally:
        s.close()


def test_missing_file_message(tmp_path):
    with pytest.raises(SpecmatchError, match="no such file"):
        safeio.read_bytes(tmp_path / "nope.jdx", kind="spectrum")


def test_size_limit_from_stat_and_from_the_environment(tmp_path, monkeypatch):
    p = tmp_path / "big.txt"
    with open(p, "wb") as fh:  # sparse: costs no disk
        fh.truncate(safeio.LIMITS["peaklist"] + 1)
    with pytest.raises(SpecmatchError, match=r"above the 8\.0 MB limit for a peaklist file"):
        safeio.read_bytes(p, kind="peaklist")
    monkeypatch.setenv("SPECMATCH_MAX_PEAKLIST_MB", "0.001")
    small = tmp_path / "small.csv"
    small.write_bytes(b"x" * 2000)
    with pytest.raises(SpecmatchError, match="SPECMATCH_MAX_PEAKLIST_MB"):
        safeio.read_bytes(small, kind="peaklist")
    monkeypatch.setenv("SPECMATCH_MAX_PEAKLIST_MB", "lots")
    with pytest.raises(SpecmatchError, match="not a number of megabytes"):
        safeio.limit("peaklist")


@pytest.mark.skipif(not os.path.exists("/proc/self/status"), reason="needs /proc")
def test_read_is_bounded_even_when_stat_says_zero(monkeypatch):
    # /proc files report size 0 and then stream: the limit must hold on the bytes read
    monkeypatch.setenv("SPECMATCH_MAX_CONFIG_MB", str(16 / (1024 * 1024)))
    assert os.stat("/proc/self/status").st_size == 0
    with pytest.raises(SpecmatchError, match="larger than the"):
        safeio.read_bytes("/proc/self/status", kind="config")


def test_every_kind_has_a_documented_limit():
    for kind, cap in safeio.LIMITS.items():
        assert cap > 0 and safeio.limit(kind) == cap
    with pytest.raises(ValueError):
        safeio.limit("nonsense")
    text = (Path(__file__).parents[1] / "DEVELOPERS.md").read_text(encoding="utf-8")
    assert "SPECMATCH_MAX_" in text and "safeio" in text


@pytest.mark.parametrize("codec,bom", [("utf-16-le", codecs.BOM_UTF16_LE), ("utf-16-be", codecs.BOM_UTF16_BE),
                                       ("utf-32-le", codecs.BOM_UTF32_LE), ("utf-8", codecs.BOM_UTF8)])
def test_text_with_a_byte_order_mark_is_decoded(codec, bom):
    text = "shift,integral\n1.25,3\nδ\n"
    assert safeio.decode_text(bom + text.encode(codec)) == text


def test_bomless_utf16_is_recognised_and_binary_refused_with_a_hint():
    text = "shift,integral\n1.25,3\n3.60,2\n"
    assert safeio.decode_text(text.encode("utf-16-le")) == text
    with pytest.raises(SpecmatchError, match="binary data .*UTF-16"):
        safeio.decode_text(b"\x00\x01\x02\x03\xff\xfe\x00\x00\x10" * 20)
    with pytest.raises(SpecmatchError, match="UTF-16 byte-order mark but is not valid UTF-16"):
        safeio.decode_text(codecs.BOM_UTF16_LE + b"\x00\xd8\x00\x00")


def test_latin1_text_of_old_software_is_read():
    assert safeio.decode_text("##TITLE= 25 °C\n".encode("latin-1")) == "##TITLE= 25 °C\n"


def test_utf16_peak_list_reads_through_peaks(tmp_path):
    from specmatch.spectra import peaks_from_file

    p = tmp_path / "peaks_1H.csv"
    p.write_bytes(codecs.BOM_UTF16_LE + "shift,integral,multiplicity,j\n3.60,2,q,7.1\n1.20,3,t,7.1\n"
                  .encode("utf-16-le"))
    pl = peaks_from_file(p, nucleus="1H")
    assert [m.multiplicity for m in pl.multiplets] == ["q", "t"]


def _cli(*args: str, timeout: float = 60) -> subprocess.CompletedProcess:
    # address space capped (a runaway read fails fast instead of swapping); the resident size of
    # these runs is far lower (measured with /usr/bin/time in the boundary notes of DEVELOPERS.md)
    pre = None
    if sys.platform.startswith("linux"):
        import resource

        def pre():  # pragma: no cover - runs in the child
            resource.setrlimit(resource.RLIMIT_AS, (1500 * 2**20, 1500 * 2**20))
    return subprocess.run([sys.executable, "-m", "specmatch", *args], capture_output=True, text=True,
                          timeout=timeout, preexec_fn=pre)


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_cli_peaks_and_identify_on_dev_zero_exit_2():
    p = _cli("peaks", "/dev/zero")
    assert p.returncode == 2 and "character device" in p.stderr and "Traceback" not in p.stderr
    p = _cli("identify", "--substrate", "C=CC", "--reagent", "HBr", "--c13", "/dev/zero")
    assert p.returncode == 2 and "character device" in p.stderr and "Traceback" not in p.stderr
