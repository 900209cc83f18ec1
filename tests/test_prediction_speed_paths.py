"""The fast paths of prediction give the same answers as the slow ones.

Speed itself is measured by ``benchmarks/bench_speed.py``, never here. These tests check
that the shortcuts (the shared graph view, the fast path of the diastereotopic test,
forked workers, rows encoded by the workers, lazy imports) change no result.

Diastereotopicity expectations are the textbook ones (homotopic / enantiotopic /
diastereotopic by the substitution test; Silverstein, Webster & Kiemle, "Spectrometric
Identification of Organic Compounds", chapter on 1H NMR, chemical equivalence).
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from rdkit import Chem

from specmatch.executor import Plan, run_tasks
from specmatch.prediction import predict
from specmatch.prediction.batch import predict_line, predict_row
from specmatch.structures import parse_structure
from specmatch.structures.graph import graph_of
from specmatch.structures.molecule import _diastereotopic, _stereo_elements, mol_from_text

# textbook cases of each kind, and molecules where the label itself creates the second
# stereo element (prochiral centres), ring stereo and given configurations
CASES = [
    "CCO",                       # ethanol CH2: enantiotopic
    "CCC(C)O",                   # butan-2-ol C3 H2: diastereotopic
    "CC(C)C(C)O",                # 3-methylbutan-2-ol: isopropyl methyls diastereotopic
    "CCC(C)CC",                  # 3-methylpentane: CH2 H diastereotopic (prochiral C3)
    "CCC(CC)(O)C",               # 3-methylpentan-3-ol
    "OCC(O)CO",                  # glycerol: CH2 H diastereotopic
    "CC(O)CC(C)O",               # pentane-2,4-diol, configuration not given
    "C[C@@H](O)C[C@H](C)O",      # meso-pentane-2,4-diol: CH2 H diastereotopic
    "C[C@@H](O)C[C@@H](C)O",     # (R,R)-pentane-2,4-diol: CH2 H homotopic (C2 axis)
    "CC1CCC(C)CC1",              # 1,4-dimethylcyclohexane (ring stereo)
    "C[C@H]1CC[C@@H](C)CC1",
    "CC1CC(C)C1",
    "CC(Br)C(C)Br",
    "C[C@@H](Br)[C@H](C)Br",
    "C/C=C/CBr",                 # (E)-1-bromobut-2-ene: CH2Br enantiotopic
    "CC(C)CC(C)(O)CC(C)C",
    "CC(Cl)CC(F)C(F)(F)C(OC)OC",
    "CCC(C)(C)CC",
    "CC(C)(O)C1CC1",
    "CCOC(C)OCC",                # acetaldehyde diethyl acetal: OCH2 H diastereotopic
    # shortcuts without labelling: no atom whose equivalent ligands the label tells apart
    "CC(C)CCO",                  # 3-methylbutan-1-ol: CH2 and isopropyl methyls not diastereotopic
    "CC(C)C(C)(C)C=C",           # twins on two centres, no stereo element
    "CCC(CC)C(C)C",              # 3-ethyl-2-methylpentane: ethyl CH2 H diastereotopic? (label on a twin branch)
    "CC(C)OC(C)C",               # diisopropyl ether
    "C/C=C/C(C)C",               # E given, no tetrahedral element
    "C/C=C/CC(C)(C)O",
    # configurations given, chiral, another centre: answered without labelling
    "C[C@H](O)CC[C@@H](C)CC",
    "C[C@H](Cl)C(C)C",
    "CC[C@H](C)[C@@H](C)CC",     # (3R,4S)-3,4-dimethylhexane: meso
    "C[C@H]1CC[C@H](C(C)C)CC1",  # trans-1-isopropyl-4-methylcyclohexane
]


@pytest.mark.parametrize("smiles", CASES)
def test_fast_diastereotopic_path_equals_the_full_substitution_test(smiles):
    mol = mol_from_text(smiles)
    classes = tuple(int(r) for r in Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    elements = _stereo_elements(mol)
    assert _diastereotopic(mol, classes, elements) == _diastereotopic(mol, classes, elements, fast=False)


def test_textbook_diastereotopic_answers():
    # butan-2-ol: the C3 methylene protons are diastereotopic; ethanol's are enantiotopic
    assert 1 in parse_structure("CCC(C)O").diastereotopic_ch2
    assert not parse_structure("CCO").diastereotopic_ch2
    # 3-methylpentane: C3 is prochiral, so each CH2's protons are diastereotopic
    assert parse_structure("CCC(C)CC").diastereotopic_ch2 == frozenset({1, 4})
    # meso- vs (R,R)-pentane-2,4-diol: only the meso CH2 has diastereotopic protons
    assert 3 in parse_structure("C[C@@H](O)C[C@H](C)O").diastereotopic_ch2
    assert 3 not in parse_structure("C[C@@H](O)C[C@@H](C)O").diastereotopic_ch2


@pytest.mark.parametrize("smiles", ["CC(=O)OCC", "c1ccccc1CC=C", "[2H]C([2H])([2H])CO", "C1CC2CCC1C2",
                                    "C#CCN", "OC1=CC=CC1"])
def test_graph_view_reads_what_rdkit_says(smiles):
    st = parse_structure(smiles)
    g = graph_of(st)
    assert graph_of(st) is g  # built once per structure
    mol = st.mol
    ri = mol.GetRingInfo()
    for a in mol.GetAtoms():
        i = a.GetIdx()
        assert (g.z[i], g.sym[i], g.arom[i], g.nh_total[i]) == (
            a.GetAtomicNum(), a.GetSymbol(), a.GetIsAromatic(), a.GetTotalNumHs())
        assert sorted(g.nbrs[i]) == sorted(n.GetIdx() for n in a.GetNeighbors())
        assert sorted(g.bonds[i]) == sorted((b.GetOtherAtomIdx(i), b.GetBondTypeAsDouble()) for b in a.GetBonds())
        assert g.min_ring_size[i] == ri.MinAtomRingSize(i)
        assert g.n_rings[i] == ri.NumAtomRings(i)
    assert g.dist == Chem.GetDistanceMatrix(mol).astype(int).tolist()


def test_deuterium_is_left_out_of_the_observed_protons():
    g = graph_of(parse_structure("[2H]C([2H])([2H])CO"))
    assert g.nh_total[0] == 3 and g.nh[0] == 0


def test_predict_line_is_the_row_as_json():
    status, text, error = predict_line("CCO")
    assert status == "ok" and not error
    assert json.loads(text) == json.loads(json.dumps(predict_row("CCO")))
    assert predict_line("# a comment")[0] == "skipped"
    status, text, error = predict_line("C1CC")
    assert status == "failed" and "never closed" in error and json.loads(text)["ok"] is False


def _shift_of_first_carbon(smiles: str) -> float:
    return predict(smiles, geometry=False).carbons[0].shift


def test_forked_workers_give_the_inline_results():
    smiles = ["CCO", "CCCBr", "CC(C)O", "C=CCCl", "C1CC1", "CCC(C)O"] * 3
    inline = [o for grp in run_tasks(_shift_of_first_carbon, smiles, Plan("inline", 0)) for o in grp]
    forked = [o for grp in run_tasks(_shift_of_first_carbon, smiles, Plan("processes", 2), ordered=True,
                                     chunk=4, fork=True) for o in grp]
    assert [o.index for o in forked] == list(range(len(smiles)))
    assert [o.value for o in forked] == [o.value for o in inline]


def test_help_loads_no_numerical_library():
    # start-up stays small when the command line is only being parsed
    code = ("import sys; from specmatch.cli import build_parser; build_parser(); "
            "print(','.join(m for m in ('numpy', 'scipy', 'rdkit', 'pandas') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_ranking_loads_the_assignment_solver_alone():
    code = ("import sys; import numpy as np; from specmatch.identification import scoring; "
            "r, c = scoring.linear_sum_assignment(np.array([[4.0, 1.0, 3.0], [2.0, 0.0, 5.0], [3.0, 2.0, 2.0]])); "
            "print(r.tolist(), c.tolist(), 'scipy.optimize' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    # the example of the scipy.optimize.linear_sum_assignment documentation: optimum cost 5,
    # rows 0, 1, 2 -> columns 1, 0, 2
    assert out.stdout.split("]")[:2] == ["[0, 1, 2", " [1, 0, 2"]
    assert out.stdout.strip().endswith("False")


def test_batch_prediction_loads_neither_numpy_nor_the_3d_layer():
    # predict --batch without --stereo-3d needs neither (the 3D layer and numpy cost start-up)
    code = ("import sys; from specmatch.prediction.batch import predict_line, warm; warm(); "
            "[predict_line(s) for s in ('CC(C)C(C)O', 'C=CCBr', 'C[C@@H](O)C[C@H](C)O', 'c1ccccc1O')]; "
            "print(','.join(m for m in ('numpy', 'specmatch.prediction.stereo') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_batch_command_loads_no_numpy(tmp_path):
    # the whole `predict --batch` command, handler imports included (the single-structure
    # text table once pulled numpy in through the spectra stage)
    src, out = tmp_path / "in.smi", tmp_path / "out.jsonl"
    src.write_text("CCO\nC=CCBr\nCC(C)C(C)O\n", encoding="utf-8")
    code = ("import sys; from specmatch.cli import main; "
            f"sys.argv = ['specmatch', 'predict', '--batch', {str(src)!r}, '--out', {str(out)!r}, '--workers', '0']; "
            "rc = main(); print(rc, 'numpy' in sys.modules)")
    got = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert got.stdout.split()[-2:] == ["0", "False"], got.stdout + got.stderr
    assert len(out.read_text(encoding="utf-8").splitlines()) == 3


def _dies_on_13(x: int):
    import os

    if x == 13:
        os._exit(3)  # as a segfault or an out-of-memory kill would
    if x == 20:
        raise ValueError("bad item")
    if x == 30:
        return lambda: x  # a value that cannot be pickled back to the parent
    return 2 * x


def test_forked_worker_that_dies_fails_only_its_running_chunk():
    # forked workers are fed by position over pipes: a worker that dies fails the chunk it
    # was running (4 items here), the chunk queued behind it goes to its replacement, an
    # exception or an unpicklable value fails its own item, and the order is kept
    from specmatch.executor import WORKER_DIED

    out = [o for grp in run_tasks(_dies_on_13, list(range(50)), Plan("processes", 2), ordered=True,
                                  chunk=4, fork=True) for o in grp]
    assert [o.index for o in out] == list(range(50))
    assert [o.index for o in out if o.error == WORKER_DIED] == [12, 13, 14, 15]
    assert "ValueError" in out[20].error and "pickle" in out[30].error
    assert all(o.value == 2 * o.index for o in out if o.ok) and sum(o.ok for o in out) == 50 - 6


def test_increment_table_fast_reader_equals_the_csv_module(tmp_path):
    """The byte-level reader of the 13C increment CSV gives what the csv module gives, on
    the shipped file and on a file it must leave to the csv module (quoted term, a quoted
    field running over a line end)."""
    import csv

    from specmatch.prediction.c13.tables import TABLE_DIR, _read_increments

    def by_csv(path):
        value, support = {}, {}
        with open(path, newline="", encoding="utf-8") as fh:
            for row in csv.DictReader(fh):
                value[row["term"]] = float(row["shift_ppm"])
                support[row["term"]] = int(row["n_carbons"])
        return value, support

    shipped = TABLE_DIR / "c13_increments.csv"
    assert _read_increments(shipped) == by_csv(shipped)
    odd = tmp_path / "odd.csv"
    odd.write_text('term,shift_ppm,handbook_ppm,n_carbons,meaning,source\r\n'
                   '"a,b",1.5,1,3,"two\r\nlines",x\r\nc,2,1,4,plain,"y, z"\r\n', encoding="utf-8")
    assert _read_increments(odd) == by_csv(odd) == ({"a,b": 1.5, "c": 2.0}, {"a,b": 3, "c": 4})


def test_row_json_is_json_dumps_of_the_row():
    """The directly written row is ``json.dumps`` of ``Prediction.to_dict()`` (with the
    input SMILES), byte for byte, on the nmrshiftdb2 test subsets (tests/data, attributed
    there) and on a prediction holding non-finite numbers and a non-ASCII warning."""
    import math
    from pathlib import Path

    from specmatch.prediction import CarbonShift, Prediction, ProtonGroup
    from specmatch.prediction.batch import row_json

    data = Path(__file__).parent / "data"
    smiles = []
    for name in ("nmrshiftdb2_c13_subset.jsonl", "nmrshiftdb2_h1_core_subset.jsonl"):
        for line in (data / name).read_text(encoding="utf-8").splitlines():
            rec = json.loads(line)
            if "smiles" in rec:
                smiles.append(rec["smiles"])
    assert len(smiles) > 150
    for smi in smiles:
        pred = predict(smi, geometry=False)
        row = pred.to_dict()
        row["smiles"] = smi
        assert row_json(pred, smi) == json.dumps(row), smi
    odd = Prediction("CC", "CC", (CarbonShift((0, 1), math.nan, 1.0, 3, "CH3 \u00b5"),),
                     (ProtonGroup((0, 1), 0.9, math.inf, 6, "s", (7.04,), False, True),), ("w\u00e9\"",))
    row = odd.to_dict()
    row["smiles"] = "C C"
    assert row_json(odd, "C C") == json.dumps(row)
    plain = Prediction("CC", "CC", (CarbonShift((0,), 7.126, 0.333, 3, "CH3 \u00b5"),),
                       (ProtonGroup((0, 1), 0.8765, 0.1, 6, "d", (7.04, 1.25), True, False),), ("w\u00e9\"",))
    assert row_json(plain, "CC") == json.dumps(plain.to_dict())

    class Scalar(float):  # a float subclass with its own repr, as numpy's scalars have
        def __repr__(self) -> str:
            return f"Scalar({float(self)})"

    wrapped = Prediction("CC", "CC", (CarbonShift((0,), Scalar(7.126), 0.333, 3, "CH3"),), (), ())
    assert row_json(wrapped, "CC") == json.dumps(wrapped.to_dict())


@pytest.mark.parametrize("n_items,chunk,workers", [(710, 22, 2), (7000, 218, 2), (10, 4, 2), (1, 1, 1), (0, 4, 2),
                                                    (333, 16, 3)])
def test_chunk_spans_cover_every_item_once_in_order(n_items, chunk, workers):
    """The forked pool's spans (shrinking toward the end) hold every item once, in order."""
    from specmatch.executor import _chunk_spans

    spans = _chunk_spans(n_items, chunk, workers)
    assert [i for a, b in spans for i in range(a, b)] == list(range(n_items))
    assert all(0 < b - a <= chunk for a, b in spans)
    sizes = [b - a for a, b in spans]
    assert sizes[:-1] == sorted(sizes[:-1], reverse=True)
