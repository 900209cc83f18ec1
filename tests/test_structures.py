"""Structures stage: parsing errors, symmetry classes, diastereotopicity.

Equivalence expectations are the standard textbook ones for NMR equivalence
(homotopic / enantiotopic / diastereotopic groups; common practice), e.g. as
treated in Silverstein, Webster & Kiemle, "Spectrometric Identification of
Organic Compounds", chapter on 1H NMR (chemical and magnetic equivalence).
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from specmatch import SpecmatchError
from specmatch.structures import canonical_smiles, parse_structure, stereocentres_created


# ------------------------------------------------------------------ bad input
@pytest.mark.parametrize(
    "text, words",
    [
        ("", "empty"),
        ("   ", "empty"),
        ("C1CC", "ring bond 1 is never closed"),
        ("CC(C", "parentheses"),
        ("CC(C)(C)(C)(C)C", "valence"),
        ("C" * 500, "500 heavy atoms"),
        ("CC.O", "disconnected"),
        ("C*C", "wildcard"),
        ("xyz", "not a valid SMILES"),
    ],
)
def test_invalid_input_gives_clear_message(text, words):
    with pytest.raises(SpecmatchError) as err:
        parse_structure(text)
    assert words in str(err.value)


def test_non_string_input():
    with pytest.raises(SpecmatchError, match="expected a SMILES"):
        parse_structure(None)  # type: ignore[arg-type]


def test_molfile_input_round_trips():
    from rdkit import Chem

    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CC(Br)CC"))
    s = parse_structure(block)
    assert s.canonical_smiles == canonical_smiles("CCC(C)Br")
    assert s.formula == "C4H9Br"


def test_explicit_hydrogens_are_removed_and_order_kept():
    s = parse_structure("[H]OC([H])([H])C")
    assert [a.GetSymbol() for a in s.mol.GetAtoms()] == ["O", "C", "C"]


# ------------------------------------------------------------ basic perception
def test_formula_and_canonical():
    s = parse_structure("OC(C)(C)C")
    assert s.formula == "C4H10O"
    assert s.canonical_smiles == "CC(C)(C)O"


def test_tert_butyl_methyls_equivalent():
    # tert-butyl: the three methyls are homotopic (common practice)
    s = parse_structure("CC(C)(C)Br")
    assert s.symmetry_classes[0] == s.symmetry_classes[2] == s.symmetry_classes[3]
    assert s.diastereotopic_pairs == ()


def test_isopropyl_methyls_next_to_stereocentre_are_diastereotopic():
    # 3-methylbutan-2-ol: the isopropyl methyls are diastereotopic (common practice;
    # they give two doublets and two 13C lines)
    s = parse_structure("CC(C)C(C)O")
    assert s.symmetry_classes[0] == s.symmetry_classes[2]  # topologically equivalent
    assert (0, 2) in s.diastereotopic_pairs
    assert s.is_diastereotopic_group(0)


def test_isopropyl_without_stereocentre_is_not_diastereotopic():
    # 2-methylpropan-1-ol: no stereocentre, the methyls are enantiotopic at most
    s = parse_structure("CC(C)CO")
    assert s.diastereotopic_pairs == ()
    assert s.diastereotopic_ch2 == frozenset()


def test_ch2_next_to_stereocentre_is_diastereotopic():
    # 2-bromobutane: C3-H2 protons are diastereotopic (common practice)
    s = parse_structure("CC(Br)CC")
    assert 3 in s.diastereotopic_ch2
    assert 1 in s.stereocentres


def test_ch2_of_ethanol_is_not_diastereotopic():
    # ethanol: CH2 protons are enantiotopic, one signal (common practice)
    assert parse_structure("CCO").diastereotopic_ch2 == frozenset()


def test_prochiral_centre_makes_ch2_diastereotopic():
    # pentan-3-ol: C3 is a prochiral centre, the CH2 protons are diastereotopic
    # (a standard example; common practice)
    s = parse_structure("CCC(O)CC")
    assert s.diastereotopic_ch2 == frozenset({1, 4})
    assert s.stereocentres == ()


def test_ring_ch2_cis_trans_to_substituent():
    # methylcyclohexane: ring CH2 protons cis/trans to the methyl differ; cyclohexane's do not
    assert parse_structure("CC1CCCCC1").diastereotopic_ch2 == frozenset({2, 3, 4, 5, 6})
    assert parse_structure("C1CCCCC1").diastereotopic_ch2 == frozenset()


def test_symmetry_classes_of_pentan_3_ol():
    s = parse_structure("CCC(O)CC")
    c = s.symmetry_classes
    assert c[0] == c[5] and c[1] == c[4] and c[2] != c[1]
    assert s.equivalence_sets("C") == [(0, 5), (1, 4), (2,)]


def test_benzene_all_equivalent():
    s = parse_structure("c1ccccc1")
    assert len(set(s.symmetry_classes)) == 1


def test_stereocentres_created_by_hbr_addition():
    # propene + HBr -> 2-bromopropane: none; but-1-ene + HBr -> 2-bromobutane: one (racemic)
    assert stereocentres_created("C=CC", "CC(C)Br") == 0
    assert stereocentres_created("C=CCC", "CC(Br)CC") == 1


# ------------------------------------------------------------ property tests
_frag = st.sampled_from(["C", "CC", "C(C)", "C(C)(C)", "O", "Cl", "Br", "C=C", "C1CC1", "CO"])


@settings(max_examples=60, deadline=None)
@given(st.lists(_frag, min_size=1, max_size=6))
def test_any_small_chain_parses_or_fails_cleanly(parts):
    text = "C" + "".join(parts)
    try:
        s = parse_structure(text)
    except SpecmatchError:
        return
    assert len(s.symmetry_classes) == s.mol.GetNumAtoms()
    assert all(0 <= i < s.mol.GetNumAtoms() for i in s.diastereotopic_ch2)


@pytest.mark.parametrize("smiles", ["O", "Br", "C", "[2H]C", "ClCl"])
def test_one_or_two_atom_molecules(smiles):
    # molecules without an sp3 centre carrying neighbours must perceive without error
    s = parse_structure(smiles)
    assert s.diastereotopic_ch2 == frozenset() and s.diastereotopic_pairs == ()


# ------------------------------------------------------------ stereo perception
def test_isomeric_smiles_keeps_the_configuration():
    # cis- and trans-4-tert-butylcyclohexanol share a constitution but not a configuration
    cis = parse_structure("CC(C)(C)[C@H]1CC[C@@H](O)CC1")
    trans = parse_structure("CC(C)(C)[C@H]1CC[C@H](O)CC1")
    assert cis.canonical_smiles == trans.canonical_smiles
    assert cis.isomeric_smiles != trans.isomeric_smiles
    assert len(cis.specified_stereo) == 2
    plain = parse_structure("CC(C)(C)C1CCC(O)CC1")
    assert plain.isomeric_smiles == plain.canonical_smiles and plain.specified_stereo == ()


def test_e_alkene_does_not_make_ch2_diastereotopic():
    # (E)-1-bromobut-2-ene: the CH2Br protons are enantiotopic (mirror plane of the planar alkene),
    # one signal (common practice)
    assert parse_structure("C/C=C/CBr").diastereotopic_ch2 == frozenset()


def test_meso_and_dl_pentanediol_ch2():
    # meso-pentane-2,4-diol: the C3 protons are diastereotopic; in the (R,R) isomer the C2 axis
    # makes them homotopic (common practice; Silverstein, Webster & Kiemle, equivalence chapter)
    assert 3 in parse_structure("C[C@H](O)C[C@@H](C)O").diastereotopic_ch2  # atom 3 is C3
    assert 3 not in parse_structure("C[C@H](O)C[C@H](C)O").diastereotopic_ch2
    # configuration not given (a mixture): treated as diastereotopic
    assert 3 in parse_structure("CC(O)CC(C)O").diastereotopic_ch2
