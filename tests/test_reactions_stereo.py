"""Relative configuration, the cyclopropylcarbinyl manifold, allylic control and published product
orders. Every case states its source; the order tests check the whole order, not just the top.
"""

from __future__ import annotations

import pytest
from rdkit import Chem

from specmatch.errors import SpecmatchError
from specmatch.reactions import enumerate_products
from specmatch.reports.enumeration_text import enumeration_table


def canon(smiles: str) -> str:
    return Chem.MolToSmiles(Chem.MolFromSmiles(smiles))


def prior(res, smiles: str) -> float:
    """Summed prior of every candidate of this constitution (or this stereoisomer, with stereo)."""
    if "@" in smiles:
        c = res.candidate(smiles)
        return c.prior if c else 0.0
    return sum(c.prior for c in res.diastereomers(smiles))


# ------------------------------------------------------------------ stereospecific additions
def test_trans_but_2_ene_bromine_gives_meso_first():
    # anti addition to the E-alkene gives meso-2,3-dibromobutane (common practice; any text on
    # bromonium ions)
    res = enumerate_products("C/C=C/C", "Br2")
    top = res.candidates[0]
    assert top.smiles == canon("C[C@@H](Br)[C@H](C)Br")
    assert top.configuration == "meso" and not top.racemic
    assert not any("diastereomers possible" in n for n in top.notes)   # no contradiction
    assert not any("racemic" in n for n in top.notes)


def test_cis_but_2_ene_bromine_gives_the_racemic_pair():
    res = enumerate_products("C/C=C\\C", "Br2")
    top = res.candidates[0]
    assert top.smiles in {canon("C[C@@H](Br)[C@@H](C)Br"), canon("C[C@H](Br)[C@H](C)Br")}
    assert top.racemic and top.configuration.startswith("racemic")
    assert res.candidate("C[C@@H](Br)[C@H](C)Br") is None   # the meso form cannot form (anti)


def test_unspecified_alkene_lists_both_diastereomers():
    res = enumerate_products("CC=CC", "Br2")
    both = res.diastereomers("CC(Br)C(C)Br")
    assert {c.configuration.split(" ")[0] for c in both} == {"meso", "racemic"}
    assert all(any("not given" in n for n in c.notes) for c in both)


def test_cyclohexene_bromine_trans_dibromide():
    # anti addition: trans-1,2-dibromocyclohexane, racemic (common practice)
    res = enumerate_products("C1=CCCCC1", "Br2")
    top = res.candidates[0]
    assert top.smiles == canon("Br[C@@H]1CCCC[C@H]1Br") or top.smiles == canon("Br[C@H]1CCCC[C@@H]1Br")
    assert top.racemic
    assert res.candidate("Br[C@@H]1CCCC[C@@H]1Br") is None   # cis (meso) is not formed


def test_hydroboration_of_1_methylcyclohexene_is_syn_and_trans():
    # syn addition of H-B: trans-2-methylcyclohexanol, racemic (Brown; common practice)
    res = enumerate_products("CC1=CCCCC1", "BH3;H2O2,NaOH")
    top = res.candidates[0]
    assert top.smiles in {canon("C[C@@H]1CCCC[C@H]1O"), canon("C[C@H]1CCCC[C@@H]1O")}
    assert top.racemic
    assert not any("diastereomers possible" in n for n in top.notes)
    assert res.candidate("C[C@@H]1CCCC[C@@H]1O") is None    # cis would need anti addition


def test_bromohydrin_of_1_methylcyclohexene_is_anti():
    # Br and OH trans (anti opening of the bromonium ion; common practice)
    res = enumerate_products("CC1=CCCCC1", "Br2/H2O")
    top = res.candidates[0]
    assert top.constitution == canon("CC1(O)CCCCC1Br").replace("@", "")
    assert top.racemic
    trans = {canon("C[C@@]1(O)CCCC[C@H]1Br"), canon("C[C@]1(O)CCCC[C@@H]1Br")}
    assert top.smiles in trans


