"""Where a study lives: storage URLs, SQLite settings, opening a study, dead trials.

The study is kept in an Optuna RDB storage: a SQLite file ``DIR/study.db`` by
default, any SQLAlchemy URL (``postgresql+psycopg2://...``) to share one study
between machines. A search worker keeps a trial RUNNING in the storage only
between its two writes (milliseconds); a worker that looks fails the running
trials of dead workers (see :func:`fail_dead_trials`).
"""

from __future__ import annotations

import functools
import os
import socket
import time
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any

import optuna
from optuna.trial import FrozenTrial, TrialState
from wellwright.physics.errors import InputError

if TYPE_CHECKING:
    from wellwright.optimize.study.study import Study

__all__ = [
    "storage_url",
    "check_storage_url",
    "make_storage",
    "open_study",
    "stored_trials",
    "fail_dead_trials",
    "worker_identity",
    "HEARTBEAT_INTERVAL_S",
    "GRACE_PERIOD_S",
]

#: Optuna's heartbeat settings of the storage (for trials of ``study.optimize``
#: loops sharing it); a running trial older than ``GRACE_PERIOD_S`` whose worker
#: is not a live process of this host is failed by the next worker that looks.
HEARTBEAT_INTERVAL_S = 10
GRACE_PERIOD_S = 60


def storage_url(storage: str | None, out_dir: str | Path) -> str:
    """The storage URL: ``storage`` as given, or the SQLite file ``out_dir/study.db``.

    Parameters
    ----------
    storage
        An Optuna storage URL, or ``None``.
    out_dir
        The search's output folder.
    """
    if storage:
        return storage
    return f"sqlite:///{Path(out_dir).resolve() / 'study.db'}"


def check_storage_url(url: str) -> None:
    """Reject a malformed or unsupported URL before anything is written."""
    import sqlalchemy.engine

    try:
        parsed = sqlalchemy.engine.make_url(url)
    except Exception:  # noqa: BLE001 - sqlalchemy raises several types for bad URLs
        raise InputError(
            f"{url!r} is not a database URL; use e.g. sqlite:///study.db or "
            "postgresql+psycopg2://user@host:5432/db",
            key="--storage",
        ) from None
    if parsed.get_backend_name() not in ("sqlite", "postgresql"):
        raise InputError(
            f"{parsed.get_backend_name()!r} databases are not supported; use sqlite:///FILE or "
            "postgresql+psycopg2://user@host:5432/db",
            key="--storage",
        )
    if parsed.get_backend_name() == "sqlite" and not parsed.database:
        raise InputError(
            "an in-memory SQLite database cannot be shared or resumed; give a file", key="--storage"
        )


def _sqlite_connect(database: str) -> Any:
    import sqlite3

    con = sqlite3.connect(database, timeout=60, check_same_thread=False)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    return con


def make_storage(url: str) -> optuna.storages.RDBStorage:
    """An RDB storage with heartbeats, tuned for several processes.

    SQLite waits up to 60 s for a lock instead of failing and runs in WAL
    mode with ``synchronous = NORMAL`` (a commit survives the death of the
    process, which is what resuming needs; readers do not block the writer);
    the file must be on a local disk. A server database checks connections
    before use (long runs outlive idle connections).
    """
    check_storage_url(url)
    if url.startswith("sqlite"):
        import sqlalchemy.engine

        database = str(sqlalchemy.engine.make_url(url).database)
        engine_kwargs: dict[str, Any] = {"creator": functools.partial(_sqlite_connect, database)}
    else:
        engine_kwargs = {"pool_pre_ping": True}
    try:
        return _rdb_storage(url, engine_kwargs)
    except ImportError:
        import sqlalchemy.engine

        backend = sqlalchemy.engine.make_url(url).get_backend_name()
        hint = (
            'pip install -e ".[scale]" (psycopg2-binary)'
            if backend == "postgresql"
            else "supported and tested: sqlite (default) and postgresql"
        )
        raise InputError(
            f"no database driver for {backend} here; {hint}", key="--storage"
        ) from None
    except Exception as exc:  # noqa: BLE001 - connection and driver errors of any backend
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"cannot open the storage ({first})", key="--storage") from None


def _rdb_storage(url: str, engine_kwargs: dict[str, Any]) -> optuna.storages.RDBStorage:
    """The storage, created once however many processes open a fresh file at the same moment.

    Two processes creating a new SQLite storage both write its schema version, and the
    second fails ("UNIQUE constraint failed: alembic_version"); it then finds the schema
    made by the first, so it simply opens the storage again.
    """
    for attempt in range(5):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
                return optuna.storages.RDBStorage(
                    url,
                    engine_kwargs=engine_kwargs,
                    heartbeat_interval=HEARTBEAT_INTERVAL_S,
                    grace_period=GRACE_PERIOD_S,
                )
        except Exception as exc:  # noqa: BLE001 - sqlalchemy's IntegrityError/OperationalError
            racing = "UNIQUE constraint failed" in str(exc) or "already exists" in str(exc)
            if not (url.startswith("sqlite") and racing) or attempt == 4:
                raise
            time.sleep(0.1 * (attempt + 1))
    raise AssertionError("unreachable")


