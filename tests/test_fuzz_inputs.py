"""Fuzzing the inputs not covered by the spectrum-reader fuzzers: ``rank --batch`` task
lines, JSON spin systems, candidate files and instrument-folder parameter files (Bruker
``procs``/``acqus``, Agilent/Varian ``procpar``).

Each property is the boundary rule of the project: whatever the input, the answer
is a result or a ``SpecmatchError`` that says what is wrong, never another exception.
Budgets are small (CI); a crash found here becomes a named case below the fuzzers.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from specmatch.errors import SpecmatchError

CANDIDATES = ["CC(C)(Br)CC", "CC(Br)C(C)C"]  # two isomeric bromides (SMILES only matter here)

NUMBER = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**6, 10**6),
                   st.sampled_from([0, -1, 1e308, -1e308, 1e-320, 77.2, 3.6, 400.0]))
SCALAR = st.one_of(NUMBER, st.none(), st.booleans(), st.text(max_size=6))
H1_LINE = st.fixed_dictionaries(
    {"shift": st.one_of(NUMBER, SCALAR)},
    optional={"integral": st.one_of(NUMBER, SCALAR), "multiplicity": st.one_of(
        st.sampled_from(["s", "d", "t", "q", "m", "dd", "sept", "br s", "xx"]), SCALAR),
        "j_hz": st.one_of(st.lists(NUMBER, max_size=4), SCALAR)})
C13_LINE = st.one_of(NUMBER, SCALAR, st.fixed_dictionaries(
    {"shift": st.one_of(NUMBER, SCALAR)}, optional={"hydrogens": st.one_of(st.integers(-2, 5), SCALAR)}))
DEPT_LINE = st.fixed_dictionaries({"shift": st.one_of(NUMBER, SCALAR),
                                   "sign": st.one_of(st.sampled_from([1, -1]), SCALAR)})
TASK = st.fixed_dictionaries(
    {"candidates": st.one_of(st.just(CANDIDATES), st.lists(st.sampled_from(CANDIDATES + ["C1CC", "", "[Xe]"]),
                                                            max_size=3), SCALAR)},
    optional={"id": SCALAR, "c13": st.one_of(st.lists(C13_LINE, max_size=6), SCALAR),
              "h1": st.one_of(st.lists(H1_LINE, max_size=5), SCALAR),
              "dept135": st.one_of(st.lists(DEPT_LINE, max_size=3), SCALAR),
              "priors": st.one_of(st.lists(NUMBER, max_size=3), SCALAR),
              "max_components": st.one_of(st.integers(0, 4), SCALAR), "solvent": SCALAR})


def _finite_json(obj) -> bool:
    """The result line is JSON a strict reader accepts (no NaN or Infinity)."""
    try:
        json.dumps(obj, allow_nan=False)
    except ValueError:
        return False
    return True


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(TASK)
def test_rank_task_lines_never_crash(task):
    from specmatch.identification.batch import rank_task

    try:
        out = rank_task(task)
    except SpecmatchError as exc:
        assert str(exc)
        return
    assert out["ok"] and _finite_json(out)
    probs = [r["probability"] for r in out["ranking"]]
    assert all(0 <= p <= 1 for p in probs) and math.isclose(sum(probs), 1, abs_tol=1e-6)


SPIN = st.one_of(
    SCALAR, st.lists(SCALAR, max_size=3),
    st.fixed_dictionaries({"shifts_ppm": st.one_of(st.lists(NUMBER, max_size=5), SCALAR)},
                          optional={"couplings_hz": st.one_of(
                              SCALAR, st.lists(st.one_of(
                                  st.tuples(st.integers(-1, 5), st.integers(-1, 5), NUMBER).map(list),
                                  st.lists(SCALAR, max_size=4)), max_size=5))}))


@settings(max_examples=150, deadline=None)
@given(SPIN, st.sampled_from([60.0, 400.13]))
def test_json_spin_systems_never_crash(data, field):
    from specmatch.prediction.spin import SpinSystem

    try:
        system = SpinSystem.from_json(data)
    except SpecmatchError as exc:
        assert str(exc)
        return
    assert all(np.isfinite(system.shifts_ppm))


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.binary(max_size=300))
def test_spin_system_files_never_crash(tmp_path, data):
    from specmatch.cli import main

    f = tmp_path / "spins.json"
    f.write_bytes(data)
    code = main(["simulate", "--spin-system", str(f), "--field", "400", "--out", str(tmp_path / "o.jdx")])
    assert code in (0, 2)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.binary(max_size=300))
def test_candidate_files_never_crash(tmp_path, data):
    from specmatch.identification.candidates import read_candidates

    f = tmp_path / "c.smi"
    f.write_bytes(data)
    try:
        lines = read_candidates(f)
    except SpecmatchError as exc:
        assert str(exc)
        return
    assert lines and all(c.smiles and not c.smiles.isspace() for c in lines)


PARAM_VALUE = st.one_of(st.text(alphabet="0123456789.-+eE <>()", max_size=12), NUMBER.map(str),
                        st.sampled_from(["", "inf", "nan", "<13C>", "<1H>", "<>", "(0..3)", "1e999"]))


def _jcamp_params(path: Path, params: dict) -> None:
    lines = ["##TITLE= Parameter file (invented)", "##JCAMPDX= 5.0"]
    lines += [f"##${k}= {v}" for k, v in params.items()]
    path.write_text("\n".join(lines + ["##END="]) + "\n")


def _reads_cleanly_or_refuses(root: Path) -> None:
    """The boundary rule for an instrument folder: finite spectrum and peaks, or a SpecmatchError."""
    from specmatch.spectra import peaks_from_file, read_spectrum

    try:
        sp = read_spectrum(root)
        assert np.all(np.isfinite(sp.ppm)) and np.all(np.isfinite(sp.intensity))
        assert sp.frequency_mhz is None or sp.frequency_mhz > 0
        pl = peaks_from_file(root)
    except SpecmatchError as exc:
        assert str(exc)
        return
    assert all(math.isfinite(p.shift) for p in pl.peaks)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.dictionaries(st.sampled_from(["SF", "OFFSET", "SW_p", "SI", "NC_proc", "BYTORDP", "DTYPP",
                                        "SFO1", "BF1", "NUC1", "SW_h", "TD", "SOLVENT"]),
                       PARAM_VALUE, max_size=6),
       st.integers(0, 600))
def test_instrument_folder_parameters_never_crash(tmp_path, override, n_bytes):
    # a processed Bruker-layout folder (invented data) whose parameter values are fuzzed
    import shutil

    root = tmp_path / "exp"
    shutil.rmtree(root, ignore_errors=True)
    pdata = root / "10" / "pdata" / "1"
    pdata.mkdir(parents=True)
    (np.arange(n_bytes // 4, dtype="<i4") % 97).tofile(pdata / "1r")
    procs = {"SF": 400.13, "OFFSET": 12.0, "SW_p": 4800.0, "SI": 128, "NC_proc": 0, "BYTORDP": 0,
             "DTYPP": 0}
    acqus = {"NUC1": "<1H>", "SOLVENT": "<CDCl3>", "SFO1": 400.13, "BF1": 400.13, "SW_h": 4800.0,
             "TD": 128, "PULPROG": "<zg30>", "BYTORDA": 0, "DTYPA": 0}
    for k, v in override.items():
        (procs if k in procs else acqus)[k] = v
    _jcamp_params(pdata / "procs", procs)
    _jcamp_params(root / "10" / "acqus", acqus)
    _reads_cleanly_or_refuses(root)


def _varian_folder(root: Path, params: dict, n: int = 256) -> None:
    """An Agilent/Varian ``fid`` + ``procpar`` folder (invented data: one decaying line)."""
    import nmrglue as ng

    root.mkdir(parents=True, exist_ok=True)
    t = np.arange(n) / 4800.0
    fid = (np.exp(-2j * np.pi * 500.0 * t) * np.exp(-t / 0.05)).astype("complex64")
    udic = ng.fileiobase.create_blank_udic(1)
    udic[0].update(size=n, complex=True, encoding="direct", sw=4800.0, obs=400.13, car=6.0 * 400.13,
                   label="H1", time=True, freq=False)
    dic = ng.varian.create_dic(udic)
    for key, val in params.items():
        dic["procpar"][key] = ng.varian.create_pdic_param(key, [str(val)])
    ng.varian.write(str(root), dic, fid, overwrite=True)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.dictionaries(st.sampled_from(["sfrq", "sw", "tn", "rfl", "rfp", "rp", "lp", "solvent", "seqfil"]),
                       PARAM_VALUE, max_size=5),
       st.one_of(st.none(), st.binary(max_size=200)))
def test_varian_procpar_never_crashes(tmp_path, override, raw_procpar):
    # parameter values fuzzed, or the procpar file replaced by arbitrary bytes
    import shutil

    root = tmp_path / "exp.fid"
    shutil.rmtree(root, ignore_errors=True)
    params = {"sfrq": 400.13, "sw": 4800.0, "tn": "H1", "rfl": 2000.0, "rfp": 0.0, "rp": 0.0, "lp": 0.0,
              "solvent": "CDCl3", "seqfil": "s2pul"}
    params.update(override)
    _varian_folder(root, params)
    if raw_procpar is not None:
        (root / "procpar").write_bytes(raw_procpar)
    _reads_cleanly_or_refuses(root)


@pytest.mark.parametrize("override,message", [
    ({"sw": "-.1"}, "spectral width"),        # found by the fuzzer above: NaN spectrum
    ({"sfrq": "0"}, "sfrq"),
])
def test_damaged_varian_parameters_are_refused(tmp_path, override, message):
    from specmatch.spectra import read_spectrum

    params = {"sfrq": 400.13, "sw": 4800.0, "tn": "H1", "rfl": 2000.0, "rfp": 0.0}
    params.update(override)
    _varian_folder(tmp_path / "exp.fid", params)
    with pytest.raises(SpecmatchError, match=message):
        read_spectrum(tmp_path / "exp.fid")


def _bruker(tmp_path: Path, procs_extra: dict, acqus_lines: str = "") -> Path:
    root = tmp_path / "exp"
    pdata = root / "10" / "pdata" / "1"
    pdata.mkdir(parents=True)
    (np.arange(128, dtype="<i4") % 97).tofile(pdata / "1r")
    procs = {"SF": 400.13, "OFFSET": 12.0, "SW_p": 4800.0, "SI": 128, "NC_proc": 0, "BYTORDP": 0,
             "DTYPP": 0, **procs_extra}
    _jcamp_params(pdata / "procs", procs)
    (root / "10" / "acqus").write_text("##TITLE= Parameter file (invented)\n##$NUC1= <1H>\n"
                                       + acqus_lines + "##END=\n")
    return root


# crashes the fuzzer found: nmrglue's parameter parser read on for ever (the test hung)
# on an array without its values or a '<' text without '>'; SF 0 divided by zero
@pytest.mark.parametrize("procs,acqus,message", [
    ({"BYTORDP": "(0..3)"}, "", r"procs' line \d+: the array declares 4 values but the file ends"),
    ({}, "##$SOLVENT= <CDCl3\n", r"acqus' line 3: the text value opened by '<' is never closed"),
    ({"SF": 0}, "", "observe frequency of 0 MHz is not plausible"),
    ({"SW_p": "inf"}, "", "must be finite and SW_p positive"),
])
def test_damaged_bruker_parameters_are_refused_not_read_for_ever(tmp_path, procs, acqus, message):
    from specmatch.spectra import read_spectrum

    with pytest.raises(SpecmatchError, match=message):
        read_spectrum(_bruker(tmp_path, procs, acqus))


def test_bruker_arrays_over_several_lines_still_read(tmp_path):
    from specmatch.spectra import read_spectrum

    root = _bruker(tmp_path, {}, "##$D= (0..5)\n0 0.1\n0.2 0.3\n0.4 0.5\n##$GPNAM= (0..1)\n<sine.100> <x>\n")
    assert read_spectrum(root).nucleus == "1H"


@pytest.mark.parametrize("line", [
    '{"candidates": ["CC(C)(Br)CC", "CC(Br)C(C)C"], "c13": [1e308, 77.2]}',
    '{"candidates": ["CC(C)(Br)CC"], "h1": [{"shift": 1.2, "integral": 1e308}]}',
    '{"candidates": ["CC(C)(Br)CC", "CC(Br)C(C)C"], "priors": [0, 0]}',
])
def test_rank_batch_lines_that_are_nonsense_fail_their_row_cleanly(tmp_path, line):
    from specmatch.identification.batch import rank_batch

    src, out = tmp_path / "t.jsonl", tmp_path / "o.jsonl"
    src.write_text(line + "\n")
    rank_batch(str(src), str(out), workers=0)
    (row,) = [json.loads(x) for x in out.read_text().splitlines()]
    assert row["ok"] or "internal error" not in row["error"], row
