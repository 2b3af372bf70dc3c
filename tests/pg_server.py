"""A throwaway PostgreSQL server for the tests and benchmarks.

:class:`PgServer` runs ``initdb`` in a new temporary folder and starts the
server listening on a Unix socket in that folder only (no TCP port), with
the PostgreSQL tools of the newest version under ``/usr/lib/postgresql``
(or the folder named by ``$STRIPSCAN_PG_BIN``).  When run as root, the
tools run as the ``postgres`` OS user (``runuser``), which then owns the
folder: the server refuses to run as root.

The server stops, and its folder goes, on :meth:`PgServer.stop`, at exit of
the Python process, and, through a small watcher process, also when the
process that started it is killed without a chance to clean up.

Clients connect as the superuser ``postgres`` over the socket, trusted
(nothing but this machine's processes can reach a socket in a private
folder).  This module must not depend on pytest: the benchmarks use it too.
"""

from __future__ import annotations

import atexit
import glob
import os
import pwd
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

__all__ = ["PgServer", "find_bin_dir", "unavailable_reason"]

SUPERUSER = "postgres"
# Names only the socket file (.s.PGSQL.5432): nothing listens on TCP.
PORT = 5432

# Run by the watcher: wait for the parent to go, then stop the server and
# remove its folder.  argv: parent pid, folder, then the stop command.
_WATCHER = """
import os, shutil, subprocess, sys, time
parent, folder, command = int(sys.argv[1]), sys.argv[2], sys.argv[3:]
while os.path.isdir(folder):
    try:
        os.kill(parent, 0)
    except ProcessLookupError:
        subprocess.run(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        shutil.rmtree(folder, ignore_errors=True)
        break
    time.sleep(0.5)
"""


def find_bin_dir() -> Path | None:
    """The folder of PostgreSQL's server tools (initdb, pg_ctl); None when not installed."""
    named = os.environ.get("STRIPSCAN_PG_BIN")
    if named:
        return Path(named) if (Path(named) / "initdb").exists() else None
    found = glob.glob("/usr/lib/postgresql/*/bin/initdb")
    if found:
        def version(path: str) -> tuple[int, ...]:
            text = Path(path).parents[1].name
            return tuple(int(part) for part in text.split(".") if part.isdigit())
        return Path(max(found, key=version)).parent
    on_path = shutil.which("initdb")
    return Path(on_path).parent if on_path else None


def unavailable_reason() -> str | None:
    """Why no throwaway server can run here (tools or driver missing); None when it can."""
    if find_bin_dir() is None:
        return "PostgreSQL's server tools (initdb) are not installed"
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return 'the PostgreSQL driver is not installed (pip install "psycopg[binary]")'
    if os.geteuid() == 0:
        try:
            pwd.getpwnam(SUPERUSER)
        except KeyError:
            return "running as root, but there is no 'postgres' OS user to run the server as"
    return None


