"""The ``wellwright`` command.

Each subcommand lives in its own module exposing ``register(subparsers)``,
which adds its parser and sets ``func`` to a function ``(args) -> int``.
Bad input (:class:`wellwright.physics.errors.InputError`) becomes one line on stderr
and exit status 2; nothing is written.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from wellwright.physics.errors import InputError

#: Modules that register a subcommand, in the order ``--help`` lists them.
COMMAND_MODULES = (
    "wellwright.optimize.cli.cmd_iv",
    "wellwright.optimize.cli.cmd_materials",
    "wellwright.optimize.cli.cmd_search",
    "wellwright.optimize.cli.cmd_packet",
    "wellwright.optimize.cli.cmd_tolerance",
    "wellwright.optimize.cli.cmd_run",
    "wellwright.optimize.cli.cmd_demo",
    "wellwright.optimize.cli.cmd_report",
)


class _Parser(argparse.ArgumentParser):
    """argparse with exit status 2 and one line for usage errors."""

    def error(self, message: str) -> None:  # noqa: D401
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="wellwright",
        description="Design resonant tunneling diode stacks: I-V, design search, growth tolerance, reports.",
    )
    parser.add_argument("--version", action="version", version=_version())
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return f"wellwright {version('wellwright')}"
    except PackageNotFoundError:
        return "wellwright (not installed)"


def main(argv: list[str] | None = None) -> int:
    """Run the ``wellwright`` command; returns the exit status."""
    # the command draws to files: a backend without a screen, set here and never on import of
    # the library (a notebook keeps its inline plots); MPLBACKEND costs no matplotlib import
    os.environ.setdefault("MPLBACKEND", "Agg")
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"wellwright {args.command}: {exc.one_line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"wellwright {args.command}: interrupted; finished work is kept", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
