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


#: runs the CLI and, on exit, writes the process's own peak resident size (VmHWM: reset
#: by exec, unlike ru_maxrss, which keeps the high-water mark of the forked test process)
_PEAK_WRAPPER = """
import atexit, os, runpy, sys
def _peak():
    with open("/proc/self/status") as fh:
        kb = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:"))
    with open(os.environ["SPECMATCH_TEST_PEAK_FILE"], "w") as out:
        out.write(str(kb))
atexit.register(_peak)
sys.argv = ["specmatch", *sys.argv[1:]]
runpy.run_module("specmatch", run_name="__main__")
"""


def _cli(*args: str, timeout: float = 60) -> tuple[subprocess.CompletedProcess, float]:
    """Run the CLI in a child; returns the result and the child's own peak resident size (MB).

    The address space is capped (a runaway read fails fast instead of swapping). The peak
    size is a bound the readers must stay under, not a figure: the figures come from
    ``benchmarks/bench_boundary.py``.
    """
    import tempfile

    pre = None
    if sys.platform.startswith("linux"):
        import resource

        def pre():  # pragma: no cover - runs in the child
            resource.setrlimit(resource.RLIMIT_AS, (1500 * 2**20, 1500 * 2**20))
    with tempfile.TemporaryDirectory() as tmp:
        peak_file = Path(tmp) / "peak"
        done = subprocess.run([sys.executable, "-c", _PEAK_WRAPPER, *args], capture_output=True,
                              text=True, timeout=timeout, preexec_fn=pre,
                              env=dict(os.environ, SPECMATCH_TEST_PEAK_FILE=str(peak_file)))
        peak_mb = int(peak_file.read_text()) / 1024 if peak_file.exists() else float("inf")
    return done, peak_mb


@pytest.mark.skipif(not (os.path.exists("/dev/zero") and os.path.exists("/proc/self/status")),
                    reason="needs /dev/zero and /proc")
def test_cli_peaks_and_identify_on_dev_zero_exit_2_quickly_and_small():
    # the Done-when bound of the hostile-input work: exit 2, within seconds, under 300 MB
    for args in (("peaks", "/dev/zero"),
                 ("identify", "--substrate", "C=CC", "--reagent", "HBr", "--c13", "/dev/zero")):
        p, peak_mb = _cli(*args)
        assert p.returncode == 2, (args, p.returncode, p.stderr)
        assert "character device" in p.stderr and "Traceback" not in p.stderr
        assert len(p.stderr.strip().splitlines()) == 1  # one line on stderr
        assert peak_mb < 300, (args, peak_mb)


def test_every_path_input_of_the_cli_goes_through_the_guarded_reader(tmp_path, capsys):
    from specmatch.cli import main

    fifo = tmp_path / "pipe.txt"
    os.mkfifo(fifo)  # would block an unguarded open() for ever
    out = str(tmp_path / "out.jsonl")
    cases = [["predict", "--batch", str(fifo), "--out", out],
             ["rank", "--batch", str(fifo), "--out", out],
             ["simulate", "--spin-system", str(fifo), "--field", "400"],
             ["identify", "--substrate", "C=CC", "--reagent", "HBr", "--c13", str(fifo)],
             ["identify", "--substrate", "C=CC", "--reagent", "HBr", "--candidates", str(fifo)]]
    if os.path.exists("/dev/zero"):
        cases += [["predict", "--batch", "/dev/zero", "--out", out],
                  ["rank", "--batch", "/dev/zero", "--out", out],
                  ["simulate", "--spin-system", "/dev/zero", "--field", "400"]]
    for argv in cases:
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert "not a file" in err and "Traceback" not in err, (argv, err)


def test_batch_inputs_have_their_own_documented_limit(tmp_path, monkeypatch, capsys):
    from specmatch.cli import main

    smiles = tmp_path / "smiles.txt"
    smiles.write_text("CCO\n" * 100)
    monkeypatch.setenv("SPECMATCH_MAX_BATCH_MB", str(100 / 2**20))
    assert main(["predict", "--batch", str(smiles), "--out", str(tmp_path / "o.jsonl")]) == 2
    assert "limit for a batch file" in capsys.readouterr().err
    assert "`batch`" in (Path(__file__).parents[1] / "DEVELOPERS.md").read_text(encoding="utf-8")
    monkeypatch.delenv("SPECMATCH_MAX_BATCH_MB")
    tasks = tmp_path / "tasks.jsonl"
    tasks.write_bytes(b'{"id": "caf\xe9"}\n')  # Latin-1: JSON lines must be UTF-8
    assert main(["rank", "--batch", str(tasks), "--out", str(tmp_path / "o.jsonl")]) == 2
    assert "is not UTF-8 text" in capsys.readouterr().err


def test_streamed_hash_is_bounded_and_matches(tmp_path, monkeypatch):
    import hashlib

    p = tmp_path / "a.jdx"
    p.write_bytes(b"##TITLE= invented\n" * 1000)
    assert safeio.sha256_file(p, kind="spectrum") == hashlib.sha256(p.read_bytes()).hexdigest()
    monkeypatch.setenv("SPECMATCH_MAX_SPECTRUM_MB", str(1000 / 2**20))
    with pytest.raises(SpecmatchError, match="limit for a spectrum file"):
        safeio.sha256_file(p, kind="spectrum")
    if os.path.exists("/dev/zero"):
        with pytest.raises(SpecmatchError, match="character device"):
            safeio.sha256_file("/dev/zero", kind="archive")


def test_instrument_folder_input_is_identified_and_hashed_by_its_files(tmp_path):
    # an instrument folder given to identify: read as a folder, hashed over its files
    # (before: an internal error, since the folder was opened as a file to hash it)
    import shutil

    from specmatch.demo import demo_case
    from specmatch.identification import identify
    from specmatch.spectra.reader import input_sha256

    case = demo_case("b")
    exp = tmp_path / "exp" / "10"
    exp.mkdir(parents=True)
    shutil.copy(case.files["c13"], exp / "13C.jdx")
    (exp / "notes.txt").write_text("invented run notes\n")
    result = identify(substrate=case.substrate, reagent=case.reagent, c13=tmp_path / "exp")
    assert result.inputs["files"]["c13"]["sha256"] == input_sha256(tmp_path / "exp")
    before = input_sha256(tmp_path / "exp")
    (exp / "notes.txt").write_text("changed\n")
    assert input_sha256(tmp_path / "exp") != before
