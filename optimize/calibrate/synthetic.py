"""Invented measurements: the project's own model from a stack with known growth errors, plus noise.

Used by the tests, the benchmark and the script that made the demo data set
in ``studies/``. Nothing here is measured.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from wellwright.optimize.calibrate.measured import Measurement
from wellwright.optimize.calibrate.problem import build_problem
from wellwright.optimize.study.growth import as_generator

__all__ = ["synthetic_measurement"]


def synthetic_measurement(
    data: dict[str, Any],
    truth: dict[str, float],
    bias_v: np.ndarray,
    *,
    area_um2: float | None = None,
    noise: float = 0.02,
    floor_a_cm2: float = 0.0,
    seed: int | np.random.Generator | None = None,
    bias_points: int = 401,
    source: str = "<synthetic>",
) -> Measurement:
    """An invented sweep of the stack ``data`` grown with the errors ``truth``.

    ``truth`` maps calibration parameter names (``barrier1.thickness_ml``,
    ``InGaAs.rate``, ``series_resistance_ohm_um2``, ...) to their true
    values; the current is the island-model current of the model on a fine
    intrinsic grid (``bias_points``), the terminal bias ``V + I R``; noise is
    multiplicative log-normal with relative sigma ``noise`` plus a Gaussian
    floor of ``floor_a_cm2``.

    Parameters
    ----------
    data
        The stack document (as parsed from its TOML file).
    truth
        True values of calibration parameters by name.
    bias_v
        Terminal biases of the invented measurement, V, strictly increasing (as a
        :class:`Measurement` holds them: a negative sweep from its far end up to zero).
    area_um2
        Mesa area, um^2, recorded with the sweep.
    noise
        Relative sigma of the multiplicative log-normal noise.
    floor_a_cm2
        Sigma of the additive Gaussian floor, A/cm^2.
    seed
        Seed or generator of the noise (``as_generator``).
    bias_points
        Points of the fine intrinsic bias grid.
    source
        Name recorded as the measurement's source.
    """
    bias = np.asarray(bias_v, float)
    if bias.ndim != 1 or bias.size < 2 or np.any(np.diff(bias) <= 0):
        # a measured sweep is stored increasing (a negative one from its far end up to zero);
        # decreasing biases gave every current zero, silently
        raise ValueError(
            "bias_v must be strictly increasing (a negative sweep from its far end up to 0)"
        )
    rng = as_generator(seed)
    template = Measurement(source, bias, np.ones(bias.size), area_um2)
    problem = build_problem(data, [template], fit=list(truth), bias_points=bias_points)
    dev = problem.deviations_of(truth)
    j = problem.predict(dev[None, :])[0][0]
    j = j * np.exp(noise * rng.standard_normal(j.size)) + floor_a_cm2 * rng.standard_normal(j.size)
    return Measurement(source, template.bias_v, j, area_um2)
