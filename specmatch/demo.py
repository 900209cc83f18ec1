"""The invented demo scenario shipped in ``sample_spectra/``.

Three cases from a fictional pilot plant (the plant, its batches and its spectra
are invented; ``sample_spectra/README.md`` says how the files were made). The
CLI, the README and the app load the scenario through :func:`demo_cases`, so
all three run exactly the same inputs.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from .errors import SpecmatchError

__all__ = ["DemoCase", "demo_cases", "demo_case", "sample_dir", "LAB_NAME"]

#: The fictional site the demo is set in.
LAB_NAME = "Larchmere fragrance-intermediates pilot plant (fictional)"

#: Environment variable that points at another copy of ``sample_spectra/``.
ENV_SAMPLE_DIR = "SPECMATCH_SAMPLE_DIR"


@dataclass(frozen=True)
class DemoCase:
    """One demo sample: the reaction, its spectrum files and what is in the tube.

    Attributes
    ----------
    key : str
        Short id, ``"a"`` or ``"b"`` (also the manifest's sample id suffix).
    sample_id : str
        The invented batch number used in the files and the manifest.
    title : str
        One line for menus.
    substrate, reagent : str
        SMILES of the alkene and the reagent text, as a chemist would type them.
    alcohol : str or None
        Alcohol SMILES for ether-forming additions (None here).
    solvent : str
        NMR solvent of the files.
    c13, h1, dept135 : Path
        JCAMP-DX spectra.
    c13_csv, h1_csv : Path
        The same data as CSV peak lists.
    description : str
        What the invented lab did and what it must decide.
    truth : dict
        Canonical-free SMILES -> mole fraction of what the generator put in the
        tube (products only; trace substrate listed in ``impurities``).
    rearranged : str
        SMILES of the rearranged product the demo's verdict should name.
    impurities : dict
        SMILES -> mole fraction of other things deliberately added (unreacted substrate).
    frequency_mhz : float
        1H frequency of the (invented) spectrometer the files come from.
    """

    key: str
    sample_id: str
    title: str
    substrate: str
    reagent: str
    alcohol: str | None
    solvent: str
    c13: Path
    h1: Path
    dept135: Path
    c13_csv: Path
    h1_csv: Path
    description: str
    truth: dict[str, float] = field(default_factory=dict)
    rearranged: str = ""
    impurities: dict[str, float] = field(default_factory=dict)
    frequency_mhz: float = 400.13

    @property
    def files(self) -> dict[str, Path]:
        """The JCAMP-DX files by role (``"c13"``, ``"h1"``, ``"dept135"``)."""
        return {"c13": self.c13, "h1": self.h1, "dept135": self.dept135}

    def ratio_text(self) -> str:
        """The true product ratio as chemists write it, major first (e.g. ``"70:30"``)."""
        parts = sorted(self.truth.values(), reverse=True)
        return ":".join(f"{round(100 * p):d}" for p in parts)


# What the generator (sample_spectra/make_demo.py) puts in each tube; it imports
# these numbers from here so the files and the documentation cannot drift apart.
_CASES = (
    {
        "key": "a",
        "sample_id": "LFP-0419-A",
        "title": "(a) vinylcyclohexane + aqueous H2SO4: which alcohol?",
        "substrate": "C=CC1CCCCC1",
        "reagent": "H2O/H2SO4",
        "alcohol": None,
        "solvent": "CDCl3",
        "stem": "a_vinylcyclohexane_hydration",
        "description": (
            f"{LAB_NAME}: batch LFP-0419-A. Vinylcyclohexane was stirred with 50% aqueous "
            "sulfuric acid and worked up. The route card expected the Markovnikov alcohol "
            "1-cyclohexylethan-1-ol; the crude smells wrong and the plant must know whether "
            "the tertiary alcohol 1-ethylcyclohexan-1-ol (from a 1,2-hydride shift of the "
            "secondary cation) is present, and how much. Invented scenario; the spectra are "
            "simulated from documented shift values."
        ),
        "truth": {"CCC1(O)CCCCC1": 0.70, "CC(O)C1CCCCC1": 0.30},
        "rearranged": "CCC1(O)CCCCC1",
        "impurities": {"C=CC1CCCCC1": 0.04},
    },
    {
        "key": "b",
        "sample_id": "LFP-0422-B",
        "title": "(b) 3-methylpent-1-ene + HBr: which bromide?",
        "substrate": "C=CC(C)CC",
        "reagent": "HBr",
        "alcohol": None,
        "solvent": "CDCl3",
        "stem": "b_methylpentene_hbr",
        "description": (
            f"{LAB_NAME}: batch LFP-0422-B. Dry HBr was passed into 3-methylpent-1-ene at "
            "0 °C. The plant must decide between the Markovnikov product 2-bromo-3-"
            "methylpentane and the rearranged tertiary bromide 3-bromo-3-methylpentane "
            "(1,2-hydride shift), and estimate the ratio. Invented scenario; the spectra "
            "are simulated from documented shift values."
        ),
        "truth": {"CCC(C)(Br)CC": 0.80, "CC(Br)C(C)CC": 0.20},
        "rearranged": "CCC(C)(Br)CC",
        "impurities": {},
    },
    {
        "key": "c",
        "sample_id": "LFP-0503-C",
        "title": "(c) 3-methylbut-1-ene + HCl, 60 MHz benchtop: which chloride?",
        "substrate": "C=CC(C)C",
        "reagent": "HCl",
        "alcohol": None,
        "solvent": "CDCl3",
        "stem": "c_methylbutene_hcl_60MHz",
        "description": (
            f"{LAB_NAME}: batch LFP-0503-C, checked at-line on the plant's 60 MHz benchtop "
            "spectrometer. HCl gas was passed into 3-methylbut-1-ene. Markovnikov addition gives "
            "2-chloro-3-methylbutane, a 1,2-hydride shift the tertiary 2-chloro-2-methylbutane. "
            "At 60 MHz the ethyl and isopropyl multiplets are strongly coupled and overlap, so "
            "first-order reading misplaces their lines. Invented scenario; the spectra are "
            "simulated (second order) from documented shift values."
        ),
        "truth": {"CCC(C)(C)Cl": 0.65, "CC(Cl)C(C)C": 0.35},
        "rearranged": "CCC(C)(C)Cl",
        "impurities": {},
        "frequency_mhz": 60.0,
    },
)


def sample_dir() -> Path:
    """Where the demo files live.

    ``$SPECMATCH_SAMPLE_DIR`` if set, else ``sample_spectra/`` next to the
    package (a source checkout or an editable install).

    Raises
    ------
    SpecmatchError
        If no such directory exists (e.g. a wheel install without the demo data).
    """
    env = os.environ.get(ENV_SAMPLE_DIR)
    candidates = [Path(env)] if env else []
    here = Path(__file__).resolve().parent
    candidates += [here.parent / "sample_spectra", here / "sample_spectra"]
    for path in candidates:
        if (path / "manifest.csv").is_file() or (path / "make_demo.py").is_file():
            return path
    raise SpecmatchError(
        "the demo files (sample_spectra/) were not found next to the specmatch package; "
        f"use a source checkout, or set {ENV_SAMPLE_DIR} to the folder that holds them"
    )


def demo_cases() -> list[DemoCase]:
    """All demo cases, with absolute paths to their files.

    Files may not exist yet if ``make_demo.py`` has not been run; callers that
    open them get the reader's own error.
    """
    base = sample_dir()
    out = []
    for spec in _CASES:
        stem = spec["stem"]
        out.append(DemoCase(
            key=spec["key"], sample_id=spec["sample_id"], title=spec["title"],
            substrate=spec["substrate"], reagent=spec["reagent"], alcohol=spec["alcohol"],
            solvent=spec["solvent"],
            c13=base / f"{stem}_13C.jdx", h1=base / f"{stem}_1H.jdx",
            dept135=base / f"{stem}_DEPT135.jdx",
            c13_csv=base / f"{stem}_13C_peaks.csv", h1_csv=base / f"{stem}_1H_peaks.csv",
            description=spec["description"], truth=dict(spec["truth"]),
            rearranged=spec["rearranged"], impurities=dict(spec["impurities"]),
            frequency_mhz=float(spec.get("frequency_mhz", 400.13)),
        ))
    return out


def demo_case(key: str) -> DemoCase:
    """One demo case by key (``"a"``, ``"b"`` or ``"c"``)."""
    for case in demo_cases():
        if case.key == key:
            return case
    known = ", ".join(c["key"] for c in _CASES)
    raise SpecmatchError(f"there is no demo case '{key}'; known cases: {known}")
