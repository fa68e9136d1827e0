"""The ``wellwright`` command.

Each subcommand lives in its own module exposing ``register(subparsers)``,
which adds its parser and sets ``func`` to a function ``(args) -> int``.
Bad input (:class:`wellwright.physics.errors.InputError`) becomes one line on stderr
and exit status 2; nothing is written. So does a self-consistent solve that does not
converge in a command that computes one stack (``iv``); the stages of many samples
(``search``, ``tolerance``, ``run``) count such a sample as failed instead.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import warnings

from wellwright.physics.electrostatics import ElectrostaticsConvergenceError
from wellwright.physics.errors import InputError

#: Modules that register a subcommand, in the order ``--help`` lists them.
COMMAND_MODULES = (
    "wellwright.optimize.cli.cmd_iv",
    "wellwright.optimize.cli.cmd_materials",
    "wellwright.optimize.cli.cmd_search",
    "wellwright.optimize.cli.cmd_packet",
    "wellwright.optimize.cli.cmd_tolerance",
    "wellwright.optimize.cli.cmd_calibrate",
    "wellwright.optimize.cli.cmd_run",
    "wellwright.optimize.cli.cmd_demo",
    "wellwright.optimize.cli.cmd_report",
)


class _Parser(argparse.ArgumentParser):
    """argparse with exit status 2 and one line for usage errors."""

    def error(self, message: str) -> None:  # noqa: D401
        self.exit(2, f"{self.prog}: error: {message}\n")


def _command_of(module: str) -> str:
    """The subcommand a module registers: its name after ``cmd_``."""
    return module.rsplit(".", 1)[-1].removeprefix("cmd_")


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The argument parser: every subcommand, or only ``command`` when it is one.

    A command module imports what its command needs, so registering only the
    one asked for keeps a command's start free of the others' libraries
    (``wellwright iv`` loads neither Optuna, SQLAlchemy, SALib nor matplotlib).
    """
    modules = [m for m in COMMAND_MODULES if _command_of(m) == command] or COMMAND_MODULES
    parser = _Parser(
        prog="wellwright",
        description="Design resonant tunneling diode stacks: I-V, design search, growth tolerance, reports.",
    )
    parser.add_argument("--version", action=_VersionAction)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name in modules:
        importlib.import_module(name).register(sub)
    return parser


class _VersionAction(argparse.Action):
    """``--version``, looked up only when asked (importlib.metadata slows every start)."""

    def __init__(self, option_strings, dest, **kwargs) -> None:
        super().__init__(option_strings, dest, nargs=0, help="show the version and exit")

    def __call__(self, parser, namespace, values, option_string=None) -> None:
        parser.exit(message=_version() + "\n")


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
    words = sys.argv[1:] if argv is None else argv
    parser = build_parser(next((w for w in words if not w.startswith("-")), None))
    args = parser.parse_args(argv)
    with warnings.catch_warnings():
        warnings.showwarning = _one_line_warning(args.command)
        return _run(args)


def _one_line_warning(command: str):
    """``warnings.showwarning`` printing ``wellwright COMMAND: warning: message``, one line."""

    def show(message, category, filename, lineno, file=None, line=None) -> None:
        text = " ".join(str(message).split())
        print(f"wellwright {command}: warning: {text}", file=sys.stderr if file is None else file)

    return show


def _run(args) -> int:
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"wellwright {args.command}: {exc.one_line()}", file=sys.stderr)
        return 2
    except ElectrostaticsConvergenceError as exc:
        print(
            f"wellwright {args.command}: the self-consistent electrostatics did not converge "
            f"({exc}); nothing written. The linear bias model "
            '([model] electrostatics = "linear") or another bias range avoids it',
            file=sys.stderr,
        )
        return 2
    except KeyboardInterrupt:
        print(f"wellwright {args.command}: interrupted; finished work is kept", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
