"""Environment codes (HOSE-style, Bremser, Anal. Chim. Acta 1978, 103, 355) and the correction table."""

from __future__ import annotations

import pytest
from rdkit import Chem

from specmatch.prediction.hose import (HoseEntry, HoseTable, MolCodes, NeighbourLayer, environment_smiles, load_layer,
                                       load_table, neighbour_features, rank_tags)


def codes_of(smiles: str, atom: int, radius: int = 3) -> list[str]:
    return MolCodes(Chem.MolFromSmiles(smiles)).codes(atom, radius)


def test_codes_grow_sphere_by_sphere():
    # CH2 of ethanol: radius 1 already holds the whole molecule, yet each radius keeps its own code
    c1, c2, c3 = codes_of("CCO", 1)
    assert len({c1, c2, c3}) == 3
    # CH2-O of propanol and butanol: the same first sphere (HO, CH2), different second ones
    p1, p2, _ = codes_of("CCCO", 2)
    b1, b2, _ = codes_of("CCCCO", 3)
    assert p1 == b1 and p2 != b2 and p1 != c1


def test_codes_do_not_depend_on_atom_order():
    # 2-methylcyclohexanol C1 written from three different starting atoms
    smiles = ["OC1CCCCC1C", "CC1CCCCC1O", "C1CCC(O)C(C)C1"]
    centre = []
    for s in smiles:
        m = Chem.MolFromSmiles(s)
        centre.append(next(a.GetIdx() for a in m.GetAtoms()
                           if a.GetSymbol() == "C" and any(n.GetSymbol() == "O" for n in a.GetNeighbors())))
    got = {tuple(codes_of(s, c, 5)) for s, c in zip(smiles, centre)}
    assert len(got) == 1


def test_rings_differ_from_chains():
    # a cyclopropane CH2 and the CH2 of propane have the same neighbours, not the same environment
    assert codes_of("C1CC1", 0, 2) != codes_of("CCC", 1, 2)


def test_different_environments_get_different_codes():
    # the CH2 of 1-bromopropane vs 1-chloropropane at radius 1
    assert codes_of("CCCBr", 2, 1) != codes_of("CCCCl", 2, 1)


def test_a_lone_atom_has_a_code_at_every_radius():
    assert len(codes_of("C", 0, 5)) == 5


def test_example_column_shows_the_environment():
    mol = Chem.MolFromSmiles("CCCCO")
    assert environment_smiles(mol, 3, 1) in ("C(C)O", "C(O)C")
    assert Chem.MolFromSmiles(environment_smiles(mol, 3, 9)) is not None  # radius beyond the molecule


def test_shipped_codes_are_those_of_this_rdkit():
    # the identifiers are RDKit's Morgan hashes: a version that hashed differently would leave
    # the table unused; the CH3 and CH2 of ethyl groups are in every table at radius 1 and 2
    mc = MolCodes(Chem.MolFromSmiles("CCOC(C)=O"))  # ethyl acetate
    for nucleus in ("13C", "1H"):
        table = load_table(nucleus)
        for atom in (0, 1):
            assert all(table.entry(r, c) is not None for r, c in enumerate(mc.codes(atom, 2), start=1)), nucleus


def test_shrinkage_walks_outward_and_stops_at_an_unknown_code():
    table = HoseTable({'1,"a"': "3,2.0,0.5,0:3:2.0:0.5", '2,"b"': "1,10.0,0.1,3:1:10.0:0.1"},
                      shrink=1.0, max_radius=3, provenance="test")
    assert table.entry(1, "a") == HoseEntry(3, 2.0, 0.5) and table.entry(1, "b") is None
    corr, sigma, depth = table.correct(["a", "b", "unknown"], base_sigma=2.0)
    # radius 1: w = 3/4 -> 1.5; radius 2: w = 1/2 -> 0.5*10 + 0.5*1.5 = 5.75
    assert corr == pytest.approx(5.75) and depth == 2
    # variances: the code's spread regularised by one pseudo-observation, then shrunk by count
    var1 = 0.75 * (3 * 0.25 + 4.0) / 4 + 0.25 * 4.0
    var2 = 0.5 * (1 * 0.01 + var1) / 2 + 0.5 * var1
    assert sigma == pytest.approx(var2 ** 0.5)
    # an unknown first code leaves the increments alone
    assert table.correct(["x", "b"], base_sigma=2.0) == (0.0, 2.0, 0)


