"""Growth tolerance of a design: Monte Carlo yield, Sobol and Morris ranking, tornado, allocation.

Every as-grown sample comes from :mod:`wellwright.optimize.study.growth` and goes through the
same physics as the search (:func:`wellwright.physics.iv.sweep`), many stacks per call,
batches spread over processes with joblib (loky by default, or any joblib
backend such as dask's).

The spec is the study's ``[targets]`` windows (:class:`wellwright.optimize.study.targets.Spec`,
re-exported here): a sample passes when every figure of merit named there
lies in its window (NaN, no NDR in the sweep, fails). The plain record this module produces (``tolerance.json``) is
described in :func:`run_tolerance`.

References
----------
.. [1] E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927) (score interval).
.. [2] A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010) (Sobol
   estimators, as implemented by SALib).
.. [3] M. D. Morris, Technometrics 33, 161 (1991) (elementary effects; from memory).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.shared.model_text import model_record
from wellwright.optimize.shared.processes import exit_with_parent
from wellwright.optimize.study.growth import AsGrown, GrowthModel, as_generator
from wellwright.optimize.study.targets import Spec  # re-exported: the pass/fail form of [targets]
from wellwright.physics.electrostatics import ElectrostaticsConvergenceError
from wellwright.physics.iv import (
    BOUNDED_BY_SWEEP,
    METRIC_NAMES,
    VALLEY_BOUNDED,
    at_bias_current_key,
    at_bias_key,
    sweep,
)
from wellwright.physics.stack import LayerTable, ModelOptions, Stack

__all__ = [
    "ranking_resolution",
    "sobol_until_resolved",
    "Spec",
    "wilson_interval",
    "yield_record",
    "batch_metrics",
    "evaluate_metrics",
    "monte_carlo_yield",
    "saltelli_design",
    "sobol_table",
    "sobol_analysis",
    "morris_analysis",
    "tornado",
    "allocate_tolerances",
    "choose_island_layers",
    "with_island_layers",
    "island_truncation_error",
    "control_order",
    "run_tolerance",
    "wafer_yield",
    "point_scale",
    "METHODS",
]

METHODS = ("sobol", "morris", "mc")
#: z is clipped to this many sigma when uniform design points are mapped to normals.
Z_CLIP = 6.0
#: Monte Carlo samples the allocation's bisection reuses (the first ones; each bisection step
#: evaluates them all, for every allocated parameter).
ALLOCATION_SAMPLES = 256
#: The growth parameter of a device's place on the wafer (never allocated a tolerance).
WAFER_PARAMETER = "wafer.radius_mm"
#: A Sobol run whose widest pass/fail total-index half-width exceeds this gets a note.
SOBOL_WIDE_CONF = 0.1
#: Base samples of the first Sobol design; it doubles until the ranking is resolved.
SOBOL_START_BASE = 32


# --------------------------------------------------------------------------- statistics


def wilson_interval(successes: int, n: int, *, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion.

    .. math:: \\frac{\\hat p + z^2/2n \\pm z\\sqrt{\\hat p(1-\\hat p)/n + z^2/4n^2}}{1 + z^2/n}

    References
    ----------
    .. [1] E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927).
    """
    from scipy.stats import norm

    if n <= 0:
        return (0.0, 1.0)
    z = float(norm.ppf(0.5 + confidence / 2.0))
    p = successes / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return (max(0.0, centre - half), min(1.0, centre + half))


# --------------------------------------------------------------------------- evaluation


#: Key of the per-sample flag (1.0 or 0.0) of a self-consistent solve that did not converge.
SOLVE_FAILED = "solve_failed"
#: Figures of merit whose Sobol indices and Morris effects are reported (the valley flag is
#: counted instead: :func:`valley_bounded_record`).
OUTPUT_NAMES = tuple(k for k in METRIC_NAMES if k != VALLEY_BOUNDED)


def output_names(metrics: dict[str, Any]) -> tuple[str, ...]:
    """The figures of an evaluation whose Sobol indices and Morris effects are reported:
    :data:`OUTPUT_NAMES` and the currents at stated biases it holds."""
    extra = tuple(k for k in metrics if k not in METRIC_NAMES and k != SOLVE_FAILED)
    return (*OUTPUT_NAMES, *extra)


def valley_bounded_record(nominal: dict[str, Any], metrics: dict[str, np.ndarray]) -> dict:
    """Whether the valley was bounded by the sweep end, nominally and in the Monte Carlo.

    ``nominal`` (bool), ``samples`` (how many samples' valleys were not reached even
    beyond the sweep end), ``of`` (samples with NDR) and ``bounded_figures`` (the figures
    of :data:`wellwright.physics.iv.BOUNDED_BY_SWEEP` that are then bounds, not values).
    """
    flag = np.asarray(metrics.get(VALLEY_BOUNDED, np.zeros(0)), float)
    return {
        "nominal": nominal.get(VALLEY_BOUNDED) == 1.0,
        "samples": int(np.count_nonzero(flag == 1.0)),
        "of": int(np.count_nonzero(np.isfinite(flag))),
        "bounded_figures": list(BOUNDED_BY_SWEEP),
    }


def metric_keys(at_bias_v: Sequence[float] = (), area_um2: float | None = None) -> tuple[str, ...]:
    """The figures of merit an evaluation returns: :data:`METRIC_NAMES`, then the current
    density at each stated bias and, with a mesa area, the mesa's current there in mA."""
    extra: list[str] = []
    for bias in at_bias_v:
        extra.append(at_bias_key(bias))
        if area_um2 is not None:
            extra.append(at_bias_current_key(bias))
    return (*METRIC_NAMES, *extra)


