"""Design search: an Optuna study over a study file's ranges, resumable and shared by workers.

The study lives in an Optuna RDB storage: a SQLite file ``DIR/study.db`` by
default, any SQLAlchemy URL (``postgresql+psycopg2://...``) to share one study
between machines. Each worker runs a batched ask-and-tell loop:

1. read the storage (incrementally): fail dead trials (see
   :func:`wellwright.optimize.search.storage.fail_dead_trials`, so a run killed
   with ``kill -9`` resumes at once), copy new complete trials of other
   workers into the sampler's in-memory study, stop when the storage holds
   ``trials`` distinct evaluated designs, or every design when the space is
   a grid smaller than that (:func:`design_budget`; a total: rerunning with
   the same number resumes up to it); a repeated design is copied and not
   counted;
2. ask up to ``batch`` trials of the in-memory study (the sampler never
   waits on the database; a space that fits the budget is enumerated, see
   :meth:`_Worker._enqueue_grid`), copy the results of any design already
   evaluated, evaluate the rest in one batched kernel call;
3. write each trial of the batch in one storage call with all its
   parameters, attributes and constraints, complete those within the total,
   tell the in-memory study.

Only Optuna's public API is used (``create_trial``, the storage's
``create_new_trial`` and ``set_trial_state_values``). Optuna's RDB storage
still writes every parameter and attribute row with its own checks (about 36
statements for a trial of five parameters and seven attributes), so storage
stays a large share of a search's time (see ``benchmarks/bench_search.py``).

Every trial carries user attributes that the standard Optuna tools (its
dashboard, ``optuna.load_study``) show without this project writing a viewer:

- ``metrics``: every figure of merit of
  :attr:`wellwright.optimize.study.study.Study.metric_names` (those of
  :data:`wellwright.physics.iv.METRIC_NAMES` and the currents at the spec's stated
  biases; None where there is no NDR);
- ``feasible``: meets the spec and every constraint;
- ``spec_violation``: :meth:`wellwright.optimize.study.study.Study.spec_violation`;
- ``constraints``: the named constraint values (> 0 violated); the same values,
  in the order of the study attribute ``constraint_names``, are the system
  attribute ``constraints`` (Optuna's ``constraints_func`` convention), which
  Optuna's samplers (``FrozenTrial.constraints``) and optuna-dashboard read, so
  the dashboard shows which trials are feasible;
- ``layers``: the full stack, each layer with name, material, label (trade
  notation), x, thickness_ml, thickness_nm, doping_cm3;
- ``worker`` (host:pid), and ``duplicate_of`` (trial number) when the
  design had been evaluated before and its results were copied, ``error``
  when the design could not be built or evaluated;
- in a robust search (``[search] robust``), ``yield``: the Monte Carlo
  yield under ``[growth]`` {value, ci_low, ci_high, samples, passed,
  confidence} (see :mod:`wellwright.optimize.search.robust`).

The trial value is the single-objective score, or the raw objectives for
several, or in a robust search :func:`wellwright.optimize.search.robust.robust_value`; how
designs are scored is documented in :mod:`wellwright.optimize.study.targets`.

This module holds the runner (workers, ask and tell, evaluation). Storage
(URLs, SQLite settings, heartbeats, dead trials) is :mod:`wellwright.optimize.search.storage`;
ranking, records and output files are :mod:`wellwright.optimize.search.designs`. Their public
names are re-exported here.
"""

from __future__ import annotations

