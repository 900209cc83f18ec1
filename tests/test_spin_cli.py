"""``specmatch simulate`` on the command line (JSON spin systems, SMILES, bad input)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from specmatch.cli import main


def _run(*args):
    return subprocess.run([sys.executable, "-m", "specmatch", *args], capture_output=True, text=True, timeout=300)


def test_spin_system_json_ab(tmp_path, capsys):
    # AB quartet, dnu 20 Hz, J 10 Hz at 100 MHz: nu0 +- D/2 +- J/2, D = sqrt(dnu^2 + J^2)
    # (Pople, Schneider & Bernstein 1959, ch. 6)
    f = tmp_path / "ab.json"
    f.write_text(json.dumps({"shifts_ppm": [1.0, 1.2], "couplings_hz": [[0, 1, 10.0]]}))
    assert main(["simulate", "--spin-system", str(f), "--field", "100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    hz = sorted(line["ppm"] * 100 for line in out["lines"])
    D = np.hypot(20.0, 10.0)
    assert hz == pytest.approx([110 - D / 2 - 5, 110 - D / 2 + 5, 110 + D / 2 - 5, 110 + D / 2 + 5], abs=0.01)
    assert sum(line["intensity"] for line in out["lines"]) == pytest.approx(2.0, abs=1e-4)


@pytest.mark.parametrize("content,args,msg", [
    ("{not json", ["--field", "60"], "not valid JSON"),
    ('{"shifts_ppm": [1.0, 2.0], "couplings_hz": [[0, 5, 7]]}', ["--field", "60"], "outside"),
    ('{"shifts_ppm": [1.0]}', [], "--field"),
    ('{"shifts_ppm": [1.0]}', ["--field", "5"], "outside"),
])
def test_bad_input_exits_2_with_one_line(tmp_path, content, args, msg):
    f = tmp_path / "s.json"
    f.write_text(content)
    proc = _run("simulate", "--spin-system", str(f), *args)
    assert proc.returncode == 2
    assert msg in proc.stderr and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


def test_missing_file_and_bad_smiles_exit_2(tmp_path):
    proc = _run("simulate", "--spin-system", str(tmp_path / "nope.json"), "--field", "60")
    assert proc.returncode == 2 and "cannot read" in proc.stderr
    proc = _run("simulate", "C1CC(", "--field", "60")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr


def test_smiles_writes_csv_and_jcamp(tmp_path, capsys):
    from specmatch.spectra import read_jcampdx

    csv_path, jdx_path = tmp_path / "s.csv", tmp_path / "s.jdx"
    assert main(["simulate", "CCBr", "--field", "60", "--out", str(csv_path), "--points", "4096"]) == 0
    text = csv_path.read_text()
    assert "not a measurement" in text.splitlines()[0]
    assert main(["simulate", "CCBr", "--field", "60", "--out", str(jdx_path), "--points", "4096"]) == 0
    spec = read_jcampdx(jdx_path.read_bytes(), source="s.jdx")
    assert spec.frequency_mhz == pytest.approx(60.0)
    assert spec.intensity.max() > 0
    assert main(["simulate", "CCBr", "--out", str(tmp_path / "s.txt")]) == 2
    assert "use a .csv or .jdx" in capsys.readouterr().err


# ------------------------------------------------------------- identify --field
def test_identify_field_sets_the_peak_list_frequency(tmp_path, capsys):
    from pathlib import Path

    from specmatch.cli.identify import _h1_at_field
    from specmatch.errors import SpecmatchError

    demo = Path(__file__).resolve().parents[1] / "sample_spectra"
    pl = _h1_at_field(str(demo / "c_methylbutene_hcl_60MHz_1H_peaks.csv"), 60.0, "CDCl3")
    assert pl.frequency_mhz == 60.0 and pl.multiplets
    # a spectrum states its own field: a contradicting --field is refused, one line, exit 2
    jdx = str(demo / "c_methylbutene_hcl_60MHz_1H.jdx")
    assert _h1_at_field(jdx, 60.0, None) == jdx
    with pytest.raises(SpecmatchError, match="60 MHz"):
        _h1_at_field(jdx, 400.0, None)
    cands = tmp_path / "candidates.smi"
    cands.write_text("CCC(C)(C)Cl\nCC(Cl)C(C)C\n")
    assert main(["identify", "--candidates", str(cands), "--h1", jdx, "--field", "-5"]) == 2
    err = capsys.readouterr().err
    assert "--field" in err and "Traceback" not in err
