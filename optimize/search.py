"""Design search: an Optuna study over a study file's ranges, resumable and shared by workers.

The study lives in an Optuna RDB storage: a SQLite file ``DIR/study.db`` by
default, any SQLAlchemy URL (``postgresql+psycopg2://...``) to share one study
between machines. Each worker runs an ask-and-tell loop:

1. fail dead trials (Optuna's heartbeat, plus trials of processes of this host
   that no longer exist, so a run killed with ``kill -9`` resumes at once);
2. stop when the storage holds ``trials`` complete trials (``trials`` is a
   total: rerunning with the same number resumes up to it); wait while other
   workers' running trials could still complete it;
3. ask up to ``batch`` trials, copy the results of any parameter set already
   evaluated, evaluate the rest in one batched kernel call, tell.

Every trial carries user attributes that the standard Optuna tools (its
dashboard, ``optuna.load_study``) show without this project writing a viewer:

- ``metrics``: every figure of merit of :data:`physics.iv.METRIC_NAMES`
  (None where there is no NDR);
- ``feasible``: meets the spec and every constraint;
- ``spec_violation``: :meth:`optimize.study.Study.spec_violation`;
- ``constraints``: the named constraint values (> 0 violated), also given to
  Optuna with ``Trial.set_constraint`` so that TPE and NSGA-II use them;
- ``layers``: the full stack, each layer with name, material, label (trade
  notation), x, thickness_ml, thickness_nm, doping_cm3;
- ``worker`` (host:pid), and ``duplicate_of`` (trial number) when the
  design had been evaluated before and its results were copied, ``error``
  when the design could not be built or evaluated.

The trial value is the single-objective score, or the raw objectives for
several; how designs are scored is documented in :mod:`optimize.study`.
"""

from __future__ import annotations

import concurrent.futures
import functools
import math
import multiprocessing
import os
import socket
import threading
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import optuna
from optuna.trial import FrozenTrial, TrialState

from physics.electrostatics import ElectrostaticsConvergenceError
from physics.errors import InputError
from physics.iv import METRIC_NAMES
from physics.stack import LayerTable, Stack

from .study import Study

__all__ = [
    "SearchResult",
    "Evaluator",
    "nominal_metrics",
    "run_search",
    "open_study",
    "storage_url",
    "make_storage",
    "make_sampler",
    "rank_trials",
    "design_record",
    "layer_records",
    "HEARTBEAT_INTERVAL_S",
]

#: Seconds between heartbeats of a running trial; a trial without one for
#: ``GRACE_PERIOD_S`` is failed by the next worker that looks.
HEARTBEAT_INTERVAL_S = 10
GRACE_PERIOD_S = 60
#: Seconds between checks while waiting for other workers' trials to finish.
POLL_S = 0.5

#: Physics errors that mark one design as not evaluable (it is then infeasible,
#: with the message in its ``error`` attribute) instead of stopping the search.
EVALUATION_ERRORS: tuple[type[Exception], ...] = (ElectrostaticsConvergenceError,)

#: Computes figures of merit of a batch of stacks on a bias grid:
#: ``evaluator(stacks, bias_v) -> {metric name: (n_stacks,) array}``, NaN where
#: there is no NDR. Must be a module-level function (workers receive it by name).
Evaluator = Callable[[Sequence[Stack], np.ndarray], dict[str, np.ndarray]]


def nominal_metrics(stacks: Sequence[Stack], bias_v: np.ndarray) -> dict[str, np.ndarray]:
    """Figures of merit of the stacks as given, in one batched sweep."""
    from physics.iv import sweep

    table = LayerTable.from_stacks(list(stacks))
    return sweep(table, bias_v, model=stacks[0].model).metrics


# --------------------------------------------------------------------------- results


@dataclass
class SearchResult:
    """What :func:`run_search` returns.

    Attributes
    ----------
    study_name, storage
        Where the Optuna study is (``optuna.load_study(study_name=..., storage=...)``).
    out_dir
        Output folder.
    n_complete, n_feasible
        Complete trials in the study, and how many of them meet spec and constraints.
    designs
        The ``[search] top`` best designs, best first, one per distinct parameter
        set, as plain records (see :func:`design_record` and :func:`rank_trials`,
        which ranks any number).
    files
        Output files by kind.
    timing
        Seconds spent by this run's workers: ``sampler`` (ask and suggest),
        ``physics`` (the evaluator), ``storage`` (tell, attributes, claims),
        ``total``; and counts ``evaluated``, ``copied`` (duplicates not recomputed).
    notes
        Anything skipped (e.g. importances with too few trials).
    """

    study_name: str
    storage: str
    out_dir: Path
    n_complete: int
    n_feasible: int
    designs: list[dict[str, Any]]
    directions: tuple[str, ...]
    files: dict[str, str] = field(default_factory=dict)
    timing: dict[str, float] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def best(self) -> dict[str, Any] | None:
        """The top design if it meets the spec and the constraints, else None."""
        return self.designs[0] if self.designs and self.designs[0]["feasible"] else None