import concurrent.futures
import itertools
import multiprocessing
import os
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import optuna
from optuna.trial import FrozenTrial, TrialState
from wellwright.optimize.search.designs import (
    GROWTH_SHEET_HEADER,
    MIN_TRIALS_FOR_IMPORTANCE,
    SearchResult,
    design_record,
    finite_or_none,
    growth_sheet_rows,
    layer_records,
    parameter_importances,
    rank_trials,
    write_outputs,
)
from wellwright.optimize.search.robust import check_robust, design_yields, robust_value
from wellwright.optimize.search.storage import (
    GRACE_PERIOD_S,
    HEARTBEAT_INTERVAL_S,
    check_storage_url,
    fail_dead_trials,
    make_storage,
    open_study,
    storage_url,
    worker_identity,
)
from wellwright.optimize.shared.processes import exit_with_parent
from wellwright.optimize.study.space import grid_size, grid_values
from wellwright.optimize.study.study import MAX_ROBUST_SAMPLES, MIN_ROBUST_SAMPLES, Study
from wellwright.optimize.tolerance.analysis import yield_record
from wellwright.physics.electrostatics import ElectrostaticsConvergenceError
from wellwright.physics.errors import InputError
from wellwright.physics.stack import Stack

__all__ = [
    "SearchResult",
    "Evaluator",
    "nominal_metrics",
    "run_search",
    "open_study",
    "storage_url",
    "make_storage",
    "make_sampler",
    "design_budget",
    "grid_designs",
    "rank_trials",
    "design_record",
    "layer_records",
    "growth_sheet_rows",
    "parameter_importances",
    "write_outputs",
    "check_storage_url",
    "GROWTH_SHEET_HEADER",
    "MIN_TRIALS_FOR_IMPORTANCE",
    "HEARTBEAT_INTERVAL_S",
    "GRACE_PERIOD_S",
]

#: Seconds between checks while waiting for other workers' trials to finish.
POLL_S = 0.5
#: A sampler that keeps proposing known designs stops after this many repeats per design
#: of the budget (repeats are copied from storage and never counted).
MAX_REPEATS = 4

#: Physics errors that mark one design as not evaluable (it is then infeasible,
#: with the message in its ``error`` attribute) instead of stopping the search.
EVALUATION_ERRORS: tuple[type[Exception], ...] = (ElectrostaticsConvergenceError,)

#: Computes figures of merit of a batch of stacks on a bias grid:
#: ``evaluator(stacks, bias_v) -> {metric name: (n_stacks,) array}``, NaN where
#: there is no NDR. Must be a module-level function (workers receive it by name). When
#: the spec asks for currents at stated biases it is called with ``at_bias_v=`` (those
#: biases) too, and must return them (:func:`nominal_metrics`); when the study grows a
#: fractional layer as islands, with ``island_layers=`` (:attr:`Study.island_layers`).
Evaluator = Callable[..., dict[str, np.ndarray]]


def nominal_metrics(
    stacks: Sequence[Stack],
    bias_v: np.ndarray,
    *,
    at_bias_v: Sequence[float] = (),
    island_layers: Sequence[int] = (),
) -> dict[str, np.ndarray]:
    """Figures of merit of the stacks as given, in one batched sweep; also the current at
    each stated bias (computed there: :func:`wellwright.physics.iv.sweep`),
    per area and, when the stacks give ``[device] area_um2``, of the mesa in mA.

    Parameters
    ----------
    stacks
        The designs; the model and the mesa area are the first one's.
    bias_v
        Bias sweep, V.
    at_bias_v
        Stated biases, V, at which the current is also computed.
    island_layers
        Layers whose fractional ``thickness_ml`` is grown as monolayer islands
        (:attr:`wellwright.optimize.study.Study.island_layers`): each design is then the
        area-weighted mixture of its whole-monolayer stacks.
    """
    from wellwright.physics.iv import island_table, sweep

    table, weights = island_table(stacks, island_layers)
    resistance = [s.device.series_resistance_ohm_um2 for s in stacks]
    return sweep(
        table,
        bias_v,
        model=stacks[0].model,
        series_resistance_ohm_um2=np.array(resistance),
        area_weights=weights,
        at_bias_v=at_bias_v,
        area_um2=stacks[0].device.area_um2,
    ).metrics


# --------------------------------------------------------------------------- results


