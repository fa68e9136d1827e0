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
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.shared.model_text import model_record
from wellwright.optimize.shared.processes import exit_with_parent
from wellwright.optimize.study.growth import AsGrown, GrowthModel, as_generator
from wellwright.optimize.study.space import GROWTH_SHEET_HEADER, growth_sheet_rows, layer_records
from wellwright.optimize.study.targets import (
    Spec,  # re-exported: the pass/fail form of [targets]
    window_report,
)
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
    "allocation_row",
    "ALLOCATION_HEADER",
    "ACTIONS",
    "paired_gain",
    "FreeThickness",
    "free_thicknesses",
    "neighbourhood",
    "recentre",
    "spec_depth",
    "RECENTRED_SHEET",
    "choose_island_layers",
    "with_island_layers",
    "island_truncation_error",
    "control_order",
    "control_summary",
    "controls_standing_out",
    "evaluations_text",
    "ranking_without_variance",
    "uniform_outcome",
    "NO_CONTROL_STANDS_OUT",
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

    Parameters
    ----------
    successes, n
        Passing outcomes and all outcomes; ``n <= 0`` gives ``(0, 1)``.
    confidence
        Two-sided confidence level of the interval, between 0 and 1.

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

    Parameters
    ----------
    nominal
        Figures of merit of the nominal design (its :data:`VALLEY_BOUNDED` flag is read).
    metrics
        Monte Carlo figures of merit, name -> array over the samples.
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
    density at each stated bias and, with a mesa area, the mesa's current there in mA.

    Parameters
    ----------
    at_bias_v
        Stated biases, V, at which a current density is asked for.
    area_um2
        Mesa area, um^2; None: no mesa currents in mA.
    """
    extra: list[str] = []
    for bias in at_bias_v:
        extra.append(at_bias_key(bias))
        if area_um2 is not None:
            extra.append(at_bias_current_key(bias))
    return (*METRIC_NAMES, *extra)


def _batch_metrics_said(*args: Any) -> tuple[dict[str, np.ndarray], list[tuple[type, str]]]:
    """:func:`batch_metrics` and the warnings it raised (category, message), so that a worker
    process's warnings reach the command's one line each instead of its stderr raw (a fuzz
    run's tolerance stage printed the energy grid's warning with its source line 13 times)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = batch_metrics(*args)
    return result, [(w.category, str(w.message)) for w in caught]


def batch_metrics(
    table: LayerTable,
    bias_v: np.ndarray,
    model: ModelOptions,
    resistance_ohm_um2: float,
    weights: np.ndarray | None = None,
    at_bias_v: Sequence[float] = (),
    area_um2: float | None = None,
) -> dict[str, np.ndarray]:
    """Metrics of a batch (of devices, see :func:`wellwright.physics.iv.sweep`); where the
    self-consistent solve fails, each device alone, and a device that still fails gets NaN
    metrics and :data:`SOLVE_FAILED` set (a failed sample, counted, never the end of the run).
    Any other error is handled the same way and also printed with the device's layer
    thicknesses, since it is a fault of the program to be reported, not of the sample.

    Parameters
    ----------
    table
        Layers of the batch's stacks.
    bias_v
        Bias sweep, V.
    model
        Model options of the sweep.
    resistance_ohm_um2
        Series resistance times area, ohm um^2 (enters only the cutoff frequency).
    weights
        Area weights, ``(n_devices, n_stacks)``, mixing the stacks into devices; None: one
        device per stack.
    at_bias_v, area_um2
        Stated biases, V, and the mesa area, um^2 (:func:`metric_keys`).
    """
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
    except Exception as error:
        if n == 1:
            if not isinstance(error, ElectrostaticsConvergenceError):
                warnings.warn(
                    f"a sample failed with {type(error).__name__}: {error} (layer thicknesses "
                    f"{np.round(table.thickness_nm, 3).tolist()} nm); counted as a failed "
                    "sample, please report it",
                    stacklevel=1,
                )
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
    from its island-mixture curve), in batches spread over joblib workers.

    Parameters
    ----------
    table
        Stacks, or as-grown devices.
    bias_v
        Bias sweep, V.
    model
        Model options of the sweep.
    series_resistance_ohm_um2
        Series resistance times area, ohm um^2; enters only the cutoff frequency.
    batch_size
        Devices per kernel call.
    n_jobs
        Number of joblib workers.
    backend
        joblib backend; None: loky, whose workers leave with this process.
    progress
        Show a progress bar.
    desc
        Label of the progress bar.
    at_bias_v, area_um2
        Stated biases, V, and the mesa area, um^2: the currents there (:func:`metric_keys`).
    """
    from joblib import Parallel, delayed, parallel_config

    n = table.n_samples if isinstance(table, AsGrown) else table.n_stacks
    batches = list(_batches(table, batch_size))
    starts = [b[0] for b in batches]
    jobs = (
        delayed(_batch_metrics_said)(
            t, bias_v, model, series_resistance_ohm_um2, w, at_bias_v, area_um2
        )
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
        for s, (r, said) in zip(starts, results, strict=True):
            parts.append(r)
            for category, message in said:  # a worker's warnings, said once by the command
                warnings.warn(message, category, stacklevel=2)
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

    @classmethod
    def for_stack(cls, stack: Stack, bias_v, **how: Any) -> Runner:
        """The runner of ``stack``: its model, series resistance and mesa area.

        Parameters
        ----------
        stack
            The design.
        bias_v
            Bias sweep, V.
        **how
            The other fields of the runner (``at_bias_v``, ``n_jobs``, ``backend``,
            ``batch_size``, ...).
        """
        return cls(
            np.asarray(bias_v, float),
            model=stack.model,
            series_resistance_ohm_um2=stack.device.series_resistance_ohm_um2,
            area_um2=stack.device.area_um2,
            **how,
        )

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
    """Yield of pass/fail outcomes: ``value`` (fraction passing), ``ci_low``,
    ``ci_high`` (Wilson score interval [1]_), ``samples``, ``passed``, ``confidence``.

    Parameters
    ----------
    ok
        Pass/fail outcomes, bool array.
    confidence
        Confidence level of the Wilson interval.
    """
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


def uniform_outcome(passed: np.ndarray) -> str | None:
    """``"passed"`` when every sample passed, ``"failed"`` when every one failed, else None
    (and for no samples): pass/fail then has no variance for a ranking to apportion.

    Parameters
    ----------
    passed
        Pass/fail outcomes (bool, or 0 and 1).
    """
    ok = np.asarray(passed, bool)
    if ok.size == 0 or ok.any() != ok.all():
        return None
    return "passed" if ok.all() else "failed"


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

    Parameters
    ----------
    model
        Growth spreads of the design.
    spec
        Windows a sample must meet.
    run
        How samples are evaluated.
    samples
        Number of Monte Carlo samples.
    seed
        A whole-number seed, a generator or None (fresh entropy).
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
    """Yield over the wafer's area: the samples at their own places on the wafer.

    Returns ``yield`` (:func:`yield_record`: the share of the wafer's area
    where a device meets the spec, with its Wilson interval [1]_),
    ``radius_mm`` and ``passed`` per sample, ``rings`` (equal-area rings,
    ``{r_in_mm, r_out_mm, samples, passed, value, ci_low, ci_high}``: the pass
    probability by radius) and ``profile`` (the nominal design's figures of
    merit at 13 radii from the centre to the edge, only the wafer's profile
    applied: ``{radius_mm, <metric>...}``).

    Parameters
    ----------
    model
        Growth spreads of the design, with a wafer (``[growth.wafer]``).
    spec
        Windows a device must meet.
    run
        How samples are evaluated.
    z
        Standard-normal coordinates of the samples, ``(n, n_parameters)``.
    rings
        Number of equal-area rings; None: ``n // 48`` clipped to 3..8.
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
    """Saltelli design points in the unit cube (SALib's scrambled Sobol' sampler):
    ``base_samples * (n_params + 2)`` rows for first and
    total order, ``base_samples * (2 n_params + 2)`` with ``second_order``.

    Parameters
    ----------
    n_params
        Number of parameters (dimensions of the cube).
    base_samples
        Base sample count ``N``, a power of 2.
    second_order
        Also the rows for second-order indices.
    seed
        A whole-number seed, a generator or None.
    """
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

    With ``pairs`` the second-order indices are appended to it as ``{parameters: [a, b], index, conf}``, largest first.

    Parameters
    ----------
    names
        Parameter names, in the design's column order.
    y
        Outputs, one per design row.
    seed
        A whole-number seed, a generator or None (for the bootstrap).
    confidence
        Confidence level of the bootstrap intervals.
    resamples
        Bootstrap resamples.
    pairs
        A list to receive the second-order indices (``y`` on a second-order design); None:
        first and total order only.
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

    A parameter whose interval reaches zero
    (``score - conf <= 0``) is indistinguishable from no effect and is listed
    as such, not ranked. Returns ``resolved``, ``leader``, ``runner_up`` (None
    when absent), ``ranked`` and ``indistinguishable_from_zero`` (names).

    Parameters
    ----------
    rows
        Ranked rows, most important first, each with ``parameter``, a score and its
        confidence half-width.
    score, conf
        Keys of the score and of its half-width in a row.
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

    The design of ``2 N`` base samples starts with the rows of the
    ``N`` design (same scrambled sequence), so each doubling evaluates only
    the new rows; it stops when :func:`ranking_resolution` of ``key`` says
    resolved or when the next doubling would exceed the budget. Returns
    ``outputs`` (name -> values on the final design), ``u``, ``tables``
    (name -> :func:`sobol_table` rows; None where an output is not finite),
    ``resolution`` and ``evaluations``.

    Parameters
    ----------
    names
        Parameter names, one per column of the design.
    evaluate
        ``evaluate(u)`` maps design rows in the unit cube to outputs (name -> values).
    key
        The output whose ranking must be resolved.
    max_evaluations
        Budget of evaluations; a doubling that would exceed it is not run.
    start_base
        Base samples of the first design (always run).
    second_order
        Use a second-order design (``N (2 D + 2)`` rows instead of ``N (D + 2)``).
    seed
        A whole-number seed, a generator or None.

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
    NaN (no NDR) in some sample, or the same in every sample, is skipped with a
    note; so is pass/fail when every sample passed or every one failed (no
    variance to apportion), which ``every_sample`` says (:func:`uniform_outcome`).
    Returns ``sobol`` (name -> ordered list), ``notes``, ``evaluations``,
    ``base_samples``, ``every_sample`` and ``resolution``
    (:func:`ranking_resolution` of pass/fail); with
    ``second_order`` (``N (2 D + 2)`` evaluations instead of ``N (D + 2)``)
    also ``sobol_second_order`` (name -> pairs of parameters with their
    interaction index, largest first).

    Parameters
    ----------
    model
        Growth spreads of the design.
    spec
        Windows that define pass/fail.
    run
        How samples are evaluated.
    base_samples
        Base samples of the (first) design.
    max_evaluations
        Budget of evaluations; None: a single design.
    second_order
        Also second-order indices.
    seed
        A whole-number seed, a generator or None.
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
    every = uniform_outcome(outputs["pass"])
    out: dict[str, list] = {}
    pairs: dict[str, list] = {}
    notes = []
    for name, y in outputs.items():
        bad = int(np.count_nonzero(~np.isfinite(y)))
        if bad:
            why = f" ({unsolved} of them: solve did not converge)" if unsolved else ""
            notes.append(f"sobol of {name} skipped: no NDR in {bad} of {y.size} samples{why}")
            continue
        if np.ptp(y) == 0.0:  # nothing to apportion; pass/fail is said by every_sample
            if name != "pass":
                notes.append(f"sobol of {name} skipped: the same value in every sample")
            continue
        if second_order:
            pairs[name] = []
        out[name] = sobol_table(model.names, y, seed=rng, pairs=pairs.get(name))
    result = {
        "sobol": out,
        "notes": notes,
        "evaluations": int(grown["evaluations"]),
        "base_samples": int(grown["base_samples"]),
        "every_sample": every,
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
    start_trajectories: int | None = None,
) -> dict[str, Any]:
    """Morris elementary effects (mu*, sigma) per figure of merit and pass/fail, ordered by mu*.

    Parameters span +-2.5 sigma on a uniform grid of ``levels``; each point is
    the island mixture of :meth:`GrowthModel.grow`; elementary effects are per
    unit of the unit cube (5 sigma) [1]_. The number of trajectories starts at
    ``start_trajectories`` and doubles (new independent trajectories appended,
    the earlier ones kept) until :func:`ranking_resolution` of pass/fail says
    resolved or ``trajectories`` (the budget) is reached.

    Parameters
    ----------
    model, spec, run
        Growth model, spec and evaluator (:class:`Runner`).
    trajectories
        Largest number of trajectories (``trajectories * (n_params + 1)`` evaluations).
    levels
        Grid levels per parameter.
    seed
        Seed or generator.
    start_trajectories
        First number of trajectories (default: ``trajectories``, no growth).

    Returns
    -------
    dict
        ``morris`` (output -> rows; none for an output the same in every sample, such as
        pass/fail where every sample passed), ``notes``, ``evaluations``, ``resolution``
        (:func:`ranking_resolution` of pass/fail), ``every_sample``
        (:func:`uniform_outcome`) and ``trajectories`` used.

    References
    ----------
    .. [1] F. Campolongo, J. Cariboni, A. Saltelli, Environ. Model. Softw. 22, 1509 (2007)
       (mu*).
    """
    from SALib.sample import morris as morris_sample

    rng = as_generator(seed)
    d = len(model.parameters)
    problem = {"num_vars": d, "names": list(model.names), "bounds": [[0.0, 1.0]] * d}
    t = max(2, min(start_trajectories or trajectories, trajectories))
    x = np.zeros((0, d))
    metrics: dict[str, np.ndarray] = {}
    while True:
        new_x = morris_sample.sample(
            problem, t - x.shape[0] // (d + 1), num_levels=levels, seed=_int_seed(rng)
        )
        new = run(model.grow((new_x - 0.5) * 5.0), desc="Morris")  # [0, 1] -> +-2.5 sigma
        metrics = {k: np.concatenate([metrics.get(k, np.zeros(0)), v]) for k, v in new.items()}
        x = np.concatenate([x, new_x])
        out, notes = _morris_tables(problem, model, spec, x, metrics, levels, rng)
        resolution = ranking_resolution(out.get("pass", []), score="mu_star", conf="mu_star_conf")
        if resolution["resolved"] or t >= trajectories:
            break
        t = min(2 * t, trajectories)
    return {
        "morris": out,
        "notes": notes,
        "evaluations": int(x.shape[0]),
        "resolution": resolution,
        "every_sample": uniform_outcome(spec.passes(metrics)),
        "trajectories": t,
    }