# --------------------------------------------------------------------------- storage


def storage_url(storage: str | None, out_dir: str | Path) -> str:
    """The storage URL: ``storage`` as given, or the SQLite file ``out_dir/study.db``."""
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
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
            return optuna.storages.RDBStorage(
                url,
                engine_kwargs=engine_kwargs,
                heartbeat_interval=HEARTBEAT_INTERVAL_S,
                grace_period=GRACE_PERIOD_S,
            )
    except ImportError as exc:
        raise InputError(
            f"database driver missing ({exc}); pip install psycopg2-binary for PostgreSQL",
            key="--storage",
        ) from None
    except Exception as exc:  # noqa: BLE001 - connection and driver errors of any backend
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"cannot open the storage ({first})", key="--storage") from None


def make_sampler(study: Study, *, seed: int, n_trials: int) -> optuna.samplers.BaseSampler:
    """The sampler the study file asks for.

    TPE (``multivariate`` and ``startup_trials`` from ``[search]``, constant
    liar so concurrent workers and batches spread out), NSGA-II (population
    ``max(8, min(50, trials // 5))``) or random. Constraints reach the samplers
    through the trials' constraint values.
    """
    s = study.search
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        if s.sampler == "random":
            return optuna.samplers.RandomSampler(seed=seed)
        if s.sampler == "nsga2":
            return optuna.samplers.NSGAIISampler(
                seed=seed, population_size=max(8, min(50, n_trials // 5))
            )
        return optuna.samplers.TPESampler(
            seed=seed,
            n_startup_trials=s.startup_trials,
            multivariate=s.multivariate,
            constant_liar=True,
        )


def _worker_seed(seed: int, worker: int, n_existing: int) -> int:
    """A sampler seed per worker and resume point (the same seed gives the same run)."""
    return int(np.random.SeedSequence([seed, worker, n_existing]).generate_state(1)[0])


def open_study(
    study: Study,
    storage: optuna.storages.BaseStorage,
    *,
    sampler: optuna.samplers.BaseSampler | None = None,
) -> optuna.Study:
    """Create the Optuna study or load it to resume, checking it was made from the same file.

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


# --------------------------------------------------------------------------- evaluation


def layer_records(stack: Stack) -> list[dict[str, Any]]:
    """The layers of a stack as plain records (contacts have no thickness)."""
    out = []
    n = len(stack.layers)
    for i, layer in enumerate(stack.layers):
        contact = i in (0, n - 1)
        ml = layer.thickness_ml
        out.append(
            {
                "name": layer.name,
                "material": layer.material,
                "label": layer.label,
                "x": layer.x,
                "thickness_ml": None
                if contact or ml is None
                else (int(round(ml)) if abs(ml - round(ml)) < 1e-9 else ml),
                "thickness_nm": None if contact else layer.thickness_nm,
                "doping_cm3": layer.doping_cm3,
            }
        )
    return out


@dataclass
class _Outcome:
    values: list[float]
    constraints: dict[str, float]
    attrs: dict[str, Any]


def _tidy(value: Any) -> Any:
    """A float on a step grid without its rounding noise (0.5800000000000001 -> 0.58)."""
    return float(f"{value:.12g}") if isinstance(value, float) else value


def _finite_or_none(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def evaluate(
    study: Study, params_list: Sequence[dict[str, float]], evaluator: Evaluator
) -> tuple[list[_Outcome], float]:
    """Evaluate parameter sets in one batch; returns the outcomes and the evaluator's seconds."""
    stacks: list[Stack | None] = []
    errors: list[str | None] = []
    for params in params_list:
        try:
            stacks.append(study.stack(params))
            errors.append(None)
        except InputError as exc:  # a corner of the space the file check did not reach
            stacks.append(None)
            errors.append(exc.one_line())
    valid = [i for i, s in enumerate(stacks) if s is not None]
    built = [s for s in stacks if s is not None]
    n = len(params_list)
    metrics = {k: np.full(n, np.nan) for k in METRIC_NAMES}
    t0 = time.perf_counter()
    if valid:
        bias = study.sweep.bias_v
        try:
            got = evaluator(built, bias)
            for k in METRIC_NAMES:
                if k in got:
                    metrics[k][valid] = np.asarray(got[k], float)
        except EVALUATION_ERRORS:  # one design spoils the batch: evaluate one at a time
            for i, stack in zip(valid, built, strict=True):
                try:
                    one = evaluator([stack], bias)
                except EVALUATION_ERRORS as exc:
                    errors[i] = f"not evaluated: {type(exc).__name__}: {exc}"
                    continue
                for k in METRIC_NAMES:
                    if k in one:
                        metrics[k][i] = float(np.asarray(one[k], float)[0])
    physics_s = time.perf_counter() - t0

    violation = study.spec_violation(metrics)
    if study.multi_objective:
        values = study.objective_values(metrics)
    else:
        values = study.single_score(metrics)[:, None]
    outcomes = []
    for i in range(n):
        m = {k: float(metrics[k][i]) for k in METRIC_NAMES}
        constraints = study.constraint_values(stacks[i], m)
        if errors[i]:
            constraints["stack_valid"] = 1.0
        feasible = bool(violation[i] == 0 and all(v <= 0 for v in constraints.values()))
        built_i = stacks[i]
        attrs: dict[str, Any] = {
            "metrics": {k: _finite_or_none(v) for k, v in m.items()},
            "feasible": feasible,
            "spec_violation": float(violation[i]),
            "constraints": constraints,
            "layers": layer_records(built_i) if built_i is not None else None,
        }
        if errors[i]:
            attrs["error"] = errors[i]
        outcomes.append(_Outcome([float(v) for v in values[i]], constraints, attrs))
    return outcomes, physics_s


# --------------------------------------------------------------------------- worker


@dataclass(frozen=True)
class _Job:
    study: Study
    url: str
    target: int
    seed: int
    worker: int
    evaluator: Evaluator
    parent_pid: int | None = None
    progress: bool = False


class _Heartbeat:
    """Records a heartbeat for the current trials every interval, in a thread."""

    def __init__(self, storage: optuna.storages.RDBStorage) -> None:
        self._storage = storage
        self._ids: set[int] = set()
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def add(self, trial_id: int) -> None:
        self._storage.record_heartbeat(trial_id)
        with self._lock:
            self._ids.add(trial_id)

    def clear(self) -> None:
        with self._lock:
            self._ids.clear()

    def _run(self) -> None:
        while not self._stop.wait(HEARTBEAT_INTERVAL_S):
            with self._lock:
                ids = list(self._ids)
            for trial_id in ids:
                try:
                    self._storage.record_heartbeat(trial_id)
                except Exception:  # noqa: BLE001 - the next beat retries; staleness fails the trial
                    pass

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)


def _identity() -> str:
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


def _fail_dead_trials(ostudy: optuna.Study, running: list[FrozenTrial]) -> int:
    """Fail running trials whose process is gone; returns how many.

    Optuna's heartbeat catches any machine's dead workers after the grace
    period; a trial of a process of this host that no longer exists is failed
    at once, and one that never got a worker tag within the grace period too.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        optuna.storages.fail_stale_trials(ostudy)
    host = socket.gethostname()
    now = time.time()
    failed = 0
    for t in running:
        owner = t.user_attrs.get("worker")
        dead = False
        if owner:
            h, _, pid = owner.rpartition(":")
            dead = h == host and pid.isdigit() and not _pid_alive(int(pid))
        elif t.datetime_start is not None:
            dead = now - t.datetime_start.timestamp() > GRACE_PERIOD_S
        if dead:
            try:
                ostudy.tell(t.number, state=TrialState.FAIL, skip_if_finished=True)
                failed += 1
            except (optuna.exceptions.UpdateFinishedTrialError, ValueError):
                pass  # finished or failed by another worker meanwhile
    return failed


def _param_key(study: Study, params: dict[str, Any]) -> tuple:
    return tuple(
        round(float(params[n]), 12) if n in params else None for n in study.parameter_names
    )


def _suggest(trial: optuna.Trial, study: Study) -> dict[str, float]:
    params: dict[str, float] = {}
    for v in study.variables:
        if v.integer:
            params[v.name] = trial.suggest_int(
                v.name, int(v.low), int(v.high), step=1 if v.log else int(v.step or 1), log=v.log
            )
        else:
            params[v.name] = trial.suggest_float(v.name, v.low, v.high, step=v.step, log=v.log)
    return params


def _tell(ostudy: optuna.Study, trial: optuna.Trial, out: _Outcome, multi: bool) -> None:
    for k, v in out.attrs.items():
        trial.set_user_attr(k, v)
    for k, v in out.constraints.items():
        trial.set_constraint(k, v)
    ostudy.tell(trial, out.values if multi else out.values[0])


def _best_text(study: Study, complete: list[FrozenTrial]) -> str:
    feasible = sum(1 for t in complete if t.user_attrs.get("feasible"))
    if study.multi_objective or not complete:
        return f"feasible={feasible}"
    best = min(t.value for t in complete if t.value is not None)
    return f"best={best:.4g} feasible={feasible}"


_CLAIMED = (TrialState.COMPLETE, TrialState.RUNNING)
_OPEN = (TrialState.COMPLETE, TrialState.RUNNING, TrialState.WAITING)


class _Worker:
    """One worker's ask-and-tell loop; ``timing`` accumulates where its time goes."""

    def __init__(self, job: _Job) -> None:
        optuna.logging.set_verbosity(optuna.logging.WARNING)
        self.job = job
        self.study = job.study
        self.storage = make_storage(job.url)
        study_id = self.storage.get_study_id_from_name(self.study.optuna_name)
        existing = len(self.storage.get_all_trials(study_id, deepcopy=False))
        sampler = make_sampler(
            self.study, seed=_worker_seed(job.seed, job.worker, existing), n_trials=job.target
        )
        self.ostudy = optuna.load_study(
            study_name=self.study.optuna_name, storage=self.storage, sampler=sampler
        )
        self.timing = dict.fromkeys(
            ("sampler", "physics", "storage", "total", "evaluated", "copied"), 0.0
        )
        self.me = _identity()
        self.bar: Any = None
        self.parent = os.getppid() if job.parent_pid is not None else None
        self.orphaned = False

    def _clock(self, kind: str, since: float) -> None:
        self.timing[kind] += time.perf_counter() - since

    def run(self) -> dict[str, float]:
        heart = _Heartbeat(self.storage)
        start = time.perf_counter()
        try:
            while True:
                if self.parent is not None and os.getppid() != self.parent:
                    self.orphaned = True  # the command that started us was killed: stop too
                    break
                room, done = self._room()
                if room is None:
                    break
                if room <= 0:  # other workers' running trials may still complete the study
                    time.sleep(POLL_S)
                    continue
                self._batch(min(self.study.search.batch, room), done, heart)
        finally:
            heart.stop()
            if self.bar is not None:
                self.bar.close()
            self.timing["total"] = time.perf_counter() - start
        return self.timing

    def _room(self) -> tuple[int | None, dict[tuple, FrozenTrial]]:
        """Trials still to claim (None: study complete) and finished designs by parameters."""
        t0 = time.perf_counter()
        while True:
            trials = self.ostudy.get_trials(deepcopy=False, states=_OPEN)
            running = [t for t in trials if t.state == TrialState.RUNNING]
            if not (running and _fail_dead_trials(self.ostudy, running)):
                break
        complete = [t for t in trials if t.state == TrialState.COMPLETE]
        self._show(complete)
        self._clock("storage", t0)
        if len(complete) >= self.job.target:
            return None, {}
        room = (
            self.job.target - len(complete) - len(running)
        )  # waiting (enqueued) trials are ours to take
        return room, {_param_key(self.study, t.params): t for t in complete}

    def _show(self, complete: list[FrozenTrial]) -> None:
        if not self.job.progress:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(
                total=self.job.target,
                initial=len(complete),
                unit="trial",
                desc=self.study.optuna_name,
                dynamic_ncols=True,
            )
        self.bar.n = min(len(complete), self.job.target)
        self.bar.set_postfix_str(_best_text(self.study, complete), refresh=True)

    def _ask(self, n: int, heart: _Heartbeat) -> list[optuna.Trial]:
        asked = []
        for _ in range(n):
            t0 = time.perf_counter()
            with warnings.catch_warnings():  # heartbeats are kept by _Heartbeat, not optimize()
                warnings.filterwarnings("ignore", message="Heartbeat of storage")
                trial = self.ostudy.ask()
            self._clock("sampler", t0)
            t0 = time.perf_counter()
            heart.add(trial._trial_id)  # Optuna's own heartbeat thread uses this id too
            trial.set_user_attr("worker", self.me)
            self._clock("storage", t0)
            asked.append(trial)
        return asked

    def _drop_surplus(self, asked: list[optuna.Trial]) -> list[optuna.Trial]:
        """Near the end, fail trials that another worker's claim made one too many."""
        if asked[-1].number + 1 <= self.job.target:  # at most target trials can precede it
            return asked
        t0 = time.perf_counter()
        numbers = sorted(t.number for t in self.ostudy.get_trials(deepcopy=False, states=_CLAIMED))
        allowed = set(numbers[: self.job.target])
        kept = []
        for trial in asked:
            if trial.number in allowed:
                kept.append(trial)
            else:
                trial.set_user_attr("surplus", True)
                self.ostudy.tell(trial, state=TrialState.FAIL)
        self._clock("storage", t0)
        return kept

    def _batch(self, n: int, done: dict[tuple, FrozenTrial], heart: _Heartbeat) -> None:
        """Ask ``n`` trials, copy known designs, evaluate the rest in one call, tell."""
        asked: list[optuna.Trial] = []
        told: set[int] = set()
        try:
            asked = self._drop_surplus(self._ask(n, heart))
            t0 = time.perf_counter()
            params = [_suggest(trial, self.study) for trial in asked]
            self._clock("sampler", t0)

            first: dict[tuple, int] = {}  # key -> index of the first trial with it in this batch
            for i, p in enumerate(params):
                key = _param_key(self.study, p)
                if key not in done:
                    first.setdefault(key, i)
            unique = sorted(first.values())
            outcomes: dict[int, _Outcome] = {}
            if unique:
                results, physics_s = evaluate(
                    self.study, [params[i] for i in unique], self.job.evaluator
                )
                self.timing["physics"] += physics_s
                self.timing["evaluated"] += len(unique)
                outcomes = dict(zip(unique, results, strict=True))

            t0 = time.perf_counter()
            for i, trial in enumerate(asked):
                key = _param_key(self.study, params[i])
                if i in outcomes:
                    out = outcomes[i]
                else:  # already evaluated: copy, do not recompute
                    prior = done.get(key)
                    if prior is not None:
                        out = _Outcome(
                            list(prior.values), dict(prior.constraints), dict(prior.user_attrs)
                        )
                        source = prior.number
                    else:
                        j = first[key]
                        out = _Outcome(
                            list(outcomes[j].values),
                            dict(outcomes[j].constraints),
                            dict(outcomes[j].attrs),
                        )
                        source = asked[j].number
                    out.attrs = {
                        k: v for k, v in out.attrs.items() if k not in ("worker", "duplicate_of")
                    }
                    out.attrs["duplicate_of"] = source
                    self.timing["copied"] += 1
                _tell(self.ostudy, trial, out, self.study.multi_objective)
                told.add(trial.number)
            self._clock("storage", t0)
        except BaseException:
            for trial in asked:
                if trial.number not in told:
                    try:
                        self.ostudy.tell(trial, state=TrialState.FAIL)
                    except Exception:  # noqa: BLE001 - keep the original error
                        pass
            raise
        finally:
            heart.clear()


def _work(job: _Job) -> dict[str, float]:
    """Run one worker until the study holds ``job.target`` complete trials; returns its timing.

    A worker process whose parent died leaves at once (its pool would keep it
    waiting for work that never comes).
    """
    worker = _Worker(job)
    timing = worker.run()
    if worker.orphaned:
        os._exit(1)
    return timing


# --------------------------------------------------------------------------- ranking


def _pareto_ranks(values: np.ndarray, directions: Sequence[str]) -> np.ndarray:
    """Non-domination rank (0 = Pareto front) of each row of objective values."""
    sign = np.array([-1.0 if d == "maximize" else 1.0 for d in directions])
    v = values * sign
    n = v.shape[0]
    ranks = np.full(n, -1)
    remaining = np.arange(n)
    r = 0
    while remaining.size:
        sub = v[remaining]
        le = np.all(sub[:, None, :] <= sub[None, :, :], axis=2)
        lt = np.any(sub[:, None, :] < sub[None, :, :], axis=2)
        dominated = np.any(le & lt, axis=0)
        front = remaining[~dominated]
        ranks[front] = r
        remaining = remaining[dominated]
        r += 1
    return ranks


def design_record(study: Study, trial: FrozenTrial) -> dict[str, Any]:
    """One evaluated design as a plain record.

    Keys: ``trial`` (number), ``feasible``, ``score`` (single objective) or
    ``objectives`` (metric -> value), ``spec_violation``, ``constraints``,
    ``metrics`` (every name of :data:`physics.iv.METRIC_NAMES`, None for NaN),
    ``params`` (parameter name -> value), ``layers`` (name, material,
    label, x, thickness_ml, thickness_nm, doping_cm3; contacts have no
    thickness), ``active_thickness_nm`` and ``stack`` (a stack dictionary for
    :func:`physics.stack.parse_stack`).
    """
    a = trial.user_attrs
    rec: dict[str, Any] = {"trial": trial.number, "feasible": bool(a.get("feasible", False))}
    if study.multi_objective:
        rec["objectives"] = {
            o.metric: _finite_or_none(v)
            for o, v in zip(study.objectives, trial.values, strict=True)
        }
    else:
        rec["score"] = trial.value
    rec["spec_violation"] = a.get("spec_violation")
    rec["constraints"] = dict(a.get("constraints", {}))
    metrics = a.get("metrics", {})
    rec["metrics"] = {k: metrics.get(k) for k in METRIC_NAMES}
    rec["params"] = {k: _tidy(v) for k, v in trial.params.items()}
    rec["layers"] = a.get("layers")
    rec["active_thickness_nm"] = (
        None
        if rec["layers"] is None
        else sum(layer["thickness_nm"] or 0.0 for layer in rec["layers"])
    )
    rec["stack"] = study.stack_dict(trial.params)
    return rec


def rank_trials(
    study: Study, trials: Sequence[FrozenTrial], *, top: int | None = None
) -> list[dict[str, Any]]:
    """Rank complete trials, best first, one record per distinct parameter set.

    Feasible designs (on spec, constraints met) come first: by score for a
    single objective; by Pareto rank, then the first objective, for several.
    Then the others, by total constraint violation, then spec violation.
    """
    seen: dict[tuple, FrozenTrial] = {}
    for t in sorted(trials, key=lambda t: t.number):
        if t.state == TrialState.COMPLETE:
            seen.setdefault(_param_key(study, t.params), t)
    unique = list(seen.values())
    feasible = [t for t in unique if t.user_attrs.get("feasible")]
    others = [t for t in unique if not t.user_attrs.get("feasible")]
    if study.multi_objective and feasible:
        vals = np.array([t.values for t in feasible], float)
        ranks = _pareto_ranks(vals, study.directions)
        sign0 = -1.0 if study.directions[0] == "maximize" else 1.0
        order = sorted(
            range(len(feasible)), key=lambda i: (ranks[i], sign0 * vals[i, 0], feasible[i].number)
        )
        feasible = [feasible[i] for i in order]
        pareto = {feasible[i].number for i in range(len(feasible)) if ranks[order[i]] == 0}
    else:
        feasible.sort(key=lambda t: (t.value, t.number))
        pareto = set()

    def violation(t: FrozenTrial) -> tuple[float, float, int]:
        c = sum(v for v in t.constraints.values() if v > 0)
        return (c, float(t.user_attrs.get("spec_violation", math.inf)), t.number)

    others.sort(key=violation)
    ranked = feasible + others
    if top is not None:
        ranked = ranked[:top]
    records = []
    for i, t in enumerate(ranked, start=1):
        rec = {"rank": i, **design_record(study, t)}
        if study.multi_objective:
            rec["pareto"] = t.number in pareto
        records.append(rec)
    return records


# --------------------------------------------------------------------------- driver


def _progress_poll(
    ostudy: optuna.Study, study: Study, target: int, futures: list, progress: bool
) -> None:
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=target, unit="trial", desc=study.optuna_name, dynamic_ncols=True)
    try:
        while True:
            if bar is not None:
                complete = ostudy.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
                bar.n = min(len(complete), target)
                bar.set_postfix_str(_best_text(study, complete), refresh=True)
            done, _ = concurrent.futures.wait(futures, timeout=1.0)
            if len(done) == len(futures):
                break
    finally:
        if bar is not None:
            bar.close()


