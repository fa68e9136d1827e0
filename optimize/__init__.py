"""wellwright drivers: command line, figures, design search, growth tolerance, reports.

Everything that drives :mod:`physics` lives here; :mod:`physics` never imports it.

Modules, each named for what it holds:

- :mod:`optimize.study`: loading a study file, its settings, the :class:`Study` dataclass;
- :mod:`optimize.space`: variables (ranges of layer keys), ``same_as``, concrete stacks;
- :mod:`optimize.targets`: target windows, objectives, spec violation, scoring, constraints;
- :mod:`optimize.search`: the Optuna runner (workers, ask and tell, evaluation);
- :mod:`optimize.storage`: storage URLs, SQLite settings, heartbeats, dead trials;
- :mod:`optimize.designs`: ranking, design records, designs.csv/json, growth sheets;
- :mod:`optimize.robust`: the robust search objective (Monte Carlo yield, common random numbers);
- :mod:`optimize.growth`: as-grown samples of a design;
- :mod:`optimize.tolerance`: Monte Carlo yield, Sobol and Morris ranking, tornado, allocation.

The public names below are imported on first use (PEP 562), so that
``import optimize`` stays cheap: it loads neither Optuna nor matplotlib.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

#: Public name -> module that defines it.
_EXPORTS = {
    # study files
    "Study": "study",
    "load_study": "study",
    "parse_study": "study",
    # spec
    "Spec": "targets",
    # design search
    "run_search": "search",
    "SearchResult": "search",
    "nominal_metrics": "search",
    "rank_trials": "designs",
    "design_record": "designs",
    # growth and tolerance
    "GrowthSettings": "growth",
    "growth_model": "growth",
    "parse_growth": "growth",
    "Runner": "tolerance",
    "wilson_interval": "tolerance",
    "monte_carlo_yield": "tolerance",
    "sobol_analysis": "tolerance",
    "morris_analysis": "tolerance",
    "tornado": "tolerance",
    "allocate_tolerances": "tolerance",
    "run_tolerance": "tolerance",
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
    from .designs import design_record, rank_trials
    from .growth import GrowthSettings, growth_model, parse_growth
    from .search import SearchResult, nominal_metrics, run_search
    from .study import Study, load_study, parse_study
    from .targets import Spec
    from .tolerance import (
        Runner,
        allocate_tolerances,
        monte_carlo_yield,
        morris_analysis,
        run_tolerance,
        sobol_analysis,
        tornado,
        wilson_interval,
    )
