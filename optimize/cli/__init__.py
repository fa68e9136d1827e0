"""The ``wellwright`` command: one module per subcommand, and the ``run`` pipeline.

The top stage: it imports every other stage, and nothing imports it.

:func:`main` is the console script's entry point. Importing this package loads
nothing else (the command's modules load when :func:`main` runs), so that
:func:`main` can set the command's thread defaults before numpy is imported:
see :data:`THREAD_VARIABLES`.
"""

from __future__ import annotations

import os
import sys
from typing import TYPE_CHECKING, Any

__all__ = ["COMMAND_MODULES", "THREAD_VARIABLES", "build_parser", "main"]

#: Thread-count variables of the BLAS and OpenMP libraries numpy may be built with, and the
#: command's default for each: one thread. The command's work is many small array
#: operations, never a large matrix product, and spreads over processes where it runs in
#: parallel (search and tolerance workers); OpenBLAS's thread pool only costs CPU (its start
#: at numpy's import and its threads' spinning after each threaded call: about 0.2 s of a
#: 0.7 s ``wellwright iv``). Set by :func:`main` only when the process starts with it
#: (numpy not yet imported) and never over a value the user set: ``OPENBLAS_NUM_THREADS=2
#: wellwright ...`` overrides it. Importing the library sets none of them.
THREAD_VARIABLES = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def thread_defaults() -> dict[str, str]:
    """Set the unset :data:`THREAD_VARIABLES` if numpy is not imported yet; returns those set."""
    if "numpy" in sys.modules:  # too late to matter here, and a library caller's process
        return {}
    applied = {k: v for k, v in THREAD_VARIABLES.items() if k not in os.environ}
    os.environ.update(applied)
    return applied


def main(argv: list[str] | None = None) -> int:
    """Run the ``wellwright`` command; returns the exit status.

    The console script's entry point: sets the thread defaults (:func:`thread_defaults`),
    then runs :func:`wellwright.optimize.cli.app.main`.
    """
    thread_defaults()
    from wellwright.optimize.cli.app import main as run

    return run(argv)


def __getattr__(name: str) -> Any:
    if name in ("COMMAND_MODULES", "build_parser"):
        from wellwright.optimize.cli import app

        return getattr(app, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


if TYPE_CHECKING:  # for type checkers and IDEs; not run
    from wellwright.optimize.cli.app import COMMAND_MODULES, build_parser
