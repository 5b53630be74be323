"""Shared fixtures: a private PostgreSQL cluster for the multi-worker storage test."""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import pytest


def _pg_bin(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    cands = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"))
    return cands[-1] if cands else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _as_postgres(cmd: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return cmd
    runuser = shutil.which("runuser")
    if runuser:
        return [runuser, "-u", "postgres", "--", *cmd]
    return ["su", "postgres", "-c", " ".join(cmd)]


@pytest.fixture(scope="session")
def postgres_url() -> Iterator[str]:
    """URL of a throw-away cluster on 127.0.0.1 (trust auth); skipped when no server
    binaries, no psycopg2 driver or no `postgres` user to run them."""
    initdb, pg_ctl = _pg_bin("initdb"), _pg_bin("pg_ctl")
    if not initdb or not pg_ctl:
        pytest.skip("PostgreSQL server binaries (initdb, pg_ctl) not found")
    try:
        import psycopg2  # noqa: F401
    except ImportError:
        pytest.skip("psycopg2 (PostgreSQL driver for SQLAlchemy) not installed")
    if os.geteuid() == 0:
        try:
            import pwd

            pw = pwd.getpwnam("postgres")
        except KeyError:
            pytest.skip("running as root and no `postgres` user to run the server")
    tmp = Path(tempfile.mkdtemp(prefix="pgtest-"))
    data = tmp / "data"
    data.mkdir()
    if os.geteuid() == 0:
        os.chown(tmp, pw.pw_uid, pw.pw_gid)
        os.chown(data, pw.pw_uid, pw.pw_gid)
    port = _free_port()
    try:
        subprocess.run(
            _as_postgres([initdb, "-D", str(data), "-A", "trust", "-U", "postgres"]),
            check=True,
            capture_output=True,
            timeout=120,
        )
        subprocess.run(
            _as_postgres(
                [
                    pg_ctl,
                    "-D",
                    str(data),
                    "-l",
                    str(tmp / "log"),
                    "-w",
                    "-o",
                    f"-p {port} -k {tmp} -c listen_addresses=127.0.0.1",
                    "start",
                ]
            ),
            check=True,
            capture_output=True,
            timeout=120,
        )
    except (subprocess.CalledProcessError, subprocess.TimeoutExpired) as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        pytest.skip(f"PostgreSQL could not be started: {exc}")
    time.sleep(0.2)
    try:
        yield f"postgresql://postgres@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run(
            _as_postgres([pg_ctl, "-D", str(data), "-m", "fast", "stop"]),
            capture_output=True,
            timeout=60,
        )
        shutil.rmtree(tmp, ignore_errors=True)
