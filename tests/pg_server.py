"""A throwaway PostgreSQL cluster with PostGIS for the tests, started from the installed server binaries.

One cluster per test session: ``initdb`` into a temporary folder, ``pg_ctl start`` on a free TCP port of
127.0.0.1 (trust authentication, nothing on disk kept: fsync off), a template database with the PostGIS
extension, and one fresh database per test made from that template (dropped after the test). PostgreSQL
refuses to run as root; when the tests run as root (CI does), the server runs as the ``postgres`` user that
Debian's packages create, and its folder belongs to that user.

Binaries: :envvar:`HYDROATLAS_PG_BIN` (a folder holding ``initdb``, ``pg_ctl`` and ``postgres``), else the
highest ``/usr/lib/postgresql/<version>/bin`` (Debian's layout), else the folder of ``pg_ctl`` on the PATH.
:func:`missing_reason` says why a cluster cannot be started here (the tests then skip, or fail under
``HYDROATLAS_REQUIRE_ALL=1``).
"""

from __future__ import annotations

import itertools
import os
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path

PG_BIN_ENV = "HYDROATLAS_PG_BIN"
SERVER_USER = "postgres"
TEMPLATE = "hydroatlas_template"


def find_bindir() -> Path | None:
    """The folder of the PostgreSQL server binaries, or None."""
    need = ("initdb", "pg_ctl", "postgres")
    candidates = []
    if os.environ.get(PG_BIN_ENV):
        candidates.append(Path(os.environ[PG_BIN_ENV]))
    debian = sorted(Path("/usr/lib/postgresql").glob("*/bin"),
                    key=lambda p: int(p.parent.name) if p.parent.name.isdigit() else 0, reverse=True)
    candidates += debian
    on_path = shutil.which("pg_ctl")
    if on_path:
        candidates.append(Path(on_path).resolve().parent)
    for folder in candidates:
        if all((folder / n).is_file() for n in need):
            return folder
    return None


def _sharedir(bindir: Path) -> Path | None:
    pg_config = bindir / "pg_config"
    exe = str(pg_config) if pg_config.is_file() else shutil.which("pg_config")
    if exe:
        try:
            out = subprocess.run([exe, "--sharedir"], capture_output=True, text=True, timeout=30)
            if out.returncode == 0 and out.stdout.strip():
                return Path(out.stdout.strip())
        except OSError:
            pass
    version = bindir.parent.name  # Debian: /usr/lib/postgresql/15/bin -> /usr/share/postgresql/15
    guess = Path("/usr/share/postgresql") / version
    return guess if guess.is_dir() else None


def _run_as() -> dict:
    """subprocess arguments that run the server as the ``postgres`` user when we are root."""
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        return {"user": SERVER_USER, "group": SERVER_USER, "extra_groups": []}
    return {}


def missing_reason() -> str | None:
    """Why no throwaway PostGIS cluster can be started here, or None when one can."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return "psycopg is not installed (pip install 'psycopg[binary]'; part of the test extra)"
    bindir = find_bindir()
    if bindir is None:
        return (f"PostgreSQL server binaries not found (Debian: apt-get install postgresql; or set {PG_BIN_ENV} to "
                "the folder of initdb and pg_ctl)")
    share = _sharedir(bindir)
    if share is None or not (share / "extension" / "postgis.control").is_file():
        return f"PostGIS is not installed for the PostgreSQL server in {bindir} (Debian: postgresql-NN-postgis-3)"
    if _run_as():
        import pwd

        try:
            pwd.getpwnam(SERVER_USER)
        except KeyError:
            return f"running as root and there is no '{SERVER_USER}' user to run the PostgreSQL server as"
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class PGServer:
    """A running throwaway cluster (see the module text); :meth:`start` makes one, :meth:`stop` removes it."""

    def __init__(self, bindir: Path, root: Path, port: int):
        self.bindir, self.root, self.port = bindir, root, port
        self.data = root / "data"
        self._names = itertools.count(1)

    @property
    def admin_url(self) -> str:
        return self.url("postgres")

    def url(self, database: str) -> str:
        return f"postgresql://{SERVER_USER}@127.0.0.1:{self.port}/{database}"

    @classmethod
    def start(cls) -> "PGServer":
        bindir = find_bindir()
        root = Path(tempfile.mkdtemp(prefix="hydroatlas-pg-"))
        run_as = _run_as()
        if run_as:
            shutil.chown(root, SERVER_USER, SERVER_USER)
        server = cls(bindir, root, _free_port())
        env = {k: v for k, v in os.environ.items() if not k.startswith("PG")}
        env["LC_ALL"] = "C"
        subprocess.run([str(bindir / "initdb"), "-D", str(server.data), "-A", "trust", "-U", SERVER_USER,
                        "--no-sync", "-E", "UTF8", "--locale=C"], check=True, capture_output=True, env=env,
                       cwd=root, **run_as)
        options = (f"-p {server.port} -k {root} -c listen_addresses=127.0.0.1 -c fsync=off "
                   "-c full_page_writes=off -c synchronous_commit=off -c max_connections=60")
        res = subprocess.run([str(bindir / "pg_ctl"), "-D", str(server.data), "-o", options, "-w", "-t", "60",
                              "-l", str(root / "server.log"), "start"], capture_output=True, text=True, env=env,
                             cwd=root, **run_as)
        if res.returncode != 0:
            log = (root / "server.log").read_text() if (root / "server.log").exists() else ""
            shutil.rmtree(root, ignore_errors=True)
            raise RuntimeError(f"pg_ctl start failed: {res.stderr}\n{log}")
        server.execute(f"CREATE DATABASE {TEMPLATE}")
        server.execute("CREATE EXTENSION postgis", database=TEMPLATE)
        return server

    def execute(self, sql: str, *, database: str = "postgres") -> None:
        import psycopg

        with psycopg.connect(self.url(database), autocommit=True) as conn:
            conn.execute(sql)

    def new_database(self) -> str:
        """A fresh database with PostGIS (no store in it yet); returns its URL."""
        name = f"store_{os.getpid()}_{next(self._names)}"
        self.execute(f"CREATE DATABASE {name} TEMPLATE {TEMPLATE}")
        return self.url(name)

    def drop_database(self, url: str) -> None:
        name = url.rsplit("/", 1)[1]
        self.execute(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")

    def stop(self) -> None:
        subprocess.run([str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "immediate", "-w", "stop"],
                       capture_output=True, cwd=self.root, **_run_as())
        shutil.rmtree(self.root, ignore_errors=True)