def test_leaving_a_fold_out_removes_its_contribution():
    # cross-validated mode: statistics without fold 3 are those of fold 0 alone
    # (residuals 1, 2 in fold 0 and 3 in fold 3: all three have mean 2, sd 0.8165)
    table = HoseTable({'1,"a"': "3,2.0,0.8165,0:2:1.5:0.5;3:1:3.0:0.0", '2,"b"': "1,10.0,0.1,3:1:10.0:0.1"},
                      shrink=1.0, max_radius=3, provenance="test")
    e = table.entry(1, "a", exclude_fold=3)
    assert e.n == 2 and e.mean == pytest.approx(1.5) and e.sd == pytest.approx(0.5, abs=1e-3)
    assert table.entry(2, "b", exclude_fold=3) is None  # seen only in the left-out fold
    assert table.entry(1, "a", exclude_fold=1) == table.entry(1, "a")


def test_rank_tags_only_for_repeated_classes():
    assert rank_tags([5, 7, 5], [20.0, 10.0, 19.0]) == ["|1", "", "|0"]


@pytest.mark.parametrize("nucleus", ["13C", "1H"])
def test_shipped_table_names_its_provenance(nucleus):
    table = load_table(nucleus)
    assert table is not None and len(table.rows) > 1000
    assert "nmrshiftdb2" in table.provenance and "Kuhn" in table.provenance
    assert "cross-validation" in table.provenance and "fit_hose.py" in table.provenance
    assert 0 < table.shrink and 1 <= table.max_radius <= 6 and 0.3 < table.sigma_scale < 3
    # every row parses; the first-sphere code of an ethyl CH3 is common enough to be there
    for key in list(table.rows)[:2000]:
        r, code = key.split(",", 1)
        e = table.entry(int(r), code[1:-1])
        assert e.n >= 1 and e.sd >= 0
    ethyl_ch3 = MolCodes(Chem.MolFromSmiles("CCCC")).codes(0, 1)[0]
    assert table.entry(1, ethyl_ch3).n >= 20


def test_codes_know_the_ring_size():
    # a cyclopropane CH2 and a cyclohexane CH2 have the same first sphere (two ring CH2
    # neighbours) but shifts some 30 ppm apart: the smallest ring size is in the atom invariants
    assert codes_of("C1CC1", 0, 1) != codes_of("C1CCCCC1", 0, 1)
    assert codes_of("C1CCC1", 0, 1) != codes_of("C1CCCC1", 0, 1)


def test_codes_tell_fusion_atoms_from_plain_ring_atoms():
    # the CH of decalin (three ring bonds) and the CH of methylcyclohexane (two ring bonds and
    # a methyl) have the same element, degree, H count and smallest ring: only the ring-bond
    # count tells their radius-0 identifiers apart
    dec = Chem.MolFromSmiles("C1CCC2CCCCC2C1")
    ch = next(a.GetIdx() for a in dec.GetAtoms() if a.GetTotalNumHs() == 1)
    assert MolCodes(dec).bits[ch][0] != MolCodes(Chem.MolFromSmiles("CC1CCCCC1")).bits[1][0]
    # and a spiro atom (four ring bonds) differs from a fusion atom of the same rings
    spiro, fused = Chem.MolFromSmiles("C1CCC2(CC1)CCCC2"), Chem.MolFromSmiles("CC12CCCCC1CCC2")
    assert MolCodes(spiro).bits[3][0] != MolCodes(fused).bits[1][0]


@pytest.mark.parametrize("smiles", ["C12C3C4C1C5C2C3C45", "C1C2CC3CC1CC(C2)C3", "CC12CC3(Br)CC1(C)CC3(I)C2",
                                    "C1CC11CC1", "C1CC2CCC1C2"])
def test_ring_invariants_do_not_depend_on_atom_order(smiles):
    # cages (cubane, adamantane) and spiro/bridged systems written from shuffled atom orders:
    # the multiset of per-atom codes is the same
    import random

    rng = random.Random(7)
    mol = Chem.MolFromSmiles(smiles)
    ref = sorted(tuple(MolCodes(mol).codes(a, 5)) for a in range(mol.GetNumAtoms()))
    for _ in range(10):
        order = list(range(mol.GetNumAtoms()))
        rng.shuffle(order)
        other = Chem.MolFromSmiles(Chem.MolToSmiles(Chem.RenumberAtoms(mol, order), canonical=False))
        assert sorted(tuple(MolCodes(other).codes(a, 5)) for a in range(other.GetNumAtoms())) == ref


