"""``specmatch app``: start the browser app with the project's settings, from anywhere.

Streamlit reads ``.streamlit/config.toml`` only from the folder it is started in, so
started elsewhere it would run with its defaults (a 200 MB upload limit, every
network interface). This command passes the project's settings as flags instead:
every key of the project's ``.streamlit/config.toml`` plus :data:`APP_LIMITS`, and
binds to 127.0.0.1 unless ``--host`` is given.

Sign-in: with an ``[auth]`` section (Streamlit's OpenID Connect login) in a secrets
file (``--secrets FILE``, else ``.streamlit/secrets.toml`` of the folder you start in
or of your home), analysts are named by their sign-in and see their own analyses and
those of their groups.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from ..errors import SpecmatchError

PROJECT_ROOT = Path(__file__).resolve().parents[2]
APP_LIMITS = {
    # uploads above this many MB are refused by the server (app.py checks the same limit)
    "server.maxUploadSize": 25,
    # largest message from the server to the browser, MB (plots of long spectra fit)
    "server.maxMessageSize": 50,
    "server.headless": True,
    "server.fileWatcherType": "none",  # no polling of the source files in production
    "server.runOnSave": False,
    "server.enableXsrfProtection": True,
    "browser.gatherUsageStats": False,
}
"""Settings that must hold wherever the app is started (they win over config.toml)."""


def _flag(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def project_settings(root: Path = PROJECT_ROOT) -> dict[str, object]:
    """Every setting of the project's ``.streamlit/config.toml`` as ``section.key``."""
    import tomllib

    path = root / ".streamlit" / "config.toml"
    if not path.is_file():
        return {}
    with open(path, "rb") as fh:
        cfg = tomllib.load(fh)
    return {f"{section}.{key}": value for section, table in cfg.items()
            if isinstance(table, dict) for key, value in table.items()}


def app_command(host: str = "127.0.0.1", port: int = 8501, *, secrets: str | None = None,
                root: Path = PROJECT_ROOT) -> list[str]:
    """The command that starts the app with the project's settings."""
    app = root / "app.py"
    if not app.is_file():
        raise SpecmatchError(f"the app ({app}) is not in this installation; install specmatch "
                             "from its source folder (pip install -e .) to run the app")
    if not 0 < port < 65536:
        raise SpecmatchError(f"--port {port} is not a port number (1-65535)")
    settings = {**project_settings(root), **APP_LIMITS,
                "server.address": host, "server.port": port}
    if secrets:
        p = Path(secrets).expanduser().resolve()
        if not p.is_file():
            raise SpecmatchError(f"the secrets file '{secrets}' does not exist")
        settings["secrets.files"] = f'["{p}"]'
    cmd = [sys.executable, "-m", "streamlit", "run", str(app)]
    for key, value in settings.items():
        cmd += [f"--{key}", _flag(value)]
    return cmd


def cmd_app(args: argparse.Namespace) -> int:
    cmd = app_command(args.host, args.port, secrets=args.secrets)
    if args.print_command:
        import shlex

        print(shlex.join(cmd))
        return 0
    env = dict(os.environ)
    if args.store:
        env["SPECMATCH_STORE"] = args.store
    if args.host not in ("127.0.0.1", "localhost", "::1"):
        print(f"specmatch: the app listens on {args.host}: anyone who can reach this machine can "
              "use it; configure sign-in before sharing saved analyses", file=sys.stderr)
    print(f"specmatch app on http://{args.host}:{args.port} (Ctrl-C stops it)", file=sys.stderr)
    sys.stderr.flush()
    # replace this process: Ctrl-C and signals reach Streamlit itself, nothing is left behind
    os.execve(cmd[0], cmd, env)
    return 0  # pragma: no cover


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("app", help="start the browser app (on 127.0.0.1 unless --host)")
    p.add_argument("--host", default="127.0.0.1",
                   help="address to listen on (default 127.0.0.1: this machine only)")
    p.add_argument("--port", type=int, default=8501, help="port (default 8501)")
    p.add_argument("--store", metavar="URL", help="analysis store for the app (as for history)")
    p.add_argument("--secrets", metavar="FILE",
                   help="secrets file with the [auth] section for sign-in")
    p.add_argument("--print-command", action="store_true",
                   help="print the Streamlit command with its settings and exit")
    p.set_defaults(func=cmd_app)
