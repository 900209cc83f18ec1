"""Product enumeration: each reaction case names the source of its expectation.

For every case the expected major product must carry the highest prior, and every expected
minor product must be on the list. Expectations marked "common practice" are the outcomes any
physical-organic text gives; named sources are cited where we are sure of them.
"""

from __future__ import annotations

import math

import pytest
from rdkit import Chem

from specmatch.errors import SpecmatchError
from specmatch.reactions import ROLES, enumerate_products


def canon(smiles: str) -> str:
    return Chem.MolToSmiles(Chem.MolFromSmiles(smiles), isomericSmiles=False)


# (substrate, reagent, alcohol, expected major, expected minors on the list, source)
CASES = [
    # --- HX, no rearrangement expected
    ("C=CC", "HBr", None, "CC(C)Br", [], "Markovnikov's rule (common practice)"),
    ("C=C(C)C", "HBr", None, "CC(C)(C)Br", [], "Markovnikov's rule (common practice)"),
    ("CC1=CCCCC1", "HCl", None, "CC1(Cl)CCCCC1", [], "tertiary cation, no rearrangement (common practice)"),
    ("C1=CCCCC1", "HCl", None, "ClC1CCCCC1", [], "common practice"),
    ("CCCCC=C", "HI", None, "CCCCC(C)I", [], "Markovnikov's rule (common practice)"),
    ("C=Cc1ccccc1", "HBr", None, "CC(Br)c1ccccc1", [], "benzylic cation (common practice)"),
    ("C=CCl", "HBr", None, "CC(Cl)Br", [], "alpha-halogen pi donation directs (common practice)"),
    # --- HX with rearrangement
    ("C=CC(C)C", "HCl", None, "CCC(C)(C)Cl", ["CC(C)C(C)Cl"],
     "1,2-hydride shift to the tertiary cation, both chlorides form (Whitmore, J. Am. Chem. Soc. 1932)"),
    ("C=CC(C)(C)C", "HCl", None, "CC(C)C(C)(C)Cl", ["CC(Cl)C(C)(C)C"],
     "1,2-methyl shift next to a quaternary centre (Whitmore, J. Am. Chem. Soc. 1932)"),
    ("C=CC(C)CC", "HBr", None, "CCC(C)(Br)CC", ["CCC(C)C(C)Br"], "1,2-hydride shift (common practice)"),
    ("C=CC1CCC1", "HBr", None, "CC1(Br)CCCC1", ["CC1CCCC1Br", "CC(Br)C1CCC1"],
     "ring expansion cyclobutylcarbinyl -> cyclopentyl, then hydride shift (common practice)"),
    ("C=C(C)C1CCC1", "HCl", None, "CC1CCCC1(C)Cl", ["CC1(C)CCCC1Cl", "CC(C)(Cl)C1CCC1"],
     "strain-relieving ring expansion, then methyl shift (common practice)"),
    ("C=CC=C", "HBr", None, "C=CC(C)Br", ["CC=CCBr"],
     "allylic cation: 1,2-adduct (kinetic) and 1,4-adduct (common practice)"),
    # --- acid-catalysed hydration and alcohol addition
    ("C=C(C)C", "H2O/H2SO4", None, "CC(C)(C)O", [], "Markovnikov hydration (common practice)"),
    ("C=CC1CCCCC1", "H2O/H2SO4", None, "CCC1(O)CCCCC1", ["CC(O)C1CCCCC1"],
     "1,2-hydride shift to the tertiary ring carbon (common practice)"),
    ("CC1=CCCCC1", "H2O/H3PO4", None, "CC1(O)CCCCC1", [], "common practice"),
    ("C=CCCC", "H3O+", None, "CCCC(C)O", [], "Markovnikov hydration (common practice)"),
    ("C=CC", "MeOH/H+", None, "COC(C)C", [], "acid-catalysed ether formation (common practice)"),
    ("C=C(C)C", "EtOH/H2SO4", None, "CCOC(C)(C)C", [], "ETBE synthesis from isobutene (common practice)"),
    ("C=CC", "H2SO4", "CC(C)O", "CC(C)OC(C)C", [], "common practice"),
    ("CC(=O)C=C", "HCl", None, "CC(=O)CCCl", [], "conjugate addition to an enone (common practice)"),
    # --- contrast reagents
    ("C=CC", "HBr/ROOR", None, "CCCBr", ["CC(C)Br"], "peroxide effect (Kharasch & Mayo, J. Am. Chem. Soc. 1933)"),
    ("C=Cc1ccccc1", "HBr/ROOR", None, "BrCCc1ccccc1", [], "peroxide effect (Kharasch & Mayo, J. Am. Chem. Soc. 1933)"),
    ("CC=C(C)C", "HBr, peroxides", None, "CC(C)C(C)Br", [], "radical addition via the tertiary radical (common practice)"),
    ("CCCCC=C", "BH3/THF; H2O2, NaOH", None, "CCCCCCO", ["CCCCC(C)O"],
     "Brown hydroboration-oxidation (about 94:6 for 1-hexene, value from memory)"),
    ("CC1=CCCCC1", "BH3;H2O2,NaOH", None, "CC1CCCCC1O", [], "Brown hydroboration-oxidation, anti-Markovnikov"),
    ("C=CC(C)(C)C", "BH3;H2O2,NaOH", None, "CC(C)(C)CCO", [], "Brown hydroboration: no rearrangement"),
    ("C=CC(C)(C)C", "Hg(OAc)2,H2O;NaBH4", None, "CC(O)C(C)(C)C", [],
     "Brown oxymercuration-demercuration: Markovnikov, no rearrangement"),
    ("C=CCCC", "1. Hg(OAc)2, H2O 2. NaBH4", None, "CCCC(C)O", [], "Brown oxymercuration-demercuration"),
    ("CC1=CCCCC1", "Hg(OAc)2, MeOH; NaBH4", None, "COC1(C)CCCCC1", [], "alkoxymercuration (common practice)"),
    ("C1=CCCCC1", "Br2", None, "BrC1CCCCC1Br", [], "anti addition via the bromonium ion (common practice)"),
    ("C=CC", "Cl2", None, "CC(Cl)CCl", [], "common practice"),
    ("C=CC", "Br2/H2O", None, "CC(O)CBr", ["CC(Br)CBr"], "bromohydrin, OH on the more substituted carbon (common practice)"),
    ("CC1=CCCCC1", "Br2/H2O", None, "CC1(O)CCCCC1Br", [], "bromohydrin (common practice)"),
    ("C=CC=C", "Br2", None, "C=CC(Br)CBr", ["BrCC=CCBr"], "1,2- and 1,4-dibromide (common practice)"),
    # --- alcohol substrates
    ("CCCCO", "HBr", None, "CCCCBr", [], "primary alcohol: SN2, no rearrangement (common practice)"),
    ("CC(O)C(C)(C)C", "HBr", None, "CC(C)C(C)(C)Br", ["CC(Br)C(C)(C)C"],
     "SN1 with 1,2-methyl shift (Whitmore, J. Am. Chem. Soc. 1932)"),
    ("CC(C)(C)CO", "HBr", None, "CCC(C)(C)Br", [], "neopentyl alcohol rearranges (Whitmore, J. Am. Chem. Soc. 1932)"),
    ("CC(C)(C)O", "HCl", None, "CC(C)(C)Cl", ["C=C(C)C"], "tertiary alcohol SN1 (common practice)"),
    ("CC(O)c1ccccc1", "HCl", None, "CC(Cl)c1ccccc1", [], "benzylic SN1 (common practice)"),
    ("C=CC(O)C", "HBr", None, "CC=CCBr", ["C=CC(C)Br"],
     "allylic cation, the bromides equilibrate: about 85:15 crotyl bromide : 3-bromobut-1-ene "
     "(Winstein & Young, J. Am. Chem. Soc. 1936, 58, 104; from memory)"),
    ("CC1CCCCC1O", "H2SO4, heat", None, "CC1=CCCCC1", ["CC1C=CCCC1", "C=C1CCCCC1"],
     "E1 dehydration, Zaitsev product major (common practice)"),
    ("CC(O)CC", "H2SO4, heat", None, "CC=CC", ["C=CCC"], "Zaitsev's rule (common practice)"),
    ("CC(C)(O)C(C)(C)O", "H2SO4, heat", None, "CC(=O)C(C)(C)C", [], "pinacol rearrangement (common practice)"),
    ("OC(c1ccccc1)(c1ccccc1)C(O)(c1ccccc1)c1ccccc1", "H2SO4, heat", None,
     "O=C(c1ccccc1)C(c1ccccc1)(c1ccccc1)c1ccccc1", [], "benzopinacol -> benzopinacolone, 1,2-aryl shift (common practice)"),
    ("CC(O)C(C)(C)C", "H2SO4, heat", None, "CC(C)=C(C)C", ["C=C(C)C(C)C", "C=CC(C)(C)C"],
     "E1 after 1,2-methyl shift, tetrasubstituted alkene major (common practice)"),
    ("CC1(C)CCCCC1O", "H2SO4, heat", None, "CC1=C(C)CCCC1", ["CC(C)=C1CCCC1"],
     "methyl shift and ring contraction of the 2,2-dimethylcyclohexyl cation (common practice)"),
]