def run_search(
    study: Study,
    *,
    trials: int | None = None,
    workers: int | None = None,
    storage: str | None = None,
    out_dir: str | Path | None = None,
    seed: int | None = None,
    progress: bool = True,
    evaluator: Evaluator = nominal_metrics,
    write: bool = True,
) -> SearchResult:
    """Run (or resume) the design search of a study and write its outputs.

    Parameters
    ----------
    study
        From :func:`optimize.study.load_study`.
    trials
        Complete trials the study should hold when done (a total: a resumed
        study runs only the missing ones; 0 just re-ranks and rewrites).
        Default ``[search] trials``.
    workers
        Processes sharing the storage (spawned; 1 runs in this process).
        Default ``[search] workers``.
    storage
        SQLAlchemy URL; default the SQLite file ``out_dir/study.db``.
    out_dir
        Output folder; default ``<study name>_out``.
    seed
        Sampler seed; default ``[search] seed``. Worker ``w`` of a run that
        starts with ``n`` trials in storage seeds its sampler from
        ``(seed, w, n)``: one worker gives the same trials for the same seed.
    progress
        Show a progress bar with the best value so far.
    evaluator
        Figures of merit of a batch of stacks (default: the nominal sweep).
        A module-level function, so that worker processes can import it.
    write
        Write designs.csv/json, growth sheets, figures and importances.

    Returns
    -------
    SearchResult
    """
    target = study.search.trials if trials is None else int(trials)
    n_workers = study.search.workers if workers is None else int(workers)
    base_seed = study.search.seed if seed is None else int(seed)
    if target < 0:
        raise InputError(f"must be >= 0, got {target}", key="--trials")
    if n_workers < 1:
        raise InputError(f"must be >= 1, got {n_workers}", key="--workers")
    if seed is not None and not 0 <= seed < 2**32:
        raise InputError(f"must be in [0, 2^32), got {seed}", key="--seed")
    out = Path(out_dir) if out_dir is not None else Path(f"{study.name}_out")
    if storage is not None:
        check_storage_url(storage)
    else:
        out.mkdir(parents=True, exist_ok=True)
    url = storage_url(storage, out)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    ostudy = open_study(study, make_storage(url))
    for params in study.search.baseline:
        ostudy.enqueue_trial(params, skip_if_exists=True)

    timing: dict[str, float] = {}
    if n_workers == 1:
        timing = _work(_Job(study, url, target, base_seed, 0, evaluator, None, progress))
    else:
        # Enqueued trials first, here: SQLite cannot stop two processes from
        # both taking the same waiting trial (it has no row locks).
        n_waiting = len(ostudy.get_trials(deepcopy=False, states=(TrialState.WAITING,)))
        if n_waiting:
            n_done = len(ostudy.get_trials(deepcopy=False, states=(TrialState.COMPLETE,)))
            first = _work(
                _Job(
                    study,
                    url,
                    min(target, n_done + n_waiting),
                    base_seed,
                    n_workers,
                    evaluator,
                    None,
                    False,
                )
            )
            timing = dict(first)
        ctx = multiprocessing.get_context("spawn")
        with concurrent.futures.ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx) as pool:
            futures = [
                pool.submit(
                    _work, _Job(study, url, target, base_seed, w, evaluator, os.getpid(), False)
                )
                for w in range(n_workers)
            ]
            _progress_poll(ostudy, study, target, futures, progress)
            for f in futures:
                for k, v in f.result().items():
                    timing[k] = timing.get(k, 0.0) + v

    all_trials = ostudy.get_trials(deepcopy=False)
    complete = [t for t in all_trials if t.state == TrialState.COMPLETE]
    designs = rank_trials(study, complete, top=study.search.top)
    result = SearchResult(
        study_name=study.optuna_name,
        storage=url,
        out_dir=out,
        n_complete=len(complete),
        n_feasible=sum(1 for t in complete if t.user_attrs.get("feasible")),
        designs=designs,
        directions=study.directions,
        timing=timing,
    )
    if write:
        write_outputs(study, ostudy, result, complete)
    return result


