"""``specmatch enumerate``: the plausible products of a reaction."""

from __future__ import annotations

import argparse

from ._common import _print_json


def cmd_enumerate(args: argparse.Namespace) -> int:
    from ..reactions import enumerate_products
    from ..reports.enumeration_text import enumeration_table

    result = enumerate_products(args.substrate, args.reagent, alcohol=args.alcohol,
                                max_shifts=args.max_shifts, use_xtb=args.xtb, control=args.control)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(enumeration_table(result))
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("enumerate", help="list the plausible products of a reaction")
    p.add_argument("--substrate", required=True, metavar="SMILES")
    p.add_argument("--reagent", required=True, metavar="TEXT",
                   help="as written, case/space-tolerant: HCl, HBr, HI, H2O/H2SO4, H2O/H3PO4, H3O+, "
                        "MeOH/H2SO4, EtOH/H2SO4, ROH/H+ (with --alcohol), 'H2SO4, heat', HBr/ROOR, "
                        "'BH3; H2O2, NaOH', 'Hg(OAc)2, H2O; NaBH4', Br2, Cl2, Br2/H2O, Cl2/H2O")
    p.add_argument("--alcohol", metavar="SMILES", help="alcohol for acid-catalysed ether formation")
    p.add_argument("--max-shifts", type=int, default=2, metavar="N", help="1,2-shifts in a row (default 2)")
    p.add_argument("--xtb", action="store_true", help="refine close cation energies with GFN2-xTB (needs tblite)")
    p.add_argument("--control", choices=("auto", "kinetic", "thermodynamic"), default="auto",
                   help="allylic cations: kinetic (cold, short) or thermodynamic (warm, equilibrating) "
                        "capture; auto = thermodynamic for HX with allylic alcohols, else kinetic")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_enumerate)