def _morris_tables(problem, model, spec, x, metrics, levels, rng):
    """SALib's Morris analysis of every finite output and of pass/fail, ordered by mu*."""
    from SALib.analyze import morris as morris_analyze

    out: dict[str, list] = {}
    notes = []
    outputs = {name: metrics[name] for name in output_names(metrics)}
    outputs["pass"] = spec.passes(metrics).astype(float)
    for name, y in outputs.items():
        if not np.all(np.isfinite(y)):
            notes.append(f"morris of {name} skipped: no NDR in some samples")
            continue
        if np.ptp(y) == 0.0:  # nothing to apportion; pass/fail is said by every_sample
            if name != "pass":
                notes.append(f"morris of {name} skipped: the same value in every sample")
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
    return out, notes


# --------------------------------------------------------------------------- tornado


def tornado(stack: Stack, run: Runner) -> dict[str, Any]:
    """One-at-a-time: each layer between the contacts -1 and +1 monolayer, all else nominal.

    Returns ``nominal`` (metrics) and ``layers``: a list of ``{layer, minus,
    plus}`` (metrics at -1 / +1 ML), ordered by the swing of the peak
    current density, largest first. One batched evaluation of ``1 + 2k`` stacks.

    Parameters
    ----------
    stack
        The nominal design.
    run
        How the stacks are evaluated.
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
    """The layers whose monolayer islands matter most: the ``max_layers`` largest estimates.

    ``tornado_layers`` come ordered by :func:`_island_order`. Returns None (every
    layer) when there are no more layers than ``max_layers``.

    Parameters
    ----------
    stack
        The design.
    tornado_layers
        Tornado rows ordered by the estimate, largest first (``layer`` names).
    max_layers
        Largest number of island layers.
    """
    names = [lay.name for lay in stack.layers]
    if len(tornado_layers) <= max_layers:
        return None
    return tuple(sorted(names.index(r["layer"]) for r in tornado_layers[:max_layers]))


def _island_order(nominal: dict, layers: list[dict]) -> list[dict]:
    """Tornado rows with ``curvature``, ``valley_curvature``, ``peak_shift`` and ``estimate``,
    largest estimate first.

    A layer left at its continuous thickness instead of mixing its two whole-monolayer
    islands (area share ``f``, the worst case ``f = 1/2``) misses the mixed curve's figures
    in two ways, from the tornado's one-monolayer steps:

    - a current bends with the thickness: off by ``f (1 - f) / 2`` times its curvature
      ``|J(+1) - 2 J(0) + J(-1)| / J(0)`` (second-order Taylor expansion of
      ``(1 - f) J(n) + f J(n + 1)`` about ``n + f``), ``curvature / 8``, for the peak and
      for the valley current;
    - the islands peak at different biases: where the current rises about linearly to a
      cliff (the default model's sharp resonances), the mixture peaks at the lower island's
      peak bias, where the other island's current is short of its peak by about ``Jp dVp /
      Vp``: off by ``(1 - f) dVp / Vp`` with ``dVp`` the shift per monolayer,
      ``|Vp(+1) - Vp(-1)| / (4 Vp(0))`` (an upper bound: a rounded peak loses less).

    The estimate is the largest of the three (no NDR at a step counts as infinite).
    Interactions between layers add to it, so the analysis measures the truncation error
    (:func:`island_truncation_error`) rather than trusting it. Ordering by the peak's
    curvature alone took the emitter spacer before the well on the demo's InGaAs/AlAs
    design (a well monolayer moves Vp by 6 %, Jp's curvature 5e-4): three island layers
    then missed the full mixture by 6.8 % in Jp, against 1.1 % with the well (measured, 4
    samples).
    """
    jp, jv, vp = "peak_current_density_a_cm2", "valley_current_density_a_cm2", "peak_voltage_v"

    def steps(r: dict, key: str) -> tuple[float, float, float] | None:
        """(minus, nominal, plus) of ``key``; None where one is missing or the nominal is 0."""
        j0, a, b = nominal.get(key), r["minus"].get(key), r["plus"].get(key)
        return None if j0 is None or a is None or b is None or j0 == 0 else (a, j0, b)

    def curvature(values: tuple[float, float, float]) -> float:
        a, j0, b = values
        return abs(a - 2 * j0 + b) / abs(j0)

    rows = []
    for r in layers:
        peak, valley, bias = steps(r, jp), steps(r, jv), steps(r, vp)
        if peak is None or bias is None:
            curv = valley_curv = shift = math.inf
        else:
            curv = curvature(peak)
            valley_curv = 0.0 if valley is None else curvature(valley)
            shift = abs(bias[2] - bias[0]) / (4.0 * abs(bias[1]))
        estimate = max(curv / 8.0, valley_curv / 8.0, shift)
        rows.append({**r, "curvature": curv, "valley_curvature": valley_curv,
                     "peak_shift": shift, "estimate": estimate})  # fmt: skip
    return sorted(rows, key=lambda r: -r["estimate"])


def with_island_layers(model: GrowthModel, run: Runner) -> tuple[GrowthModel, dict[str, Any]]:
    """``model`` with its island layers chosen (:func:`choose_island_layers`) and the
    tornado record it was chosen from, with ``islands``: {layers, continuous_layers,
    curvatures (relative, of the peak current density), valley_curvatures, peak_shifts and
    estimates (relative; :func:`_island_order`)}.

    Parameters
    ----------
    model
        Growth spreads of the design.
    run
        How the tornado stacks are evaluated.
    """
    import dataclasses

    tor = tornado(model.stack, run)
    ordered = _island_order(tor["nominal"], tor["layers"])
    chosen = choose_island_layers(model.stack, ordered, max_layers=model.max_island_layers)
    k = len(ordered) if chosen is None else len(chosen)
    finite = lambda v: v if math.isfinite(v) else None  # noqa: E731
    tor["islands"] = {
        "layers": [r["layer"] for r in ordered[:k]],
        "continuous_layers": [r["layer"] for r in ordered[k:]],
        "curvatures": {r["layer"]: finite(r["curvature"]) for r in ordered},
        "valley_curvatures": {r["layer"]: finite(r["valley_curvature"]) for r in ordered},
        "peak_shifts": {r["layer"]: finite(r["peak_shift"]) for r in ordered},
        "estimates": {r["layer"]: finite(r["estimate"]) for r in ordered},
    }
    return dataclasses.replace(model, island_layers=chosen), tor


def island_truncation_error(
    model: GrowthModel, run: Runner, z: np.ndarray
) -> dict[str, float | int | None]:
    """Largest relative difference of Jp, Vp and PVCR between the chosen island layers and
    the full mixture over every layer (``2**k`` stacks).

    Parameters
    ----------
    model
        Growth spreads with the chosen island layers.
    run
        How samples are evaluated.
    z
        Standard-normal coordinates of the samples checked, ``(n, n_parameters)``.
    """
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
#: Two-sided level of the paired test a yield gain must pass to count as measurable.
GAIN_TEST_LEVEL = 0.05
#: Share of the allocation samples on which re-centring screens every candidate design (the
#: rest, which the choice never sees, confirm the chosen one against the nominal).
RECENTRE_SCREEN_SHARE = 0.25
#: Most candidate designs the re-centring screens (pairs of moves are dropped first).
RECENTRE_MAX_CANDIDATES = 64
#: The allocation's actions (``action`` of each row).
ACTIONS = ("tighten", "keep", "no measurable effect", "re-centre", "redesign")


def paired_gain(
    new: np.ndarray, old: np.ndarray, *, confidence: float = 0.95, level: float = GAIN_TEST_LEVEL
) -> dict[str, Any]:
    """Yield gain of pass/fail outcomes ``new`` over ``old`` on the same samples, and whether
    it is measurable.

    With common random numbers the two outcomes of one sample are paired, so the
    honest test uses only the samples where they differ: the exact McNemar test
    [1]_ (a two-sided sign test of ``better`` against ``worse``, binomial with
    p = 1/2). The change counts as ``measurable`` only when that test rejects
    "no change" at ``level`` **and** its size exceeds the half-width of the
    Wilson interval [2]_ of the ``old`` yield (never recommend what lies within
    the yield's own noise); a measurable change may be a loss (``gain`` < 0).

    Returns ``gain`` (difference of the yields), ``better``, ``worse``
    (samples passing with only one of them), ``samples``, ``p_value``, ``level``,
    ``yield_half_width``, ``measurable`` and ``test`` (its name).

    Parameters
    ----------
    new, old
        Pass/fail outcomes of the two designs on the same samples.
    confidence
        Confidence level of the Wilson interval of the ``old`` yield.
    level
        Significance level of the McNemar test.

    References
    ----------
    .. [1] Q. McNemar, Psychometrika 12, 153 (1947) (from memory).
    .. [2] E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927).
    """
    from scipy.stats import binomtest

    new, old = np.asarray(new, bool), np.asarray(old, bool)
    better = int(np.count_nonzero(new & ~old))
    worse = int(np.count_nonzero(~new & old))
    n = int(old.size)
    gain = (better - worse) / n if n else 0.0
    p = float(binomtest(better, better + worse, 0.5).pvalue) if better + worse else 1.0
    lo, hi = wilson_interval(int(np.count_nonzero(old)), n, confidence=confidence)
    half = 0.5 * (hi - lo)
    return {
        "gain": gain,
        "better": better,
        "worse": worse,
        "samples": n,
        "p_value": p,
        "level": level,
        "yield_half_width": half,
        "measurable": bool(p < level and abs(gain) > half),
        "test": "exact McNemar test on the paired samples (common random numbers), "
        f"p < {level:g}, and a gain beyond the half-width of the yield's Wilson interval",
    }


@dataclass(frozen=True)
class FreeThickness:
    """A thickness the design may change: ``name`` (the study's variable, else the layer's
    name), the ``layers`` that take it (tied layers together) and its whole-monolayer
    bounds (``high_ml`` None: open)."""

    name: str
    layers: tuple[int, ...]
    low_ml: int
    high_ml: int | None = None


def free_thicknesses(stack: Stack, variables: Sequence[Any] | None = None) -> list[FreeThickness]:
    """The thicknesses a re-centring may move.

    Parameters
    ----------
    stack
        The design.
    variables
        The study's variables (:class:`wellwright.optimize.study.space.Variable`): its
        ``thickness_ml`` and ``thickness_nm`` ranges, with their bounds in whole monolayers
        of the first layer they set (none when the study varies no thickness). ``None`` (no
        study): every layer between the contacts that grows in monolayers, alone, at least
        1 ML.
    """
    out = []
    for v in variables or ():
        if v.key not in ("thickness_ml", "thickness_nm"):
            continue
        mono = stack.layers[v.layers[0]].monolayer_nm
        if mono is None:
            continue
        scale = 1.0 if v.key == "thickness_ml" else mono
        low = max(1, math.ceil(v.low / scale - 1e-9))
        out.append(FreeThickness(v.name, tuple(v.layers), low, math.floor(v.high / scale + 1e-9)))
    if variables is not None:
        return out
    n = len(stack.layers)
    return [
        FreeThickness(layer.name, (i,), 1)
        for i, layer in enumerate(stack.layers)
        if 0 < i < n - 1 and layer.monolayer_nm is not None
    ]


def neighbourhood(
    k: int, *, max_candidates: int = RECENTRE_MAX_CANDIDATES
) -> list[tuple[int, ...]]:
    """Whole-monolayer moves of ``k`` free thicknesses: every move of at most two monolayers
    in all (each thickness +-1 or +-2 ML alone, or two of them +-1 ML together).

    That is ``4 k + 2 k (k - 1)`` moves (13 for two free thicknesses, 60 for
    five): the moves a grower would call "nearby", growing quadratically, not
    as ``5**k``. Beyond ``max_candidates`` moves the pairs are dropped first, then
    the list is cut.

    Parameters
    ----------
    k
        Number of free thicknesses.
    max_candidates
        Largest number of moves returned.
    """
    singles, pairs, doubles = [], [], []
    for j in range(k):
        for d in (-1, 1):
            step = [0] * k
            step[j] = d
            singles.append(tuple(step))
            step2 = [0] * k
            step2[j] = 2 * d
            doubles.append(tuple(step2))
        for m in range(j + 1, k):
            for a in (-1, 1):
                for b in (-1, 1):
                    step = [0] * k
                    step[j], step[m] = a, b
                    pairs.append(tuple(step))
    moves = singles + pairs + doubles
    if len(moves) > max_candidates:
        moves = singles + doubles
    return moves[:max_candidates]


def spec_depth(spec: Spec, metrics: dict[str, np.ndarray]) -> np.ndarray:
    """How deep each design sits inside the spec: the smallest, over the windows, of its
    distance to the nearer bound in units of the window's scale (half the width of a
    two-sided window, the bound's magnitude for a one-sided one; negative outside, -inf
    for NaN). Breaks ties between equal yields: the deeper design has more room for growth
    errors (common practice).

    Parameters
    ----------
    spec
        The windows.
    metrics
        Figures of merit of the designs, name -> array.
    """
    n = len(next(iter(metrics.values())))
    depth = np.full(n, np.inf)
    for name, lo, hi in spec.windows:
        if math.isfinite(lo) and math.isfinite(hi):
            scale = 0.5 * (hi - lo)
        else:
            bound = lo if math.isfinite(lo) else hi
            scale = abs(bound) or 1.0
        v = np.asarray(metrics[name], float)
        with np.errstate(invalid="ignore"):
            d = np.minimum(v - lo, hi - v) / scale
        depth = np.minimum(depth, np.where(np.isnan(v), -np.inf, d))
    return depth


def _move_label(
    stack: Stack, free: Sequence[FreeThickness], base: Sequence[float], step: Sequence[int]
) -> str:
    """A move in a grower's words: "barrier1 and barrier2 +1 ML (to 6 ML), well -1 ML (to 14 ML)"."""
    parts = [
        f"{' and '.join(stack.layers[i].name for i in f.layers)} {d:+d} ML (to {b + d:.0f} ML)"
        for f, b, d in zip(free, base, step, strict=True)
        if d
    ]
    return ", ".join(parts) or "the nominal rounded to whole monolayers"


def _recentre_moves(
    model: GrowthModel, free: Sequence[FreeThickness], max_candidates: int
) -> tuple[list[float], list[tuple[int, ...]]]:
    """The whole-monolayer base of the ``free`` thicknesses and the :func:`neighbourhood`
    moves from it that stay within their bounds (plus no move at all when a free thickness
    is fractional: the nominal rounded)."""
    base = [float(np.round(model.nominal_ml[f.layers[0]])) for f in free]
    fractional = any(
        abs(model.nominal_ml[i] - round(model.nominal_ml[i])) > 1e-6 for f in free for i in f.layers
    )
    moves = ([tuple([0] * len(free))] if fractional else []) + neighbourhood(
        len(free), max_candidates=max_candidates
    )

    def allowed(move: tuple[int, ...]) -> bool:
        for f, b, d in zip(free, base, move, strict=True):
            v = b + d
            if v < max(1, f.low_ml) or (f.high_ml is not None and v > f.high_ml):
                return False
        return True

    return base, [m for m in moves if allowed(m)]


def _free_records(model: GrowthModel, free: Sequence[FreeThickness]) -> list[dict[str, Any]]:
    """The ``free`` thicknesses of a re-centring as plain records: {name, layers, nominal_ml,
    low_ml, high_ml}."""
    return [
        {
            "name": f.name,
            "layers": [model.stack.layers[i].name for i in f.layers],
            "nominal_ml": float(model.nominal_ml[f.layers[0]]),
            "low_ml": f.low_ml,
            "high_ml": f.high_ml,
        }
        for f in free
    ]


def _recentre_text(
    label: str, new_y: dict[str, Any], old_y: dict[str, Any], gain: dict[str, Any], better: bool
) -> str:
    """The one sentence on the confirmed re-centring: yields, gain and the verdict."""
    verdict = "a measurable gain" if better else "not a measurable gain (within the yield's noise)"
    keep = (
        ""
        if better
        else "; keep the nominal" + (" (more samples would tell)" if gain["gain"] > 0 else "")
    )
    head = (
        f"re-centre to {label}: yield " if better else f"the best nearby design ({label}) yields "
    )
    return (
        f"{head}{100 * new_y['value']:.0f} % "
        f"({100 * new_y['ci_low']:.0f} to {100 * new_y['ci_high']:.0f} %) against "
        f"{100 * old_y['value']:.0f} % for the nominal on the same "
        f"{new_y['samples']} samples, {100 * gain['gain']:+.0f} points: {verdict}{keep}"
    )


def recentre(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    *,
    z: np.ndarray,
    free: Sequence[FreeThickness],
    nominal_passed: np.ndarray | None = None,
    screen_share: float = RECENTRE_SCREEN_SHARE,
    max_candidates: int = RECENTRE_MAX_CANDIDATES,
) -> dict[str, Any]:
    """The whole-monolayer design near the nominal with the highest yield under the same spreads.

    Candidates are the :func:`neighbourhood` moves of the ``free`` thicknesses
    within their bounds (plus the nominal rounded to whole monolayers when a
    free thickness is fractional). Every candidate is grown from the same
    coordinates ``z`` (common random numbers: differences between candidates
    are the designs', not the draws'), at the wafer's centre, as one batch:
    screened on the first ``screen_share`` of the samples; the best one is
    then confirmed on the remaining samples, which the choice never saw, so
    its yield and its gain over the nominal (the same samples) are not
    flattered by having been picked among many (:func:`paired_gain`).

    Returns ``free`` ({name, layers, nominal_ml, low_ml, high_ml}),
    ``candidates`` (screen yields, best first: {move, label, screen_yield,
    meets_spec, depth}; equal yields ordered by :func:`spec_depth`, then by the
    smaller move), ``nominal_screen_yield``, ``budget`` ({candidates, screen_samples, confirm_samples,
    devices, stacks}), ``design`` (None when no candidate beats the nominal on
    the screen; else {label, move, thickness_ml, layers}), ``metrics`` and
    ``spec_check`` of the chosen design without growth errors, ``yield`` and
    ``nominal_yield`` (:func:`yield_record` on the confirming samples),
    ``gain`` (:func:`paired_gain`), ``better`` (a measurable gain),
    ``intervals_overlap`` and ``text`` (one sentence).

    Parameters
    ----------
    model
        Growth spreads of the nominal design.
    spec
        Windows a device must meet.
    run
        How samples are evaluated.
    z
        Standard-normal coordinates of the samples, ``(n, n_parameters)``, shared by every
        candidate.
    free
        The thicknesses that may move (:func:`free_thicknesses`).
    nominal_passed
        Pass/fail of the nominal design on ``z``; None: computed.
    screen_share
        Share of the samples used to screen the candidates (at least 4, and at least one
        sample left to confirm).
    max_candidates
        Largest number of candidate moves (:func:`neighbourhood`).
    """
    z = np.atleast_2d(z)
    n = z.shape[0]
    n_screen = min(max(4, int(round(screen_share * n))), n - 1)
    scale = point_scale(model)
    if nominal_passed is None:
        nominal_passed = spec.passes(run(model.grow(z, sigma_scale=scale), desc="nominal"))
    nominal_passed = np.asarray(nominal_passed, bool)
    base, moves = _recentre_moves(model, free, max_candidates)
    models = [
        model.with_thickness_ml(
            {i: b + d for f, b, d in zip(free, base, m, strict=True) for i in f.layers}
        )
        for m in moves
    ]
    out: dict[str, Any] = {
        "free": _free_records(model, free),
        "method": _recentre_method(n_screen, n - n_screen),
        "design": None,
        "better": False,
    }
    if not moves:
        out.update(
            candidates=[],
            budget=dict.fromkeys(
                ("candidates", "screen_samples", "confirm_samples", "devices", "stacks"), 0
            ),
            text="no whole-monolayer design within two monolayers stays inside the study's ranges",
        )
        return out
    screen = _screen_candidates(model, models, moves, spec, run, z=z[:n_screen], scale=scale)
    out["candidates"] = _candidate_records(model.stack, free, base, moves, screen)
    nominal_screen = float(np.mean(nominal_passed[:n_screen]))
    out["nominal_screen_yield"] = nominal_screen
    out["budget"] = {
        "candidates": len(moves),
        "screen_samples": n_screen,
        "confirm_samples": n - n_screen,
        "devices": len(moves) * (n_screen + 1) + 1,
        "stacks": screen.stacks,
    }
    best = screen.order[0]
    if not _beats_nominal(screen, nominal_screen):
        out["text"] = (
            f"no whole-monolayer design within two monolayers of the free thicknesses beats the "
            f"nominal on the screen ({100 * screen.yields[best]:.0f} % at best against "
            f"{100 * nominal_screen:.0f} %, none deeper inside the spec at equal yield)"
        )
        return out
    chosen = models[best].grow(z[n_screen:], sigma_scale=scale)
    out["budget"]["devices"] += n - n_screen
    out["budget"]["stacks"] += int(chosen.table.n_stacks)
    ok_new = spec.passes(run(chosen, desc="re-centre confirm"))
    design = _design_record(models[best], free, base, moves[best], out["candidates"][0])
    out.update(_confirmed(spec, screen, design, ok_new=ok_new, ok_old=nominal_passed[n_screen:]))
    return out


def _recentre_method(n_screen: int, n_confirm: int) -> str:
    """How :func:`recentre` searched, in words (the record's ``method``)."""
    return (
        "every whole-monolayer move of at most two monolayers in all (each free "
        "thickness +-1 or +-2 ML alone, or two of them +-1 ML together) within the "
        f"study's ranges; screened on {n_screen} as-grown samples, the best confirmed on "
        f"the other {n_confirm}; the same random numbers for every design"
    )


@dataclass(frozen=True)
class _Screen:
    """The re-centring candidates on the screening samples (index ``c`` for a candidate;
    ``plain``, ``meets`` and ``depth`` have the nominal design as their last entry)."""

    yields: np.ndarray  #: screen yield of each candidate
    plain: dict[str, np.ndarray]  #: figures of merit without growth errors
    meets: np.ndarray  #: meets the spec without growth errors
    depth: np.ndarray  #: :func:`spec_depth` without growth errors
    order: list[int]  #: candidates, best first
    stacks: int  #: stacks evaluated


def _screen_candidates(
    model: GrowthModel,
    models: list[GrowthModel],
    moves: list[tuple[int, ...]],
    spec: Spec,
    run: Runner,
    *,
    z: np.ndarray,
    scale: np.ndarray | None,
) -> _Screen:
    """Grow every candidate of :func:`recentre` from the same coordinates ``z`` as one batch,
    and evaluate each candidate and the nominal design without growth errors; equal
    yields are ordered by :func:`spec_depth`, then by the smaller move."""
    grown = AsGrown.concatenate([m.grow(z, sigma_scale=scale) for m in models])
    ok = spec.passes(run(grown, desc="re-centre screen")).reshape(len(moves), z.shape[0])
    plain = run(
        LayerTable.concatenate([m.nominal for m in [*models, model]]), desc="re-centre nominal"
    )
    depth = spec_depth(spec, plain)  # last entry: the nominal itself
    screen_yield = ok.mean(axis=1)
    order = sorted(
        range(len(moves)),
        key=lambda c: (-screen_yield[c], -depth[c], sum(map(abs, moves[c]))),
    )
    stacks = grown.table.n_stacks + len(moves) + 1
    return _Screen(screen_yield, plain, spec.passes(plain), depth, order, int(stacks))


def _candidate_records(
    stack: Stack,
    free: Sequence[FreeThickness],
    base: Sequence[float],
    moves: list[tuple[int, ...]],
    screen: _Screen,
) -> list[dict[str, Any]]:
    """The screened candidates of :func:`recentre`, best first: {move, label, screen_yield,
    meets_spec, depth}."""
    return [
        {
            "move": dict(zip([f.name for f in free], map(int, moves[c]), strict=True)),
            "label": _move_label(stack, free, base, moves[c]),
            "screen_yield": float(screen.yields[c]),
            "meets_spec": bool(screen.meets[c]),
            "depth": float(screen.depth[c]),
        }
        for c in screen.order
    ]


def _design_record(
    chosen: GrowthModel,
    free: Sequence[FreeThickness],
    base: Sequence[float],
    move: tuple[int, ...],
    candidate: dict[str, Any],
) -> dict[str, Any]:
    """The chosen design of :func:`recentre`: {label, move, thickness_ml, layers}
    (``chosen``: its growth model, ``candidate``: its record among the candidates)."""
    return {
        "label": candidate["label"],
        "move": candidate["move"],
        "thickness_ml": {f.name: int(b + d) for f, b, d in zip(free, base, move, strict=True)},
        "layers": layer_records(chosen.stack),
    }


def _beats_nominal(screen: _Screen, nominal_screen: float) -> bool:
    """The best candidate does better than the nominal on the screen: a higher yield, or
    (a tie, with few samples or every design passing) deeper inside the spec windows."""
    best = screen.order[0]
    return not (
        screen.yields[best] < nominal_screen
        or (screen.yields[best] == nominal_screen and screen.depth[best] <= screen.depth[-1])
    )


def _confirmed(
    spec: Spec,
    screen: _Screen,
    design: dict[str, Any],
    *,
    ok_new: np.ndarray,
    ok_old: np.ndarray,
) -> dict[str, Any]:
    """The :func:`recentre` fields of the chosen design confirmed on the samples the screen
    never saw (``ok_new`` its pass/fail there, ``ok_old`` the nominal's)."""
    best = screen.order[0]
    new_y, old_y = yield_record(ok_new), yield_record(ok_old)
    gain = paired_gain(ok_new, ok_old)
    metrics = _clean(screen.plain, best)
    better = bool(gain["measurable"] and gain["gain"] > 0)
    return {
        "design": design,
        "metrics": metrics,
        "spec_check": window_report(spec.windows, metrics),
        "meets_spec": bool(screen.meets[best]),
        "yield": new_y,
        "nominal_yield": old_y,
        "gain": gain,
        "better": better,
        "intervals_overlap": bool(new_y["ci_low"] <= old_y["ci_high"]),
        "text": _recentre_text(design["label"], new_y, old_y, gain, better),
    }


def _advice_recentre(recentred: dict[str, Any] | None) -> tuple[str, str]:
    if recentred is not None and recentred.get("better"):
        y = recentred["yield"]
        return "re-centre", (
            f"re-centre to {recentred['design']['label']} (yield {100 * y['value']:.0f} %, "
            f"{100 * y['ci_low']:.0f} to {100 * y['ci_high']:.0f} %)"
        )
    if recentred is not None and recentred.get("design") is None and recentred.get("candidates"):
        return "redesign", (
            "no whole-monolayer design within two monolayers does better: relax the spec or "
            "the target yield, or change the design"
        )
    if recentred is not None and recentred.get("design") is not None:
        return "redesign", (
            f"the best nearby design ({recentred['design']['label']}) gains no measurable "
            "yield: relax the spec or the target yield, or change the design"
        )
    return "redesign", (
        "the design itself must change (re-centre it or search again), or relax the spec or "
        "the target yield"
    )


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
    nominal_passed: np.ndarray | None = None,
    recentred: dict[str, Any] | None = None,
) -> list[dict[str, Any]]:
    """Largest sigma of each named parameter that still gives ``target_yield``, and what the
    grower should do about it.

    Bisection on the Monte Carlo yield over a factor ``s`` in ``[0, max_scale]``
    on that parameter's sigma (the others at theirs), with common random
    numbers: the same ``z`` at every step (at the wafer's centre), so the yield
    changes only through ``s``. With ``joint_thickness`` a last row scales
    every layer's thickness sigma by one common factor (the question "how
    well must the whole growth hold its monolayers?", which a single layer
    cannot answer when several share the failures).

    Returns ``{parameter, nominal_sigma, allowed_sigma, unit, target_yield,
    yield_nominal, yield_held_exactly, yield_at_allowed, gain, action, advice,
    note}``; ``allowed_sigma`` is None when even ``s = 0`` misses the target,
    and ``max_scale * sigma`` when the target holds up to there. Every row
    carries one ``action`` of :data:`ACTIONS` with its ``advice`` in words:

    - ``keep``: the target holds at the present spread (up to the allowed one);
    - ``tighten``: the allowed spread reaches the target and the gain over the
      present spread is measurable (:func:`paired_gain`, which ``gain`` holds);
    - ``no measurable effect``: the allowed spread reaches the target but the gain over
      the present spread is not measurable (the advice says which part of the test
      failed, with its numbers), so tightening it is not recommended;
    - ``re-centre`` / ``redesign``: the target is missed even with it held
      exactly, so tightening it alone cannot reach it, whatever its effect; the
      re-centred design if one does measurably better, else the design, the spec
      or the target must change.

    Parameters
    ----------
    model
        Growth spreads of the design.
    spec
        Windows a device must meet.
    run
        How samples are evaluated.
    parameters
        Names of the growth parameters to allocate, one row each.
    z
        Standard-normal coordinates of the samples, ``(n, n_parameters)``, used at every step.
    target_yield
        Yield to reach, between 0 and 1.
    max_scale
        Largest factor ``s`` on a sigma that is tried.
    steps
        Bisection steps.
    joint_thickness
        Add the row of all layer thicknesses scaled together.
    nominal_passed
        Pass/fail of ``z`` at the nominal spreads; None: computed.
    recentred
        The :func:`recentre` record the rows point to when the target is out of reach.
    """
    names = list(model.names)
    base = point_scale(model)
    base = np.ones(len(names)) if base is None else base
    groups: list[tuple[str, list[int]]] = [(p, [names.index(p)]) for p in parameters]
    thickness = [j for j, par in enumerate(model.parameters) if par.kind == "thickness"]
    if joint_thickness and len(thickness) > 1:
        groups.append((ALL_THICKNESSES, thickness))
    if nominal_passed is None:
        nominal_passed = spec.passes(run(model.grow(z, sigma_scale=base), desc="allocate"))
    ok_nominal = np.asarray(nominal_passed, bool)
    y_nominal = float(np.mean(ok_nominal))
    out = []
    for label, idx in groups:
        sig = float(np.max([model.sigmas[j] for j in idx]))
        unit = model.parameters[idx[0]].unit

        def passes_at(s: float, idx: list[int] = idx, label: str = label) -> np.ndarray:
            scale = base.copy()
            scale[idx] = s
            metrics = run(
                model.grow(z, sigma_scale=scale), desc=f"allocate {label}: spread x{s:.3g}"
            )
            return spec.passes(metrics)

        rec: dict[str, Any] = {
            "parameter": label,
            "nominal_sigma": sig,
            "unit": unit,
            "target_yield": target_yield,
            "yield_nominal": y_nominal,
            "yield_held_exactly": None,
            "gain": None,
            "note": "" if len(idx) == 1 else "every layer's thickness sigma scaled together",
        }
        ok_hi = passes_at(max_scale)
        if np.mean(ok_hi) >= target_yield:
            allowed = max_scale * sig
            rec.update(
                allowed_sigma=float(allowed),
                yield_at_allowed=float(np.mean(ok_hi)),
                action="keep",
                advice=f"no tightening needed: the target holds up to {max_scale:g} x the "
                f"present spread ({allowed:.3g} {unit}; search bound)",
            )
            out.append(rec)
            continue
        ok_lo = passes_at(0.0)
        rec["yield_held_exactly"] = float(np.mean(ok_lo))
        if np.mean(ok_lo) < target_yield:
            rec.update(_missed_when_held(ok_lo, ok_nominal, recentred, target_yield))
            out.append(rec)
            continue
        lo, hi, ok_best = 0.0, max_scale, ok_lo
        for _ in range(steps):
            mid = 0.5 * (lo + hi)
            ok_mid = passes_at(mid)
            if np.mean(ok_mid) >= target_yield:
                lo, ok_best = mid, ok_mid
            else:
                hi = mid
        rec.update(_allowed_row(lo, sig, unit, ok_best, ok_nominal))
        out.append(rec)
    return out


