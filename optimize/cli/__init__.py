"""The ``wellwright`` command: one module per subcommand, and the ``run`` pipeline.

The top stage: it imports every other stage, and nothing imports it.
"""

from wellwright.optimize.cli.app import COMMAND_MODULES, build_parser, main

__all__ = ["COMMAND_MODULES", "build_parser", "main"]
