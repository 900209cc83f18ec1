"""Prediction stage: 1H and 13C spectra from additive increment tables.

``predict(smiles)`` returns a :class:`Prediction`; results are cached per input
text, so scoring many spectra against one candidate predicts it once.
"""

from __future__ import annotations

from functools import lru_cache
from typing import TYPE_CHECKING

from .types import CarbonShift, Prediction, ProtonGroup

if TYPE_CHECKING:  # RDKit is loaded on first prediction, so small submodules import fast
    from ..structures import Structure

__all__ = ["CarbonShift", "Prediction", "ProtonGroup", "predict", "predict_structure"]


def predict_structure(structure: Structure, *, geometry: bool = True) -> Prediction:
    """Predict both spectra of an already perceived structure.

    Parameters
    ----------
    geometry : bool
        Apply the 3D layer (prediction/stereo.py) to molecules with a relative configuration
        (cis/trans, meso/dl). About 0.1-1 s per such molecule on first use, then cached; batch
        predictions of many unrelated molecules switch it off for speed.
    """
    from .c13.predictor import TABLES_VERSION as C_VERSION, predict_carbons
    from .h1.predictor import TABLES_VERSION as H_VERSION, predict_protons
    from .hose import MolCodes

    layer_3d = False
    if geometry:
        # imported here: batch predictions without the layer never load it (nor numpy)
        from .stereo import apply_stereo_layer, needs_stereo_layer

        layer_3d = needs_stereo_layer(structure)
    codes = MolCodes(structure.mol)  # one code builder for both nuclei
    # where the 3D layer runs it brings its own cis/trans terms, so the neighbour layer's
    # configuration features stay out: both together counted the effect twice
    # (SPECMATCH_CROSS_VALIDATED=1 bench_stereo.py --limit 1500, 625 carbons: 1.59 ppm
    # together, 1.53 with the features alone, 1.58 with the 3D layer on the previous tables)
    carbons, c_warn = predict_carbons(structure, codes=codes, configuration=not layer_3d)
    protons, h_warn = predict_protons(structure, codes=codes)
    prediction = Prediction(
        smiles=structure.smiles,
        canonical_smiles=structure.canonical_smiles,
        carbons=tuple(carbons),
        protons=tuple(protons),
        warnings=tuple(dict.fromkeys([*c_warn, *h_warn])),
        tables_version=f"13C {C_VERSION}; 1H {H_VERSION}",
    )
    if layer_3d:
        # relative configuration specified and relevant: 3D ensemble layer (prediction/stereo.py)
        prediction = apply_stereo_layer(structure, prediction)
    return prediction


@lru_cache(maxsize=8192)
def predict(smiles: str, *, geometry: bool = True) -> Prediction:
    """Predict the 1H and 13C spectra of a molecule given as SMILES or molfile text.

    ``geometry`` as in :func:`predict_structure`.

    Raises
    ------
    specmatch.SpecmatchError
        If the structure cannot be parsed.
    """
    from ..structures import parse_structure

    return predict_structure(parse_structure(smiles), geometry=geometry)
