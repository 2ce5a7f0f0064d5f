"""Throwaway engine servers for the engine tests: a PostgreSQL server on loopback, started from
the distribution's packages (``pg_config --bindir``) in a temporary data folder.

initdb refuses to run as root, so as root the server runs as the ``postgres`` system user (which
the distribution's package creates) through ``runuser``. Nothing outside the temporary folder is
touched; the server is stopped when the test session ends.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import pytest

# .ci/run sets this: in CI the engine tests must run, so a missing engine fails them
REQUIRE_ENGINES = os.environ.get("CHURNLIFE_REQUIRE_ENGINES") == "1"


def engine_unavailable(reason: str) -> None:
    """Skip the engine test, or fail it when CHURNLIFE_REQUIRE_ENGINES=1."""
    if REQUIRE_ENGINES:
        pytest.fail(f"CHURNLIFE_REQUIRE_ENGINES=1, but {reason}")
    pytest.skip(reason)


@dataclass
class PostgresServer:
    bindir: Path
    data: Path
    port: int
    user: str
    as_user: list[str]

    @property
    def url(self) -> str:
        return f"postgresql://{self.user}@127.0.0.1:{self.port}/postgres"

    def psql(self, sql: str, database: str = "postgres") -> str:
        out = subprocess.run(
            [*self.as_user, str(self.bindir / "psql"), "-h", "127.0.0.1", "-p", str(self.port),
             "-U", self.user, "-d", database, "-v", "ON_ERROR_STOP=1", "-At", "-c", sql],
            capture_output=True, text=True, check=True,
        )
        return out.stdout

    def stop(self) -> None:
        subprocess.run(
            [*self.as_user, str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "immediate",
             "stop"], capture_output=True,
        )
        shutil.rmtree(self.data.parent, ignore_errors=True)


def postgres_bindir() -> Path | None:
    """The server's folder, or None when no PostgreSQL server is installed."""
    pg_config = shutil.which("pg_config")
    candidates = []
    if pg_config:
        out = subprocess.run([pg_config, "--bindir"], capture_output=True, text=True)
        candidates.append(Path(out.stdout.strip()))
    candidates += sorted(Path("/usr/lib/postgresql").glob("*/bin"), reverse=True)
    for path in candidates:
        if (path / "initdb").is_file() and (path / "pg_ctl").is_file():
            return path
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_postgres() -> PostgresServer:
    bindir = postgres_bindir()
    if bindir is None:
        raise RuntimeError("no PostgreSQL server installed (pg_config --bindir finds no initdb)")
    root = Path(tempfile.mkdtemp(prefix="churnlife-pg-"))
    data = root / "data"
    as_user: list[str] = []
    user = os.environ.get("USER", "postgres")
    if os.geteuid() == 0:
        as_user = ["runuser", "-u", "postgres", "--"]
        user = "postgres"
        os.chmod(root, 0o755)
        shutil.chown(root, "postgres")
    subprocess.run(
        [*as_user, str(bindir / "initdb"), "-D", str(data), "-U", user, "-A", "trust",
         "--no-sync", "-E", "UTF8"], capture_output=True, check=True,
    )
    port = _free_port()
    opts = f"-c listen_addresses=127.0.0.1 -p {port} -c unix_socket_directories={root} -c fsync=off"
    subprocess.run(
        [*as_user, str(bindir / "pg_ctl"), "-D", str(data), "-o", opts, "-l",
         str(root / "server.log"), "-w", "start"], capture_output=True, check=True,
    )
    server = PostgresServer(bindir, data, port, user, as_user)
    for _ in range(50):
        try:
            server.psql("SELECT 1")
            return server
        except subprocess.CalledProcessError:
            time.sleep(0.1)
    server.stop()
    raise RuntimeError("PostgreSQL did not start")


def load_duckdb_tables(url: str, duckdb_path: Path, schema: str = "public") -> list[str]:
    """Copy every table of a DuckDB file into PostgreSQL (``schema``), through Arrow."""
    import adbc_driver_postgresql.dbapi as dbapi
    import duckdb

    con = duckdb.connect(str(duckdb_path), read_only=True)
    names = [r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()]
    with dbapi.connect(url) as pg, pg.cursor() as cur:
        cur.execute(f'CREATE SCHEMA IF NOT EXISTS "{schema}"')
        for name in names:
            table = con.sql(f'SELECT * FROM "{name}"').to_arrow_table()
            cur.adbc_ingest(name, table, mode="replace", db_schema_name=schema)
        pg.commit()
    con.close()
    return names