@pytest.mark.parametrize("substrate,reagent,alcohol,major,minors,source", CASES,
                         ids=[f"{c[0]}+{c[1]}" for c in CASES])
def test_reaction_case(substrate, reagent, alcohol, major, minors, source):
    res = enumerate_products(substrate, reagent, alcohol=alcohol)
    smiles = [c.constitution for c in res.candidates]
    # the expectation is about constitutions: diastereomers of one constitution count together
    by_constitution: dict[str, float] = {}
    for c in res.candidates:
        by_constitution[c.constitution] = by_constitution.get(c.constitution, 0.0) + c.prior
    top = max(by_constitution, key=by_constitution.get)
    assert top == canon(major), (source, [(c.smiles, round(c.prior, 3)) for c in res.candidates])
    assert all(c.role == "major" for c in res.diastereomers(major))
    for m in minors:
        assert canon(m) in smiles, (source, m, smiles)
        assert by_constitution[canon(m)] < by_constitution[top]
    assert math.isclose(sum(c.prior for c in res.candidates), 1.0, abs_tol=1e-9)
    keys = [c.smiles for c in res.candidates]
    assert len(set(keys)) == len(keys)  # de-duplicated by stereoisomer (constitution where no configuration)
    assert all(c.role in ROLES for c in res.candidates)