def open_study(
    study: Study,
    storage: optuna.storages.BaseStorage,
    *,
    sampler: optuna.samplers.BaseSampler | None = None,
) -> optuna.Study:
    """Create the Optuna study or load it to resume, checking it was made from the same file.

    Parameters
    ----------
    study
        The study the search runs (its name, space, spec and sweep are checked).
    storage
        The Optuna storage.
    sampler
        Sampler of the Optuna study; Optuna's default when ``None``.

    Raises
    ------
    InputError
        When the storage holds a study of this name made from a different
        search space, spec or sweep (``[search] study_name`` picks another name).
    """
    name = study.optuna_name
    try:
        ostudy = optuna.create_study(
            storage=storage,
            study_name=name,
            directions=[optuna.study.StudyDirection[d.upper()] for d in study.directions],
            load_if_exists=True,
            sampler=sampler,
        )
    except Exception as exc:  # noqa: BLE001
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(
            f"cannot create or load study '{name}' ({first})", key="--storage"
        ) from None
    directions = tuple(d.name.lower() for d in ostudy.directions)
    stored = ostudy.user_attrs.get("wellwright_fingerprint")
    if stored is None and not ostudy.get_trials(deepcopy=False):
        ostudy.set_user_attr("wellwright_fingerprint", study.fingerprint())
        ostudy.set_user_attr("wellwright_source", study.source)
        ostudy.set_user_attr("parameters", list(study.parameter_names))
        ostudy.set_user_attr("constraint_names", list(study.constraint_names))
        ostudy.set_user_attr(
            "objectives", [f"{o.direction} {o.metric}" for o in study.objectives] or ["score"]
        )
        stored = study.fingerprint()
    if stored != study.fingerprint() or directions != study.directions:
        raise InputError(
            f"the storage already holds a study '{name}' made from a different search space, "
            "spec or sweep; "
            "set [search] study_name to a new name or use another --out/--storage",
            source=study.source,
            key="search.study_name",
        )
    return ostudy


def stored_trials(study: Study, url: str) -> int:
    """Complete trials a storage holds of this study (its name and fingerprint), else 0.

    Creates nothing: a SQLite file that does not exist holds none.

    Parameters
    ----------
    study
        The study the search runs.
    url
        The storage URL (:func:`storage_url`).
    """
    if url.startswith("sqlite"):
        import sqlalchemy.engine

        database = sqlalchemy.engine.make_url(url).database
        if not database or not Path(database).is_file():
            return 0
    storage = make_storage(url)
    try:
        sid = storage.get_study_id_from_name(study.optuna_name)
        if storage.get_study_user_attrs(sid).get("wellwright_fingerprint") != study.fingerprint():
            return 0
        return len(storage.get_all_trials(sid, deepcopy=False, states=(TrialState.COMPLETE,)))
    except KeyError:
        return 0
    finally:
        storage.engine.dispose()


def worker_identity() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def _pid_alive(pid: int) -> bool:
    """Whether a process of this host exists and is not a zombie (killed, not yet reaped)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True  # no /proc (not Linux): existence is all we can tell


def fail_dead_trials(ostudy: optuna.Study, running: list[FrozenTrial]) -> int:
    """Fail running trials whose worker is gone; returns how many.

    A trial of a process of this host that no longer exists is failed at once;
    any other running trial once it is older than ``GRACE_PERIOD_S`` (a search
    worker keeps its rows RUNNING for milliseconds; a trial with Optuna
    heartbeats is failed by Optuna's own rule when they stop).

    Parameters
    ----------
    ostudy
        The Optuna study.
    running
        Its trials in the RUNNING state.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        optuna.storages.fail_stale_trials(ostudy)
    host = socket.gethostname()
    now = time.time()
    failed = 0
    for t in running:
        h, _, pid = str(t.user_attrs.get("worker", "")).rpartition(":")
        if h == host and pid.isdigit():
            dead = not _pid_alive(int(pid))
        else:
            dead = (
                t.datetime_start is not None and now - t.datetime_start.timestamp() > GRACE_PERIOD_S
            )
        if dead:
            try:
                ostudy.tell(t.number, state=TrialState.FAIL, skip_if_finished=True)
                failed += 1
            except (optuna.exceptions.UpdateFinishedTrialError, ValueError):
                pass  # finished or failed by another worker meanwhile
    return failed