def batch_metrics(
    table: LayerTable,
    bias_v: np.ndarray,
    model: ModelOptions,
    resistance_ohm_um2: float,
    weights: np.ndarray | None = None,
    at_bias_v: Sequence[float] = (),
    area_um2: float | None = None,
) -> dict[str, np.ndarray]:
    """Metrics of a batch (of devices, with area ``weights``: see
    :func:`wellwright.physics.iv.sweep`, also for ``at_bias_v`` and ``area_um2``); where the
    self-consistent solve fails, each device alone, and a device that still fails gets NaN
    metrics and :data:`SOLVE_FAILED` set (a failed sample, counted, never the end of the run)."""
    n = table.n_stacks if weights is None else weights.shape[0]
    keys = metric_keys(at_bias_v, area_um2)
    try:
        metrics = sweep(
            table,
            bias_v,
            model=model,
            series_resistance_ohm_um2=resistance_ohm_um2,
            area_weights=weights,
            at_bias_v=at_bias_v,
            area_um2=area_um2,
        ).metrics
        return {**{k: metrics[k] for k in keys}, SOLVE_FAILED: np.zeros(n)}
    except ElectrostaticsConvergenceError:
        if n == 1:
            nan = {name: np.full(1, np.nan) for name in keys}
            return {**nan, SOLVE_FAILED: np.ones(1)}
    parts = []
    extra = (at_bias_v, area_um2)
    for i in range(n):
        if weights is None:
            parts.append(
                batch_metrics(
                    table.take(slice(i, i + 1)), bias_v, model, resistance_ohm_um2, None, *extra
                )
            )
            continue
        cols = np.nonzero(weights[i])[0]
        parts.append(
            batch_metrics(
                table.take(cols),
                bias_v,
                model,
                resistance_ohm_um2,
                weights[i : i + 1, cols],
                *extra,
            )
        )
    return {k: np.concatenate([p[k] for p in parts]) for k in (*keys, SOLVE_FAILED)}


def _batches(devices: LayerTable | AsGrown, batch_size: int):
    """``(start, stop, table, area weights or None)`` per batch of devices."""
    n = devices.n_samples if isinstance(devices, AsGrown) else devices.n_stacks
    for s in range(0, n, batch_size):
        stop = min(s + batch_size, n)
        if isinstance(devices, AsGrown):
            yield (s, stop, *devices.batch(s, stop))
        else:
            yield s, stop, devices.take(slice(s, stop)), None


def evaluate_metrics(
    table: LayerTable | AsGrown,
    bias_v: np.ndarray,
    *,
    model: ModelOptions = ModelOptions(),
    series_resistance_ohm_um2: float = 0.0,
    batch_size: int = 16,
    n_jobs: int = 1,
    backend: str | None = None,
    progress: bool = False,
    desc: str = "samples",
    at_bias_v: Sequence[float] = (),
    area_um2: float | None = None,
) -> dict[str, np.ndarray]:
    """Figures of merit of every row of ``table`` (or every device of an :class:`AsGrown`,
    from its island-mixture curve): batches of ``batch_size`` devices per kernel call,
    spread over ``n_jobs`` joblib workers (``backend`` None: loky); the series resistance
    enters only the cutoff frequency; ``at_bias_v`` and ``area_um2``: the currents at stated
    biases (:func:`metric_keys`)."""
    from joblib import Parallel, delayed, parallel_config

    n = table.n_samples if isinstance(table, AsGrown) else table.n_stacks
    batches = list(_batches(table, batch_size))
    starts = [b[0] for b in batches]
    jobs = (
        delayed(batch_metrics)(t, bias_v, model, series_resistance_ohm_um2, w, at_bias_v, area_um2)
        for _, _, t, w in batches
    )
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=n, desc=desc, unit="stack", leave=False)
    parts = []
    # parallel_config (not Parallel(backend=...)) also registers joblib's dask backend; loky's
    # workers leave when this process is killed (they would idle for minutes otherwise)
    config = (
        parallel_config(backend=backend)
        if backend is not None
        else parallel_config(backend="loky", initializer=exit_with_parent, initargs=(os.getpid(),))
    )
    with config:
        results = Parallel(n_jobs=n_jobs, return_as="generator")(jobs)
        for s, r in zip(starts, results, strict=True):
            parts.append(r)
            if bar is not None:
                bar.update(min(batch_size, n - s))
    if bar is not None:
        bar.close()
    return {
        k: np.concatenate([p[k] for p in parts]) if parts else np.zeros(0)
        for k in (*metric_keys(at_bias_v, area_um2), SOLVE_FAILED)
    }


@dataclass(frozen=True)
class Runner:
    """How samples are evaluated: bias grid, model, batching and parallelism, and the
    stated biases at which the spec asks for a current (with the mesa area for mA)."""

    bias_v: np.ndarray
    model: ModelOptions = ModelOptions()
    series_resistance_ohm_um2: float = 0.0
    batch_size: int = 16
    n_jobs: int = 1
    backend: str | None = None
    progress: bool = False
    at_bias_v: tuple[float, ...] = ()
    area_um2: float | None = None

    def __call__(self, table: LayerTable | AsGrown, desc: str = "samples") -> dict[str, np.ndarray]:
        return evaluate_metrics(
            table,
            self.bias_v,
            model=self.model,
            series_resistance_ohm_um2=self.series_resistance_ohm_um2,
            batch_size=self.batch_size,
            n_jobs=self.n_jobs,
            backend=self.backend,
            progress=self.progress,
            desc=desc,
            at_bias_v=self.at_bias_v,
            area_um2=self.area_um2,
        )


# --------------------------------------------------------------------------- Monte Carlo


def yield_record(ok: np.ndarray, confidence: float = 0.95) -> dict[str, Any]:
    """Yield of pass/fail outcomes ``ok``: ``value`` (fraction passing), ``ci_low``,
    ``ci_high`` (Wilson score interval [1]_), ``samples``, ``passed``, ``confidence``."""
    k, n = int(np.count_nonzero(ok)), int(ok.size)
    lo, hi = wilson_interval(k, n, confidence=confidence)
    return {
        "value": k / n if n else float("nan"),
        "ci_low": lo,
        "ci_high": hi,
        "samples": n,
        "passed": k,
        "confidence": confidence,
    }


