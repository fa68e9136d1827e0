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
import signal
import sys
import warnings
from collections.abc import Iterable
from typing import Any, NoReturn

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

    def error(self, message: str) -> NoReturn:  # noqa: D401
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
    previous = _terminate_as_interrupt()
    try:
        return _run(args)
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _run(args: argparse.Namespace) -> int:
    with warnings.catch_warnings(record=True) as caught:
        try:
            status = int(args.func(args) or 0)
        except InputError as exc:
            return _fail(args.command, exc.one_line())
        except ElectrostaticsConvergenceError as exc:
            return _fail(
                args.command,
                f"the self-consistent electrostatics did not converge ({exc}); nothing written. "
                'The linear bias model ([model] electrostatics = "linear") or another bias range '
                "avoids it",
            )
        except BrokenPipeError:  # e.g. `wellwright materials --json | head`: the reader left
            _silence_stdout()
            return 2
        except OSError as exc:  # a write failed (read-only folder, full disk): nothing half-written
            where = f"{exc.filename}: " if exc.filename else ""
            return _fail(args.command, f"{where}cannot write ({exc.strerror or exc})")
        except KeyboardInterrupt:
            return _fail(args.command, "interrupted; finished work is kept", status=130)
    # after the command's own output, one plain line each (never before an error line)
    for line in warning_lines(w.message for w in caught):
        print(f"wellwright {args.command}: warning: {line}", file=sys.stderr)
    return status


def warning_lines(messages: Iterable[Warning | str]) -> list[str]:
    """Each distinct warning once, in the order raised, as the one plain line the command
    prints (a command that records its warnings in a file records these lines)."""
    return list(dict.fromkeys(" ".join(str(m).split()) for m in messages))


def _terminate_as_interrupt() -> Any:
    """SIGTERM unwinds like Ctrl-C (finally blocks run, worker pools are shut down, the
    run folder stays resumable); returns the handler it replaced."""

    def handler(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt

    try:
        return signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread (an embedding program): leave its handlers alone
        return None


def _fail(command: str, line: str, *, status: int = 2) -> int:
    print(f"wellwright {command}: {line}", file=sys.stderr)
    return status


def _silence_stdout() -> None:
    """Point stdout at /dev/null so that Python's final flush raises no second BrokenPipeError."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):  # stdout without a file descriptor (a test's capture)
        pass


if __name__ == "__main__":
    sys.exit(main())