# ------------------------------------------------------------------ neighbour layer
def test_neighbour_features_list_the_atoms_around_by_distance():
    mol = Chem.MolFromSmiles("CC(O)CCl")
    bits = MolCodes(mol).bits
    dist = Chem.GetDistanceMatrix(mol).astype(int).tolist()
    feats = neighbour_features(bits, dist[0], 0)
    # atoms 1 (distance 1), 2 and 3 (distance 2), 4 (distance 3): radius 0, radius 1 and
    # radius 0 paired with the centre each; radius 2 and radius 1 paired for the neighbour,
    # radius 1 paired and radius 0 paired with the centre's radius 1 for the two atoms at
    # distance 2, radius 0 paired with the centre's radius 1 for the one at distance 3
    assert len(feats) == 3 * 4 + 2 + 4 + 1
    assert sorted(int(f.split(":")[0]) for f in feats) == [1] * 5 + [2] * 10 + [3] * 4
    assert f"3:e{bits[0][1]:x}:{bits[4][0]:x}" in feats
    assert f"2:d{bits[0][0]:x}:{bits[3][1]:x}" in feats and f"2:e{bits[0][1]:x}:{bits[2][0]:x}" in feats
    assert f"1:0:{bits[1][0]:x}" in feats and f"3:1:{bits[4][1]:x}" in feats
    assert f"3:c{bits[0][0]:x}:{bits[4][0]:x}" in feats and f"1:d{bits[0][0]:x}:{bits[1][1]:x}" in feats


def test_neighbour_features_do_not_depend_on_atom_order():
    def feats(smiles):
        mol = Chem.MolFromSmiles(smiles)
        bits = MolCodes(mol).bits
        dist = Chem.GetDistanceMatrix(mol).astype(int).tolist()
        cl = next(a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "Cl")
        carbon = next(a.GetNeighbors()[0].GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "Cl")
        return sorted(neighbour_features(bits, dist[carbon], carbon)), cl

    assert feats("ClCC(O)CC")[0] == feats("CCC(O)CCl")[0]


def test_layer_sums_weights_and_leaves_a_fold_out():
    layer = NeighbourLayer({"1:0:a": "5,0.5000,0.4;0.5;0.6;0.5;0.5,C", "2:1:b": "3,-0.2000,0;0;-0.3;0;0,CC"},
                           provenance="test")
    assert layer.shift(["1:0:a", "1:0:a", "2:1:b", "9:9:unknown"]) == pytest.approx(0.8)
    assert layer.shift(["1:0:a", "2:1:b"], exclude_fold=2) == pytest.approx(0.3)
    assert layer.weight("9:9:unknown", exclude_fold=1) == 0.0


def test_shipped_layer_names_its_provenance_and_keeps_weights_small():
    layer = load_layer("13C")
    assert layer is not None and len(layer.rows) > 1000
    assert "nmrshiftdb2" in layer.provenance and "fit_hose.py" in layer.provenance
    assert "cross-validation" in layer.provenance
    weights = [layer.weight(f) for f in layer.rows]
    # ridge-shrunk: no single neighbour carries a large shift of its own
    assert max(abs(w) for w in weights) < 10.0
    assert all(len(v.split(",")[2].split(";")) == 5 for v in list(layer.rows.values())[:500])
    assert load_layer("1H") is None  # the 1H data is too small for a layer (cross-validated: worse)


def test_layer_applies_where_the_first_sphere_is_unknown_without_pushing_cyclopropane_off():
    # cyclopropane's CH2 (two ring-3 CH2 neighbours) is not in the development data: the code
    # table has nothing, the neighbour layer (learned on substituted cyclopropanes) still
    # applies, and must not push it further from the measured -2.8 ppm (Pretsch, Buhlmann &
    # Badertscher, Structure Determination of Organic Compounds, 13C of cycloalkanes) than
    # half a ppm beyond the increments
    from specmatch.prediction.c13.predictor import predict_carbons
    from specmatch.structures import parse_structure

    st = parse_structure("C1CC1")
    table = load_table("13C")
    assert table.entry(1, MolCodes(st.mol).codes(0, 1)[0]) is None
    full, _ = predict_carbons(st)
    bare, _ = predict_carbons(st, correction=False)
    assert full[0].shift != bare[0].shift  # the layer ran
    assert abs(full[0].shift + 2.8) < abs(bare[0].shift + 2.8) + 0.5


