"""A private PostgreSQL and a private Redis for tests that stop and restart them (never the shared ones).

PostgreSQL runs as the ``postgres`` user (``runuser``, when we are root; else as
ourselves) from a temporary directory it owns, on its own port and socket directory; Redis keeps nothing on disk
(``--save ""``), so a restart loses every message, as an unpersisted broker does.
"""

from __future__ import annotations

import contextlib
import glob
import os
import shutil
import socket
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["PrivatePostgres", "PrivateRedis", "free_port", "missing_tools"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _postgres_bin() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[3]) if Path(p).parts[3].isdigit() else 0)
    return Path(found[-1]).parent if found else None


def missing_tools() -> list[str]:
    """What this machine lacks to run the private services."""
    missing = []
    if _postgres_bin() is None:
        missing.append("PostgreSQL server binaries in /usr/lib/postgresql/*/bin")
    if shutil.which("redis-server") is None:
        missing.append("redis-server")
    if os.geteuid() == 0 and shutil.which("runuser") is None:
        missing.append("runuser (as root, PostgreSQL runs as the postgres user)")
    return missing


def _wait_port(port: int, timeout: float = 30.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                return
        except OSError:
            time.sleep(0.1)
    raise AssertionError(f"nothing listens on port {port} after {timeout} s")


@dataclass
class PrivatePostgres:
    """``initdb`` in a temporary directory, then ``pg_ctl start/stop`` on a port of its own."""

    port: int = field(default_factory=free_port)
    root: Path = field(default_factory=lambda: Path(tempfile.mkdtemp(prefix="fz-pg-")))

    @property
    def url(self) -> str:
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/postgres"

    def _as_postgres(self, *command: str) -> None:
        prefix = ["runuser", "-u", "postgres", "--"] if os.geteuid() == 0 else []  # PostgreSQL refuses to run as root
        subprocess.run([*prefix, *command], check=True, capture_output=True, timeout=120)

    def init(self) -> None:
        binaries = _postgres_bin()
        assert binaries is not None
        self.bin = binaries
        (self.root / "socket").mkdir()
        if os.geteuid() == 0:
            shutil.chown(self.root, "postgres", "postgres")
            shutil.chown(self.root / "socket", "postgres", "postgres")
        self._as_postgres(str(binaries / "initdb"), "-D", str(self.root / "data"), "-A", "trust", "-U", "postgres", "--no-sync")
        self.start()

    def start(self) -> None:
        options = f"-p {self.port} -k {self.root / 'socket'} -c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=200"
        self._as_postgres(str(self.bin / "pg_ctl"), "-D", str(self.root / "data"), "-o", options, "-l", str(self.root / "log"), "-w", "start")
        _wait_port(self.port)

    def stop(self, mode: str = "fast") -> None:
        self._as_postgres(str(self.bin / "pg_ctl"), "-D", str(self.root / "data"), "-m", mode, "-w", "stop")

    def destroy(self) -> None:
        with contextlib.suppress(subprocess.CalledProcessError, AttributeError):
            self.stop("immediate")
        shutil.rmtree(self.root, ignore_errors=True)


@dataclass
class PrivateRedis:
    """``redis-server`` on a port of its own, keeping nothing on disk."""

    port: int = field(default_factory=free_port)
    process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> None:
        command = ["redis-server", "--port", str(self.port), "--bind", "127.0.0.1", "--save", "", "--appendonly", "no"]
        self.process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _wait_port(self.port)

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.kill()  # as a crash: nothing saved
            self.process.wait(10)
        self.process = None
