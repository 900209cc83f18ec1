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
                               dept135=args.dept135, total_h=getattr(args, "total_h", None))
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
    saved_id = None
    if args.save:
        from .store import save_run

        saved_id = save_run(result, {"c13": args.c13, "h1": args.h1, "dept135": args.dept135},
                            store=args.store, sample_id=args.sample_id, user=args.user)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(result_text(result))
        if args.report:
            print(f"\nreport written to {args.report}")
        if saved_id:
            print(f"saved as analysis {saved_id} (see 'specmatch history show {saved_id[:12]}')")
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
    p.add_argument("--reagent", required=True, metavar="TEXT",
                   help="as written, case/space-tolerant: HCl, HBr, HI, H2O/H2SO4, H2O/H3PO4, H3O+, "
                        "MeOH/H2SO4, EtOH/H2SO4, ROH/H+ (with --alcohol), 'H2SO4, heat', HBr/ROOR, "
                        "'BH3; H2O2, NaOH', 'Hg(OAc)2, H2O; NaBH4', Br2, Cl2, Br2/H2O, Cl2/H2O")
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
    p.add_argument("--total-h", type=float, metavar="N", dest="total_h",
                   help="scale 1H integrals so the compound's multiplets add up to N H")
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

    p = sub.add_parser("history", help="saved analyses: list, search, show, export, compare")
    p.add_argument("--store", metavar="URL", help="database URL (default $SPECMATCH_STORE, "
                   "else a SQLite file in your data directory)")
    p.set_defaults(func=cmd_history, action=None)
    hs = p.add_subparsers(dest="action", metavar="ACTION")
    store_opt = argparse.ArgumentParser(add_help=False)  # --store also after the action
    store_opt.add_argument("--store", metavar="URL", default=argparse.SUPPRESS)
    store_opt.add_argument("--json", action="store_true", help="print JSON")
    q = hs.add_parser("list", parents=[store_opt], help="latest saved analyses, newest first")
    q.add_argument("--limit", type=int, default=30, metavar="N", help="how many (default 30)")
    q.add_argument("--all-versions", action="store_true", help="list every version, notes included")
    q = hs.add_parser("search", parents=[store_opt], help="find saved analyses")
    q.add_argument("--substrate", metavar="SMILES", help="same molecule, any SMILES spelling")
    q.add_argument("--reagent", metavar="TEXT")
    q.add_argument("--verdict", metavar="TEXT", help="verdict words or the top candidate's SMILES")
    q.add_argument("--since", metavar="DATE", help="run on or after (UTC, YYYY-MM-DD[THH:MM])")
    q.add_argument("--until", metavar="DATE", help="run on or before (UTC)")
    q.add_argument("--sample-id", metavar="ID")
    q.add_argument("--limit", type=int, default=200, metavar="N")
    q.add_argument("--all-versions", action="store_true")
    q = hs.add_parser("show", parents=[store_opt], help="one analysis with its versions and files")
    q.add_argument("id", help="analysis id (or its first characters)")
    q = hs.add_parser("export", parents=[store_opt], help="write an analysis as JSON or HTML")
    q.add_argument("id")
    q.add_argument("--format", choices=["json", "html"], default="json")
    q.add_argument("--out", metavar="FILE", help="file to write (default: standard output)")
    q.add_argument("--include-files", action="store_true", help="JSON: embed the input files (base64)")
    q = hs.add_parser("compare", parents=[store_opt], help="two analyses side by side")
    q.add_argument("id_a")
    q.add_argument("id_b")
    q = hs.add_parser("note", parents=[store_opt], help="add a note or a corrected verdict (new version)")
    q.add_argument("id")
    q.add_argument("text", help="the note; with --verdict, the reason for the correction")
    q.add_argument("--verdict", metavar="TEXT", help="record this corrected verdict")
    q.add_argument("--author", metavar="NAME", help="who writes it (default: the OS user)")
    p = sub.add_parser("batch", help="run a manifest of samples, resumable")
    p.add_argument("manifest", metavar="MANIFEST.csv", help="columns: sample_id, substrate, reagent, "
                   "c13, h1, dept135, solvent, alcohol, candidates (paths relative to the manifest)")
    p.add_argument("--out", metavar="DIR", help="where summary.csv goes (default MANIFEST_results/)")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes (default: CPUs; 0: in this process)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786")
    p.add_argument("--store", metavar="URL", help="database URL for the results (as for history)")
    p.add_argument("--user", metavar="NAME", help="who runs the batch (default: the OS user)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
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
    except BrokenPipeError:
        # output piped into `head` and closed early: not an error of the user's input
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # last line of defence: one clear line, never a traceback
        if args.debug:
            raise
        print(f"specmatch: internal error ({type(exc).__name__}: {exc}); "
              "rerun with --debug and report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    raise SystemExit(main())
