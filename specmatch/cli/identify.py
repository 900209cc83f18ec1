"""``specmatch identify`` and ``specmatch mixture``: the whole job, and the product ratio alone."""

from __future__ import annotations

import argparse

from ..errors import SpecmatchError
from ._common import _print_json


def cmd_identify(args: argparse.Namespace) -> int:
    from ..identification import identify
    from ..identification.candidates import read_candidates
    from ..reports.result_text import result_text

    if not (args.substrate or args.reagent) and not args.candidates:
        raise SpecmatchError("give the reaction (--substrate and --reagent), your own candidate list "
                             "(--candidates FILE), or both")
    if bool(args.substrate) != bool(args.reagent):
        raise SpecmatchError("give both --substrate and --reagent, or neither (with --candidates FILE)")
    extra: list[str] = []
    names: dict[str, str] = {}
    if args.candidates:
        lines = read_candidates(args.candidates)
        extra = [c.smiles for c in lines]
        names = {c.smiles: c.name for c in lines if c.name != c.smiles}
    h1 = _h1_at_field(args.h1, args.field, args.solvent) if args.field is not None else args.h1
    result = identify(
        substrate=args.substrate, reagent=args.reagent, alcohol=args.alcohol,
        c13=args.c13, h1=h1, dept135=args.dept135, solvent=args.solvent,
        candidates=extra, mixture=args.mixture, use_prior=not args.no_prior,
        max_components=args.max_components, candidate_names=names,
    )
    if args.report:
        from ..reports.html import write_report

        write_report(result, args.report)
    if args.nmredata:
        from ..reports.nmredata import write_nmredata

        write_nmredata(result, args.nmredata)
    # the verdict first: a save that fails (read-only store, full disk) must not hide it
    if args.json:
        _print_json(result.to_dict())
    else:
        print(result_text(result))
        if args.report:
            print(f"\nreport written to {args.report}")
    if args.save:
        import sys

        from ..store import save_run

        sys.stdout.flush()
        saved_id = save_run(result, {"c13": args.c13, "h1": args.h1, "dept135": args.dept135},
                            store=args.store, sample_id=args.sample_id, user=args.user)
        print(f"saved as analysis {saved_id} (see 'specmatch history show {saved_id[:12]}')",
              file=sys.stderr if args.json else sys.stdout)
    return 0


def _h1_at_field(path, field: float, solvent):
    """The 1H peak list read with the spectrometer field given by --field (spectra state their own)."""
    import dataclasses
    import math
    import os

    from ..spectra import PeakList, peaks_from_file, read_spectrum

    if not (math.isfinite(field) and 20.0 <= field <= 1300.0):
        raise SpecmatchError(f"--field {field:g}: give the 1H frequency in MHz (e.g. 60 or 400)")
    if path is None:
        raise SpecmatchError("--field sets the field of the 1H peak list: give it with --h1")
    if not os.path.exists(path):
        return path  # identify says what is wrong with the path
    got = read_spectrum(os.fspath(path), nucleus="1H")
    if not isinstance(got, PeakList):
        if got.frequency_mhz and abs(got.frequency_mhz - field) > 0.5:
            raise SpecmatchError(f"{os.path.basename(path)} was recorded at {got.frequency_mhz:g} MHz "
                                 f"(.OBSERVE FREQUENCY) but --field says {field:g}; drop --field")
        return path
    pl = peaks_from_file(os.fspath(path), nucleus="1H", solvent=solvent)
    return dataclasses.replace(pl, frequency_mhz=float(field))


# -------------------------------------------------------------------------- mixture
def cmd_mixture(args: argparse.Namespace) -> int:
    from ..identification.mixture import mixture_from_files
    from ..reports.mixture_text import mixture_text

    est = mixture_from_files(args.h1, args.candidates, solvent=args.solvent)
    if args.json:
        _print_json(est.to_dict())
    else:
        print(mixture_text(est))
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser(
        "identify", help="the whole job: reaction (or your candidate list) + spectra -> verdict",
        description="Which product, pure or a mixture? Candidates come from the reaction "
                    "(--substrate and --reagent), from your own list (--candidates FILE: one SMILES "
                    "per line, optionally followed by a name; '#' starts a comment at the start of a "
                    "line or after a space), or both.")
    p.add_argument("--substrate", metavar="SMILES")
    p.add_argument("--reagent", metavar="TEXT")
    p.add_argument("--alcohol", metavar="SMILES")
    p.add_argument("--c13", metavar="FILE")
    p.add_argument("--h1", metavar="FILE")
    p.add_argument("--dept135", metavar="FILE")
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--field", type=float, metavar="MHZ",
                   help="1H frequency of a --h1 peak list (spectrum files state their own)")
    p.add_argument("--candidates", metavar="FILE",
                   help="candidate SMILES, one per line (added to the reaction's, or alone)")
    p.add_argument("--mixture", action="store_true", help="also estimate the product ratio from 1H")
    p.add_argument("--max-components", type=int, choices=(1, 2, 3), default=2,
                   help="largest mixture considered (default 2; 1: assume a pure sample)")
    p.add_argument("--no-prior", action="store_true", help="verdict from the spectra alone")
    p.add_argument("--report", metavar="OUT.html", help="write a self-contained HTML report")
    p.add_argument("--nmredata", metavar="OUT.sdf",
                   help="write the top structure with its assigned signals as NMReDATA (SD file)")
    p.add_argument("--save", action="store_true", help="save the analysis (inputs, files, verdict) in the store")
    p.add_argument("--store", metavar="URL", help="with --save: database URL (default $SPECMATCH_STORE)")
    p.add_argument("--sample-id", metavar="ID", help="with --save: the sample's id")
    p.add_argument("--user", metavar="NAME", help="with --save: who ran it (default: the OS user)")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_identify)

    p = sub.add_parser("mixture", help="product ratio from a crude 1H spectrum")
    p.add_argument("--h1", required=True, metavar="FILE", help="1H spectrum or CSV peak list with integrals")
    p.add_argument("--candidates", required=True, metavar="FILE", help="candidate SMILES, one per line")
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_mixture)