class PgServer:
    """One PostgreSQL server in a temporary folder, on a Unix socket only.

    Parameters
    ----------
    durable : bool
        Keep PostgreSQL's usual crash safety (fsync on commit).  Off by
        default: a test's data need not survive a power cut, and tests run
        faster without flushing each commit; a commit still survives the
        server being killed.  Benchmarks that compare with SQLite pass True.
    settings : dict, optional
        More ``postgresql.conf`` settings.
    """

    def __init__(self, *, durable: bool = False, settings: dict[str, Any] | None = None) -> None:
        bin_dir = find_bin_dir()
        if bin_dir is None:
            raise RuntimeError("PostgreSQL's server tools (initdb) are not installed")
        self.bin_dir = bin_dir
        self.durable = durable
        self.settings = dict(settings or {})
        self.folder: Path | None = None
        self._watcher: subprocess.Popen[bytes] | None = None
        self._running = False

    # ------------------------------------------------------------ paths

    @property
    def socket_dir(self) -> Path:
        assert self.folder is not None, "the server has not been started"
        return self.folder

    @property
    def data_dir(self) -> Path:
        return self.socket_dir / "data"

    @property
    def log_file(self) -> Path:
        return self.socket_dir / "server.log"

    # ---------------------------------------------------------- running

    def _as_server_user(self, tool: str, *args: str) -> list[str]:
        command = [str(self.bin_dir / tool), *args]
        return ["runuser", "-u", SUPERUSER, "--", *command] if os.geteuid() == 0 else command

    def _run(self, tool: str, *args: str) -> None:
        done = subprocess.run(self._as_server_user(tool, *args), capture_output=True, text=True)
        if done.returncode != 0:
            log = self.log_file.read_text(errors="replace")[-2000:] if self.log_file.exists() else ""
            raise RuntimeError(f"{tool} {' '.join(args[:2])} failed ({done.returncode}): "
                               f"{done.stderr.strip() or done.stdout.strip()}\n{log}")

    def _stop_command(self, mode: str) -> list[str]:
        return self._as_server_user("pg_ctl", "stop", "-D", str(self.data_dir), "-m", mode, "-w")

    def start(self) -> "PgServer":
        """Create the folder, initdb, start the server and wait until it accepts connections."""
        if self._running:
            return self
        # Directly under the system's temporary folder: the server user must be
        # able to reach it, and pytest's own folders are private to root.
        self.folder = Path(tempfile.mkdtemp(prefix="stripscan-pg-", dir=tempfile.gettempdir()))
        if os.geteuid() == 0:
            user = pwd.getpwnam(SUPERUSER)
            os.chown(self.folder, user.pw_uid, user.pw_gid)
        atexit.register(self.stop)
        self._run("initdb", "-D", str(self.data_dir), "-U", SUPERUSER, "--auth=trust",
                  "--encoding=UTF8", "--locale=C", "--no-instructions")
        settings = {
            "listen_addresses": "''",
            "unix_socket_directories": f"'{self.socket_dir}'",
            "port": str(PORT),
            "max_connections": "60",
            "logging_collector": "off",
            # Not durable: nothing is flushed to disk, but every commit is in the server's log (in the
            # operating system's cache) before it returns, so a server killed half way (the fault tests)
            # still keeps what it committed; only a power cut could lose it.
            **({} if self.durable else {"fsync": "off", "full_page_writes": "off"}),
            **{key: str(value) for key, value in self.settings.items()},
        }
        conf = "".join(f"{key} = {value}\n" for key, value in settings.items())
        with open(self.data_dir / "postgresql.conf", "a", encoding="utf-8") as handle:
            handle.write("\n# stripscan test server\n" + conf)
        self._run("pg_ctl", "start", "-D", str(self.data_dir), "-l", str(self.log_file), "-w", "-t", "60")
        self._running = True
        self._watcher = subprocess.Popen(
            [sys.executable, "-c", _WATCHER, str(os.getpid()), str(self.folder), *self._stop_command("immediate")],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            start_new_session=True)
        return self

    def stop(self) -> None:
        """Stop the server (fast shutdown) and remove its folder; calling it again does nothing."""
        if self.folder is None:
            return
        folder, self._running = self.folder, False
        try:
            if (self.data_dir / "postmaster.pid").exists():
                subprocess.run(self._stop_command("fast"), capture_output=True)
        finally:
            shutil.rmtree(folder, ignore_errors=True)
            self.folder = None
            if self._watcher is not None:
                # The folder is gone, so the watcher ends by itself within half a second.
                self._watcher.wait(timeout=10)
                self._watcher = None
            atexit.unregister(self.stop)

    def kill(self) -> None:
        """Stop the server at once, as a crash would (``pg_ctl stop -m immediate``); the folder stays."""
        subprocess.run(self._stop_command("immediate"), capture_output=True)
        self._running = False

    def restart(self) -> None:
        """Start the server again after :meth:`kill`, on the same data."""
        self._run("pg_ctl", "start", "-D", str(self.data_dir), "-l", str(self.log_file), "-w", "-t", "60")
        self._running = True

    @property
    def running(self) -> bool:
        return self._running

    def __enter__(self) -> "PgServer":
        return self.start()

    def __exit__(self, *exc_info: object) -> None:
        self.stop()

    # ------------------------------------------------------- connecting

    def conninfo(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        """A libpq connection string for a database on this server."""
        return f"host={self.socket_dir} port={PORT} dbname={dbname} user={user}"

    def url(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        """The same as a ``postgresql://`` URL (socket folder given as the host parameter)."""
        from urllib.parse import quote
        return f"postgresql://{quote(user)}@/{quote(dbname)}?host={quote(str(self.socket_dir))}&port={PORT}"

    def connect(self, dbname: str = "postgres", user: str = SUPERUSER, **kwargs: Any) -> Any:
        """A psycopg connection (autocommit unless told otherwise)."""
        import psycopg
        kwargs.setdefault("autocommit", True)
        return psycopg.connect(self.conninfo(dbname, user), **kwargs)

    def admin(self, statement: str, params: Any = None) -> list[tuple[Any, ...]]:
        """Run one statement as the superuser in the ``postgres`` database; return its rows."""
        with self.connect() as conn:
            cursor = conn.execute(statement, params)
            return cursor.fetchall() if cursor.description else []

    def create_database(self, name: str, *, template: str | None = None) -> str:
        """Create a database (copied from ``template`` when given); return its name."""
        from psycopg import sql
        statement = sql.SQL("CREATE DATABASE {}").format(sql.Identifier(name))
        if template is not None:
            statement += sql.SQL(" TEMPLATE {}").format(sql.Identifier(template))
        with self.connect() as conn:
            conn.execute(statement)
        return name

    def drop_database(self, name: str) -> None:
        """Drop a database, closing its connections, and every role named ``<name>_...``."""
        from psycopg import sql
        with self.connect() as conn:
            conn.execute(sql.SQL("DROP DATABASE IF EXISTS {} WITH (FORCE)").format(sql.Identifier(name)))
            roles = [row[0] for row in conn.execute(
                "SELECT rolname FROM pg_roles WHERE starts_with(rolname, %s) ORDER BY rolname DESC",
                (name + "_",))]
            for role in roles:
                conn.execute(sql.SQL("DROP ROLE {}").format(sql.Identifier(role)))

    def databases(self) -> list[str]:
        """Names of the databases on the server, templates left out."""
        return [row[0] for row in self.admin("SELECT datname FROM pg_database WHERE NOT datistemplate "
                                             "ORDER BY datname")]
