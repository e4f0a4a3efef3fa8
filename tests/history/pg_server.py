"""A throw-away PostgreSQL server for the history tests, started in a temporary folder.

Debian's server binaries (/usr/lib/postgresql/*/bin, or initdb on the PATH). initdb refuses to
run as root, so as root the server runs as the unprivileged system user `nightbench-pg` (created
here when missing, as .ci/run does). It listens only on a unix socket in its own folder; fsync
is off (a test server: speed over durability).
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

PG_USER = "nightbench-pg"


def find_bindir() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                   key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    if found:
        return Path(found[-1]).parent
    initdb = shutil.which("initdb")
    return Path(initdb).resolve().parent if initdb else None


@dataclass
class PgServer:
    bindir: Path
    folder: Path
    user: str

    @property
    def socket_dir(self) -> Path:
        return self.folder

    def url(self, database: str) -> str:
        return (f"postgresql+psycopg://{self.user}@/{database}?host={self.socket_dir}")

    def _run(self, *argv: str) -> None:
        cmd = [str(self.bindir / argv[0]), *argv[1:]]
        if os.geteuid() == 0:
            cmd = ["runuser", "-u", self.user, "--", *cmd]
        subprocess.run(cmd, check=True, capture_output=True, timeout=60)

    def create_database(self, name: str) -> str:
        self._run("createdb", "-h", str(self.socket_dir), "-U", self.user, name)
        return self.url(name)

    def stop(self) -> None:
        try:
            self._run("pg_ctl", "-D", str(self.folder / "data"), "-m", "immediate", "-w", "stop")
        finally:
            shutil.rmtree(self.folder, ignore_errors=True)


def _ensure_user() -> str:
    if os.geteuid() != 0:
        return pwd.getpwuid(os.geteuid()).pw_name
    try:
        pwd.getpwnam(PG_USER)
    except KeyError:
        subprocess.run(["useradd", "--system", "--no-create-home", PG_USER], check=True,
                       capture_output=True)
    return PG_USER


def start_server(bindir: Path) -> PgServer:
    """initdb + pg_ctl start in a fresh folder under /tmp (readable by the server's user)."""
    user = _ensure_user()
    folder = Path(tempfile.mkdtemp(prefix="nightbench-pg-"))
    if os.geteuid() == 0:
        shutil.chown(folder, user)
    server = PgServer(bindir, folder, user)
    try:
        server._run("initdb", "-D", str(folder / "data"), "-U", user, "--auth=trust",
                    "-E", "UTF8", "--no-sync", "--no-instructions")
        options = (f"-k {folder} -c listen_addresses='' -c fsync=off -c synchronous_commit=off "
                   "-c full_page_writes=off -c max_connections=60")
        server._run("pg_ctl", "-D", str(folder / "data"), "-o", options, "-l",
                    str(folder / "server.log"), "-w", "-t", "60", "start")
    except subprocess.CalledProcessError as exc:
        log = (folder / "server.log").read_text() if (folder / "server.log").exists() else ""
        shutil.rmtree(folder, ignore_errors=True)
        raise RuntimeError(f"PostgreSQL did not start: {exc.stderr.decode()[-400:]} {log[-400:]}")
    return server
