"""Robust search: each candidate's objective is its Monte Carlo yield under growth variation.

With ``[search] robust = true`` (or ``wellwright search --robust``) every
design the search proposes is grown ``robust_samples`` times on paper
(:mod:`wellwright.optimize.study.growth`, the study's ``[growth]`` spreads and the layers' own
``growth`` tables) and the fraction of as-grown samples meeting the
``[targets]`` windows (:class:`wellwright.optimize.study.targets.Spec`) is its yield, stored
with its Wilson interval as the trial attribute ``yield``. The search then
prefers designs that survive growth over designs that are only nominally best
(for example one whose peak current density sits at the edge of its window).

Common random numbers
---------------------
Every trial uses the same random draws, so that two designs are compared on
the same simulated growth runs and the difference of their yields is not
sampling noise between trials (common practice in simulation optimisation).
The standard-normal coordinate of each variation parameter is drawn from its
own stream seeded by ``(seed, crc32(parameter name))``, with
``seed`` the study's ``[search] seed`` (not ``--seed``, which only reseeds the
sampler: the yields of one study must stay comparable across resumed runs and
machines). Sample ``k`` of every design therefore sees the same thickness
error on ``barrier1``, the same ``AlAs.rate`` error, and so on.

With ``[growth.wafer]`` each sample also sits at its own place on the wafer,
so the yield a robust search maximises is the wafer yield (the share of the
wafer's area where a device meets the spec).

Evaluation
----------
Each sample is the island mixture of whole-monolayer stacks
(:meth:`wellwright.optimize.study.growth.GrowthModel.grow`, the island layers
chosen per design from one-monolayer steps of its nominal stack as in the
tolerance analysis); all stacks of one design go through one batched
:func:`wellwright.physics.iv.sweep` call per trial.

Objective and ranking
---------------------
The Optuna value a robust search minimises is :func:`robust_value`:
``(1 - yield)`` plus a tie-break from the nominal score
(:func:`wellwright.optimize.study.targets.single_score`) smaller than one sample's worth of
yield, so designs are ordered by yield first and, at equal yield, by how well
their nominal figures meet the spec (this also gives the sampler a gradient
while every design it has seen still has zero yield).
:func:`wellwright.optimize.search.designs.rank_trials` ranks by yield, then nominal score.

References
----------
.. [1] E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927) (score interval of the yield).
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Sequence
from typing import Any

import numpy as np
from wellwright.optimize.study.study import RobustPlan, check_robust
from wellwright.physics.stack import Stack

__all__ = [
    "RobustPlan",
    "check_robust",
    "common_random_numbers",
    "design_yields",
    "robust_value",
]


def _stream(seed: int, label: str) -> np.random.Generator:
    return np.random.default_rng([int(seed), zlib.crc32(label.encode("utf-8"))])


def common_random_numbers(parameter_names: Sequence[str], *, samples: int, seed: int) -> np.ndarray:
    """Standard normals ``(samples, n_parameters)``.

    Each column comes from its own stream keyed by the seed and the parameter
    name, so a column depends only on its name: two designs with the same
    named parameters get the same draws, whatever else they have.

    Parameters
    ----------
    parameter_names
        Names of the growth parameters, one column each.
    samples
        Number of rows.
    seed
        Seed of the streams (required).
    """
    if seed is None:
        raise ValueError("common random numbers need a seed")
    z = np.empty((samples, len(parameter_names)))
    for j, name in enumerate(parameter_names):
        z[:, j] = _stream(seed, name).standard_normal(samples)
    return z


def design_yields(
    stacks: Sequence[Stack], bias_v: np.ndarray, plan: RobustPlan
) -> list[dict[str, Any]]:
    """Monte Carlo yield of each design with common random numbers (one sweep call per design).

    Returns, per stack, :func:`wellwright.optimize.tolerance.analysis.yield_record` (``value``,
    ``ci_low``, ``ci_high``, ``samples``, ``passed``, ``confidence``) plus
    ``failures``: per window, the samples missing it, and ``solve_failed``, the samples
    whose self-consistent solve did not converge (failed samples).

    Parameters
    ----------
    stacks
        The designs.
    bias_v
        Bias sweep, V.
    plan
        The robust search's plan: growth settings, spec, samples and seed.
    """
    from wellwright.optimize.study.growth import growth_model
    from wellwright.optimize.tolerance.analysis import (
        SOLVE_FAILED,
        Runner,
        with_island_layers,
        yield_record,
    )

    out = []
    for stack in stacks:
        run = Runner.for_stack(
            stack, bias_v, batch_size=plan.samples, at_bias_v=plan.spec.at_bias_v
        )
        model, _ = with_island_layers(growth_model(stack, plan.settings, plan.per_layer), run)
        z = common_random_numbers(model.names, samples=plan.samples, seed=plan.seed)
        # a sample whose self-consistent solve fails is a failed sample, not a failed design
        metrics = run(model.grow(z))
        rec = yield_record(plan.spec.passes(metrics))
        rec["failures"] = {
            name: int(np.count_nonzero(m)) for name, m in plan.spec.misses(metrics).items()
        }
        rec["failures"][SOLVE_FAILED] = int(np.count_nonzero(metrics[SOLVE_FAILED]))
        out.append(rec)
    return out


def robust_value(yield_value: float, score: float, *, samples: int) -> float:
    """The value a robust search minimises: ``(1 - yield) + t(score) / (samples + 1)``.

    Parameters
    ----------
    yield_value
        Monte Carlo yield, between 0 and 1.
    score
        Nominal single-objective score (NaN allowed).
    samples
        Monte Carlo samples of the yield.

    Notes
    -----
    ``t(s) = (s + 1) / (s + 2)`` maps the nominal single-objective score
    ``s`` (in ``(-1, 0]`` on spec, ``> 0`` off spec; see
    :func:`wellwright.optimize.study.targets.single_score`) monotonically into ``(0, 1)``
    (1 for NaN). Divided by ``samples + 1`` it stays below one sample's worth
    of yield (``1 / samples``), so it only orders designs of equal yield.
    """
    if not math.isfinite(score):
        t = 1.0
    elif score <= -1.0:
        t = 0.0
    else:
        t = (score + 1.0) / (score + 2.0)
    return (1.0 - float(yield_value)) + t / (samples + 1)