# --------------------------------------------------------------------------- outputs

GROWTH_SHEET_HEADER = ["layer", "name", "material", "x", "monolayers", "nm", "doping_cm3"]
MIN_TRIALS_FOR_IMPORTANCE = 20


def growth_sheet_rows(record: dict[str, Any]) -> list[list[Any]]:
    """Rows of a design's growth sheet, in stack order (first row: emitter contact).

    Material in trade notation; monolayers as whole numbers where the layer was
    given in monolayers; contacts have no thickness (grown as thick as the
    device process needs).
    """
    rows = []
    for i, layer in enumerate(record["layers"] or []):
        ml = layer["thickness_ml"]
        nm = layer["thickness_nm"]
        rows.append(
            [
                i,
                layer["name"],
                layer["label"],
                "" if layer["x"] is None else f"{layer['x']:.3f}",
                "" if ml is None else (str(ml) if isinstance(ml, int) else f"{ml:.2f}"),
                "" if nm is None else f"{nm:.3f}",
                f"{layer['doping_cm3']:.3g}",
            ]
        )
    return rows


def _designs_table(
    study: Study, designs: list[dict[str, Any]]
) -> tuple[list[str], list[list[Any]]]:
    head = ["rank", "trial", "feasible"]
    head += (
        [f"objective:{o.metric}" for o in study.objectives] if study.multi_objective else ["score"]
    )
    head += ["spec_violation", *METRIC_NAMES, *study.parameter_names, "active_thickness_nm"]
    rows = []
    for d in designs:
        row = [d["rank"], d["trial"], d["feasible"]]
        row += list(d["objectives"].values()) if study.multi_objective else [d["score"]]
        row += [d["spec_violation"], *(d["metrics"][k] for k in METRIC_NAMES)]
        row += [d["params"].get(n) for n in study.parameter_names] + [d["active_thickness_nm"]]
        rows.append([f"{v:.6g}" if isinstance(v, float) else v for v in row])
    return head, rows