def test_free_cation_gives_both_ring_diastereomers_with_statistical_weights():
    # a planar tertiary cation is captured from both faces (common practice: no directing group);
    # 1,2-dimethylcyclohexene + HBr gives cis and trans 1-bromo-1,2-dimethylcyclohexane
    res = enumerate_products("CC1=C(C)CCCC1", "HBr")
    pair = res.diastereomers("CC1CCCCC1(C)Br")
    assert len(pair) == 2
    assert pair[0].prior == pytest.approx(pair[1].prior, rel=1e-6)
    assert all("either face" in c.flags for c in pair)


def test_open_chain_diastereomers_from_a_cation_stay_one_candidate():
    # 3-methylpent-1-ene + HBr: the erythro/threo 2-bromo-3-methylpentanes are one candidate
    res = enumerate_products("C=CC(C)CC", "HBr")
    assert len(res.diastereomers("CCC(C)C(C)Br")) == 1


def test_header_shows_typed_and_canonical_smiles_and_e_z():
    # C(\C)=C/C is (E)-but-2-ene written with a branch: heavy atoms typed C1 (C2) C3 C4
    res = enumerate_products("C(\\C)=C/C", "Br2")
    text = enumeration_table(res)
    first = text.splitlines()[0]
    assert "C(\\C)=C/C" in first and "canonical C/C=C/C" in first and "C1=C3 E" in first
    assert "count the heavy atoms of the substrate SMILES as typed" in text
    assert "Br+ adds to C1=C3" in text     # pathway numbers follow the same convention
    assert "meso" in text
    assert res.to_dict()["substrate_stereo"] == ["C1=C3 E"]


def test_wording_bromonium_chloronium():
    for reagent, word in (("Br2", "bromonium"), ("Cl2", "chloronium"), ("Br2/H2O", "bromonium")):
        res = enumerate_products("C=CC", reagent)
        text = enumeration_table(res)
        assert word in text
        assert "Bronium" not in text and "Clonium" not in text


def test_hydroboration_minor_route_names_the_more_hindered_carbon():
    res = enumerate_products("CCCCC=C", "BH3;H2O2,NaOH")
    minor = res.candidate("CCCCC(C)O")
    assert "B to C5 (the more hindered carbon" in minor.pathway[0]
    major = res.candidate("CCCCCCO")
    assert "B to C6 (the less hindered carbon)" in major.pathway[0]


# ------------------------------------------------------------------ cyclopropylcarbinyl manifold
def test_cyclopropylmethanol_hbr_lists_the_three_skeletons():
    # cyclopropylcarbinyl / cyclobutyl / homoallyl manifold: Roberts & Mazur, J. Am. Chem. Soc.
    # 1951, 73, 2509 (48:47:5 for the alcohols from the amine; from memory)
    res = enumerate_products("OCC1CC1", "HBr")
    carbinyl, cyclobutyl, homoallyl = (prior(res, s) for s in ("BrCC1CC1", "BrC1CCC1", "C=CCCBr"))
    assert carbinyl > homoallyl and cyclobutyl > homoallyl > 0.01
    assert carbinyl > 0.2 and cyclobutyl > 0.2
    assert "ring-expanded" in res.candidate("BrC1CCC1").flags
    assert "ring-opened" in res.candidate("C=CCCBr").flags


def test_vinylcyclopropane_hbr_lists_ring_expanded_and_opened_bromides():
    # the secondary cyclopropylcarbinyl cation gives the same three skeletons (Roberts & Mazur 1951
    # pattern; from memory)
    res = enumerate_products("C=CC1CC1", "HBr")
    assert prior(res, "CC(Br)C1CC1") > prior(res, "CC=CCCBr") > 0.01
    assert prior(res, "CC1CCC1Br") > prior(res, "CC=CCCBr")