def monte_carlo_yield(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    samples: int,
    seed: int | np.random.Generator | None = None,
) -> dict[str, Any]:
    """Monte Carlo yield with the Wilson interval and the failure breakdown.

    Returns ``yield`` (see :func:`yield_record`), ``failures`` (per window:
    samples missing it; ``no_ndr``: samples with no NDR in the sweep;
    ``solve_failed``: samples whose self-consistent solve did not converge, failed),
    ``metrics`` (arrays), ``passed`` (bool array) and ``z`` (the random
    numbers, reused as common random numbers by the allocation). Each sample is
    the island mixture of :meth:`GrowthModel.grow`, at the wafer's centre (see
    :func:`wafer_yield` for the yield over the wafer).
    """
    rng = as_generator(seed)
    z = model.draw_z(samples, rng)
    metrics = run(model.grow(z, sigma_scale=point_scale(model)), desc="Monte Carlo")
    ok = spec.passes(metrics)
    failures = {name: int(np.count_nonzero(m)) for name, m in spec.misses(metrics).items()}
    failed = np.asarray(metrics.get(SOLVE_FAILED, np.zeros(samples))) > 0
    failures["no_ndr"] = int(
        np.count_nonzero(~np.isfinite(metrics["peak_current_density_a_cm2"]) & ~failed)
    )
    failures[SOLVE_FAILED] = int(np.count_nonzero(failed))
    return {
        "yield": yield_record(ok),
        "failures": failures,
        "metrics": metrics,
        "passed": ok,
        "z": z,
    }


def point_scale(model: GrowthModel) -> np.ndarray | None:
    """Sigma factors that put every sample at the wafer's centre (None without a wafer)."""
    kinds = [p.kind for p in model.parameters]
    if "wafer" not in kinds:
        return None
    return np.array([0.0 if k == "wafer" else 1.0 for k in kinds])