def _pct(value: float) -> str:
    return f"{100 * value:.0f} %"


def _not_measurable(gain: dict[str, Any]) -> str:
    """Why a :func:`paired_gain` is no measurable gain, with the numbers of what decided it:
    the paired test's p-value against its level, the change against the yield's noise, or
    both (a measurable loss: said so)."""
    level = gain.get("level", GAIN_TEST_LEVEL)
    why = []
    if not gain["p_value"] < level:
        why.append(f"paired test p = {gain['p_value']:.2g}, not below {level:g}")
    if not abs(gain["gain"]) > gain["yield_half_width"]:
        why.append(f"within the yield's noise of +-{100 * gain['yield_half_width']:.1f} points")
    return ", and ".join(why) or "a measurable loss"


def _missed_when_held(
    ok_held: np.ndarray,
    ok_nominal: np.ndarray,
    recentred: dict[str, Any] | None,
    target_yield: float,
) -> dict[str, Any]:
    """An allocation row's fields when ``target_yield`` is missed even with the parameter
    held exactly (pass/fail ``ok_held``): tightening it alone cannot reach the target, so
    re-centre or redesign (:func:`_advice_recentre`), whatever its own effect."""
    gain = paired_gain(ok_held, ok_nominal)
    action, what = _advice_recentre(recentred)
    yields = (
        f"yield {_pct(np.mean(ok_held))} against {_pct(np.mean(ok_nominal))} at the present spread"
    )
    if gain["measurable"] and gain["gain"] < 0:
        why = (
            "holding this exactly lowers the yield (the nominal misses the spec and the "
            f"spread carries some samples into it; {yields})"
        )
    else:
        effect = (
            f"a measurable gain, paired p = {gain['p_value']:.2g}"
            if gain["measurable"]
            else f"no measurable gain: {_not_measurable(gain)}"
        )
        why = (
            f"the target {_pct(target_yield)} is not reached even with this held exactly "
            f"({yields}; {effect}), so tightening it alone cannot reach it"
        )
    return {
        "allowed_sigma": None,
        "yield_at_allowed": float(np.mean(ok_held)),
        "gain": gain,
        "action": action,
        "advice": f"{why}: {what}",
    }


