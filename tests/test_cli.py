"""The `corpusmill` command: the list of commands, and how each command fails on bad input.

Exit statuses follow Python's `sys.exit` (an integer is the status; a string is printed to
stderr and the status is 1) and argparse (status 2 and a usage line for wrong arguments): every
command gives status 2 for wrong arguments and status 1, with `corpusmill: ` messages, for a
build it cannot use.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from conftest import REPO
from corpusmill import cli
from corpusmill.cli import COMMANDS

# The arguments each command takes after the build folder, so that only the folder is wrong.
AFTER_BUILD = {"compare": ["{build}-new"], "trace": ["shards/dev/ngram-x.parquet", "0"]}


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    """(exit status, stdout, stderr) of `corpusmill ARGV`, as a process would end."""
    try:
        cli.main(argv)
        status, message = 0, ""
    except SystemExit as stop:
        code = stop.code
        status, message = (1, f"{code}\n") if isinstance(code, str) else (code or 0, "")
    out, err = capsys.readouterr()
    return status, out, err + message


def arguments(command: str, build: Path) -> list[str]:
    return [command, str(build), *(a.format(build=build) for a in AFTER_BUILD.get(command, []))]


def test_help_lists_every_command_with_its_summary_on_stdout(capsys: pytest.CaptureFixture[str]) -> None:
    """GNU Coding Standards, --help: the help goes to standard output and the status is 0."""
    for flag in ("--help", "-h"):
        status, out, err = run([flag], capsys)
        assert (status, err) == (0, "")
        listed = {line.split()[0]: line.split(None, 1)[1] for line in out.splitlines() if line.startswith("  ")}
        assert listed == {name: summary for name, (_, _, summary) in COMMANDS.items()}


def test_no_command_prints_the_usage_to_stderr_with_status_2(capsys: pytest.CaptureFixture[str]) -> None:
    status, out, err = run([], capsys)
    assert (status, out) == (2, "")
    assert err.startswith("usage: corpusmill COMMAND") and all(f"  {name} " in err for name in COMMANDS)


def test_an_unknown_command_is_named_before_the_usage(capsys: pytest.CaptureFixture[str]) -> None:
    status, out, err = run(["audti", "build"], capsys)
    assert (status, out) == (2, "")
    assert err.splitlines()[0] == "corpusmill: unknown command 'audti'; choose one of the commands below"
    assert "  audit " in err


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_each_command_refuses_a_missing_build_folder_with_status_1_naming_it(command: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """No traceback, nothing on stdout: every line of stderr starts with `corpusmill: `, and the
    message names the folder (or the file it lacks there)."""
    missing = tmp_path / "no-such-build"
    status, out, err = run(arguments(command, missing), capsys)
    assert (status, out) == (1, "")
    assert err and all(line.startswith("corpusmill: ") for line in err.splitlines()), err
    assert str(missing) in err and "Traceback" not in err


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_each_command_refuses_missing_arguments_with_status_2_and_its_own_usage(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    status, out, err = run([command], capsys)
    assert (status, out) == (2, "")
    assert err.startswith(f"usage: corpusmill {command}") and "the following arguments are required" in err


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_each_command_refuses_an_unknown_option_with_its_own_usage(command: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    status, _, err = run([*arguments(command, tmp_path), "--no-such-option"], capsys)
    assert status == 2
    assert err.startswith(f"usage: corpusmill {command}") and "unrecognized arguments: --no-such-option" in err


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_each_command_has_its_own_help(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    status, out, _ = run([command, "--help"], capsys)
    assert status == 0 and out.startswith(f"usage: corpusmill {command}")


def test_a_failing_command_ends_the_process_with_status_1_and_its_message_on_stderr(tmp_path: Path) -> None:
    process = subprocess.run([sys.executable, "-m", "corpusmill.cli", "progress", str(tmp_path)], capture_output=True, text=True, cwd=REPO)
    assert process.returncode == 1 and process.stdout == ""
    assert process.stderr == f"corpusmill: {tmp_path / 'logs'}: not found; is {tmp_path} a build folder?\n"


def test_a_reader_closing_the_pipe_early_ends_the_command_quietly_with_the_sigpipe_status(tmp_path: Path) -> None:
    """POSIX: a writer to a pipe with no reader gets SIGPIPE / EPIPE; a shell reports a process
    killed by it as 128 + 13. Here `progress` lists 100 running jobs (300 kB) and `head` reads one byte."""
    logs = tmp_path / "logs" / "prepare"
    logs.mkdir(parents=True)
    for number in range(100):
        (logs / f"chunk{number}.log").write_text(f"progress: chunk {number}: {'x' * 3000}\n")
    command = f"{sys.executable} -m corpusmill.cli progress {tmp_path}; echo status $? >&2"
    process = subprocess.run(["bash", "-c", f"({command}) | head -c 1"], capture_output=True, text=True, cwd=REPO)
    assert process.stdout == "p"  # prepare/chunk0.log: ...
    assert process.stderr == "status 141\n"
