"""``specmatch app``: the browser app starts with the project's settings from any folder,
bound to 127.0.0.1 unless --host is given (one real start on loopback)."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from specmatch.cli import main
from specmatch.cli.app import APP_LIMITS, app_command, project_settings

ROOT = Path(__file__).resolve().parents[1]


def _flags(cmd: list[str]) -> dict[str, str]:
    i = cmd.index("run") + 2
    return dict(zip(cmd[i::2], cmd[i + 1::2]))


def test_command_carries_the_limits_and_binds_to_loopback(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)  # started elsewhere than the repository
    flags = _flags(app_command())
    assert flags["--server.address"] == "127.0.0.1"
    assert flags["--server.maxUploadSize"] == "25"
    assert flags["--browser.gatherUsageStats"] == "false"
    # every setting of the project's config file is passed, the limits win
    for key, value in project_settings().items():
        assert f"--{key}" in flags
    assert project_settings()["server.maxUploadSize"] == APP_LIMITS["server.maxUploadSize"]
    assert _flags(app_command("0.0.0.0", 9000))["--server.address"] == "0.0.0.0"
    assert main(["app", "--print-command", "--port", "8600"]) == 0
    assert "--server.port 8600" in capsys.readouterr().out
    assert main(["app", "--port", "70000"]) == 2
    assert "not a port number" in capsys.readouterr().err
    assert main(["app", "--secrets", str(tmp_path / "none.toml")]) == 2


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _listening(port: int) -> set[str]:
    """Local addresses listening on ``port`` (from /proc/net/tcp, IPv4)."""
    out = set()
    for line in Path("/proc/net/tcp").read_text().splitlines()[1:]:
        local, state = line.split()[1], line.split()[3]
        addr, p = local.split(":")
        if int(p, 16) == port and state == "0A":
            out.add(socket.inet_ntoa(bytes.fromhex(addr)[::-1]))
    return out


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/net/tcp").exists(), reason="needs Linux /proc")
def test_app_starts_on_loopback_from_another_folder(tmp_path):
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(ROOT), HOME=str(tmp_path))
    proc = subprocess.Popen([sys.executable, "-m", "specmatch", "app", "--port", str(port),
                             "--store", f"sqlite:///{tmp_path / 'a.sqlite'}"], cwd=tmp_path,
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 90
        body = b""
        while time.monotonic() < deadline and proc.poll() is None:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as r:
                    body = r.read()
                    break
            except OSError:
                time.sleep(0.5)
        assert body == b"ok", proc.stderr.read().decode()[-2000:] if proc.poll() is not None else ""
        assert _listening(port) == {"127.0.0.1"}
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        proc.stderr.close()