def _feasible_objective(t: FrozenTrial, *, i: int, maximize: bool) -> float:
    """Objective ``i`` as a value to minimise; designs off spec count as the worst."""
    v = t.values[i]
    if not (t.user_attrs.get("feasible") and math.isfinite(v)):
        return math.inf
    return -v if maximize else v


def parameter_importances(
    study: Study, ostudy: optuna.Study, complete: list[FrozenTrial]
) -> dict[str, Any]:
    """Optuna's parameter importances of the score (or of each objective).

    Skipped (with a ``note``) below :data:`MIN_TRIALS_FOR_IMPORTANCE` complete
    trials or with fewer than two parameters; multi-objective importances are
    over the designs that meet the spec.
    """
    if len(study.variables) < 2:
        return {"note": "fewer than two search parameters; nothing to rank"}
    if len(complete) < MIN_TRIALS_FOR_IMPORTANCE:
        return {
            "note": f"only {len(complete)} complete trials; importances need "
            f"{MIN_TRIALS_FOR_IMPORTANCE}"
        }
    out: dict[str, Any] = {}
    targets: list[tuple[str, Callable[[FrozenTrial], float]]] = []
    if study.multi_objective:
        for i, o in enumerate(study.objectives):
            targets.append(
                (
                    o.metric,
                    functools.partial(_feasible_objective, i=i, maximize=o.direction == "maximize"),
                )
            )
    else:
        targets.append(("score", lambda t: float(t.values[0])))
    for name, target in targets:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                imp = optuna.importance.get_param_importances(ostudy, target=target)
            out[name] = {k: float(v) for k, v in imp.items()}
        except Exception as exc:  # noqa: BLE001 - too few distinct values, all-infinite targets, ...
            out[name] = {"note": f"not computed ({type(exc).__name__}: {exc})"}
    return out


