"""Energy scales of the reactions stage against the published values they come from."""

from __future__ import annotations

import pytest
from rdkit import Chem

from specmatch.reactions import enumerate_products
from specmatch.reactions.network import Network, make_intermediate, prepare
from specmatch.reactions.scales import alkene_dh, radical_terms, ring_strain, ring_strain_table


def cation(smiles: str):
    mol = prepare(Chem.MolFromSmiles(smiles))
    centre = next(a.GetIdx() for a in mol.GetAtoms() if a.GetFormalCharge() == 1)
    return make_intermediate(mol, centre)


def test_cation_class_order():
    # methyl < primary < secondary < tertiary in stability: every physical-organic text (common practice)
    e = [cation(s).energy for s in ("[CH3+]", "C[CH2+]", "C[CH+]C", "C[C+](C)C")]
    assert e == sorted(e, reverse=True)
    # secondary vs tertiary, heats of ionisation in superacid ~14 kcal/mol (Arnett & Petro 1978, from memory)
    assert cation("C[CH+]C").energy - cation("C[C+](C)C").energy == pytest.approx(14.0, abs=3)


def test_resonance_and_substituent_terms():
    # allyl cation about as stable as isopropyl (gas-phase hydride ion affinities, from memory)
    allyl, isopropyl = cation("C=C[CH2+]"), cation("C[CH+]C")
    assert abs(allyl.energy - isopropyl.energy) < 5
    assert len(allyl.forms) == 2 and "allylic" in allyl.cls
    # 1-phenylethyl more stable than tert-butyl (solvolysis, from memory)
    assert cation("C[CH+]c1ccccc1").energy < cation("C[C+](C)C").energy
    # alpha-oxygen (oxocarbenium) strongly stabilises; alpha-carbonyl and beta-halogen destabilise
    assert cation("CO[CH+]C").energy < cation("C[C+](C)C").energy - 5
    assert cation("CC(=O)[CH+]C").energy > cation("CC[CH+]C").energy + 10
    assert cation("ClC[CH+]C").energy > cation("CC[CH+]C").energy + 3
    assert "oxocarbenium" in cation("CO[CH+]C").cls


def test_ring_strain_values():
    # strain energies from heats of combustion (Wiberg, Angew. Chem. Int. Ed. Engl. 1986; values from memory)
    table = ring_strain_table()
    assert table[3] == pytest.approx(27.5, abs=0.5)
    assert table[4] == pytest.approx(26.5, abs=0.5)
    assert table[5] == pytest.approx(6.2, abs=0.5)
    assert table[6] == pytest.approx(0.0, abs=0.5)
    assert ring_strain(Chem.MolFromSmiles("C1CCC1")) == pytest.approx(26.5)
    assert ring_strain(Chem.MolFromSmiles("c1ccccc1")) == 0.0  # aromatic rings carry no strain term
    # ring expansion cyclobutylcarbinyl -> cyclopentyl is downhill even from tertiary to secondary
    assert cation("C[C+](C)C1CCC1").energy > cation("CC1(C)CCC[CH+]1").energy


def test_radical_scale_bde():
    # C-H bond dissociation energies, Blanksby & Ellison, Acc. Chem. Res. 2003 (values from memory):
    # methyl 105.0, ethyl 101.1, isopropyl 98.6, tert-butyl 96.5, allyl 88.8 kcal/mol
    t = radical_terms()
    assert t["methyl"] - t["primary"] == pytest.approx(105.0 - 101.1, abs=0.3)
    assert t["secondary"] - t["primary"] == pytest.approx(98.6 - 101.1, abs=0.3)
    assert t["tertiary"] - t["primary"] == pytest.approx(96.5 - 101.1, abs=0.3)
    assert t["allylic_resonance"] == pytest.approx(88.8 - 101.1, abs=0.5)


@pytest.mark.parametrize("smiles,value", [
    # heats of hydrogenation, Kistiakowsky and co-workers, J. Am. Chem. Soc. 1935-1937 (values from memory)
    ("C=CC", 30.1), ("CC=CC", 27.6), ("C=C(C)C", 28.4), ("CC=C(C)C", 26.9), ("CC(C)=C(C)C", 26.6),
])
def test_alkene_stability(smiles, value):
    mol = Chem.MolFromSmiles(smiles)
    bond = next(b for b in mol.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE)
    assert alkene_dh(mol, bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()) == pytest.approx(value, abs=0.05)


def test_xtb_refinement_reorders_only_within_the_window(monkeypatch):
    """The refinement uses xTB only for close cations and never moves one beyond the window."""
    from specmatch.reactions import xtb

    net = Network(max_shifts=2, explore_window=2.0, max_nodes=100)
    a, b, far = cation("CCC[CH+]C"), cation("CC[CH+]CC"), cation("CCCC[CH2+]")
    for inter in (a, b, far):
        net.add_entry(inter, 1.0, "test", group="g")
    fake = {a.key: 0.0, b.key: -6.0, far.key: -50.0}  # kcal/mol: b much lower, far never consulted
    monkeypatch.setattr(xtb, "cation_energy_kcal", lambda smiles: fake[smiles])
    n = xtb.refine_network(net, window=2.0, warnings=[])
    assert n == 2
    assert net.nodes[b.key].xtb_energy < net.nodes[a.key].xtb_energy
    assert abs(net.nodes[b.key].xtb_energy - b.energy) <= 2.0 + 1e-9
    assert net.nodes[far.key].xtb_energy is None


def test_solvent_capture_acetic_acid():
    # HBr in acetic acid: the solvent competes with bromide (acetates as by-products; common practice)
    res = enumerate_products("C=CC(C)C", "HBr/AcOH")
    assert res.candidates[0].smiles == "CCC(C)(C)Br"
    acetate = res.candidate("CCC(C)(C)OC(C)=O")
    assert acetate is not None and "acetate" in acetate.label
