"""Manifests and the files they name: bounded, guarded reading and a parser that
never crashes (hypothesis fuzz at a small budget; crashes found become cases here).
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_batch_runners import echo_runner
from test_store_support import sqlite_url  # noqa: F401 (fixture)

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.executor import Plan, plan_workers, run_tasks
from specmatch.store import batch as batch_mod
from specmatch.store.batch import parse_manifest, read_manifest, run_batch

HEADER = "sample_id,substrate,reagent,c13,h1,dept135,solvent,alcohol,candidates\n"


def test_devices_pipes_and_empty_folders_fail_their_row_quickly(tmp_path, sqlite_url):
    (tmp_path / "ok.jdx").write_text("##TITLE=invented\n##END=\n")
    os.mkfifo(tmp_path / "pipe.jdx")
    (tmp_path / "folder").mkdir()
    (tmp_path / "exp" / "1").mkdir(parents=True)  # an instrument folder: kept as a zip of its files
    (tmp_path / "exp" / "1" / "spectrum.jdx").write_text("##TITLE=invented\n##END=\n")
    m = tmp_path / "m.csv"
    m.write_text(HEADER + "OK,C=CC,HBr,ok.jdx,,,,,\n"
                 "EXP,C=CC,HBr,exp,,,,,\n"
                 "ZERO,C=CC,HBr,/dev/zero,,,,,\n"
                 "URANDOM,C=CC,HBr,,/dev/urandom,,,,\n"
                 "PIPE,C=CC,HBr,pipe.jdx,,,,,\n"
                 "DIR,C=CC,HBr,folder,,,,,\n")
    t0 = time.monotonic()
    res = run_batch(m, tmp_path / "out", workers=0, store=sqlite_url, runner=echo_runner)
    assert time.monotonic() - t0 < 20  # never reads a device without limit, never blocks
    rows = {r["sample_id"]: r for r in res.rows}
    assert rows["OK"]["status"] == "done"
    # the guarded reader's words (specmatch.safeio), the same as for every other input
    assert "'/dev/zero' is a character device, not a file" in rows["ZERO"]["error"]
    assert "'/dev/urandom' is a character device" in rows["URANDOM"]["error"]
    assert "pipe.jdx' is a FIFO (named pipe), not a file" in rows["PIPE"]["error"]
    assert rows["EXP"]["status"] == "done"
    assert "folder' is a folder that holds no files" in rows["DIR"]["error"]


def test_oversized_and_bad_manifests_are_refused(tmp_path, monkeypatch, capsys):
    with pytest.raises(SpecmatchError, match="is a character device, not a file"):
        read_manifest("/dev/zero")
    big = tmp_path / "big.jdx"
    big.write_bytes(b"x" * 2000)
    monkeypatch.setenv("SPECMATCH_MAX_SPECTRUM_MB", str(1000 / (1024 * 1024)))
    m = tmp_path / "m.csv"
    m.write_text(HEADER + "BIG,C=CC,HBr,big.jdx,,,,,\n")
    (s,) = read_manifest(m)
    assert "above the 1,000 bytes limit for a spectrum file" in s.error
    assert "SPECMATCH_MAX_SPECTRUM_MB" in s.error  # says how to raise it
    monkeypatch.setenv("SPECMATCH_MAX_MANIFEST_MB", str(50 / (1024 * 1024)))
    with pytest.raises(SpecmatchError, match="limit for a manifest file"):
        read_manifest(m)
    monkeypatch.delenv("SPECMATCH_MAX_MANIFEST_MB")
    # UTF-16 is decoded (byte-order mark); a refusal names the encoding and what to do
    m.write_bytes("sample_id,substrate\n".encode("utf-16"))
    with pytest.raises(SpecmatchError, match=r"\(read as UTF-16 text\) has no column 'reagent'; "
                                             r"save it as CSV UTF-8; its first line must name"):
        read_manifest(m)
    monkeypatch.setattr(batch_mod, "MAX_MANIFEST_ROWS", 3)
    m.write_text(HEADER + "".join(f"S{i},C=CC,HBr,big.jdx,,,,,\n" for i in range(5)))
    with pytest.raises(SpecmatchError, match="more than 3 samples"):
        read_manifest(m)
    assert main(["batch", "/dev/zero", "--store", f"sqlite:///{tmp_path / 's.sqlite'}"]) == 2
    assert "is a character device" in capsys.readouterr().err


def test_utf16_manifest_with_a_bom_is_read(tmp_path):
    # what a spreadsheet's "Unicode" CSV export gives: the rows are read as written
    (tmp_path / "a.jdx").write_text("##TITLE=invented\n##END=\n")
    m = tmp_path / "m.csv"
    for codec in ("utf-16", "utf-32"):
        m.write_bytes((HEADER + "S-\u00e9,C=CC,HBr,a.jdx,,,,,\n").encode(codec))
        (s,) = read_manifest(m)
        assert s.error is None and s.sample_id == "S-\u00e9" and s.files["c13"][0] == "a.jdx"


def test_tab_separated_or_8bit_manifest_is_refused_with_what_to_do(tmp_path):
    m = tmp_path / "m.csv"
    m.write_bytes(HEADER.replace(",", "\t").encode("utf-16"))
    with pytest.raises(SpecmatchError, match="UTF-16 text.*tab-separated: save it as CSV"):
        read_manifest(m)
    # Latin-1 bytes: not guessed (sample ids and paths would be silently mis-read)
    m.write_bytes((HEADER + "S-\u00e9,C=CC,HBr,a.jdx,,,,,\n").encode("latin-1"))
    with pytest.raises(SpecmatchError, match="is not UTF-8 text .*save it again as UTF-8"):
        read_manifest(m)


# a NUL byte means a binary file was given as the manifest: say so, run no rows of it
def test_nul_bytes_in_a_manifest_are_a_clear_error(tmp_path):
    with pytest.raises(SpecmatchError, match="NUL"):
        parse_manifest(HEADER + "S1,C=CC,HBr,a\x00.jdx\n", tmp_path)


CELL = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=30)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(max_size=400))
def test_fuzz_manifest_text_never_crashes(tmp_path, text):
    try:
        samples = parse_manifest(text, tmp_path)
    except SpecmatchError as exc:
        assert str(exc)
        return
    for s in samples:
        assert s.sample_id and (s.error is None or s.error)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.lists(CELL, min_size=0, max_size=11), max_size=8))
def test_fuzz_manifest_rows_never_crash(tmp_path, rows):
    import csv
    import io

    buf = io.StringIO()
    csv.writer(buf).writerows(rows)
    try:
        samples = parse_manifest(HEADER + buf.getvalue(), tmp_path)
    except SpecmatchError:
        return
    ids = [s.sample_id for s in samples if s.error is None]
    assert len(ids) == len(set(ids))  # a sample id is run once at most
    for s in samples:
        if s.error is None:
            assert s.fields["substrate"] and s.fields["reagent"]
            assert any(s.fields[c] for c in ("c13", "h1", "dept135"))


# ----------------------------------------------------------------- the executor
def test_worker_policy(monkeypatch):
    monkeypatch.delenv("SPECMATCH_WORKERS", raising=False)
    monkeypatch.setattr("specmatch.executor._available_cpus", lambda: 8)
    assert plan_workers(10, 0) == Plan("inline", 0)
    assert plan_workers(10, 3) == Plan("processes", 3)
    assert plan_workers(2, 5) == Plan("processes", 2)  # never more than the tasks
    assert plan_workers(1000) == Plan("processes", 4)  # automatic: at most MAX_AUTO_WORKERS
    assert plan_workers(5, per_worker=4) == Plan("inline", 0)  # too few to pay for workers
    assert plan_workers(100, scheduler="tcp://x:1").kind == "dask"
    monkeypatch.setenv("SPECMATCH_WORKERS", "0")
    assert plan_workers(1000) == Plan("inline", 0)
    assert plan_workers(1000, 2) == Plan("processes", 2)  # the argument wins over the variable
    monkeypatch.setenv("SPECMATCH_WORKERS", "many")
    with pytest.raises(SpecmatchError, match="SPECMATCH_WORKERS"):
        plan_workers(10)
    with pytest.raises(SpecmatchError, match="--workers -1"):
        plan_workers(10, -1)


def _square_or_fail(x: int) -> int:
    if x == 3:
        raise SpecmatchError("three is refused")
    if x == 5:
        raise KeyError("five")
    return x * x


@pytest.mark.parametrize("plan", [Plan("inline", 0), Plan("processes", 2)])
def test_run_tasks_keeps_order_and_fails_tasks_alone(plan):
    got = [o for group in run_tasks(_square_or_fail, range(40), plan, ordered=True, chunk=3)
           for o in group]
    assert [o.index for o in got] == list(range(40))
    assert [o.value for o in got if o.ok] == [i * i for i in range(40) if i not in (3, 5)]
    assert got[3].error == "three is refused"
    assert got[5].error == "internal error (KeyError: 'five')"


def _slow_head(x: int) -> int:
    if x == 0:
        import time as _t

        _t.sleep(1.5)  # the first task holds back the ordered output; the rest pile up
    return x


def test_ordered_output_survives_a_slow_first_task():
    # this lost the tail of the batch once: the buffer of finished tasks stopped new
    # submissions and the loop ended with items never sent
    got = [o.value for group in run_tasks(_slow_head, range(60), Plan("processes", 2), ordered=True)
           for o in group]
    assert got == list(range(60))


def test_predict_and_rank_batches_run_on_the_executor(tmp_path, monkeypatch):
    """The same lines in the same order, in this process and on two worker processes."""
    src = tmp_path / "in.smi"
    src.write_text("CCO\nnot-a-smiles((\n\nCC(C)Br\nC=CC(C)C\n" * 3)
    outs = []
    for workers in ("0", "2"):
        monkeypatch.setenv("SPECMATCH_WORKERS", workers)
        out = tmp_path / f"out{workers}.jsonl"
        assert main(["predict", "--batch", str(src), "--out", str(out)]) == 1  # the bad line fails
        outs.append(out.read_text().splitlines())
    assert outs[0] == outs[1] and len(outs[0]) == 15
    assert '"ok": false' in outs[0][1] and "not a valid SMILES" in outs[0][1]
