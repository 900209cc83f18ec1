"""An instrument folder given to ``identify --save`` is kept as a zip of its files.

The spectrum is a real export of the corpus (tests/data/spectra/real, see its README and
licence) placed in a folder, the way an instrument writes one file per experiment folder.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from specmatch.cli import main
from specmatch.spectra import peaks_from_file
from specmatch.spectra.reader import input_name, input_sha256, read_input_bytes
from specmatch.store import open_store

REAL = Path(__file__).parent / "data" / "spectra" / "real" / "chloroethanol_1h_cdcl3_affn.dx"


def _folder(tmp_path: Path) -> Path:
    exp = tmp_path / "chloroethanol" / "1"
    exp.mkdir(parents=True)
    shutil.copy(REAL, exp / "spectrum.dx")
    return tmp_path / "chloroethanol"


def test_folder_zip_is_reproducible_and_reads_back_the_same(tmp_path):
    folder = _folder(tmp_path)
    first, second = read_input_bytes(folder), read_input_bytes(folder)
    assert first == second and first[:2] == b"PK"
    assert input_name(folder) == "chloroethanol.zip"
    direct = peaks_from_file(folder)
    again = peaks_from_file(first, name="chloroethanol.zip")
    assert [round(p.shift, 4) for p in direct.peaks] == [round(p.shift, 4) for p in again.peaks]
    # a changed file changes the hash
    before = input_sha256(folder)
    (folder / "1" / "notes.txt").write_text("operator remark\n")
    assert input_sha256(folder) != before


def test_identify_save_keeps_an_instrument_folder(tmp_path, capsys):
    folder = _folder(tmp_path)
    cands = tmp_path / "c.smi"
    cands.write_text("OCCCl 2-chloroethanol\nCC(O)Cl 1-chloroethanol\n")
    url = f"sqlite:///{tmp_path / 'store.db'}"
    code = main(["identify", "--candidates", str(cands), "--h1", str(folder), "--save", "--store", url])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert "saved as analysis" in out.err + out.out
    with open_store(url) as st:
        (row,) = st.search()
        files = st.files(row.id)
    assert list(files) == ["chloroethanol.zip"]
    assert files["chloroethanol.zip"] == read_input_bytes(folder)
    assert main(["history", "--store", url, "verify"]) == 0
