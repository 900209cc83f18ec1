"""The same molecule written from other atoms gives the same predicted spectrum.

Structures are records of the nmrshiftdb2 development set (Kuhn & Schlörer, Magn. Reson.
Chem. 2015, 53, 582; open data) on which predictions once depended on atom order: rings
read from a fusion atom, a gamma carbon reached through two ring paths, conformer
ensembles of the two enantiomers, symmetric molecules split into diastereotopic halves,
and sums meeting a rounding boundary. Each is written in four seeded random atom orders.
"""

from __future__ import annotations

import random

import pytest
from rdkit import Chem

from specmatch.prediction import predict

CASES = [
    "CC(=O)OCC(C)(C)CC(=C)CC",             # sum at a rounding boundary (34.6625)
    "CC1OCC(=O)OC1C",                       # gamma CH through the ether and the ester path
    "COc1ccc2cc(Br)ccc2c1",                 # naphthalene fusion carbons
    "Brc1cccc2c(Br)cccc12",                 # two symmetric rings of one fusion carbon
    "Oc1ccc2ccccc2c1Br",
    "CCCC(=O)[C@@H]1C[C@H]1Cl",             # trans: enantiomer ensembles
    "CCC[C@H]1CC[C@@H](C(=O)OC)CC1",        # 1,4-cyclohexane: class-mean stereo corrections
    "CC(C)[C@H]1CC[C@H](C)C(=O)O1",
    "C1CC2CC(C1)C2",                        # diastereotopic pair listed twice
    "O1C2C3OC3C3OC3C12",                    # six equivalent CH in a ring of pairs
    "C#C[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O",  # five centres: the diastereomer set
]


def _lines(smiles: str) -> tuple[list, list]:
    p = predict(smiles)
    c = sorted((round(x.shift, 3), x.hydrogens, len(x.atoms)) for x in p.carbons)
    h = sorted((round(g.shift, 3), g.count, g.multiplicity) for g in p.protons)
    return c, h


@pytest.mark.parametrize("smiles", CASES)
def test_prediction_is_the_same_from_every_atom(smiles):
    mol = Chem.MolFromSmiles(smiles)
    rng = random.Random(20261202)
    want = _lines(smiles)
    for _ in range(4):
        order = list(range(mol.GetNumAtoms()))
        rng.shuffle(order)  # a seeded renumbering: the same orders on every run
        other = Chem.MolToSmiles(Chem.RenumberAtoms(mol, order), canonical=False)
        assert _lines(other) == want, (smiles, other)
