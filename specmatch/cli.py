"""The ``specmatch`` command: one subcommand per stage.

Every subcommand gathers input, calls the library and lays out its result; no
chemistry lives here. User errors (``SpecmatchError``, unreadable files) print one
line ``specmatch: <message>`` on stderr and exit 2; ``--debug`` shows tracebacks.

Each handler imports its stage lazily so ``specmatch --help`` stays fast.
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any, Callable, Sequence

from . import __version__
from .errors import SpecmatchError

EXIT_USER_ERROR = 2


def _print_json(obj: Any) -> None:
    json.dump(obj, sys.stdout, indent=2, ensure_ascii=False, default=str)
    sys.stdout.write("\n")


def _progress(total: int, desc: str):
    """A progress bar on stderr for long batches (silent for short ones or non-TTY)."""
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit="item", file=sys.stderr,
                disable=total < 200 or not sys.stderr.isatty(), leave=False)


def _read_lines(path: str) -> list[str]:
    try:
        with open(path, encoding="utf-8") as fh:
            return fh.read().splitlines()
    except OSError as exc:
        raise SpecmatchError(f"cannot read '{path}': {exc.strerror}") from None
    except UnicodeDecodeError:
        raise SpecmatchError(f"cannot read '{path}': it is not UTF-8 text") from None


def _open_out(path: str):
    try:
        return open(path, "w", encoding="utf-8")
    except OSError as exc:
        raise SpecmatchError(f"cannot write '{path}': {exc.strerror}") from None


# --------------------------------------------------------------------------- predict
def cmd_predict(args: argparse.Namespace) -> int:
    from .prediction import predict
    from .reports.prediction_text import prediction_table

    if args.batch:
        if not args.out:
            raise SpecmatchError("--batch needs --out OUT.jsonl")
        lines = _read_lines(args.batch)
        with _open_out(args.out) as out, _progress(len(lines), "predict") as bar:
            for line in lines:
                smi = line.strip()
                if not smi or smi.startswith("#"):
                    row: dict[str, Any] = {"smiles": line, "ok": False, "error": "empty line"}
                else:
                    smi = smi.split()[0]
                    try:
                        row = predict(smi).to_dict()
                        row["smiles"] = smi
                    except SpecmatchError as exc:
                        row = {"smiles": smi, "ok": False, "error": str(exc)}
                    except Exception as exc:  # one bad molecule must not stop a batch
                        row = {"smiles": smi, "ok": False, "error": f"internal error: {exc}"}
                out.write(json.dumps(row) + "\n")
                bar.update()
        return 0
    if not args.smiles:
        raise SpecmatchError("give a SMILES, or --batch FILE --out OUT.jsonl")
    pred = predict(args.smiles)
    if args.json:
        _print_json(pred.to_dict())
    else:
        print(prediction_table(pred, frequency_mhz=args.frequency, solvent=args.solvent))
    return 0


# ------------------------------------------------------------------------ enumerate
def cmd_enumerate(args: argparse.Namespace) -> int:
    from .reactions import enumerate_products
    from .reports.enumeration_text import enumeration_table

    result = enumerate_products(args.substrate, args.reagent, alcohol=args.alcohol,
                                max_shifts=args.max_shifts, use_xtb=args.xtb)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(enumeration_table(result))
    return 0


# ---------------------------------------------------------------------------- peaks
def cmd_peaks(args: argparse.Namespace) -> int:
    from .reports.peaks_text import peaklist_table
    from .spectra import peaks_from_file

    peaklist = peaks_from_file(args.file, nucleus=args.nucleus, solvent=args.solvent,
                               dept135=args.dept135)
    if args.json:
        from .spectra import peaklist_to_dict

        _print_json(peaklist_to_dict(peaklist))
    else:
        print(peaklist_table(peaklist))
    return 0


# ----------------------------------------------------------------------------- rank
def cmd_rank(args: argparse.Namespace) -> int:
    from .identification.batch import rank_batch

    if not args.batch or not args.out:
        raise SpecmatchError("use: specmatch rank --batch TASKS.jsonl --out RESULTS.jsonl")
    rank_batch(args.batch, args.out, progress=_progress)
    return 0


# ------------------------------------------------------------------------- identify
def cmd_identify(args: argparse.Namespace) -> int:
    from .identification import identify
    from .reports.result_text import result_text

    extra: list[str] = []
    if args.candidates:
        extra = [ln.split()[0] for ln in _read_lines(args.candidates)
                 if ln.strip() and not ln.lstrip().startswith("#")]
    result = identify(
        substrate=args.substrate, reagent=args.reagent, alcohol=args.alcohol,
        c13=args.c13, h1=args.h1, dept135=args.dept135, solvent=args.solvent,
        candidates=extra, mixture=args.mixture, use_prior=not args.no_prior,
    )
    if args.report:
        from .reports.html import write_report

        write_report(result, args.report)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(result_text(result))
        if args.report:
            print(f"\nreport written to {args.report}")
    return 0


# -------------------------------------------------------------------------- mixture
def cmd_mixture(args: argparse.Namespace) -> int:
    from .identification.mixture import mixture_from_files
    from .reports.mixture_text import mixture_text

    est = mixture_from_files(args.h1, args.candidates, solvent=args.solvent)
    if args.json:
        _print_json(est.to_dict())
    else:
        print(mixture_text(est))
    return 0


# -------------------------------------------------------------------- history/batch
def cmd_history(args: argparse.Namespace) -> int:
    from .store.commands import run_history

    return run_history(args)


def cmd_batch(args: argparse.Namespace) -> int:
    from .store.batch import run_batch_command

    return run_batch_command(args)


# --------------------------------------------------------------------------- parser
def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="specmatch",
        description="Which isomer did the carbocation reaction give? Enumerate the products, "
                    "predict their 1H/13C spectra, match the measured spectra.",
        epilog="An identification is advisory: confirm it with orthogonal data before use.",
    )
    ap.add_argument("--version", action="version", version=f"specmatch {__version__}")
    ap.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("predict", help="predict 1H and 13C spectra of a structure")
    p.add_argument("smiles", nargs="?", help="SMILES of the structure")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--batch", metavar="FILE", help="one SMILES per line")
    p.add_argument("--out", metavar="OUT.jsonl", help="with --batch: where to write results")
    p.add_argument("--frequency", type=float, default=400.0, metavar="MHZ",
                   help="1H frequency for the peak text (default 400)")
    p.add_argument("--solvent", default="CDCl3", help="solvent named in the peak text")
    p.set_defaults(func=cmd_predict)

    p = sub.add_parser("enumerate", help="list the plausible products of a reaction")
    p.add_argument("--substrate", required=True, metavar="SMILES")
    p.add_argument("--reagent", required=True, metavar="TEXT", help="e.g. HBr, H2O/H2SO4, MeOH/H+")
    p.add_argument("--alcohol", metavar="SMILES", help="alcohol for acid-catalysed ether formation")
    p.add_argument("--max-shifts", type=int, default=2, metavar="N", help="1,2-shifts in a row (default 2)")
    p.add_argument("--xtb", action="store_true", help="refine close cation energies with GFN2-xTB (needs tblite)")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_enumerate)

    p = sub.add_parser("peaks", help="read a spectrum file and list its peaks and multiplets")
    p.add_argument("file")
    p.add_argument("--nucleus", choices=["1H", "13C"])
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--dept135", action="store_true", help="the file is a DEPT-135 spectrum")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_peaks)

    p = sub.add_parser("rank", help="rank candidate structures against observed shifts (batch)")
    p.add_argument("--batch", metavar="TASKS.jsonl")
    p.add_argument("--out", metavar="RESULTS.jsonl")
    p.set_defaults(func=cmd_rank)

    p = sub.add_parser("identify", help="the whole job: reaction + spectra -> verdict")
    p.add_argument("--substrate", required=True, metavar="SMILES")
    p.add_argument("--reagent", required=True, metavar="TEXT")
    p.add_argument("--alcohol", metavar="SMILES")
    p.add_argument("--c13", metavar="FILE")
    p.add_argument("--h1", metavar="FILE")
    p.add_argument("--dept135", metavar="FILE")
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--candidates", metavar="FILE", help="extra candidate SMILES, one per line")
    p.add_argument("--mixture", action="store_true", help="also estimate the product ratio from 1H")
    p.add_argument("--no-prior", action="store_true", help="verdict from the spectra alone")
    p.add_argument("--report", metavar="OUT.html", help="write a self-contained HTML report")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_identify)

    p = sub.add_parser("mixture", help="product ratio from a crude 1H spectrum")
    p.add_argument("--h1", required=True, metavar="FILE", help="1H spectrum or CSV peak list with integrals")
    p.add_argument("--candidates", required=True, metavar="FILE", help="candidate SMILES, one per line")
    p.add_argument("--solvent", metavar="NAME")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_mixture)

    p = sub.add_parser("history", help="saved analyses: list, search, show, export, compare")
    p.set_defaults(func=cmd_history)
    p = sub.add_parser("batch", help="run a manifest of samples, resumable")
    p.set_defaults(func=cmd_batch)
    return ap


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    func: Callable[[argparse.Namespace], int] = args.func
    try:
        return func(args)
    except SpecmatchError as exc:
        if args.debug:
            raise
        print(f"specmatch: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("specmatch: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # last line of defence: one clear line, never a traceback
        if args.debug:
            raise
        print(f"specmatch: internal error ({type(exc).__name__}: {exc}); "
              "rerun with --debug and report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    raise SystemExit(main())