def test_layer_shifts_of_a_molecule_equal_the_feature_sums():
    from specmatch.prediction.hose import hex_codes
    from specmatch.structures import parse_structure
    from specmatch.structures.graph import graph_of

    layer = load_layer("13C")
    st = parse_structure("CC(Cl)C1CCC(O)CC1")
    bits, dist = MolCodes(st.mol).bits, graph_of(st).dist
    centres = [a.GetIdx() for a in st.mol.GetAtoms() if a.GetSymbol() == "C"]
    got = layer.shifts(hex_codes(bits), dist, centres)
    for centre, value in zip(centres, got):
        assert value == pytest.approx(layer.shift(neighbour_features(bits, dist[centre], centre)), abs=1e-9)
    assert layer.shifts(hex_codes(bits), dist, centres, exclude_fold=2) == pytest.approx(
        [layer.shift(neighbour_features(bits, dist[c], c), exclude_fold=2) for c in centres], abs=1e-9)


# ------------------------------------------------------------------ packed copies
@pytest.mark.parametrize("name", ["hose_c13.csv.gz", "hose_h1.csv.gz"])
def test_shipped_packed_table_holds_exactly_the_csv_values(name):
    # the packed copy is what predictions read; the CSV (provenance, folds, examples) is the
    # table: every row of the CSV must come back bit for bit, and nothing else
    from specmatch.prediction.hose import TABLE_DIR, read_packed_table, read_table

    packed, csv = read_packed_table(TABLE_DIR / name), read_table(TABLE_DIR / name)
    assert packed is not None, f"{name}: packed copy missing or stale; run hose.pack_table on it"
    assert (packed.shrink, packed.max_radius, packed.sigma_scale, packed.provenance) == \
        (csv.shrink, csv.max_radius, csv.sigma_scale, csv.provenance)
    assert len(packed._packed[0]) == len(csv.rows)
    for key in csv.rows:
        r, code = key.split(",", 1)
        a, b = packed.entry(int(r), code[1:-1]), csv.entry(int(r), code[1:-1])
        assert a == b and repr(a) == repr(b), key
    assert packed.entry(1, "zzzzzzzz") is None and packed.entry(1, "0104b75c|7") is None


def test_shipped_packed_layer_holds_exactly_the_csv_weights():
    from specmatch.prediction.hose import TABLE_DIR, read_layer, read_packed_layer

    packed, csv = read_packed_layer(TABLE_DIR / "layer_c13.csv.gz"), read_layer(TABLE_DIR / "layer_c13.csv.gz")
    assert packed is not None, "layer_c13: packed copy missing or stale; run hose.pack_layer on it"
    assert packed.provenance == csv.provenance
    assert packed._by_prefix(None) == csv._by_prefix(None)
    assert all(repr(packed.weight(f)) == repr(csv.weight(f)) for f in csv.rows)
    assert sum(len(v) for v in packed._flat[None].values()) == len(csv.rows)


def test_written_table_gets_its_packed_copy_and_a_stale_copy_is_ignored(tmp_path):
    from specmatch.prediction.hose import read_packed_table, read_table, write_table

    path = tmp_path / "hose_test.csv.gz"
    rows = [(1, "0104b75c", 3, 0.25, 0.5, "0:3:0.2500:0.5000", "C(C)C"),
            (2, "0104b75c|1", 1, -1.5, 0.0, "2:1:-1.5000:0.0000", "C(C)C")]
    write_table(path, rows, ["test table"], 2.0, 5, 1.1)
    packed = read_packed_table(path)
    assert packed is not None and packed.entry(2, "0104b75c|1") == read_table(path).entry(2, "0104b75c|1")
    assert packed.entry(1, "0104b75c") == (3, 0.25, 0.5) and packed.entry(2, "0104b75c") is None
    # the CSV rewritten (another fit) without its copy: the copy no longer counts
    from specmatch.prediction.hose import _write_gz_csv

    _write_gz_csv(path, ["test table"], "radius,code,n,mean_ppm,sd_ppm,by_fold,example",
                  ['1,"0104b75c",3,9.0000,0.5000,0:3:9.0000:0.5000,C(C)C'])
    assert read_packed_table(path) is None and read_table(path).entry(1, "0104b75c").mean == 9.0