# ------------------------------------------------------------------ allylic control
def test_butadiene_hbr_kinetic_and_thermodynamic():
    # buta-1,3-diene + HBr: about 80:20 1,2 : 1,4 at -80 C, 15:85 at 40 C (from memory)
    cold = enumerate_products("C=CC=C", "HBr")
    warm = enumerate_products("C=CC=C", "HBr", control="thermodynamic")
    assert prior(cold, "C=CC(C)Br") > prior(cold, "CC=CCBr")
    assert prior(warm, "CC=CCBr") > prior(warm, "C=CC(C)Br")
    assert any("kinetic control" in n for n in cold.candidate("C=CC(C)Br").notes)
    assert any("thermodynamic control" in n for n in warm.candidate("CC=CCBr").notes)


def test_butadiene_bromine_has_the_temperature_note():
    res = enumerate_products("C=CC=C", "Br2")
    assert any("--control thermodynamic" in n for n in res.candidate("C=CC(Br)CBr").notes)


def test_bad_control_value_is_a_clear_error():
    with pytest.raises(SpecmatchError, match="--control must be one of"):
        enumerate_products("C=CC=C", "HBr", control="hot")


# ------------------------------------------------------------------ published orders
def test_2_methylbut_3_en_2_ol_hbr_gives_mainly_prenyl_bromide():
    # the allylic cation; the bromides equilibrate to mainly 1-bromo-3-methylbut-2-ene
    # (Winstein & Young, J. Am. Chem. Soc. 1936, 58, 104 pattern; from memory)
    res = enumerate_products("CC(C)(O)C=C", "HBr")
    assert res.candidates[0].constitution == canon("CC(C)=CCBr")
    assert prior(res, "CC(C)=CCBr") > 0.5 > prior(res, "C=CC(C)(C)Br")


def test_2_methylcyclohexanol_dehydration_order():
    # 1-methylcyclohexene >> 3-methylcyclohexene > methylenecyclohexane (Todd, J. Chem. Educ. 1994,
    # 71, 440, the "Evelyn effect" study; values from memory)
    res = enumerate_products("CC1CCCCC1O", "H2SO4, heat")
    one, three, exo = (prior(res, s) for s in ("CC1=CCCCC1", "CC1C=CCCC1", "C=C1CCCCC1"))
    assert one > 5 * three
    assert three > exo > 0


def test_3_3_dimethylbutan_2_ol_dehydration_order():
    # 2,3-dimethylbut-2-ene > 2,3-dimethylbut-1-ene (about 30%) >> 3,3-dimethylbut-1-ene (about 3%)
    # (from memory)
    res = enumerate_products("CC(O)C(C)(C)C", "H2SO4, heat")
    tetra, gem, unrearranged = (prior(res, s) for s in ("CC(C)=C(C)C", "C=C(C)C(C)C", "C=CC(C)(C)C"))
    assert tetra > gem > 2 * unrearranged
    assert unrearranged < 0.06


def test_hbr_peroxides_leaves_little_markovnikov_bromide():
    # Kharasch & Mayo, J. Am. Chem. Soc. 1933, 55, 2468: with peroxides propene gives 1-bromopropane
    # nearly exclusively; a few per cent at most of 2-bromopropane (from memory)
    for alkene, anti, markov in (("C=CC", "CCCBr", "CC(C)Br"), ("C=Cc1ccccc1", "BrCCc1ccccc1", "CC(Br)c1ccccc1")):
        res = enumerate_products(alkene, "HBr/ROOR")
        assert prior(res, anti) > 0.9
        assert prior(res, markov) < 0.05


def test_configuration_labels_count_the_substrate_as_typed():
    # one numbering in every output: C1, C2, ... are the 1-based heavy atoms of the
    # substrate SMILES as written, so the same alkene typed two ways names its
    # alkene carbons differently, and each time as the user counts them
    # (1-methylcyclohexene + Br2: anti addition across the ring C=C, racemic trans dibromide)
    for typed, ends in (("CC1=CCCCC1", ("C2", "C3")), ("C1CCC(C)=CC1", ("C4", "C6"))):
        e = enumerate_products(typed, "Br2")
        top = e.candidates[0]
        assert top.racemic
        for label in ends:
            assert f"{label} R*" in top.configuration or f"{label} S*" in top.configuration, top.configuration
        assert any(f"C{ends[0][1:]}=C{ends[1][1:]}" in step for step in top.pathway), top.pathway