def _allowed_row(
    scale: float, sigma: float, unit: str, ok_best: np.ndarray, ok_nominal: np.ndarray
) -> dict[str, Any]:
    """An allocation row's fields once the bisection found the largest ``scale`` of the
    present ``sigma`` that meets the target (pass/fail there ``ok_best``): keep, tighten
    (a measurable gain) or no measurable effect."""
    allowed = scale * sigma
    row: dict[str, Any] = {
        "allowed_sigma": float(allowed),
        "yield_at_allowed": float(np.mean(ok_best)),
    }
    if scale >= 1.0:
        return {
            **row,
            "action": "keep",
            "advice": f"no tightening needed: the target holds up to {allowed:.3g} {unit}",
        }
    gain = paired_gain(ok_best, ok_nominal)
    row["gain"] = gain
    if gain["measurable"] and gain["gain"] > 0:
        return {
            **row,
            "action": "tighten",
            "advice": f"tighten from {sigma:.3g} to {allowed:.3g} {unit}: yield "
            f"{_pct(np.mean(ok_best))} ({100 * gain['gain']:+.0f} points, paired "
            f"p = {gain['p_value']:.2g})",
        }
    return {
        **row,
        "action": "no measurable effect",
        "advice": f"no measurable effect: tightening it to {allowed:.3g} {unit} changes "
        f"the yield by {100 * gain['gain']:+.1f} points, no measurable gain "
        f"({_not_measurable(gain)}); do not tighten it on this evidence",
    }