def test_at_least_thirty_cases_cover_every_reagent_class():
    assert len(CASES) >= 30
    classes = {enumerate_products(s, r, alcohol=a).reaction_class for s, r, a, *_ in CASES}
    assert classes == {"hx_ionic", "hydration", "alcohol_addition", "hx_radical", "hydroboration",
                       "oxymercuration", "halogenation", "halohydrin", "substitution", "dehydration"}


def test_demo_vinylcyclohexane_hydration_lists_both_alcohols():
    # needed by the demo: unrearranged Markovnikov alcohol is a substantial minor (common practice)
    res = enumerate_products("C=CC1CCCCC1", "H2O/H2SO4")
    shifted, plain = res.candidate("CCC1(O)CCCCC1"), res.candidate("CC(O)C1CCCCC1")
    assert shifted.prior > plain.prior > 0.1
    assert "hydride shift" in shifted.label and "rearranged" in shifted.flags
    assert plain.label == "Markovnikov product"
    assert any("tertiary cation" in step for step in shifted.pathway)


def test_demo_3_methylpent_1_ene_hbr():
    res = enumerate_products("C=CC(C)CC", "HBr")
    assert res.candidate("CCC(C)(Br)CC").prior > res.candidate("CCC(C)C(C)Br").prior > 0.1


def test_no_rearrangement_reagents_do_not_list_shifted_products():
    # oxymercuration and hydroboration go through no free cation (Brown)
    for reagent in ("Hg(OAc)2,H2O;NaBH4", "BH3;H2O2,NaOH"):
        res = enumerate_products("C=CC(C)(C)C", reagent)
        assert res.candidate("CC(C)C(C)(C)O") is None
        assert not any("rearranged" in c.flags for c in res.candidates)


def test_anti_markovnikov_product_is_listed_but_not_expected_under_ionic_conditions():
    res = enumerate_products("C=CC", "HBr")
    anti = res.candidate("CCCBr")
    assert anti is not None and anti.role == "not expected under these conditions"
    assert "anti-Markovnikov" in anti.flags


def test_pathway_names_cation_classes_and_energies():
    res = enumerate_products("C=CC(C)C", "HCl")
    path = res.candidate("CCC(C)(C)Cl").pathway
    assert "secondary cation" in path[0] and "kcal/mol" in path[0]
    assert "1,2-hydride shift" in path[1] and "tertiary cation" in path[1]
    assert "-14.0 kcal/mol" in path[1]  # secondary -> tertiary on the documented scale
    assert path[-1].startswith("Cl- captures")


def test_isoenergetic_shift_kept_as_flagged_low_prior_candidate():
    # 2-pentyl <-> 3-pentyl cation: equal on the scale; 3-bromopentane forms in small amounts (common practice)
    res = enumerate_products("C=CCCC", "HBr")
    c = res.candidate("CCC(Br)CC")
    assert c is not None and "isoenergetic shift" in c.flags
    assert c.prior < 0.1 and c.role in ("trace", "minor")


def test_shift_kinds_are_named():
    res = enumerate_products("OC(c1ccccc1)(c1ccccc1)C(O)(c1ccccc1)c1ccccc1", "H2SO4, heat")
    assert "1,2-aryl shift" in res.candidates[0].label
    res = enumerate_products("CC1(C)CCCCC1O", "H2SO4, heat")
    c = res.candidate("CC(C)=C1CCCC1")
    assert "ring-contracted" in c.flags and "6 -> 5" in c.label