def make_sampler(study: Study, *, seed: int, n_trials: int) -> optuna.samplers.BaseSampler:
    """The sampler the study file asks for.

    TPE (``multivariate`` and ``startup_trials`` from ``[search]``, constant
    liar so concurrent workers and batches spread out), NSGA-II (population
    ``max(8, min(50, n_trials // 5))``) or random. Constraints reach the samplers
    through the trials' constraint values.

    Parameters
    ----------
    study
        The study (its ``[search]`` settings).
    seed
        Seed of the sampler.
    n_trials
        Trials of the search (sets the NSGA-II population).
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


def design_budget(study: Study, trials: int) -> int:
    """Distinct designs a search of ``trials`` evaluates: ``trials``, or the whole grid if smaller.

    A trial that repeats a design already evaluated is answered from storage
    (``duplicate_of``) and does not count; a sampler that keeps repeating is
    stopped after :data:`MAX_REPEATS` repeats per design of the budget.

    Parameters
    ----------
    study
        The study (its variables give the grid, if any).
    trials
        Trials asked for.
    """
    grid = grid_values(study.variables)
    return trials if grid is None else min(trials, grid_size(grid))


def grid_designs(study: Study, *, trials: int, seed: int) -> list[dict[str, Any]]:
    """Every design of a space on a grid with at most ``trials`` designs, in an order
    shuffled by ``seed``; empty when the space is continuous or larger.

    Parameters
    ----------
    study
        The study (its variables give the grid, if any).
    trials
        Largest number of designs.
    seed
        Seed of the shuffle.
    """
    grid = grid_values(study.variables)
    if grid is None or grid_size(grid) > trials:
        return []
    designs = [dict(zip(grid, values, strict=True)) for values in itertools.product(*grid.values())]
    return [designs[i] for i in np.random.default_rng(seed).permutation(len(designs))]


def _worker_seed(seed: int, worker: int, n_existing: int) -> int:
    """A sampler seed per worker and resume point (the same seed gives the same run)."""
    return int(np.random.SeedSequence([seed, worker, n_existing]).generate_state(1)[0])


# --------------------------------------------------------------------------- evaluation


@dataclass
class _Outcome:
    values: list[float]
    constraints: dict[str, float]
    attrs: dict[str, Any]


def evaluate(
    study: Study, params_list: Sequence[dict[str, float]], evaluator: Evaluator
) -> tuple[list[_Outcome], float]:
    """Evaluate parameter sets in one batch; returns the outcomes and the evaluator's seconds.

    Parameters
    ----------
    study
        The study.
    params_list
        Parameter sets, variable name -> value.
    evaluator
        ``evaluator(stacks, bias_v, **extra)`` -> figures of merit (:func:`nominal_metrics`
        by default).
    """
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
    names = study.metric_names
    metrics = {k: np.full(n, np.nan) for k in names}
    extra: dict[str, Any] = {"at_bias_v": study.at_bias_v} if study.at_bias_v else {}
    if study.island_layers:
        extra["island_layers"] = study.island_layers
    t0 = time.perf_counter()
    if valid:
        bias = study.sweep.bias_v
        try:
            got = evaluator(built, bias, **extra)
            for k in names:
                if k in got:
                    metrics[k][valid] = np.asarray(got[k], float)
        except EVALUATION_ERRORS:  # one design spoils the batch: evaluate one at a time
            for i, stack in zip(valid, built, strict=True):
                try:
                    one = evaluator([stack], bias, **extra)
                except EVALUATION_ERRORS as exc:
                    errors[i] = f"not evaluated: {type(exc).__name__}: {exc}"
                    continue
                for k in names:
                    if k in one:
                        metrics[k][i] = float(np.asarray(one[k], float)[0])
    yields: list[dict[str, Any]] = _yields(study, stacks, errors) if study.search.robust else []
    physics_s = time.perf_counter() - t0

    violation = study.spec_violation(metrics)
    if study.multi_objective:
        values = study.objective_values(metrics)
    else:
        values = study.single_score(metrics)[:, None]
    if study.search.robust:
        scores = values[:, 0].copy()
        values = np.array(
            [
                [robust_value(y["value"], float(s), samples=study.search.robust_samples)]
                for y, s in zip(yields, scores, strict=True)
            ]
        )
    outcomes = []
    for i in range(n):
        m = {k: float(metrics[k][i]) for k in names}
        constraints = study.constraint_values(stacks[i], m)
        if errors[i]:
            constraints["stack_valid"] = 1.0
        feasible = bool(violation[i] == 0 and all(v <= 0 for v in constraints.values()))
        built_i = stacks[i]
        attrs: dict[str, Any] = {
            "metrics": {k: finite_or_none(v) for k, v in m.items()},
            "feasible": feasible,
            "spec_violation": float(violation[i]),
            "constraints": constraints,
            "layers": layer_records(built_i, islands=study.island_layers)
            if built_i is not None
            else None,
        }
        if study.search.robust:
            attrs["yield"] = yields[i]
            attrs["score"] = float(scores[i])  # nominal score: the tie-break of equal yields
        if errors[i]:
            attrs["error"] = errors[i]
        outcomes.append(_Outcome([float(v) for v in values[i]], constraints, attrs))
    return outcomes, physics_s


def _yields(
    study: Study, stacks: Sequence[Stack | None], errors: list[str | None]
) -> list[dict[str, Any]]:
    """Robust search: the Monte Carlo yield of each buildable design (see :mod:`wellwright.optimize.search.robust`).

    A design that could not be built or evaluated gets yield 0 over 0 samples;
    one whose samples the physics cannot evaluate gets an ``error`` too.
    """
    plan = check_robust(study)
    out = []
    for i, stack in enumerate(stacks):
        rec = None
        if stack is not None and errors[i] is None:
            try:
                (rec,) = design_yields([stack], study.sweep.bias_v, plan)
            except EVALUATION_ERRORS as exc:
                errors[i] = f"yield not evaluated: {type(exc).__name__}: {exc}"
        out.append(rec or {**yield_record(np.zeros(0, bool)), "value": 0.0, "failures": {}})
    return out


# --------------------------------------------------------------------------- worker

#: The system attribute Optuna's ``constraints_func`` convention fills with a trial's
#: constraint values (a list, feasible when all are <= 0): what Optuna's samplers and
#: optuna-dashboard read. Their names, in order, are the study attribute ``constraint_names``.
CONSTRAINTS_KEY = "constraints"


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
    baselines: bool = True  #: evaluate ``[search] baseline`` designs the storage lacks


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


def _best_text(study: Study, complete: list[FrozenTrial]) -> str:
    feasible = sum(1 for t in complete if t.user_attrs.get("feasible"))
    if study.multi_objective or not complete:
        return f"feasible={feasible}"
    if study.search.robust:
        best_yield = max((t.user_attrs.get("yield") or {}).get("value", 0.0) for t in complete)
        return f"best yield={best_yield:.3g} feasible={feasible}"
    best = min(t.value for t in complete if t.value is not None)
    return f"best={best:.4g} feasible={feasible}"


_CLAIMED = (TrialState.COMPLETE, TrialState.RUNNING)


def _copied(out: _Outcome, source: int | None) -> _Outcome:
    """A duplicate design's outcome: ``out`` with ``duplicate_of`` (set when stored when None)."""
    attrs = {k: v for k, v in out.attrs.items() if k not in ("worker", "duplicate_of")}
    if source is not None:
        attrs["duplicate_of"] = source
    return _Outcome(list(out.values), dict(out.constraints), attrs)


