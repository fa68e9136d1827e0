"""Every subcommand's --help, and clear exit-2 messages for unknown commands and bad paths.

Exit status 2 and one line for bad input: the project's convention (DESIGN.md).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from wellwright.optimize.cli import COMMAND_MODULES, build_parser, main


def _commands() -> list[str]:
    sub = next(a for a in build_parser()._actions if a.dest == "command")
    return sorted(sub.choices)


def test_every_module_registers_a_command():
    assert {"run", "demo", "report"} <= set(_commands())
    assert len(_commands()) >= len(COMMAND_MODULES)


@pytest.mark.parametrize("command", _commands())
def test_help_works(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    assert exc.value.code == 0
    assert "usage: wellwright" in capsys.readouterr().out


def test_unknown_command_exits_2():
    got = subprocess.run(
        [sys.executable, "-m", "wellwright.optimize.cli", "frobnicate"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert got.returncode == 2
    assert "invalid choice: 'frobnicate'" in got.stderr
    assert "Traceback" not in got.stderr


@pytest.mark.parametrize(
    ("argv", "match"),
    [
        (["run", "{tmp}/missing.toml"], "missing.toml: file not found"),
        (["report", "{tmp}/nowhere"], "not a folder"),
        (["report", "{tmp}"], "not a run folder"),
        (["run", "{tmp}/missing.toml", "--method", "guess"], "invalid choice"),
    ],
)
def test_bad_paths_exit_2_with_one_line(argv, match, tmp_path, capsys):
    argv = [a.replace("{tmp}", str(tmp_path)) for a in argv]
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse usage errors
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2
    assert match in err
    assert len(err.strip().splitlines()) <= 2  # argparse adds its usage line
    assert not (tmp_path / "missing_run").exists()


def test_demo_out_that_is_a_file_exits_2(tmp_path, capsys):
    f = tmp_path / "afile"
    f.write_text("x")
    assert main(["demo", "--quick", "--out", str(f)]) == 2
    assert "not a folder" in capsys.readouterr().err


#: Libraries a command loads only where it uses them (a fast start; issue 15).
HEAVY = ("optuna", "sqlalchemy", "SALib", "matplotlib")


def _loaded_after(code: str) -> set[str]:
    """The HEAVY libraries a fresh interpreter holds after running ``code``."""
    probe = f"import sys\n{code}\nprint(' '.join(m for m in {HEAVY!r} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    return set(out.stdout.splitlines()[-1].split())


def test_the_parser_loads_no_heavy_library():
    # common practice: argument parsing must not pay for libraries only some commands use
    assert (
        _loaded_after("from wellwright.optimize.cli import build_parser; build_parser()") == set()
    )


@pytest.mark.parametrize("fast", [False, True])
def test_iv_without_figures_loads_no_heavy_library_nor_scipy(tmp_path, fast):
    # the default model and the fast one (the default's Fermi table and roughness rate took
    # scipy.interpolate and scipy.special, 0.5 s of a command's start, until numpy did them)
    text = Path("studies/inp_thz_oscillator.toml").read_text()
    if fast:
        fast_model = '[model]\nelectrostatics = "linear"\ntransport = "coherent"\n'
        text = text.replace("[model]\n", fast_model, 1)
    (tmp_path / "stack.toml").write_text(text)
    stack = str(tmp_path / "stack.toml")
    code = (
        "from wellwright.optimize.cli import main\n"
        f"assert main(['iv', {stack!r}, '--no-figures', '--out', {str(tmp_path)!r}]) == 0\n"
    )
    # the numpy fallback of the compiled Poisson step solves its banded system with scipy
    from wellwright.physics.transmission import DEFAULT_BACKEND

    if fast or DEFAULT_BACKEND == "compiled":
        code += "assert 'scipy' not in sys.modules, 'scipy imported'"
    assert _loaded_after(code) == set()


#: The thread-count variables the command defaults (wellwright.optimize.cli.THREAD_VARIABLES).
THREADS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def _environment_after(code: str, **preset: str) -> dict[str, str]:
    """The THREADS variables a fresh interpreter holds after running ``code``."""
    import os

    env = {k: v for k, v in os.environ.items() if k not in THREADS} | preset
    probe = (
        f"import os\n{code}\n"
        f"print(' '.join(k + '=' + os.environ.get(k, 'unset') for k in {THREADS!r}))"
    )
    out = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True, env=env
    )
    return dict(w.split("=") for w in out.stdout.splitlines()[-1].split())


def test_the_command_defaults_to_one_blas_thread_and_keeps_the_users_choice(tmp_path):
    # common practice: a process-level choice (thread counts) belongs to the program, not to a
    # library; numpy's BLAS reads these variables once, when it loads
    run = "from wellwright.optimize.cli import main\nmain(['materials', '--json'])"
    assert _environment_after(run) == dict.fromkeys(THREADS, "1")
    assert _environment_after(run, OPENBLAS_NUM_THREADS="3")["OPENBLAS_NUM_THREADS"] == "3"
    # numpy loaded first (a library or a test calling main): nothing is set
    assert _environment_after("import numpy\n" + run) == dict.fromkeys(THREADS, "unset")
    # importing the library sets nothing
    library = "import wellwright.optimize.cli, wellwright.physics, wellwright.optimize"
    assert _environment_after(library) == dict.fromkeys(THREADS, "unset")
