"""Reactions stage: enumerate the plausible products of a reaction, with pathway and prior.

Public API
----------
enumerate_products(substrate, reagent, *, alcohol=None, max_shifts=2, use_xtb=False) -> Enumeration
parse_reagent(text) -> Reagent
known_reagents() -> list[Reagent]

The energy scales and the reagent catalogue are data files in ``data/`` (each row with its
source); the mechanism model is documented in :mod:`specmatch.reactions.network`.
"""

from .enumeration import enumerate_products
from .types import ROLES, Candidate, Enumeration
from .reagents import Reagent, known_reagents, parse_reagent

__all__ = ["ROLES", "Candidate", "Enumeration", "Reagent", "enumerate_products", "known_reagents",
           "parse_reagent"]