def _stored(t: FrozenTrial) -> _Outcome:
    """The outcome a stored trial records."""
    return _Outcome(list(t.values), dict(t.user_attrs.get("constraints", {})), dict(t.user_attrs))


class _Worker:
    """One worker: proposes on an in-memory copy of the study, writes each trial once.

    The sampler works on an in-memory Optuna study (its view of the search): the
    complete trials of the storage are copied into it as they appear, and the
    worker asks and tells there. Only finished designs reach the storage: each
    in one ``create_new_trial`` carrying its parameters, attributes and
    constraints (state RUNNING, tagged with the worker), then set COMPLETE once
    the rows' trial numbers show that the study's total is not exceeded
    (several workers may write at once); a kill between the two leaves tagged
    RUNNING rows that the next worker fails at once. ``timing`` accumulates
    where the time goes.
    """

    def __init__(self, job: _Job) -> None:
        optuna.logging.set_verbosity(optuna.logging.WARNING)
        self.job = job
        self.study = job.study
        self.storage = make_storage(job.url)
        self.study_id = self.storage.get_study_id_from_name(self.study.optuna_name)
        self.shared = optuna.load_study(
            study_name=self.study.optuna_name,
            storage=self.storage,
            sampler=optuna.samplers.RandomSampler(seed=0),  # never asked: reads and fails only
        )
        existing = self.shared.get_trials(deepcopy=False)
        sampler = make_sampler(
            self.study, seed=_worker_seed(job.seed, job.worker, len(existing)), n_trials=job.target
        )
        directions: list[Any] = list(self.study.directions)  # "minimize"/"maximize"
        self.memory = optuna.create_study(directions=directions, sampler=sampler)
        self.budget = design_budget(self.study, job.target)
        self.grid = grid_designs(self.study, trials=job.target, seed=_worker_seed(job.seed, 0, 0))
        if job.worker:  # workers start at different points of the one order
            cut = job.worker * len(self.grid) // (job.worker + 1)
            self.grid = self.grid[cut:] + self.grid[:cut]
        self.me = worker_identity()
        self.seen: set[int] = set()  # numbers of the stored complete trials known here
        self.done: dict[tuple, FrozenTrial] = {}  # the first complete trial of each design
        self._mirror([t for t in existing if t.state == TrialState.COMPLETE], initial=True)
        if job.baselines:
            for params in self.study.search.baseline:
                if self.study.parameter_key(params) not in self.done:
                    self.memory.enqueue_trial(params)
        self.timing = dict.fromkeys(
            ("sampler", "physics", "storage", "total", "cpu", "evaluated", "copied"), 0.0
        )
        self.bar: Any = None
        self.parent = os.getppid() if job.parent_pid is not None else None
        self.orphaned = False

    def _clock(self, kind: str, since: float) -> None:
        self.timing[kind] += time.perf_counter() - since

    def run(self) -> dict[str, float]:
        start, cpu = time.perf_counter(), time.process_time()
        try:
            while True:
                if self.parent is not None and os.getppid() != self.parent:
                    self.orphaned = True  # the command that started us was killed: stop too
                    break
                room = self._sync()
                if room is None:
                    break
                if room <= 0:  # other workers' rows may still complete the study
                    time.sleep(POLL_S)
                    continue
                self._batch(min(self.study.search.batch, room))
        finally:
            if self.bar is not None:
                self.bar.close()
            self.timing["total"] = time.perf_counter() - start
            self.timing["cpu"] = time.process_time() - cpu
        return self.timing

    def _mirror(self, complete: list[FrozenTrial], *, initial: bool) -> None:
        """Copy stored complete trials the sampler has not seen into the in-memory study."""
        new = [t for t in complete if t.number not in self.seen]
        for t in new:
            self.seen.add(t.number)
            self.done.setdefault(self.study.parameter_key(t.params), t)
        self.memory.add_trials(
            optuna.trial.create_trial(
                params=t.params,
                distributions=t.distributions,
                values=t.values,
                constraints=t.constraints,
            )
            for t in new
            if initial or t.user_attrs.get("worker") != self.me  # ours were told there
        )

    def _sync(self) -> int | None:
        """Read the storage: trials still to claim (None: the study is complete)."""
        t0 = time.perf_counter()
        while True:
            trials = self.shared.get_trials(deepcopy=False, states=_CLAIMED)
            running = [t for t in trials if t.state == TrialState.RUNNING]
            if not (running and fail_dead_trials(self.shared, running)):
                break
        complete = [t for t in trials if t.state == TrialState.COMPLETE]
        new = sum(1 for t in complete if "duplicate_of" not in t.user_attrs)
        self._mirror(complete, initial=False)
        self._show(complete)
        self._clock("storage", t0)
        if new >= self.budget or len(complete) >= self.budget * (1 + MAX_REPEATS):
            return None
        return self.budget - new - len(running)

    def _show(self, complete: list[FrozenTrial]) -> None:
        if not self.job.progress:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(
                total=self.budget,
                initial=0,
                unit="design",
                desc=self.study.optuna_name,
                dynamic_ncols=True,
            )
        self.bar.n = min(
            sum(1 for t in complete if "duplicate_of" not in t.user_attrs), self.budget
        )
        self.bar.set_postfix_str(_best_text(self.study, complete), refresh=True)

    def _batch(self, n: int) -> None:
        """Ask ``n`` trials, copy known designs, evaluate the rest in one call, store, tell."""
        t0 = time.perf_counter()
        self._enqueue_grid(n)
        asked = [self.memory.ask() for _ in range(n)]
        params = [_suggest(trial, self.study) for trial in asked]
        self._clock("sampler", t0)
        try:
            outcomes, twins = self._outcomes(params)
        except BaseException:
            self._store_failed(asked)
            raise
        self._store(asked, outcomes, twins)

    def _enqueue_grid(self, n: int) -> None:
        """Enumeration: queue the next ``n`` designs of the grid not yet evaluated.

        When the whole space fits the budget (:func:`grid_designs`), the
        in-memory study is handed the designs one batch at a time, skipping
        those any worker has stored meanwhile, so each design is evaluated once
        (two workers may rarely meet on one design; the later one is a copy).
        """
        added = 0
        while self.grid and added < n:
            params = self.grid.pop(0)
            if self.study.parameter_key(params) not in self.done:
                self.memory.enqueue_trial(params)
                added += 1

    def _outcomes(self, params: list[dict[str, float]]) -> tuple[list[_Outcome], dict[int, int]]:
        """Outcomes of a batch: new designs evaluated in one call, known ones copied.

        Also returns the copies of designs first seen earlier in this batch
        (index -> index of the first, earlier in the batch), whose ``duplicate_of`` is the
        first's trial number, written with the row.
        """
        keys = [self.study.parameter_key(p) for p in params]
        first: dict[tuple, int] = {}
        for i, key in enumerate(keys):
            if key not in self.done:
                first.setdefault(key, i)
        unique = sorted(first.values())
        fresh: dict[int, _Outcome] = {}
        if unique:
            results, physics_s = evaluate(
                self.study, [params[i] for i in unique], self.job.evaluator
            )
            self.timing["physics"] += physics_s
            self.timing["evaluated"] += len(unique)
            fresh = dict(zip(unique, results, strict=True))
        outcomes, twins = [], {}
        for i, key in enumerate(keys):
            if i in fresh:
                outcomes.append(fresh[i])
                continue
            prior = self.done.get(key)
            if prior is not None:
                outcomes.append(_copied(_stored(prior), prior.number))
            else:
                twins[i] = first[key]
                outcomes.append(_copied(fresh[first[key]], None))
            self.timing["copied"] += 1
        return outcomes, twins

    def _template(self, trial: optuna.Trial, out: _Outcome) -> FrozenTrial:
        return optuna.trial.create_trial(
            state=TrialState.RUNNING,
            params=trial.params,
            distributions=trial.distributions,
            user_attrs={**out.attrs, "worker": self.me},
            system_attrs={
                CONSTRAINTS_KEY: [float(out.constraints[n]) for n in self.study.constraint_names]
            },
        )

    def _store(
        self, asked: list[optuna.Trial], outcomes: list[_Outcome], twins: dict[int, int]
    ) -> None:
        """Write the batch (one row per trial), complete what fits the total, tell the sampler."""
        t0 = time.perf_counter()
        ids: list[int] = []
        try:
            for k, (trial, out) in enumerate(zip(asked, outcomes, strict=True)):
                if k in twins:  # its first is stored already (earlier in the batch): its number
                    # goes in with the row, so no other worker counts the row as a new design
                    first = self.storage.get_trial_number_from_id(ids[twins[k]])
                    out = _Outcome(
                        out.values, out.constraints, {**out.attrs, "duplicate_of": first}
                    )
                ids.append(
                    self.storage.create_new_trial(
                        self.study_id, template_trial=self._template(trial, out)
                    )
                )
            kept = self._within_total(ids)
            for k, (trial_id, out) in enumerate(zip(ids, outcomes, strict=True)):
                if not kept[k]:
                    self.storage.set_trial_user_attr(trial_id, "surplus", True)
                try:
                    self.storage.set_trial_state_values(
                        trial_id,
                        TrialState.COMPLETE if kept[k] else TrialState.FAIL,
                        out.values if kept[k] else None,
                    )
                except optuna.exceptions.UpdateFinishedTrialError:
                    kept[k] = False  # failed as dead by another worker meanwhile
        except BaseException:
            self._fail_rows(ids)
            self._tell(asked, outcomes, [False] * len(asked))
            raise
        finally:
            self._clock("storage", t0)
        self._tell(asked, outcomes, kept)

    def _within_total(self, ids: list[int]) -> list[bool]:
        """Which new rows are among the first ``budget`` claimed new designs (numbers are
        ordered); a repeat never counts, so it is always kept."""
        if self.storage.get_trial_number_from_id(ids[-1]) < self.budget:
            return [True] * len(ids)  # fewer than budget trials of any state precede it
        claimed = self.shared.get_trials(deepcopy=False, states=_CLAIMED)
        repeats = {t.number for t in claimed if "duplicate_of" in t.user_attrs}
        numbers = sorted(t.number for t in claimed if t.number not in repeats)
        allowed = set(numbers[: self.budget]) | repeats
        return [self.storage.get_trial_number_from_id(i) in allowed for i in ids]

    def _tell(self, asked: list[optuna.Trial], outcomes: list[_Outcome], kept: list[bool]) -> None:
        """Tell the in-memory study what became of each asked trial."""
        t0 = time.perf_counter()
        for trial, out, ok in zip(asked, outcomes, kept, strict=True):
            if not ok:
                self.memory.tell(trial, state=TrialState.FAIL)
                continue
            for name in self.study.constraint_names:
                trial.set_constraint(name, float(out.constraints[name]))
            self.memory.tell(trial, out.values if self.study.multi_objective else out.values[0])
        self._clock("sampler", t0)

    def _fail_rows(self, ids: list[int]) -> None:
        for trial_id in ids:
            try:
                self.storage.set_trial_state_values(trial_id, TrialState.FAIL)
            except Exception:  # noqa: BLE001 - keep the original error; a dead row is failed later
                pass

    def _store_failed(self, asked: list[optuna.Trial]) -> None:
        """A batch that could not be evaluated: stored as failed trials, told failed."""
        for trial in asked:
            try:
                self.storage.create_new_trial(
                    self.study_id,
                    template_trial=optuna.trial.create_trial(
                        state=TrialState.FAIL,
                        params=trial.params,
                        distributions=trial.distributions,
                        user_attrs={"worker": self.me},
                    ),
                )
            except Exception:  # noqa: BLE001 - keep the original error
                pass
            self.memory.tell(trial, state=TrialState.FAIL)


