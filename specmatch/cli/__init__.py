"""The ``specmatch`` command: one module per subcommand group, each a thin handler.

Every handler gathers input, calls the library and lays out its result; no
chemistry lives here. User errors (``SpecmatchError``, unreadable files) print one
line ``specmatch: <message>`` on stderr and exit 2; ``--debug`` shows tracebacks.

Each handler imports its stage lazily so ``specmatch --help`` stays fast. To add a
command, write a module with ``register(sub)`` and list it in ``_COMMAND_MODULES``.
"""

from __future__ import annotations

import argparse
import sys
from importlib import import_module
from typing import Callable, Sequence

from .. import __version__
from ..errors import SpecmatchError

EXIT_USER_ERROR = 2

#: modules with a ``register(sub)`` function, in the order ``--help`` lists them
_COMMAND_MODULES = ("predict", "simulate", "enumerate", "peaks", "rank", "identify", "history", "app")


#: commands whose module registers that one command alone: run as the first word, only
#: that module is imported to parse the line (the batch commands' start-up)
_ALONE = ("predict", "rank")


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The ``specmatch`` parser; ``only``: register that command's module alone."""
    ap = argparse.ArgumentParser(
        prog="specmatch",
        description="Which isomer did the carbocation reaction give? Enumerate the products, "
                    "predict their 1H/13C spectra, match the measured spectra.",
        epilog="An identification is advisory: confirm it with orthogonal data before use.",
    )
    ap.add_argument("--version", action="version", version=f"specmatch {__version__}")
    ap.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")
    for name in _COMMAND_MODULES if only is None else (only,):
        import_module(f"{__name__}.{name}").register(sub)
    return ap


def console_main() -> None:
    """The ``specmatch`` command (console script and ``python -m specmatch``): :func:`main`,
    then exit with its status.

    A batch command that has written and closed its output asks to end without the
    interpreter's teardown (``_common._fast_exit_after``): streams are flushed and the
    ``atexit`` functions run, then the process exits at once. ``main()`` itself always
    returns, so callers in Python (tests) are unaffected.
    """
    code = main()
    from . import _common

    if _common.FAST_EXIT:
        import atexit
        import os

        try:
            sys.stdout.flush()
            sys.stderr.flush()
        except (OSError, ValueError):  # a closed pipe (output into `head`): nothing more to say
            pass
        atexit._run_exitfuncs()
        os._exit(code)
    raise SystemExit(code)


def main(argv: Sequence[str] | None = None) -> int:
    words = list(sys.argv[1:] if argv is None else argv)
    first = next((w for w in words if not w.startswith("-")), None)
    parser = build_parser(first if first in _ALONE else None)
    args = parser.parse_args(words)
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