# --------------------------------------------------------------------------- driver


#: Truncation error of the island mixture (relative, Jp or PVCR, on the samples checked)
#: beyond which the results are said to be indicative only.
ISLAND_TRUNCATION_WARN = 0.1


def island_warning(islands: dict[str, Any]) -> str | None:
    """One sentence when the island mixture, truncated to the chosen layers, misses the full
    mixture by more than :data:`ISLAND_TRUNCATION_WARN` in Jp or PVCR on the samples checked
    (:func:`island_truncation_error`); None otherwise.

    Sharp resonances (the self-consistent model's current cliff) make this common: the
    whole-monolayer stacks of a sample peak at biases a few mV apart, so their mixture's
    peak is lower and broader than that of any few of them (measured on the demo's best
    design: Jp of the mixture over five layers 40 kA/cm^2, over two of them 72 kA/cm^2).

    Parameters
    ----------
    islands
        The record's ``islands`` (``layers``, ``continuous_layers``, ``check``).
    """
    check = islands.get("check") or {}
    errors: dict[str, float] = {
        name: float(check[key])
        for name, key in (("Jp", "peak_current_density_a_cm2"), ("PVCR", "pvcr"))
        if check.get(key) is not None
    }
    if not errors or max(errors.values()) <= ISLAND_TRUNCATION_WARN:
        return None
    worst = ", ".join(f"{100 * v:.0f} % in {k}" for k, v in errors.items())
    n = len(islands["layers"])
    return (
        f"the island mixture over {n} of {n + len(islands['continuous_layers'])} layers misses "
        f"the mixture over every layer by up to {worst} on the {check['samples']} samples "
        "checked: yields and rankings are indicative only; raise [growth] island_layers "
        "(each layer more doubles the cost)"
    )


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
            f"{check['samples']} samples: Jp {100 * check['peak_current_density_a_cm2']:.3g} %, "
            f"Vp {100 * (check['peak_voltage_v'] or 0):.3g} %, "
            f"PVCR {100 * (check['pvcr'] or 0):.3g} %)"
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
    parameter score, largest first: ``{control, parameters, score, measure}``.

    Parameters
    ----------
    model
        Growth spreads; each parameter names what controls it.
    scores
        Score of each parameter, name -> value (missing: 0).
    measure
        What the scores are (copied into each row).
    """
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


#: :func:`control_summary` where no source cell or layer scores above zero.
NO_CONTROL_STANDS_OUT = (
    "no source cell or layer stands out from zero at this sample size (more --samples would tell)"
)


def controls_standing_out(record: dict[str, Any]) -> list[bool]:
    """Per row of the record's ``control_order``: whether it stands out from zero (a score
    above zero and a parameter the ``ranking`` does not list as indistinguishable from zero)."""
    zero = set((record.get("ranking") or {}).get("indistinguishable_from_zero") or [])
    return [
        c["score"] > 0 and not all(p in zero for p in c["parameters"])
        for c in record.get("control_order") or []
    ]


def _no_variance(outcome: str, samples: int, what: str) -> str:
    return (
        f"every one of the {samples} {what} {outcome} the spec, so pass/fail has no "
        "variance to apportion and nothing is ranked by it"
    )


def ranking_without_variance(ranking: dict[str, Any] | None) -> str | None:
    """Where every sample of a Sobol or Morris ranking passed (or every one failed), that in
    words (the command line and the report both say this in place of a ranking); else None.

    Parameters
    ----------
    ranking
        The record's ``ranking`` (``every_sample``, ``evaluations``).
    """
    if not ranking or ranking.get("every_sample") is None:
        return None
    return _no_variance(
        ranking["every_sample"], ranking["evaluations"], "samples the ranking evaluated"
    )


def evaluations_text(ranking: dict[str, Any]) -> str:
    """The evaluations a Sobol or Morris ranking used against its budget (``--samples``), in
    words. A budget below the method's smallest design (Sobol: 8 base samples of D + 2
    evaluations; Morris: two trajectories of D + 1) was raised to that design, which is then
    what ran, and this says so (the command line and the report both say this).

    Parameters
    ----------
    ranking
        The record's ``ranking`` (``evaluations``, ``budget``).
    """
    used, budget = ranking.get("evaluations", "?"), ranking.get("budget", "?")
    if isinstance(used, int) and isinstance(budget, int) and used > budget:
        return (
            f"{used} evaluations used: the budget of {budget} (--samples) is below the "
            f"method's smallest design, so it was raised by {used - budget} to that"
        )
    return f"{used} of a budget of {budget} evaluations used"


def control_summary(record: dict[str, Any], *, top: int = 1, parameters: bool = False) -> str:
    """What the grower controls hardest, in words: "layer barrier1 first, then In cell";
    controls of equal score share a place ("A and B first"); said plainly where none
    stands out from zero or from the others, or where every as-grown sample passed (or
    failed) so that nothing can (the command line and the report both say this).

    Parameters
    ----------
    record
        A tolerance record (``control_order``, optionally ``ranking``).
    top
        Places named (the first and the ones after it).
    parameters
        Name each control's growth parameters in brackets.
    """
    order = record.get("control_order") or []
    standing = [c for c, s in zip(order, controls_standing_out(record), strict=True) if s]
    if not standing:
        y = record.get("yield") or {}
        if y.get("samples") and y.get("passed") in (0, y["samples"]):
            outcome = "passed" if y["passed"] else "failed"
            return _no_variance(outcome, y["samples"], "as-grown samples")
        return NO_CONTROL_STANDS_OUT
    if len(order) > 1 and all(c["score"] == order[0]["score"] for c in order):
        return "no source cell or layer stands out from the others (equal scores)"
    places: list[list[dict[str, Any]]] = []  # controls of equal score, highest first
    for c in standing:
        if places and c["score"] == places[-1][0]["score"]:
            places[-1].append(c)
        else:
            places.append([c])

    def named(c: dict[str, Any]) -> str:
        return f"{c['control']} ({', '.join(c['parameters'])})" if parameters else c["control"]

    words = [" and ".join(named(c) for c in place) for place in places[:top]]
    return f"{words[0]} first" + "".join(f", then {w}" for w in words[1:])


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
    variables: Sequence[Any] | None = None,
    recentring: bool = True,
) -> dict[str, Any]:
    """The whole tolerance analysis of one design; optionally writes ``out_dir``.

    The island layers are chosen first (:func:`with_island_layers`); with
    layers left continuous, the first ``island_checks`` Monte Carlo samples are also
    evaluated with the full
    mixture to measure the truncation error (``islands.check``).

    ``method``: ``mc`` (yield, tornado, allocation), ``morris`` (adds Morris
    screening: a quarter of ``max(2, samples // (n_params + 1))`` trajectories,
    doubled until the pass/fail ranking is resolved or that budget is reached) or
    ``sobol`` (adds Sobol indices, base samples doubled from :data:`SOBOL_START_BASE`
    until resolved, up to the largest power of two ``<= samples // (n_params + 2)``). The
    allocation reuses the first :data:`ALLOCATION_SAMPLES` Monte Carlo samples. When the
    yield at the centre is below ``target_yield`` (with ``recentring`` and an
    allocation asked for, ``allocate`` > 0), the
    whole-monolayer design nearby with the highest yield under the same
    spreads is looked for on the same samples (:func:`recentre`, moving the
    study's thickness ``variables``, see :func:`free_thicknesses`), and the
    allocation rows point to it.

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
    valley_curvatures, peak_shifts, estimates, check}; ``allocation``; ``parameters`` [{name, kind,
    sigma, unit, control}]; ``control_order`` (:func:`control_order`: source
    cells and layers, the one to control hardest first); ``ranking`` (Sobol or
    Morris: :func:`ranking_resolution` of pass/fail with ``measure``,
    ``evaluations`` used and the ``budget``) and ``ranking_resolved`` (None for
    ``mc``); ``nominal`` metrics; ``valley_bounded_by_sweep``
    (:func:`valley_bounded_record`: nominal and Monte Carlo valleys not reached even
    beyond the sweep end, whose figures are bounds); ``nominal_check`` (the nominal
    design against each window,
    :func:`wellwright.optimize.study.targets.window_report`) and ``nominal_misses``
    (the texts of the windows it misses, by how much), ``nominal_closest`` (when it
    misses none: the window it is nearest to leaving, relative to the bound); ``recentre``
    (:func:`recentre`, None when the target yield is met or nothing can move);
    ``spec``; ``settings``; ``notes``. The Sobol
    design starts at :data:`SOBOL_START_BASE` base samples and doubles until
    the leader of pass/fail is separated from the runner-up beyond their
    confidence intervals or the budget is spent.

    Parameters
    ----------
    model
        Growth spreads of the design.
    spec
        Windows a device must meet.
    run
        How samples are evaluated.
    method
        ``sobol``, ``morris`` or ``mc`` (see above).
    samples
        Monte Carlo samples, also the budget of the Morris or Sobol design.
    seed
        A whole-number seed, a generator or None.
    allocate
        Number of the most important parameters given a tolerance allocation; 0: none.
    target_yield
        Yield the allocation and the re-centring aim at, between 0 and 1.
    out_dir
        Folder the outputs are written to (:func:`write_outputs`); None: nothing written.
    design
        The design's record, stored as ``design``.
    figures
        Also write the PNG figures.
    second_order
        Also second-order Sobol indices (``method`` ``sobol``).
    island_checks
        Monte Carlo samples evaluated with the full island mixture; 0: no check.
    variables
        The study's variables, for the thicknesses a re-centring may move.
    recentring
        Look for a re-centred design when the yield misses the target.
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
        "parameters": _parameter_records(model),
        "spec": _spec_records(spec),
        "yield": mc["yield"],
        "failures": mc["failures"],
        **_wafer_record(model, mc),
        "sobol": {},
        "morris": {},
        "model": model_record(model.stack),
        **_nominal_fields(spec, tor["nominal"], mc["metrics"], notes),
        "tornado": tor["layers"],
    }
    record["islands"] = _checked_islands(model, run, tor["islands"], mc["z"], checks=island_checks)
    notes.append(_island_note(record["islands"]))
    if method == "sobol":
        record.update(
            _sobol_fields(model, spec, run, samples, second_order, seed=seeds[1], notes=notes)
        )
    elif method == "morris":
        record.update(_morris_fields(model, spec, run, samples, seed=seeds[1], notes=notes))
    ranking_source, scores, measure = _control_scores(model, record, mc, notes)
    record["control_order"] = control_order(model, scores, measure)
    z_alloc = mc["z"][:ALLOCATION_SAMPLES]
    record["recentre"], record["allocation"] = _recentre_and_allocate(
        model,
        spec,
        run,
        ranking_source,
        allocate=allocate,
        z=z_alloc,
        nominal_passed=mc["passed"][:ALLOCATION_SAMPLES],
        target_yield=target_yield,
        recentring=recentring and mc["yield"]["value"] < target_yield,
        variables=variables,
    )
    record["ranking_resolved"] = record.get("ranking", {}).get("resolved")
    record["settings"] = {
        "method": method,
        "second_order": bool(second_order and method == "sobol"),
        "samples": samples,
        **_bias_settings(run),
        "seed": seed if isinstance(seed, int) else None,
        "target_yield": target_yield,
        "allocation_samples": int(z_alloc.shape[0]),
        "recentre_budget": None if record["recentre"] is None else record["recentre"]["budget"],
    }
    record["notes"] = notes
    if out_dir is not None:
        write_outputs(record, mc, Path(out_dir), figures=figures)
    return record


def _parameter_records(model: GrowthModel) -> list[dict[str, Any]]:
    """The growth parameters as plain records {name, kind, sigma, unit, control}."""
    return [
        {"name": p.name, "kind": p.kind, "sigma": p.sigma, "unit": p.unit, "control": p.control}
        for p in model.parameters
    ]


def _spec_records(spec: Spec) -> list[dict[str, Any]]:
    """The spec's windows as plain records {metric, min, max} (None: no bound)."""
    return [
        {
            "metric": m,
            "min": lo if math.isfinite(lo) else None,
            "max": hi if math.isfinite(hi) else None,
        }
        for m, lo, hi in spec.windows
    ]


def _checked_islands(
    model: GrowthModel, run: Runner, islands: dict[str, Any], z: np.ndarray, *, checks: int
) -> dict[str, Any]:
    """The ``islands`` record of :func:`with_island_layers` with its warning and, when layers
    are left continuous, its truncation check on the first ``checks`` samples of ``z``
    (0: none)."""
    if islands["continuous_layers"] and checks > 0:
        islands["check"] = island_truncation_error(model, run, z[:checks])
    islands["warning"] = island_warning(islands)
    return islands


def _recentre_and_allocate(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    ranking: list[str],
    *,
    allocate: int,
    z: np.ndarray,
    nominal_passed: np.ndarray,
    target_yield: float,
    recentring: bool,
    variables: Sequence[Any] | None,
) -> tuple[dict[str, Any] | None, list[dict]]:
    """The re-centring and the allocation of :func:`run_tolerance`, both on the samples ``z``.

    The re-centring (:func:`recentre`; else None) when ``recentring`` (the yield misses the
    target), an allocation is asked for (``allocate`` > 0), ``z`` holds at least 8 samples
    and a thickness of the study's ``variables`` may move. The allocation
    (:func:`allocate_tolerances`, pointing to the re-centred design) of the first
    ``allocate`` parameters of ``ranking`` but the wafer's place; none when ``allocate`` is
    0 or the model has no growth parameter."""
    recentred = None
    if recentring and allocate > 0 and z.shape[0] >= 8:
        free = free_thicknesses(model.stack, variables)
        if free:
            recentred = recentre(model, spec, run, z=z, free=free, nominal_passed=nominal_passed)
    allocation = (
        allocate_tolerances(
            model,
            spec,
            run,
            parameters=[p for p in ranking if p != WAFER_PARAMETER][:allocate],
            z=z,
            target_yield=target_yield,
            nominal_passed=nominal_passed,
            recentred=recentred,
        )
        if allocate > 0 and model.parameters
        else []
    )
    return recentred, allocation


def _bias_settings(run: Runner) -> dict[str, Any]:
    """The sweep of ``run`` for the record's settings: points, first and last bias."""
    return {
        "bias_points": int(run.bias_v.size),
        "bias_min_v": float(run.bias_v[0]),
        "bias_max_v": float(run.bias_v[-1]),
    }


def _nominal_fields(
    spec: Spec, nominal: dict[str, Any], mc_metrics: dict[str, np.ndarray], notes: list[str]
) -> dict[str, Any]:
    """The record's fields on the nominal design: ``nominal`` metrics, the valley-bounded
    flags, ``nominal_check``, ``nominal_misses`` and ``nominal_closest`` (see
    :func:`run_tolerance`); a note when valleys are bounded by the sweep end."""
    bounded = valley_bounded_record(nominal, mc_metrics)
    if bounded["nominal"] or bounded["samples"]:
        notes.append(
            f"valley bounded by the sweep end (the current still falls at the last bias "
            f"computed): {'the nominal design and ' if bounded['nominal'] else ''}"
            f"{bounded['samples']} of {bounded['of']} Monte Carlo samples; their valley "
            "current is an upper bound and valley voltage, PVCR, peak-to-valley differences "
            "and output power lower bounds (spreads and indices of these figures include "
            "bounds): raise the sweep's end bias"
        )
    check = window_report(spec.windows, nominal)
    misses = [r["text"] for r in check if not r["inside"]]
    inside = [r for r in check if r["inside"]]
    closest = (
        None
        if misses or not inside
        else min(inside, key=lambda r: r["margin"] / (abs(r["bound"]) or 1.0))["text"]
    )
    return {
        "nominal": nominal,
        VALLEY_BOUNDED: bounded,
        "nominal_check": check,
        "nominal_misses": misses,
        "nominal_closest": closest,
    }


def _sobol_fields(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    samples: int,
    second_order: bool,
    *,
    seed: np.random.Generator,
    notes: list[str],
) -> dict[str, Any]:
    """The record's Sobol fields (``sobol``, ``sobol_second_order``, ``sobol_evaluations``,
    ``ranking``) from :func:`sobol_analysis` within the budget ``samples``."""
    d = len(model.parameters)
    per_base = 2 * d + 2 if second_order else d + 2
    n_base = max(8, 2 ** int(math.floor(math.log2(max(1, samples // per_base)))))
    s = sobol_analysis(
        model,
        spec,
        run,
        base_samples=min(n_base, SOBOL_START_BASE),
        max_evaluations=n_base * per_base,
        second_order=second_order,
        seed=seed,
    )
    notes += s["notes"]
    widest = max((r["total_conf"] for r in s["sobol"].get("pass", [])), default=0.0)
    if widest > SOBOL_WIDE_CONF:
        notes.append(
            f"Sobol on {s['base_samples']} base samples for {d} parameters: confidence "
            f"half-widths up to {widest:.2f}, so negative first-order estimates and totals "
            "above 1 are sampling noise; trust the order of the leading parameters, not the "
            "values, or rerun with more --samples (the half-widths shrink as 1/sqrt(samples))"
        )
    out = {
        "sobol": s["sobol"],
        "sobol_evaluations": s["evaluations"],
        "ranking": {
            **s["resolution"],
            "measure": "total Sobol index of pass/fail",
            "evaluations": s["evaluations"],
            "budget": samples,
            "every_sample": s["every_sample"],
        },
    }
    if second_order:
        out["sobol_second_order"] = s["sobol_second_order"]
    return out


def _morris_fields(
    model: GrowthModel,
    spec: Spec,
    run: Runner,
    samples: int,
    *,
    seed: np.random.Generator,
    notes: list[str],
) -> dict[str, Any]:
    """The record's Morris fields (``morris``, ``ranking``) from :func:`morris_analysis`:
    a quarter of the budget's trajectories first, doubled until resolved."""
    budget_t = max(2, samples // (len(model.parameters) + 1))
    m = morris_analysis(
        model,
        spec,
        run,
        trajectories=budget_t,
        start_trajectories=max(2, budget_t // 4),
        seed=seed,
    )
    notes += m["notes"]
    return {
        "morris": m["morris"],
        "ranking": {
            **m["resolution"],
            "measure": "Morris mu* of pass/fail",
            "evaluations": m["evaluations"],
            "budget": samples,
            "every_sample": m["every_sample"],
        },
    }


def _control_scores(
    model: GrowthModel, record: dict[str, Any], mc: dict[str, Any], notes: list[str]
) -> tuple[list[str], dict[str, float], str]:
    """The parameters to allocate (most important first), their scores and the measure: the
    resolved Sobol ranking, else Morris mu* of pass/fail, else the Monte Carlo correlation of
    |deviation| with failure (a cheap fallback, noted). Sobol parameters indistinguishable
    from zero are not ranked."""
    sobol_pass = record["sobol"].get("pass", [])
    morris_pass = record["morris"].get("pass", [])
    if record["sobol"] and record["ranking"]["ranked"]:
        return (
            record["ranking"]["ranked"],
            {r["parameter"]: r["total_index"] for r in sobol_pass},
            "total Sobol index of pass/fail",
        )
    if any(r["mu_star"] > 0 for r in morris_pass):
        return (
            [r["parameter"] for r in morris_pass],
            {r["parameter"]: r["mu_star"] for r in morris_pass},
            "Morris mu* of pass/fail",
        )
    fail = (~mc["passed"]).astype(float)
    score = [
        abs(np.corrcoef(np.abs(mc["z"][:, j]), fail)[0, 1]) if fail.std() > 0 else 0.0
        for j in range(len(model.parameters))
    ]
    measure = "correlation of |deviation| with failure (Monte Carlo)"
    if fail.std() > 0:
        notes.append(f"allocation parameters ranked by {measure}")
        return [model.names[j] for j in np.argsort(score)[::-1]], _named(model, score), measure
    # every sample passed (or failed): nothing orders the controls by the yield, so the
    # allocation takes those that move the peak current most (how far each may loosen)
    jp = "peak_current_density_a_cm2"
    table = record["sobol"].get(jp) or record["morris"].get(jp)
    if table:
        order = [r["parameter"] for r in table]  # most effect first
    else:
        y = np.asarray(mc["metrics"][jp], float)
        dev = np.abs(y - np.nanmedian(y))
        effect = [
            abs(np.corrcoef(np.abs(mc["z"][:, j]), dev)[0, 1]) if np.nanstd(dev) > 0 else 0.0
            for j in range(len(model.parameters))
        ]
        order = [model.names[j] for j in np.argsort(np.nan_to_num(effect))[::-1]]
    notes.append(
        "every sample passed or every one failed: allocation parameters ordered by their effect "
        "on the peak current density"
    )
    return order, _named(model, score), measure


def _named(model: GrowthModel, score: Sequence[float]) -> dict[str, float]:
    """Scores by parameter name."""
    return dict(zip(model.names, map(float, score), strict=True))


#: The growth sheet of the re-centred design (written when it is a measurable gain).
RECENTRED_SHEET = "growth_sheet_recentred.csv"
#: Columns of ``allocation.csv`` (the report's copy uses the same).
ALLOCATION_HEADER = [
    "parameter",
    "unit",
    "nominal_sigma",
    "allowed_sigma",
    "yield_nominal",
    "yield_held_exactly",
    "yield_at_allowed",
    "gain",
    "p_value",
    "action",
    "advice",
    "note",
]


def allocation_row(a: dict[str, Any]) -> list[Any]:
    """One row of ``allocation.csv`` from an allocation record (:data:`ALLOCATION_HEADER`)."""
    gain = a.get("gain") or {}
    return [
        a["parameter"],
        a["unit"],
        a["nominal_sigma"],
        a["allowed_sigma"],
        a.get("yield_nominal"),
        a.get("yield_held_exactly"),
        a.get("yield_at_allowed"),
        gain.get("gain"),
        gain.get("p_value"),
        a.get("action", ""),
        a.get("advice", ""),
        a["note"],
    ]


def write_outputs(
    record: dict[str, Any], mc: dict[str, Any], out: Path, *, figures: bool = True
) -> dict[str, str]:
    """``tolerance.json``, ``samples.csv``, ``sobol_<metric>.csv``, ``tornado.csv``,
    ``allocation.csv``, :data:`RECENTRED_SHEET` (when re-centring is a measurable gain) and
    the PNG figures, each written to a temporary name and renamed.

    Parameters
    ----------
    record
        The tolerance record (:func:`run_tolerance`); its ``files`` are set (paths relative
        to ``out``; the returned ones as written).
    mc
        The Monte Carlo record (:func:`monte_carlo_yield`, with ``wafer`` when there is one).
    out
        Folder to write to.
    figures
        Also write the PNG figures.
    """
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
            ALLOCATION_HEADER,
            (allocation_row(a) for a in record["allocation"]),
        )
    )
    rc = record.get("recentre")
    if rc is not None and rc.get("better"):  # a growth sheet only for a design worth growing
        files["growth_sheet_recentred"] = str(
            write_csv(out / RECENTRED_SHEET, GROWTH_SHEET_HEADER, growth_sheet_rows(rc["design"]))
        )
    if figures:
        from wellwright.optimize.tolerance import figures as tf

        files.update(tf.save_all(record, mc, out))
    # on file, relative to the record's own folder: a moved or archived folder still holds
    record["files"] = {k: Path(v).relative_to(out).as_posix() for k, v in files.items()}
    write_json(out / "tolerance.json", record)
    return files