# ------------------------------------------------------------------ relative configuration
def _config_feats(smiles: str) -> dict[int, list[str]]:
    from specmatch.prediction.hose import configuration_features, hex_codes

    mol = Chem.MolFromSmiles(smiles)
    dist = Chem.GetDistanceMatrix(mol).astype(int).tolist()
    return configuration_features(mol, hex_codes(MolCodes(mol).bits), dist, range(mol.GetNumAtoms()))


def _relations(smiles: str) -> set[str]:
    return {f.split(":")[1][-1] for fs in _config_feats(smiles).values() for f in fs}


def test_ring_faces_tell_cis_from_trans():
    # cis-1,2-dimethylcyclohexane is the meso form (1R,2S), trans the chiral (1R,2R) one; the
    # 1,4 isomers (centres that are not CIP stereocentres) differ too
    assert _relations("C[C@@H]1CCCC[C@@H]1C") == {"c"}  # RDKit: (1R,2S)
    assert _relations("C[C@@H]1CCCC[C@H]1C") == {"t"}  # RDKit: (1R,2R)
    assert _relations("C[C@H]1CC[C@@H](C)CC1") != _relations("C[C@H]1CC[C@H](C)CC1")
    assert _config_feats("CC1CCCCC1C") == {i: [] for i in range(8)}  # no configuration given


def test_alkene_pairs_follow_the_slashes():
    from specmatch.prediction.hose import alkene_pairs

    assert alkene_pairs(Chem.MolFromSmiles("C/C=C/C")) == [(0, 3, False)]
    assert alkene_pairs(Chem.MolFromSmiles("C/C=C\\C")) == [(0, 3, True)]
    assert alkene_pairs(Chem.MolFromSmiles("CC=CC")) == []


@pytest.mark.parametrize("smiles", ["C[C@@H]1CCCC[C@H]1O", "O[C@H]1CC[C@@H](C(C)(C)C)CC1",
                                    "C[C@@]12CCCC[C@H]1CCCC2", "C/C=C(\\C)CCl"])
def test_configuration_features_do_not_depend_on_atom_order(smiles):
    # the same molecule written from other atoms: the feature multiset of every atom class
    mol = Chem.MolFromSmiles(smiles)
    ref = sorted(sorted(v) for v in _config_feats(smiles).values())
    assert any(ref)
    for root in range(mol.GetNumAtoms()):
        other = Chem.MolToSmiles(mol, rootedAtAtom=root, canonical=False)
        assert sorted(sorted(v) for v in _config_feats(other).values()) == ref, other


# ------------------------------------------------------------------ integer keys
def test_code_keys_stand_for_exactly_one_code_text():
    # a packed table finds a code by its integer key: one key per text and one text per key
    from specmatch.prediction.hose import code_key

    assert code_key(1, "0104b75c") == (1 << 40) | (0x0104B75C << 8)
    assert code_key(2, "0104b75c|0") == (2 << 40) | (0x0104B75C << 8) | 1
    assert code_key(2, "0104b75c|1") != code_key(2, "0104b75c|0") != code_key(2, "0104b75c")
    # texts of another form (upper case, leading zeros in the tag, short or long codes) have no key
    for text in ("0104B75C", "0104b75c|00", "0104b75c|", "104b75c", "00104b75c", "zzzzzzzz", " 0104b75c"):
        assert code_key(1, text) is None, text


@pytest.mark.parametrize("smiles", ["CC(C)C(C)O", "C/C=C/CBr", "C1CC1C(Cl)CC=C", "CC(C)(C)C1CCC(O)CC1", "C=CC(C)CC"])
def test_correct_atom_equals_the_correction_of_the_code_texts(smiles):
    # the predictors look codes up by identifier (correct_atom); the walk over the code texts
    # (correct) must give the same numbers, on the packed copy and on the CSV, with and
    # without rank tags
    from specmatch.prediction.hose import TABLE_DIR, read_table

    mol = Chem.MolFromSmiles(smiles)
    bits = MolCodes(mol).bits
    for name, nucleus in (("hose_c13.csv.gz", "13C"), ("hose_h1.csv.gz", "1H")):
        packed, csv = load_table(nucleus), read_table(TABLE_DIR / name)
        for atom in range(mol.GetNumAtoms()):
            for tag in ("", "|0", "|1", "|7"):
                texts = [f"{x:08x}{tag}" for x in bits[atom][1:packed.max_radius + 1]]
                want = csv.correct(texts, 2.0)
                assert packed.correct_atom(bits[atom], tag, 2.0) == want
                assert csv.correct_atom(bits[atom], tag, 2.0) == want
                assert packed.correct(texts, 2.0) == want
