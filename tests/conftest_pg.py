"""A throwaway PostgreSQL server for the storage tests (imported by test files).

Starts ``initdb`` + ``pg_ctl`` from the installed server binaries in a temporary folder,
on a free localhost port with the unix socket in that folder, ``fsync=off`` for speed, and
trust authentication (the server listens on 127.0.0.1 only and lives for the test session).
PostgreSQL refuses to run as root, so under root the binaries run as the ``postgres`` OS
user through ``runuser``.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator


def find_bindir() -> Path | None:
    """Folder with initdb and pg_ctl (newest installed version), or None."""
    cands = sorted(glob.glob("/usr/lib/postgresql/*/bin"), key=lambda p: int(Path(p).parent.name)
                   if Path(p).parent.name.isdigit() else 0, reverse=True)
    on_path = shutil.which("pg_ctl")
    if on_path:
        cands.append(str(Path(on_path).parent))
    for c in cands:
        if (Path(c) / "initdb").exists() and (Path(c) / "pg_ctl").exists():
            return Path(c)
    return None


def unavailable_reason() -> str | None:
    """Why no server can be started here (None when one can)."""
    if find_bindir() is None:
        return "PostgreSQL server binaries (initdb, pg_ctl) not installed"
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            return "running as root and there is no 'postgres' OS user to run the server"
        if shutil.which("runuser") is None:
            return "running as root and runuser is missing"
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextmanager
def postgres_server() -> Iterator[str]:
    """Start a server, yield its ``postgresql+psycopg://`` URL, stop and remove it after."""
    bindir = find_bindir()
    assert bindir is not None
    root = os.geteuid() == 0
    prefix = ["runuser", "-u", "postgres", "--"] if root else []
    tmp = Path(tempfile.mkdtemp(prefix="dd-pg-", dir="/tmp"))
    if root:
        shutil.chown(tmp, "postgres", "postgres")
    data = tmp / "data"
    port = _free_port()
    started = False
    try:
        subprocess.run(prefix + [str(bindir / "initdb"), "-D", str(data), "-A", "trust", "-U", "postgres",
                                 "-E", "UTF8", "--no-sync"],
                       check=True, capture_output=True, timeout=120)
        opts = (f"-p {port} -k {tmp} -c listen_addresses=127.0.0.1 -c fsync=off "
                "-c synchronous_commit=off -c full_page_writes=off")
        subprocess.run(prefix + [str(bindir / "pg_ctl"), "-D", str(data), "-l", str(tmp / "server.log"),
                                 "-w", "-t", "60", "-o", opts, "start"],
                       check=True, capture_output=True, timeout=90)
        started = True
        yield f"postgresql+psycopg://postgres@127.0.0.1:{port}/postgres"
    finally:
        if started:
            subprocess.run(prefix + [str(bindir / "pg_ctl"), "-D", str(data), "-m", "immediate", "-w", "stop"],
                           capture_output=True, timeout=60)
        shutil.rmtree(tmp, ignore_errors=True)
