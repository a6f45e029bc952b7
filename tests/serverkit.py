"""Throw-away servers for the warehouse tests: a PostgreSQL cluster and a local Spark session.

PostgreSQL: `initdb` in a temporary folder, the server listening on 127.0.0.1
only, on a free port, its Unix socket in the same folder, trust
authentication for the loopback and the socket (a password user is added by
the test that needs one); stopped and removed at the end. initdb refuses to
run as root, so under root the server runs as an unprivileged user
(`postgres` when it exists, else `nobody`).

Spark: one `local[1]` session for the whole test run, bound to 127.0.0.1,
without its web UI (start-up takes seconds: share it).

When a server cannot start, `unavailable(reason)` skips the test, except under
CI (`CI=true`), where it fails: CI cannot pass without them.
"""

from __future__ import annotations

import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import pytest


def unavailable(reason: str):
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"{reason} (CI=true: the warehouse tests need it; .ci/run installs it)", pytrace=False)
    pytest.skip(reason)


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _tool(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    for base in sorted(Path("/usr/lib/postgresql").glob("*/bin"), reverse=True):  # Debian's layout
        if (base / name).exists():
            return str(base / name)
    return None


@dataclass
class Postgres:
    """A running throw-away cluster: connect as `user` to `dbname` on 127.0.0.1:`port`."""

    folder: Path
    port: int
    user: str = "modeldiff"
    dbname: str = "postgres"
    run_as: str | None = None
    pg_ctl: str = "pg_ctl"

    def url(self, dbname: str | None = None, user: str | None = None, password: str | None = None) -> str:
        """A URL over TCP on the loopback (a password user: `reader`, `READER_PASSWORD`, set by `add_reader`)."""
        who = user or READER
        if password is not None:
            who += f":{password}"
        return f"postgresql://{who}@127.0.0.1:{self.port}/{dbname or self.dbname}"

    def socket_url(self, dbname: str | None = None) -> str:
        """The administrator's URL, over the Unix socket in the server's folder (trusted)."""
        return f"postgresql://{self.user}@/{dbname or self.dbname}?host={self.folder}&port={self.port}"

    def connect(self, dbname: str | None = None, autocommit: bool = True):
        import psycopg

        return psycopg.connect(self.socket_url(dbname), autocommit=autocommit)

    def reader_url(self, dbname: str | None = None) -> str:
        return self.url(dbname, READER, READER_PASSWORD)

    def stop(self) -> None:
        _run([self.pg_ctl, "-D", str(self.folder / "data"), "-m", "immediate", "stop"], self.run_as, check=False)
        shutil.rmtree(self.folder, ignore_errors=True)


READER = "reader"
READER_PASSWORD = "Wh-s3cret-9f2c"  # the read-only account the tests connect as over TCP (never printed)


def grant_reader(server: Postgres, dbname: str) -> None:
    """Let `reader` read every table of `dbname`'s public schema, and nothing else."""
    with server.connect(dbname) as admin:
        admin.execute(f'GRANT CONNECT ON DATABASE "{dbname}" TO {READER}')
        admin.execute(f"GRANT USAGE ON SCHEMA public TO {READER}")
        admin.execute(f"GRANT SELECT ON ALL TABLES IN SCHEMA public TO {READER}")
        admin.execute(f"REVOKE CREATE ON SCHEMA public FROM PUBLIC")


def _run(args: list[str], user: str | None, check: bool = True) -> subprocess.CompletedProcess:
    return subprocess.run(args, user=user, check=check, capture_output=True, text=True, timeout=120,
                          cwd="/")


def start_postgres() -> Postgres:
    """Start a cluster; raises RuntimeError with the reason when it cannot."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        raise RuntimeError("psycopg is not installed (pip install -e '.[test]')") from None
    initdb, pg_ctl = _tool("initdb"), _tool("pg_ctl")
    if initdb is None or pg_ctl is None:
        raise RuntimeError("PostgreSQL's initdb and pg_ctl are not installed (Debian: apt-get install postgresql)")
    run_as = None
    if os.geteuid() == 0:
        for name in ("postgres", "nobody"):
            try:
                pwd.getpwnam(name)
            except KeyError:
                continue
            run_as = name
            break
        if run_as is None:
            raise RuntimeError("running as root and no unprivileged user to run PostgreSQL as")
    folder = Path(tempfile.mkdtemp(prefix="modeldiff-pg-"))
    if run_as is not None:
        os.chown(folder, pwd.getpwnam(run_as).pw_uid, pwd.getpwnam(run_as).pw_gid)
    port = free_port()
    server = Postgres(folder, port, run_as=run_as, pg_ctl=pg_ctl)
    try:
        _run([initdb, "-D", str(folder / "data"), "-U", server.user, "--auth-local=trust",
              "--auth-host=scram-sha-256", "-E", "UTF8", "--locale=C", "--no-sync"], run_as)
        options = (f"-c listen_addresses=127.0.0.1 -p {port} -k {folder} -c fsync=off -c full_page_writes=off "
                   "-c synchronous_commit=off -c shared_buffers=32MB -c max_connections=20")
        _run([pg_ctl, "-D", str(folder / "data"), "-o", options, "-l", str(folder / "log"), "-w", "-t", "60",
              "start"], run_as)
    except (subprocess.SubprocessError, OSError) as error:
        log = ""
        if (folder / "log").exists():
            log = (folder / "log").read_text(errors="replace")[-300:]
        detail = getattr(error, "stderr", "") or ""
        shutil.rmtree(folder, ignore_errors=True)
        raise RuntimeError(f"PostgreSQL did not start: {error} {detail.strip()[-300:]} {log}") from None
    try:
        with server.connect() as admin:
            admin.execute(f"CREATE ROLE {READER} LOGIN PASSWORD '{READER_PASSWORD}'")
    except Exception as error:  # noqa: BLE001
        server.stop()
        raise RuntimeError(f"PostgreSQL started but cannot be reached on its socket: {error}") from None
    return server


_SPARK: list = []


def spark_session():
    """The test run's one local Spark session (started on first use); raises RuntimeError when it cannot start."""
    if _SPARK:
        return _SPARK[0]
    try:
        import pyspark  # noqa: F401
    except ImportError:
        raise RuntimeError("pyspark is not installed (pip install -e '.[test]')") from None
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        raise RuntimeError("no Java runtime (Debian: apt-get install default-jre-headless)")
    from modeldiff.backends import local_session

    try:
        session = local_session("local[1]")
        session.sparkContext.setLogLevel("ERROR")
    except Exception as error:  # noqa: BLE001 - Java gateway errors of any kind
        raise RuntimeError(f"Spark did not start: {str(error).splitlines()[0] if str(error) else error!r}") from None
    _SPARK.append(session)
    return session


def stop_spark() -> None:
    while _SPARK:
        _SPARK.pop().stop()