def write_outputs(
    study: Study, ostudy: optuna.Study, result: SearchResult, complete: list[FrozenTrial]
) -> None:
    """Write designs.csv/json, growth sheets, history/Pareto/importance figures and the best I-V."""
    from . import search_figures
    from .outputs import write_csv, write_json

    out = result.out_dir
    files = result.files
    files["designs_json"] = str(write_json(out / "designs.json", result.designs))
    head, rows = _designs_table(study, result.designs)
    files["designs_csv"] = str(write_csv(out / "designs.csv", head, rows))

    sheets = out / "growth_sheets"
    keep = set()
    for d in result.designs:
        if d["layers"] is None:
            continue
        path = write_csv(
            sheets / f"rank{d['rank']:02d}_trial{d['trial']:05d}.csv",
            GROWTH_SHEET_HEADER,
            growth_sheet_rows(d),
        )
        keep.add(path.name)
    if sheets.is_dir():
        for old in sheets.glob("rank*_trial*.csv"):
            if old.name not in keep:
                old.unlink()
    files["growth_sheets"] = str(sheets)

    if complete:
        files["history"] = str(search_figures.save_history(study, complete, out / "history.png"))
        if study.multi_objective:
            files["pareto"] = str(search_figures.save_pareto(study, complete, out / "pareto.png"))
    importances = parameter_importances(study, ostudy, complete)
    files["importances_json"] = str(write_json(out / "importances.json", importances))
    plotted = {k: v for k, v in importances.items() if isinstance(v, dict) and "note" not in v}
    if plotted:
        files["importances"] = str(
            search_figures.save_importances(plotted, out / "importances.png")
        )
    else:
        note = importances.get("note") or next(
            (v["note"] for v in importances.values() if "note" in v), ""
        )
        result.notes.append(f"parameter importances skipped: {note}")

    best = result.best
    if best is not None:
        try:
            from .figures import iv_figures
        except ImportError:
            result.notes.append(
                "I-V figures of the best design skipped (optimize.figures not available)"
            )
        else:
            from physics.iv import stack_iv

            stack = study.stack(best["params"])
            curves = stack_iv(stack, study.sweep.bias_v)
            paths = iv_figures(stack, curves, out / "best_design")
            files.update({f"best_{k}": str(v) for k, v in paths.items()})
    result.files = files
