"""Reagent catalogue, aliases, safety notes, the text report and the CLI face of `enumerate`."""

from __future__ import annotations

import json

import pytest

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.reactions import enumerate_products, known_reagents, parse_reagent
from specmatch.reports.enumeration_text import enumeration_table


@pytest.mark.parametrize("text,key", [
    ("HBr", "HBr"), ("hbr", "HBr"), ("HBr in AcOH", "HBr/AcOH"), ("HCl/HOAc", "HCl/AcOH"), (" HBr ", "HBr"), ("hydrobromic acid", "HBr"),
    ("HCl", "HCl"), ("hi", "HI"),
    ("H2O/H2SO4", "H2O/H2SO4"), ("H2SO4 / H2O", "H2O/H2SO4"), ("h2o, h2so4", "H2O/H2SO4"),
    ("H2O + H2SO4", "H2O/H2SO4"), ("H₂O/H₂SO₄", "H2O/H2SO4"),
    ("H2O/H3PO4", "H2O/H3PO4"), ("H3O+", "H3O+"),
    ("CH3OH/H2SO4", "MeOH/H2SO4"), ("MeOH/H+", "MeOH/H2SO4"), ("EtOH/H2SO4", "EtOH/H2SO4"),
    ("HBr/ROOR", "HBr/ROOR"), ("HBr, peroxides", "HBr/ROOR"),
    ("BH3;H2O2,NaOH", "BH3;H2O2,NaOH"), ("1. BH3/THF 2. H2O2, NaOH", "BH3;H2O2,NaOH"),
    ("BH3·THF; H2O2, NaOH", "BH3;H2O2,NaOH"),
    ("Hg(OAc)2,H2O;NaBH4", "Hg(OAc)2,H2O;NaBH4"), ("1. Hg(OAc)2, H2O 2. NaBH4", "Hg(OAc)2,H2O;NaBH4"),
    ("Br2", "Br2"), ("br2/ch2cl2", "Br2"), ("Cl2", "Cl2"), ("Br2/H2O", "Br2/H2O"), ("NBS, H2O", "Br2/H2O"),
    ("H2SO4, heat", "H2SO4, heat"), ("heat / H2SO4", "H2SO4, heat"), ("H3PO4, Δ", "H2SO4, heat"),
])
def test_aliases(text, key):
    assert parse_reagent(text).key == key


def test_unknown_reagent_lists_known_ones():
    with pytest.raises(SpecmatchError) as err:
        parse_reagent("HBrr")
    msg = str(err.value)
    assert "HBrr" in msg and "HBr/ROOR" in msg and "Hg(OAc)2, H2O; NaBH4" in msg


def test_empty_reagent():
    with pytest.raises(SpecmatchError, match="no reagent"):
        parse_reagent("  ")


def test_catalogue_for_the_picker():
    reagents = known_reagents()
    assert len(reagents) >= 15
    keys = {r.key for r in reagents}
    assert {"HCl", "HBr", "HI", "H2O/H2SO4", "HBr/ROOR", "BH3;H2O2,NaOH", "Hg(OAc)2,H2O;NaBH4",
            "Br2", "Cl2", "Br2/H2O", "H2SO4, heat"} <= keys
    for r in reagents:
        assert r.name and r.aliases and r.reagent_class
        assert r.safety[-1].startswith("Read the SDS")
        assert isinstance(r.safety_notes, list)
    by_key = {r.key: r for r in reagents}
    # specific hazards (reagent safety data sheets; common practice)
    assert any("mercury" in s.lower() and "waste" in s.lower() for s in by_key["Hg(OAc)2,H2O;NaBH4"].safety)
    assert any("pyrophoric" in s for s in by_key["BH3;H2O2,NaOH"].safety)
    assert any("peroxides" in s for s in by_key["BH3;H2O2,NaOH"].safety)
    assert any("corrosive" in s and "gas" in s for s in by_key["HBr"].safety)
    assert any("alkylating" in s for s in by_key["HBr"].safety)
    assert any("toxic" in s for s in by_key["Br2"].safety)
    assert by_key["ROH/H+"].needs_alcohol and not by_key["MeOH/H2SO4"].needs_alcohol


def test_every_data_row_has_a_source():
    import csv
    from pathlib import Path

    import specmatch.reactions as rx

    data = Path(rx.__file__).parent / "data"
    for path in data.glob("*.csv"):
        with open(path, encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        assert rows and all(r["source"].strip() for r in rows), path.name


def test_text_table():
    text = enumeration_table(enumerate_products("C=CC(C)CC", "HBr"))
    assert "CCC(C)(Br)CC" in text and "after 1,2-hydride shift" in text
    assert "Read the SDS" in text and "qualified person" in text
    assert "tertiary cation" in text


def test_cli_json(capsys):
    assert main(["enumerate", "--substrate", "C=CC1CCCCC1", "--reagent", "H2O/H2SO4", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["substrate"] == "C=CC1CCCCC1" and out["reagent"] == "H2O/H2SO4"
    smiles = [c["smiles"] for c in out["candidates"]]
    assert "CCC1(O)CCCCC1" in smiles and "CC(O)C1CCCCC1" in smiles
    assert abs(sum(c["prior"] for c in out["candidates"]) - 1) < 1e-4
    assert {"smiles", "label", "pathway", "prior", "role"} <= set(out["candidates"][0])


def test_cli_alcohol_and_errors(capsys):
    assert main(["enumerate", "--substrate", "C=CC", "--reagent", "ROH/H+", "--alcohol", "CCO"]) == 0
    assert "CCOC(C)C" in capsys.readouterr().out
    assert main(["enumerate", "--substrate", "CCC", "--reagent", "HBr"]) == 2
    assert "no non-aromatic C=C" in capsys.readouterr().err
    assert main(["enumerate", "--substrate", "C=CC", "--reagent", "nonsense"]) == 2
    assert "known reagents" in capsys.readouterr().err
