"""wellwright drivers: command line, figures, design search, growth tolerance, reports.

Everything that drives :mod:`physics` lives here; :mod:`physics` never imports it.

Stage packages, imported only downwards (see DEVELOPERS.md):
``shared`` < ``study`` < ``tolerance`` < ``search`` < ``calibrate`` < ``report`` < ``cli``.

The public names below are imported on first use (PEP 562), so that
``import wellwright.optimize`` stays cheap: it loads neither Optuna nor matplotlib.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

#: Public name -> module that defines it.
_EXPORTS = {
    # study files
    "Study": "study.study",
    "load_study": "study.study",
    "parse_study": "study.study",
    # spec
    "Spec": "study.targets",
    # design search
    "run_search": "search.engine",
    "SearchResult": "search.designs",
    "nominal_metrics": "search.engine",
    "rank_trials": "search.designs",
    "design_record": "search.designs",
    # growth and tolerance
    "GrowthSettings": "study.growth",
    "growth_model": "study.growth",
    "parse_growth": "study.growth",
    "Runner": "tolerance.analysis",
    "wilson_interval": "tolerance.analysis",
    "monte_carlo_yield": "tolerance.analysis",
    "sobol_analysis": "tolerance.analysis",
    "morris_analysis": "tolerance.analysis",
    "tornado": "tolerance.analysis",
    "allocate_tolerances": "tolerance.analysis",
    "run_tolerance": "tolerance.analysis",
}

__all__ = [
    "GrowthSettings",
    "Runner",
    "SearchResult",
    "Spec",
    "Study",
    "allocate_tolerances",
    "design_record",
    "growth_model",
    "load_study",
    "monte_carlo_yield",
    "morris_analysis",
    "nominal_metrics",
    "parse_growth",
    "parse_study",
    "rank_trials",
    "run_search",
    "run_tolerance",
    "sobol_analysis",
    "tornado",
    "wilson_interval",
]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'optimize' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if TYPE_CHECKING:  # for type checkers and IDEs; not run
    from wellwright.optimize.search.designs import SearchResult, design_record, rank_trials
    from wellwright.optimize.search.engine import nominal_metrics, run_search
    from wellwright.optimize.study.growth import GrowthSettings, growth_model, parse_growth
    from wellwright.optimize.study.study import Study, load_study, parse_study
    from wellwright.optimize.study.targets import Spec
    from wellwright.optimize.tolerance.analysis import (
        Runner,
        allocate_tolerances,
        monte_carlo_yield,
        morris_analysis,
        run_tolerance,
        sobol_analysis,
        tornado,
        wilson_interval,
    )
