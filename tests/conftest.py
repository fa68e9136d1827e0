"""Shared fixtures: study files for the search tests and a throwaway PostgreSQL server."""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

#: A symmetric In0.53Ga0.47As/AlAs double-barrier stack on InP (invented test
#: scenario, not a measured device); ranges are filled in by the tests.
#: (the machinery tests run the fast model, set explicitly: the default is self-consistent
#: with the scattering-assisted channel)
STACK_HEAD = """\
temperature_k = 300
substrate = "InP"

[model]
electrostatics = "linear"
transport = "coherent"

[[layers]]
name = "emitter"
material = "In0.53Ga0.47As"
doping_cm3 = 2e18

[[layers]]
name = "spacer1"
material = "In0.53Ga0.47As"
thickness_nm = 2.0
"""

STACK_TAIL = """\
[[layers]]
name = "barrier2"
same_as = "barrier1"

[[layers]]
name = "spacer2"
material = "In0.53Ga0.47As"
thickness_nm = 5.0

[[layers]]
name = "collector"
material = "In0.53Ga0.47As"
doping_cm3 = 2e18
"""


def study_text(
    *,
    barrier: str = "{min = 4, max = 7}",
    well: str = "{min = 10, max = 18}",
    well_x: str = "0.53",
    extra: str = "",
    targets: str = "peak_current_density_a_cm2 = {min = 1e5, max = 4e5}\npvcr = {min = 3}\n",
) -> str:
    """A study file: the stack above with ranges on the barriers and the well."""
    return (
        STACK_HEAD
        + f"""
[[layers]]
name = "barrier1"
material = "AlAs"
thickness_ml = {barrier}

[[layers]]
name = "well"
material = "InGaAs"
x = {well_x}
thickness_ml = {well}

"""
        + STACK_TAIL
        + "\n[targets]\n"
        + targets
        + "\n"
        + extra
    )


@pytest.fixture
def write_study(tmp_path: Path):
    """``write_study(text, name="study")`` -> path of a study file in the test's tmp folder."""

    def write(text: str, name: str = "study") -> Path:
        path = tmp_path / f"{name}.toml"
        path.write_text(text, encoding="utf-8")
        return path

    return write


# --------------------------------------------------------------------------- PostgreSQL


def _pg_bin_dir() -> Path | None:
    """Folder holding initdb and pg_ctl: PATH first, then Debian's /usr/lib/postgresql/*/bin."""
    found = shutil.which("initdb"), shutil.which("pg_ctl")
    if all(found):
        return Path(os.path.realpath(found[0])).parent
    for d in sorted(glob.glob("/usr/lib/postgresql/*/bin"), reverse=True):
        if os.access(Path(d) / "initdb", os.X_OK) and os.access(Path(d) / "pg_ctl", os.X_OK):
            return Path(d)
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _server_user() -> str | None:
    """The unprivileged account to run the server as when we are root (None: run as ourselves).

    PostgreSQL refuses to run as root. Uses the ``postgres`` account of the
    system package, else ``nobody``, else creates a system user ``wellwright_pg``.
    """
    if os.geteuid() != 0:
        return None
    for name in ("postgres", "nobody"):
        try:
            pwd.getpwnam(name)
            return name
        except KeyError:
            continue
    subprocess.run(["useradd", "-r", "-M", "-s", "/usr/sbin/nologin", "wellwright_pg"], check=True)
    return "wellwright_pg"


def _as_user(user: str | None, argv: list[str]) -> list[str]:
    if user is None:
        return argv
    if shutil.which("runuser"):
        return ["runuser", "-u", user, "--", *argv]
    import shlex

    return ["su", "-s", "/bin/sh", user, "-c", shlex.join(argv)]


@pytest.fixture(scope="session")
def postgres_url() -> Iterator[str]:
    """SQLAlchemy URL of a throwaway PostgreSQL server on a free loopback port.

    The data folder is a fresh temporary folder owned by the server's user,
    authentication is ``trust`` on loopback only, and the server is stopped
    and its folder removed at the end of the session.
    """
    try:
        import psycopg2
    except ImportError:
        pytest.skip("psycopg2 is not installed (pip install psycopg2-binary)")
    bindir = _pg_bin_dir()
    if bindir is None:
        pytest.skip(
            "no PostgreSQL binaries (initdb, pg_ctl) on PATH or in /usr/lib/postgresql/*/bin"
        )
    user = _server_user()
    root = Path(tempfile.mkdtemp(prefix="wellwright-pg-"))
    data, sock, log = root / "data", root / "sock", root / "server.log"
    sock.mkdir()
    if user is not None:
        info = pwd.getpwnam(user)
        for p in (root, sock):
            os.chown(p, info.pw_uid, info.pw_gid)
    run = {"cwd": root, "capture_output": True, "text": True}
    db_user = "wellwright"
    init = subprocess.run(
        _as_user(
            user,
            [
                str(bindir / "initdb"),
                "-D",
                str(data),
                "-A",
                "trust",
                "-U",
                db_user,
                "-E",
                "UTF8",
                "--locale=C",
                "--no-sync",
            ],
        ),
        **run,
    )
    if init.returncode != 0:
        shutil.rmtree(root, ignore_errors=True)
        pytest.fail(f"initdb failed: {init.stderr.strip()[-500:]}")
    port = _free_port()
    options = (
        f"-c listen_addresses=127.0.0.1 -p {port} -k {sock} -c fsync=off -c max_connections=50"
    )
    start = subprocess.run(
        _as_user(
            user,
            [
                str(bindir / "pg_ctl"),
                "-D",
                str(data),
                "-o",
                options,
                "-l",
                str(log),
                "-w",
                "-t",
                "60",
                "start",
            ],
        ),
        **run,
    )
    if start.returncode != 0:
        text = log.read_text() if log.exists() else start.stderr
        shutil.rmtree(root, ignore_errors=True)
        pytest.fail(f"pg_ctl start failed: {text.strip()[-800:]}")
    try:
        deadline = time.time() + 30
        while True:
            try:
                con = psycopg2.connect(host="127.0.0.1", port=port, user=db_user, dbname="postgres")
                break
            except psycopg2.OperationalError:
                if time.time() > deadline:
                    raise
                time.sleep(0.2)
        con.autocommit = True
        with con.cursor() as cur:
            cur.execute("CREATE DATABASE wellwright_test")
        con.close()
        yield f"postgresql+psycopg2://{db_user}@127.0.0.1:{port}/wellwright_test"
    finally:
        subprocess.run(
            _as_user(user, [str(bindir / "pg_ctl"), "-D", str(data), "-m", "fast", "-w", "stop"]),
            **run,
        )
        shutil.rmtree(root, ignore_errors=True)