def _work(job: _Job) -> dict[str, float]:
    """Run one worker until the study holds its budget of designs (:func:`design_budget`); returns its timing.

    A worker process whose parent died leaves at once (its pool would keep it
    waiting for work that never comes).
    """
    exit_with_parent(job.parent_pid)  # also while a batch runs, not only between batches
    worker = _Worker(job)
    timing = worker.run()
    if worker.orphaned:
        os._exit(1)
    return timing


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


def _with_robust(study: Study, robust: bool | None, samples: int | None) -> Study:
    """The study with the robust-search options of the command line applied, checked."""
    if samples is not None and not MIN_ROBUST_SAMPLES <= samples <= MAX_ROBUST_SAMPLES:
        raise InputError(
            f"{samples} outside [{MIN_ROBUST_SAMPLES}, {MAX_ROBUST_SAMPLES}]",
            key="--robust-samples",
        )
    on = study.search.robust if robust is None else bool(robust)
    if samples is not None and not on:
        raise InputError(
            "needs --robust or [search] robust = true", source=study.source, key="--robust-samples"
        )
    changes: dict[str, Any] = {"robust": on}
    if samples is not None:
        changes["robust_samples"] = int(samples)
    study = replace(study, search=replace(study.search, **changes))
    if on:
        check_robust(study)
    return study


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
    robust: bool | None = None,
    robust_samples: int | None = None,
) -> SearchResult:
    """Run (or resume) the design search of a study and write its outputs.

    Parameters
    ----------
    study
        From :func:`wellwright.optimize.study.study.load_study`.
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
    robust
        Make the objective the Monte Carlo yield under ``[growth]`` (see
        :mod:`wellwright.optimize.search.robust`); default ``[search] robust``.
    robust_samples
        As-grown samples per design of a robust search; default
        ``[search] robust_samples``. The common random numbers are seeded by
        ``[search] seed`` (``seed`` reseeds only the sampler).

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
    study = _with_robust(study, robust, robust_samples)
    out = Path(out_dir) if out_dir is not None else Path(f"{study.name}_out")
    if storage is not None:
        check_storage_url(storage)
    else:
        out.mkdir(parents=True, exist_ok=True)
    url = storage_url(storage, out)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    ostudy = open_study(study, make_storage(url))

    timing: dict[str, float] = {}
    if n_workers == 1:
        timing = _work(_Job(study, url, target, base_seed, 0, evaluator, None, progress))
    else:
        # The baseline designs first, here, so that only one process evaluates them.
        complete = ostudy.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
        known = {study.parameter_key(t.params) for t in complete}
        missing = {study.parameter_key(p) for p in study.search.baseline} - known
        if missing:
            n_first = min(target, len(complete) + len(missing))
            timing = _work(_Job(study, url, n_first, base_seed, n_workers, evaluator))
        ctx = multiprocessing.get_context("spawn")
        # each worker watches this process from its start, before the job's imports (a
        # spawned worker under load takes seconds to reach _work)
        with concurrent.futures.ProcessPoolExecutor(
            max_workers=n_workers,
            mp_context=ctx,
            initializer=exit_with_parent,
            initargs=(os.getpid(),),
        ) as pool:
            futures = [
                pool.submit(
                    _work,
                    _Job(study, url, target, base_seed, w, evaluator, os.getpid(), baselines=False),
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
    first = [t for t in complete if "duplicate_of" not in t.user_attrs]  # copies left out
    result = SearchResult(
        study_name=study.optuna_name,
        storage=url,
        out_dir=out,
        n_complete=len(complete),
        n_feasible=sum(1 for t in complete if t.user_attrs.get("feasible")),
        designs=designs,
        directions=study.directions,
        timing=timing,
        n_designs=len(first),
        n_designs_feasible=sum(1 for t in first if t.user_attrs.get("feasible")),
    )
    if write:
        write_outputs(study, ostudy, result, complete)
    return result
