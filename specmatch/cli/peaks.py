"""``specmatch peaks``: lines, multiplets and flags of a spectrum file."""

from __future__ import annotations

import argparse

from ._common import _print_json


def cmd_peaks(args: argparse.Namespace) -> int:
    from ..reports.tables_text import peaklist_table
    from ..spectra import peaks_from_file

    peaklist = peaks_from_file(args.file, nucleus=args.nucleus, solvent=args.solvent,
                               dept135=args.dept135, total_h=args.total_h)
    if args.formula and peaklist.nucleus == "1H":
        from ..spectra import scale_integrals

        peaklist = scale_integrals(peaklist, formula=args.formula)
    if args.json:
        from ..spectra import peaklist_to_dict

        _print_json(peaklist_to_dict(peaklist))
    else:
        print(peaklist_table(peaklist))
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("peaks", help="read a spectrum file and list its peaks and multiplets")
    p.add_argument("file")
    p.add_argument("--nucleus", choices=["1H", "13C"])
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--dept135", action="store_true", help="the file is a DEPT-135 spectrum")
    p.add_argument("--total-h", type=float, metavar="N", dest="total_h",
                   help="scale 1H integrals so the compound's multiplets add up to N H")
    p.add_argument("--formula", metavar="FORMULA_OR_SMILES",
                   help="scale 1H integrals to the H count of this compound (e.g. C2H5ClO or OCCCl)")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_peaks)