def wafer_yield(
    model: GrowthModel, spec: Spec, run: Runner, z: np.ndarray, *, rings: int | None = None
) -> dict[str, Any]:
    """Yield over the wafer's area: the samples ``z`` at their own places on the wafer.

    Returns ``yield`` (:func:`yield_record`: the share of the wafer's area
    where a device meets the spec, with its Wilson interval [1]_),
    ``radius_mm`` and ``passed`` per sample, ``rings`` (equal-area rings,
    ``{r_in_mm, r_out_mm, samples, passed, value, ci_low, ci_high}``: the pass
    probability by radius) and ``profile`` (the nominal design's figures of
    merit at 13 radii from the centre to the edge, only the wafer's profile
    applied: ``{radius_mm, <metric>...}``).
    """
    wafer = model.wafer
    r = model.radius_mm(z)
    assert wafer is not None and r is not None  # called only for a model with a wafer
    ok = spec.passes(run(model.grow(z), desc="wafer"))
    n_rings = rings or int(np.clip(z.shape[0] // 48, 3, 8))
    edges = wafer.radius_mm * np.sqrt(np.linspace(0.0, 1.0, n_rings + 1))
    ring = np.clip(np.searchsorted(edges, r, side="right") - 1, 0, n_rings - 1)
    ring_rows = []
    for k in range(n_rings):
        rec = yield_record(ok[ring == k])
        ring_rows.append({"r_in_mm": float(edges[k]), "r_out_mm": float(edges[k + 1]), **rec})
    radii = np.linspace(0.0, wafer.radius_mm, 13)
    only = np.array([1.0 if p.kind == "wafer" else 0.0 for p in model.parameters])
    zeros = np.zeros((radii.size, len(model.parameters)))
    nominal = run(model.grow(zeros, sigma_scale=only, radius_mm=radii), desc="wafer profile")
    profile = [{"radius_mm": float(radii[i]), **_clean(nominal, i)} for i in range(radii.size)]
    return {
        "yield": yield_record(ok),
        "radius_mm": r,
        "passed": ok,
        "rings": ring_rows,
        "profile": profile,
    }


# --------------------------------------------------------------------------- Sobol


def _int_seed(rng: np.random.Generator) -> int:
    return int(rng.integers(0, 2**31 - 1))


def saltelli_design(
    n_params: int,
    base_samples: int,
    *,
    second_order: bool = False,
    seed: int | np.random.Generator | None = None,
) -> np.ndarray:
    """Saltelli design points in the unit cube (SALib's scrambled Sobol' sampler;
    ``base_samples`` a power of 2): ``base_samples * (n_params + 2)`` rows for first and
    total order, ``base_samples * (2 n_params + 2)`` with ``second_order``."""
    from SALib.sample import sobol as sobol_sample

    problem = {
        "num_vars": n_params,
        "names": [f"p{i}" for i in range(n_params)],
        "bounds": [[0.0, 1.0]] * n_params,
    }
    return sobol_sample.sample(
        problem, base_samples, calc_second_order=second_order, seed=_int_seed(as_generator(seed))
    )


def sobol_table(
    names: Sequence[str],
    y: np.ndarray,
    *,
    seed: int | np.random.Generator | None = None,
    confidence: float = 0.95,
    resamples: int = 200,
    pairs: list | None = None,
) -> list[dict[str, Any]]:
    """First and total Sobol indices of outputs ``y`` on a :func:`saltelli_design`, ordered by
    total index, most important first: ``{parameter, first_index, first_conf, total_index, total_conf}``.

    With a list ``pairs`` (and ``y`` on a second-order design) the second-order
    indices are appended to it as ``{parameters: [a, b], index, conf}``, largest first.
    """
    from SALib.analyze import sobol as sobol_analyze

    problem = {"num_vars": len(names), "names": list(names), "bounds": [[0.0, 1.0]] * len(names)}
    y = np.asarray(y, float)
    if np.nanstd(y) == 0.0:
        rows = [
            {
                "parameter": p,
                "first_index": 0.0,
                "first_conf": 0.0,
                "total_index": 0.0,
                "total_conf": 0.0,
            }
            for p in names
        ]
        return rows
    res = sobol_analyze.analyze(
        problem,
        y,
        calc_second_order=pairs is not None,
        num_resamples=resamples,
        conf_level=confidence,
        seed=_int_seed(as_generator(seed)),
    )
    rows = [
        {
            "parameter": p,
            "first_index": float(res["S1"][i]),
            "first_conf": float(res["S1_conf"][i]),
            "total_index": float(res["ST"][i]),
            "total_conf": float(res["ST_conf"][i]),
        }
        for i, p in enumerate(names)
    ]
    if pairs is not None:
        d = len(names)
        found = [
            {
                "parameters": [names[i], names[j]],
                "index": float(res["S2"][i, j]),
                "conf": float(res["S2_conf"][i, j]),
            }
            for i in range(d)
            for j in range(i + 1, d)
        ]
        pairs.extend(sorted(found, key=lambda r: -r["index"]))
    return sorted(rows, key=lambda r: -r["total_index"])


# --------------------------------------------------------------------------- ranking resolution


def ranking_resolution(
    rows: Sequence[dict[str, Any]], *, score: str = "total_index", conf: str = "total_conf"
) -> dict[str, Any]:
    """Whether a ranking is resolved: the leader's interval lies above the runner-up's.

    ``rows`` are ordered, most important first, each with a ``score`` and its
    confidence half-width ``conf``. A parameter whose interval reaches zero
    (``score - conf <= 0``) is indistinguishable from no effect and is listed
    as such, not ranked. Returns ``resolved``, ``leader``, ``runner_up`` (None
    when absent), ``ranked`` and ``indistinguishable_from_zero`` (names).
    """
    zero = [r["parameter"] for r in rows if r[score] - r[conf] <= 0]
    ranked = [r for r in rows if r["parameter"] not in zero]
    if not rows or rows[0]["parameter"] in zero:
        resolved = False  # no leader stands out from zero
    elif len(rows) == 1:
        resolved = True
    else:  # the runner-up is the next row, whether or not it stands out from zero
        resolved = rows[0][score] - rows[0][conf] > rows[1][score] + rows[1][conf]
    return {
        "resolved": bool(resolved),
        "leader": rows[0]["parameter"] if rows else None,
        "runner_up": rows[1]["parameter"] if len(rows) > 1 else None,
        "ranked": [r["parameter"] for r in ranked],
        "indistinguishable_from_zero": zero,
    }


def sobol_until_resolved(
    names: Sequence[str],
    evaluate: Callable[[np.ndarray], dict[str, np.ndarray]],
    *,
    key: str,
    max_evaluations: int,
    start_base: int = 32,
    second_order: bool = False,
    seed: int | np.random.Generator | None = None,
) -> dict[str, Any]:
    """Sobol indices on a Saltelli design that doubles until the ranking of ``key`` is resolved.

    ``evaluate(u)`` maps design rows in the unit cube to outputs (name ->
    values). The design of ``2 N`` base samples starts with the rows of the
    ``N`` design (same scrambled sequence), so each doubling evaluates only
    the new rows; it stops when :func:`ranking_resolution` of ``key`` says
    resolved or when the next doubling would exceed ``max_evaluations``
    (the first design, ``start_base`` base samples, is always run). Returns
    ``outputs`` (name -> values on the final design), ``u``, ``tables``
    (name -> :func:`sobol_table` rows; None where an output is not finite),
    ``resolution`` and ``evaluations``.

    References
    ----------
    .. [1] A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010) (estimators).
    """
    rng = as_generator(seed)
    design_seed = _int_seed(rng)
    d = len(names)
    per_base = 2 * d + 2 if second_order else d + 2
    n = start_base
    u = np.zeros((0, d))
    outputs: dict[str, np.ndarray] = {}
    while True:
        full = saltelli_design(d, n, second_order=second_order, seed=design_seed)
        new = evaluate(full[u.shape[0] :])
        outputs = {k: np.concatenate([outputs.get(k, np.zeros(0)), v]) for k, v in new.items()}
        u = full
        y = outputs[key]
        finite = np.all(np.isfinite(y))
        pairs: list | None = [] if second_order else None  # the design's layout, pairs unused
        rows = sobol_table(names, y, seed=rng, pairs=pairs) if finite else []
        res = ranking_resolution(rows)
        if res["resolved"] or 2 * n * per_base > max_evaluations:
            break
        n *= 2
    return {
        "outputs": outputs,
        "u": u,
        "base_samples": n,
        "resolution": res,
        "evaluations": u.shape[0],
    }


def _normal(u: np.ndarray) -> np.ndarray:
    from scipy.stats import norm

    return np.clip(norm.ppf(np.clip(u, 1e-12, 1 - 1e-12)), -Z_CLIP, Z_CLIP)


def sobol_analysis(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    base_samples: int,
    max_evaluations: int | None = None,
    second_order: bool = False,
    seed: int | np.random.Generator | None = None,
) -> dict[str, Any]:
    """Sobol indices of each figure of merit and of pass/fail w.r.t. every growth parameter.

    Each point is the island mixture of :meth:`GrowthModel.grow` (a
    deterministic function of the parameters, as the estimators need). With ``max_evaluations`` the
    design starts at ``base_samples`` and doubles until the ranking of
    pass/fail is resolved or the budget is spent (:func:`sobol_until_resolved`);
    without, it is one design of ``base_samples``. A figure of merit that is
    NaN (no NDR) in some sample is skipped with a note. Returns ``sobol``
    (name -> ordered list), ``notes``, ``evaluations``, ``base_samples`` and
    ``resolution`` (:func:`ranking_resolution` of pass/fail); with
    ``second_order`` (``N (2 D + 2)`` evaluations instead of ``N (D + 2)``)
    also ``sobol_second_order`` (name -> pairs of parameters with their
    interaction index, largest first).
    """
    rng = as_generator(seed)

    def evaluate(u: np.ndarray) -> dict[str, np.ndarray]:
        metrics = run(model.grow(_normal(u)), desc="Sobol")
        out = {name: metrics[name] for name in output_names(metrics)}
        out["pass"] = spec.passes(metrics).astype(float)
        out[SOLVE_FAILED] = np.asarray(metrics.get(SOLVE_FAILED, np.zeros(u.shape[0])), float)
        return out

    grown = sobol_until_resolved(
        model.names,
        evaluate,
        key="pass",
        max_evaluations=0 if max_evaluations is None else max_evaluations,
        start_base=base_samples,
        second_order=second_order,
        seed=rng,
    )
    outputs = grown["outputs"]
    unsolved = int(np.count_nonzero(outputs.pop(SOLVE_FAILED)))
    out: dict[str, list] = {}
    pairs: dict[str, list] = {}
    notes = []
    for name, y in outputs.items():
        bad = int(np.count_nonzero(~np.isfinite(y)))
        if bad:
            why = f" ({unsolved} of them: solve did not converge)" if unsolved else ""
            notes.append(f"sobol of {name} skipped: no NDR in {bad} of {y.size} samples{why}")
            continue
        if second_order:
            pairs[name] = []
        out[name] = sobol_table(model.names, y, seed=rng, pairs=pairs.get(name))
    result = {
        "sobol": out,
        "notes": notes,
        "evaluations": int(grown["evaluations"]),
        "base_samples": int(grown["base_samples"]),
        "resolution": ranking_resolution(out.get("pass", [])),
    }
    if second_order:
        result["sobol_second_order"] = pairs
    return result


# --------------------------------------------------------------------------- Morris


def morris_analysis(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    trajectories: int,
    levels: int = 4,
    seed: int | np.random.Generator | None = None,
) -> dict[str, Any]:
    """Morris elementary effects (mu*, sigma) per figure of merit and pass/fail, ordered by mu*.

    Parameters span +-2.5 sigma on a uniform grid of ``levels``; each point is
    the island mixture of :meth:`GrowthModel.grow`; elementary effects are per
    unit of the unit cube (5 sigma).
    """
    from SALib.analyze import morris as morris_analyze
    from SALib.sample import morris as morris_sample

    rng = as_generator(seed)
    d = len(model.parameters)
    problem = {"num_vars": d, "names": list(model.names), "bounds": [[0.0, 1.0]] * d}
    x = morris_sample.sample(problem, trajectories, num_levels=levels, seed=_int_seed(rng))
    z = (x - 0.5) * 5.0  # [0, 1] -> [-2.5, 2.5] sigma
    metrics = run(model.grow(z), desc="Morris")
    out: dict[str, list] = {}
    notes = []
    outputs = {name: metrics[name] for name in output_names(metrics)}
    outputs["pass"] = spec.passes(metrics).astype(float)
    for name, y in outputs.items():
        if not np.all(np.isfinite(y)):
            notes.append(f"morris of {name} skipped: no NDR in some samples")
            continue
        res = morris_analyze.analyze(
            problem,
            x,
            np.asarray(y, float),
            num_resamples=200,
            num_levels=levels,
            seed=_int_seed(rng),
        )
        rows = [
            {
                "parameter": p,
                "mu_star": float(res["mu_star"][i]),
                "mu_star_conf": float(res["mu_star_conf"][i]),
                "sigma": float(res["sigma"][i]),
            }
            for i, p in enumerate(model.names)
        ]
        out[name] = sorted(rows, key=lambda r: -r["mu_star"])
    return {"morris": out, "notes": notes, "evaluations": int(x.shape[0])}


# --------------------------------------------------------------------------- tornado


def tornado(stack: Stack, run: Runner) -> dict[str, Any]:
    """One-at-a-time: each layer between the contacts -1 and +1 monolayer, all else nominal.

    Returns ``nominal`` (metrics) and ``layers``: a list of ``{layer, minus,
    plus}`` (metrics at -1 / +1 ML), ordered by the swing of the peak
    current density, largest first. One batched evaluation of ``1 + 2k`` stacks.
    """
    idx = [i for i, lay in enumerate(stack.layers[1:-1], start=1) if lay.monolayer_nm is not None]
    table = stack.table()
    rows = [table.thickness_nm[0].copy()]
    for i in idx:
        for step in (-1, 1):
            t = table.thickness_nm[0].copy()
            ml = stack.layers[i].monolayer_nm
            assert ml is not None  # idx holds only layers with a monolayer
            t[i] = max(t[i] + step * ml, ml)
            rows.append(t)
    big = table.take(np.zeros(len(rows), int)).with_thickness_nm(np.array(rows))
    m = run(big, desc="tornado")
    pick = lambda r: {k: (None if not np.isfinite(v[r]) else float(v[r])) for k, v in m.items()}  # noqa: E731
    layers = [
        {"layer": stack.layers[i].name, "minus": pick(1 + 2 * j), "plus": pick(2 + 2 * j)}
        for j, i in enumerate(idx)
    ]

    def swing(rec: dict) -> float:
        a, b = rec["minus"]["peak_current_density_a_cm2"], rec["plus"]["peak_current_density_a_cm2"]
        return abs(b - a) if a is not None and b is not None else math.inf

    return {"nominal": pick(0), "layers": sorted(layers, key=lambda r: -swing(r))}


def choose_island_layers(
    stack: Stack, tornado_layers: list[dict], *, max_layers: int = 3
) -> tuple[int, ...] | None:
    """The layers whose monolayer islands matter most: the ``max_layers`` largest curvatures.

    The curvature of layer ``i`` is ``|Jp(+1) - 2 Jp(0) + Jp(-1)| / Jp(0)``
    from the tornado's one-monolayer steps (no NDR counts as infinite): a
    layer left continuous is off from its own island mixture by about
    ``f (1 - f) / 2`` times it (second-order Taylor expansion of
    ``(1 - f) J(n) + f J(n + 1)`` about ``n + f``), though interactions
    between layers add to that, so the analysis measures the truncation error
    (:func:`island_truncation_error`) rather than trusting it. Returns None (every layer) when there are no more layers
    than ``max_layers``.
    """
    names = [lay.name for lay in stack.layers]
    if len(tornado_layers) <= max_layers:
        return None
    return tuple(sorted(names.index(r["layer"]) for r in tornado_layers[:max_layers]))


def _curvature_order(nominal: dict, layers: list[dict]) -> list[dict]:
    def curvature(r: dict) -> float:
        key = "peak_current_density_a_cm2"
        j0, a, b = nominal.get(key), r["minus"][key], r["plus"][key]
        if j0 is None or a is None or b is None or j0 == 0:
            return math.inf
        return abs(a - 2 * j0 + b) / abs(j0)

    rows = [{**r, "curvature": curvature(r)} for r in layers]
    return sorted(rows, key=lambda r: -r["curvature"])


def with_island_layers(model: GrowthModel, run: Runner) -> tuple[GrowthModel, dict[str, Any]]:
    """``model`` with its island layers chosen (:func:`choose_island_layers`) and the
    tornado record it was chosen from, with ``islands``: {layers, continuous_layers,
    curvatures (relative, of the peak current density)}."""
    import dataclasses

    tor = tornado(model.stack, run)
    ordered = _curvature_order(tor["nominal"], tor["layers"])
    chosen = choose_island_layers(model.stack, ordered, max_layers=model.max_island_layers)
    k = len(ordered) if chosen is None else len(chosen)
    finite = lambda v: v if math.isfinite(v) else None  # noqa: E731
    tor["islands"] = {
        "layers": [r["layer"] for r in ordered[:k]],
        "continuous_layers": [r["layer"] for r in ordered[k:]],
        "curvatures": {r["layer"]: finite(r["curvature"]) for r in ordered},
    }
    return dataclasses.replace(model, island_layers=chosen), tor


def island_truncation_error(
    model: GrowthModel, run: Runner, z: np.ndarray
) -> dict[str, float | int | None]:
    """Largest relative difference of Jp, Vp and PVCR between the chosen island layers and
    the full mixture over every layer (``2**k`` stacks) on the samples ``z``."""
    import dataclasses

    full = run(dataclasses.replace(model, island_layers=None).grow(z), desc="island check")
    used = run(model.grow(z), desc="island check")
    out: dict[str, float | int | None] = {"samples": int(np.atleast_2d(z).shape[0])}
    for key in ("peak_current_density_a_cm2", "peak_voltage_v", "pvcr"):
        err = np.abs(used[key] / full[key] - 1.0)
        out[key] = float(np.nanmax(err)) if np.any(np.isfinite(err)) else None
    return out


# --------------------------------------------------------------------------- allocation


#: Label of the joint allocation row: every layer's thickness spread scaled together.
ALL_THICKNESSES = "all layer thicknesses"


def allocate_tolerances(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    parameters: Sequence[str],
    z: np.ndarray,
    target_yield: float = 0.9,
    max_scale: float = 4.0,
    steps: int = 6,
    joint_thickness: bool = True,
) -> list[dict[str, Any]]:
    """Largest sigma of each named parameter that still gives ``target_yield``.

    Bisection on the Monte Carlo yield over a factor ``s`` in ``[0, max_scale]``
    on that parameter's sigma (the others at theirs), with common random
    numbers: the same ``z`` at every step (at the wafer's centre), so the yield
    changes only through ``s``. With ``joint_thickness`` a last row scales
    every layer's thickness sigma by one common factor (the question "how
    well must the whole growth hold its monolayers?", which a single layer
    cannot answer when several share the failures). Returns ``{parameter,
    nominal_sigma, allowed_sigma, unit, yield_at_allowed, note}``;
    ``allowed_sigma`` is None when even ``s = 0`` misses the target, and
    ``max_scale * sigma`` (with a note) when the target holds up to there.
    """
    names = list(model.names)
    base = point_scale(model)
    base = np.ones(len(names)) if base is None else base
    groups: list[tuple[str, list[int]]] = [(p, [names.index(p)]) for p in parameters]
    thickness = [j for j, par in enumerate(model.parameters) if par.kind == "thickness"]
    if joint_thickness and len(thickness) > 1:
        groups.append((ALL_THICKNESSES, thickness))
    out = []
    for label, idx in groups:
        sig = float(np.max([model.sigmas[j] for j in idx]))

        def yield_at(s: float, idx: list[int] = idx, label: str = label) -> float:
            scale = base.copy()
            scale[idx] = s
            metrics = run(model.grow(z, sigma_scale=scale), desc=f"allocate {label}")
            return float(np.mean(spec.passes(metrics)))

        rec: dict[str, Any] = {
            "parameter": label,
            "nominal_sigma": sig,
            "unit": model.parameters[idx[0]].unit,
            "target_yield": target_yield,
            "note": "" if len(idx) == 1 else "every layer's thickness sigma scaled together",
        }
        y_hi = yield_at(max_scale)
        if y_hi >= target_yield:
            rec.update(
                allowed_sigma=float(max_scale * sig),
                yield_at_allowed=y_hi,
                note=f"target met up to {max_scale:g} x the nominal sigma (search bound)",
            )
            out.append(rec)
            continue
        y_lo = yield_at(0.0)
        if y_lo < target_yield:
            rec.update(
                allowed_sigma=None,
                yield_at_allowed=y_lo,
                note="target missed even with this held exactly; other spreads dominate",
            )
            out.append(rec)
            continue
        lo, hi, y_best = 0.0, max_scale, y_lo
        for _ in range(steps):
            mid = 0.5 * (lo + hi)
            y = yield_at(mid)
            if y >= target_yield:
                lo, y_best = mid, y
            else:
                hi = mid
        rec.update(allowed_sigma=float(lo * sig), yield_at_allowed=y_best)
        out.append(rec)
    return out


# --------------------------------------------------------------------------- driver


def _island_note(islands: dict[str, Any]) -> str:
    if not islands["layers"]:
        return (
            "monolayer islands not modelled ([growth] island_layers = 0): every layer at its "
            "continuous thickness"
        )
    text = (
        "monolayer islands: each as-grown sample is the area-weighted mixture of the I-Vs of "
        f"the whole-monolayer stacks of {', '.join(islands['layers'])}"
    )
    if not islands["continuous_layers"]:
        return text + " (every combination, exact)"
    text += f"; {', '.join(islands['continuous_layers'])} kept at their continuous thickness"
    check = islands.get("check")
    if check and check.get("peak_current_density_a_cm2") is not None:
        text += (
            f" (truncation error against the mixture over every layer, largest on "
            f"{check['samples']} samples: Jp {100 * check['peak_current_density_a_cm2']:.2g} %, "
            f"Vp {100 * (check['peak_voltage_v'] or 0):.2g} %, "
            f"PVCR {100 * (check['pvcr'] or 0):.2g} %)"
        )
    return text


def _wafer_record(model: GrowthModel, mc: dict[str, Any]) -> dict[str, Any]:
    if "wafer" not in mc:
        return {}
    w = model.wafer
    assert w is not None  # "wafer" in mc only for a model with a wafer
    return {
        "wafer_yield": mc["wafer"]["yield"],
        "wafer": {
            "diameter_mm": w.diameter_mm,
            "thickness_loss": w.thickness_loss if not w.thickness_profile else None,
            "thickness_profile": [list(p) for p in w.thickness_profile] or None,
            "x_shift": w.x_shift,
            "doping_change": w.doping_change,
            "rings": mc["wafer"]["rings"],
            "profile": mc["wafer"]["profile"],
        },
    }


def control_order(model: GrowthModel, scores: dict[str, float], measure: str) -> list[dict]:
    """What the grower should control hardest: the parameters grouped by what controls
    them (a source cell, a layer, a material's rate), each group scored by its largest
    parameter score, largest first: ``{control, parameters, score, measure}``."""
    groups: dict[str, list[str]] = {}
    for p in model.parameters:
        groups.setdefault(p.control, []).append(p.name)
    rows = [
        {
            "control": control,
            "parameters": sorted(names, key=lambda n: -scores.get(n, 0.0)),
            "score": max(scores.get(n, 0.0) for n in names),
            "measure": measure,
        }
        for control, names in groups.items()
    ]
    return sorted(rows, key=lambda r: -r["score"])


def _clean(metrics: dict[str, np.ndarray], i: int) -> dict[str, float | None]:
    return {k: (None if not np.isfinite(v[i]) else float(v[i])) for k, v in metrics.items()}


def run_tolerance(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    method: str = "sobol",
    samples: int = 256,
    seed: int | np.random.Generator | None = None,
    allocate: int = 3,
    target_yield: float = 0.9,
    out_dir: str | Path | None = None,
    design: dict[str, Any] | None = None,
    figures: bool = True,
    second_order: bool = False,
    island_checks: int = 4,
) -> dict[str, Any]:
    """The whole tolerance analysis of one design; optionally writes ``out_dir``.

    The island layers are chosen first (:func:`with_island_layers`); with
    ``island_checks`` > 0 and layers left continuous, the first
    ``island_checks`` Monte Carlo samples are also evaluated with the full
    mixture to measure the truncation error (``islands.check``).

    ``method``: ``mc`` (yield, tornado, allocation), ``morris`` (adds Morris
    screening with ``max(2, samples // (n_params + 1))`` trajectories) or
    ``sobol`` (adds Sobol indices with the largest power of two
    ``<= samples // (n_params + 2)`` base samples, at least 8). The allocation
    reuses the first :data:`ALLOCATION_SAMPLES` Monte Carlo samples.

    The record (``tolerance.json``): ``yield`` {value, ci_low, ci_high,
    samples, passed, confidence} (at the wafer's centre); with
    ``[growth.wafer]`` also ``wafer_yield`` (the same fields, over the wafer's
    area) and ``wafer`` {diameter_mm, profile settings, rings, profile} (see
    :func:`wafer_yield`); ``failures``; ``sobol`` {metric name and
    ``pass`` -> list ordered by total index of {parameter, first_index,
    first_conf, total_index, total_conf}} (empty unless ``sobol``);
    ``sobol_second_order`` {metric name and ``pass`` -> pairs ``{parameters,
    index, conf}``, largest first} (only with ``second_order``, which spends the
    budget on ``N (2 D + 2)`` instead of ``N (D + 2)`` evaluations);
    ``morris``; ``tornado``; ``islands`` {layers, continuous_layers, curvatures,
    check}; ``allocation``; ``parameters`` [{name, kind,
    sigma, unit, control}]; ``control_order`` (:func:`control_order`: source
    cells and layers, the one to control hardest first); ``ranking`` (Sobol or
    Morris: :func:`ranking_resolution` of pass/fail with ``measure``,
    ``evaluations`` used and the ``budget``) and ``ranking_resolved`` (None for
    ``mc``); ``nominal`` metrics; ``valley_bounded_by_sweep``
    (:func:`valley_bounded_record`: nominal and Monte Carlo valleys not reached even
    beyond the sweep end, whose figures are bounds); ``spec``; ``settings``; ``notes``. The Sobol
    design starts at :data:`SOBOL_START_BASE` base samples and doubles until
    the leader of pass/fail is separated from the runner-up beyond their
    confidence intervals or the budget is spent.
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}")
    rng = as_generator(seed)
    seeds = rng.spawn(4)
    notes: list[str] = []
    model, tor = with_island_layers(model, run)
    mc = monte_carlo_yield(model, spec, run, samples=samples, seed=seeds[0])
    if model.wafer is not None:
        mc["wafer"] = wafer_yield(model, spec, run, mc["z"])
    record: dict[str, Any] = {
        "design": design or {},
        "parameters": [
            {"name": p.name, "kind": p.kind, "sigma": p.sigma, "unit": p.unit, "control": p.control}
            for p in model.parameters
        ],
        "spec": [
            {
                "metric": m,
                "min": lo if math.isfinite(lo) else None,
                "max": hi if math.isfinite(hi) else None,
            }
            for m, lo, hi in spec.windows
        ],
        "yield": mc["yield"],
        "failures": mc["failures"],
        **_wafer_record(model, mc),
        "sobol": {},
        "morris": {},
    }
    record["model"] = model_record(model.stack)
    record["nominal"] = tor["nominal"]
    bounded = valley_bounded_record(tor["nominal"], mc["metrics"])
    record[VALLEY_BOUNDED] = bounded
    if bounded["nominal"] or bounded["samples"]:
        notes.append(
            f"valley bounded by the sweep end (the current still falls at the last bias "
            f"computed): {'the nominal design and ' if bounded['nominal'] else ''}"
            f"{bounded['samples']} of {bounded['of']} Monte Carlo samples; their valley "
            "current is an upper bound and valley voltage, PVCR, peak-to-valley differences "
            "and output power lower bounds (spreads and indices of these figures include "
            "bounds): raise the sweep's end bias"
        )
    record["tornado"] = tor["layers"]
    islands = tor["islands"]
    if islands["continuous_layers"] and island_checks > 0:
        islands["check"] = island_truncation_error(model, run, mc["z"][:island_checks])
    record["islands"] = islands
    notes.append(_island_note(islands))
    d = len(model.parameters)
    ranking_source = None
    if method == "sobol":
        per_base = 2 * d + 2 if second_order else d + 2
        n_base = max(8, 2 ** int(math.floor(math.log2(max(1, samples // per_base)))))
        s = sobol_analysis(
            model,
            spec,
            run,
            base_samples=min(n_base, SOBOL_START_BASE),
            max_evaluations=n_base * per_base,
            second_order=second_order,
            seed=seeds[1],
        )
        n_base = s["base_samples"]
        record["sobol"] = s["sobol"]
        if second_order:
            record["sobol_second_order"] = s["sobol_second_order"]
        notes += s["notes"]
        widest = max((r["total_conf"] for r in s["sobol"]["pass"]), default=0.0)
        if widest > SOBOL_WIDE_CONF:
            notes.append(
                f"Sobol on {n_base} base samples for {d} parameters: confidence half-widths up "
                f"to {widest:.2f}, so negative first-order estimates and totals above 1 are "
                "sampling noise; trust the order of the leading parameters, not the values, "
                "or rerun with more --samples (the half-widths shrink as 1/sqrt(samples))"
            )
        record["sobol_evaluations"] = s["evaluations"]
        record["ranking"] = {
            **s["resolution"],
            "measure": "total Sobol index of pass/fail",
            "evaluations": s["evaluations"],
            "budget": samples,
        }
        # parameters whose total index is indistinguishable from zero are not ranked
        ranking_source = s["resolution"]["ranked"] or None
    elif method == "morris":
        m = morris_analysis(
            model, spec, run, trajectories=max(2, samples // (d + 1)), seed=seeds[1]
        )
        record["morris"] = m["morris"]
        record["ranking"] = {
            **ranking_resolution(m["morris"].get("pass", []), score="mu_star", conf="mu_star_conf"),
            "measure": "Morris mu* of pass/fail",
            "evaluations": m["evaluations"],
            "budget": samples,
        }
        notes += m["notes"]
        if "pass" in m["morris"] and any(r["mu_star"] > 0 for r in m["morris"]["pass"]):
            ranking_source = [r["parameter"] for r in m["morris"]["pass"]]
    if ranking_source is None:
        # rank by the Monte Carlo correlation of |z| with failure (cheap fallback)
        fail = (~mc["passed"]).astype(float)
        score = [
            abs(np.corrcoef(np.abs(mc["z"][:, j]), fail)[0, 1]) if fail.std() > 0 else 0.0
            for j in range(d)
        ]
        ranking_source = [model.names[j] for j in np.argsort(score)[::-1]]
        scores = dict(zip(model.names, map(float, score), strict=True))
        measure = "correlation of |deviation| with failure (Monte Carlo)"
        notes.append(
            "allocation parameters ranked by correlation of |deviation| with failure in the Monte Carlo"
        )
    elif method == "sobol":
        scores = {r["parameter"]: r["total_index"] for r in record["sobol"]["pass"]}
        measure = "total Sobol index of pass/fail"
    else:
        scores = {r["parameter"]: r["mu_star"] for r in record["morris"]["pass"]}
        measure = "Morris mu* of pass/fail"
    record["control_order"] = control_order(model, scores, measure)
    if allocate > 0 and d:
        record["allocation"] = allocate_tolerances(
            model,
            spec,
            run,
            parameters=[p for p in ranking_source if p != WAFER_PARAMETER][:allocate],
            z=mc["z"][:ALLOCATION_SAMPLES],
            target_yield=target_yield,
        )
    else:
        record["allocation"] = []
    record["ranking_resolved"] = record.get("ranking", {}).get("resolved")
    record["settings"] = {
        "method": method,
        "second_order": bool(second_order and method == "sobol"),
        "samples": samples,
        "bias_points": int(run.bias_v.size),
        "bias_min_v": float(run.bias_v[0]),
        "bias_max_v": float(run.bias_v[-1]),
        "seed": seed if isinstance(seed, int) else None,
        "target_yield": target_yield,
    }
    record["notes"] = notes
    if out_dir is not None:
        write_outputs(record, mc, Path(out_dir), figures=figures)
    return record


def write_outputs(
    record: dict[str, Any], mc: dict[str, Any], out: Path, *, figures: bool = True
) -> dict[str, str]:
    """``tolerance.json``, ``samples.csv``, ``sobol_<metric>.csv``, ``tornado.csv``,
    ``allocation.csv`` and the PNG figures, each written to a temporary name and renamed."""
    from wellwright.optimize.shared.outputs import write_csv, write_json

    files = {}
    n = mc["passed"].size
    names = [p["name"] for p in record["parameters"]]
    wafer = mc.get("wafer")
    keys = (*METRIC_NAMES, *[k for k in output_names(mc["metrics"]) if k not in METRIC_NAMES])
    head = ["sample", "passed", *keys, *[f"z:{p}" for p in names]]
    if wafer is not None:  # the same sample at its own place on the wafer
        head += ["radius_mm", "passed_on_wafer"]
    rows = (
        [
            i,
            int(mc["passed"][i]),
            *[_clean(mc["metrics"], i)[k] for k in keys],
            *mc["z"][i].tolist(),
            *([] if wafer is None else [float(wafer["radius_mm"][i]), int(wafer["passed"][i])]),
        ]
        for i in range(n)
    )
    files["samples_csv"] = str(write_csv(out / "samples.csv", head, rows))
    for metric, table in record["sobol"].items():
        files[f"sobol_{metric}"] = str(
            write_csv(
                out / f"sobol_{metric}.csv",
                ["parameter", "first_index", "first_conf", "total_index", "total_conf"],
                (
                    [
                        r["parameter"],
                        r["first_index"],
                        r["first_conf"],
                        r["total_index"],
                        r["total_conf"],
                    ]
                    for r in table
                ),
            )
        )
    tor_rows = []
    for r in record["tornado"]:
        for side in ("minus", "plus"):
            tor_rows.append([r["layer"], side, *[r[side].get(k) for k in keys]])
    files["tornado_csv"] = str(write_csv(out / "tornado.csv", ["layer", "step", *keys], tor_rows))
    files["allocation_csv"] = str(
        write_csv(
            out / "allocation.csv",
            ["parameter", "unit", "nominal_sigma", "allowed_sigma", "yield_at_allowed", "note"],
            (
                [
                    a["parameter"],
                    a["unit"],
                    a["nominal_sigma"],
                    a["allowed_sigma"],
                    a["yield_at_allowed"],
                    a["note"],
                ]
                for a in record["allocation"]
            ),
        )
    )
    if figures:
        from wellwright.optimize.tolerance import figures as tf

        files.update(tf.save_all(record, mc, out))
    record["files"] = files
    write_json(out / "tolerance.json", record)
    return files