def test_bridgehead_cation_is_not_formed():
    # 2-norbornyl cation does not shift H to give the 1-norbornyl (bridgehead) cation (Bredt; common practice)
    res = enumerate_products("C1=CC2CCC1C2", "HCl")
    assert res.candidates[0].smiles == canon("ClC1CC2CCC1C2")
    assert res.candidate("ClC12CCC(CC1)C2") is None


def test_max_shifts_limits_sequences():
    deep = enumerate_products("C=CC1CCC1", "HBr", max_shifts=2)
    shallow = enumerate_products("C=CC1CCC1", "HBr", max_shifts=1)
    none = enumerate_products("C=CC1CCC1", "HBr", max_shifts=0)
    assert deep.candidates[0].constitution == canon("CC1(Br)CCCC1")
    assert shallow.candidate("CC1(Br)CCCC1") is None
    assert shallow.candidates[0].constitution == canon("CC1CCCC1Br")
    assert not any("rearranged" in c.flags for c in none.candidates)


def test_stereo_notes():
    res = enumerate_products("C=CC", "Br2")
    assert any("racemic" in n for n in res.candidate("CC(Br)CBr").notes)
    res = enumerate_products("C1=CCCCC1", "Br2")
    assert any("anti addition" in n for n in res.candidates[0].notes)
    res = enumerate_products("CC(O)CC", "H2SO4, heat")
    assert any("E/Z" in n for n in res.candidate("CC=CC").notes)
    res = enumerate_products("CC1=CCCCC1", "BH3;H2O2,NaOH")
    assert any("syn" in n for n in res.candidates[0].notes)


def test_e1_byproducts_and_unreacted_substrate_are_candidates():
    res = enumerate_products("C=CC(C)C", "HCl")
    assert "E1 by-product" in res.candidate("CC=C(C)C").flags
    assert "unreacted substrate" in res.candidate("C=CC(C)C").flags


def test_to_dict_shape():
    d = enumerate_products("C=CC", "HBr").to_dict()
    assert set(d) >= {"substrate", "reagent", "candidates", "warnings", "ranked_by"}
    assert set(d["candidates"][0]) >= {"smiles", "label", "pathway", "prior", "role"}
    assert d["reagent"] == "HBr" and isinstance(d["candidates"][0]["pathway"], list)
    assert "empirical" in d["ranked_by"]


def test_molfile_substrate():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("C=CC(C)C"))
    res = enumerate_products(block, "HCl")
    assert res.candidates[0].smiles == canon("CCC(C)(C)Cl")


@pytest.mark.parametrize("substrate,reagent,kwargs,fragment", [
    ("C1CC", "HBr", {}, "not a valid SMILES"),
    ("CCCC", "HBr", {}, "no non-aromatic C=C"),
    ("c1ccccc1", "H2O/H2SO4", {}, "no non-aromatic C=C"),
    ("CC#C", "HBr", {}, "triple bonds are not handled"),
    ("C=CC", "HBrr", {}, "known reagents"),
    ("C=CC", "ROH/H+", {}, "--alcohol"),
    ("C=CC", "H2SO4", {"alcohol": "CC"}, "not an alcohol"),
    ("C=CC", "H2SO4, heat", {}, "no aliphatic C-OH"),
    ("C" * 70 + "=C", "HBr", {}, "60 heavy atoms"),
    ("C=CC", "HBr", {"max_shifts": 9}, "--max-shifts"),
    ("C=CC", "HBr", {"max_shifts": -1}, "--max-shifts"),
    ("C=C[CH2+]", "HBr", {}, "neutral"),
])
def test_bad_input_gives_clear_error(substrate, reagent, kwargs, fragment):
    with pytest.raises(SpecmatchError, match=fragment.replace("(", r"\(").replace("+", r"\+")):
        enumerate_products(substrate, reagent, **kwargs)


def test_explosion_cap(monkeypatch):
    from specmatch.reactions import scales

    params = dict(scales.prior_parameters())
    params["candidates"] = dict(params["candidates"], max_intermediates=3)
    monkeypatch.setattr("specmatch.reactions.enumeration.prior_parameters", lambda: params)
    with pytest.raises(SpecmatchError, match="explosion cap"):
        enumerate_products("C=CC(C)CC", "HBr")


def test_xtb_flag_reports_model():
    res = enumerate_products("C=CC(C)C", "HCl", use_xtb=True)
    from specmatch.reactions.xtb import available

    if available():
        assert "GFN2-xTB" in res.ranked_by
    else:
        assert any("tblite" in w for w in res.warnings)
    # xTB only reorders within the close band: the downhill hydride shift still wins
    assert res.candidates[0].smiles == canon("CCC(C)(C)Cl")
