"""``-v``, ``-q`` and ``--debug`` after the command mean what they mean before it, for every command.

What is tested
--------------
* ``--help`` of the group and of every command lists the three options.
* Every command (run, compare, plan, check, info, demo) with ``-q`` after it
  prints exactly what it prints with ``-q`` before it; for run, compare,
  plan, check and demo that is nothing at all. ``-q`` after the command wins over
  ``-v`` before it, as ``-q -v`` does.
* ``-v`` after the command gives the progress lines of run, compare and plan on
  a stderr that is not a terminal (pytest's capture), and every ``-v``
  counts wherever it stands: ``-v info F -v`` logs debug messages as
  ``-vv info F`` does, and ``-v info F`` does not.
* ``--debug`` after the command gives the error's traceback instead of
  the one line (the exception leaves `upscale.cli.main.main`; the console
  script in a subprocess prints Python's traceback), for an input error of
  every command.
* An option's value that looks like a global option is a value:
  ``--out -q`` writes into a folder named ``-q`` and stays verbose.
"""

from __future__ import annotations

import subprocess

import pytest
from conftest import UPSCALE_EXE, write_raster

from upscale.cli.main import main
from upscale.errors import UpscaleError
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 3_318_409_752
SHAPE = (32, 32)
GLOBAL = ("-v, --verbose", "-q, --quiet", "--debug")


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    return write_raster(tmp_path_factory.mktemp("global") / "field.tif", uncorrelated_lognormal(SHAPE, SEED))


@pytest.fixture(scope="module")
def finished(field):
    """A finished run of `field`, for ``upscale check``."""
    out = field.parent / "finished"
    assert main(["-q", "run", str(field), "--block", "8x8", "--method", "geometric", "--out", str(out)]) == 0
    return out


def _commands(field, finished, out):
    """Each command with arguments that make it do its work, writing (if it writes) into `out`."""
    return {
        "run": ["run", field, "--block", "8x8", "--method", "geometric", "--out", out],
        "compare": ["compare", field, "--block", "8x8", "--methods", "geometric,harmonic", "--out", out],
        "plan": ["plan", field, "--blocks", "4x4,8x8", "--methods", "geometric,harmonic", "--out", out],
        "check": ["check", finished, "--solver", "direct"],
        "info": ["info", field],
        "demo": ["demo", "--out", out],
    }


COMMANDS = ["run", "compare", "plan", "check", "info", "demo"]


@pytest.mark.parametrize("command", [[], *([c] for c in COMMANDS)], ids=["upscale", *COMMANDS])
def test_help_lists_the_global_options(run_cli, command):
    code, stdout, err = run_cli(*command, "--help")
    assert (code, err) == (0, "")
    for option in GLOBAL:
        assert option in stdout, (command, option)


@pytest.mark.slow
@pytest.mark.parametrize("command", COMMANDS)
def test_quiet_after_the_command_is_quiet_before_it(run_cli, field, finished, tmp_path, command):
    before = run_cli("-q", *_commands(field, finished, tmp_path / "before")[command])
    after = run_cli(*_commands(field, finished, tmp_path / "after")[command], "-q")
    assert before[0] == 0, before
    assert after == before
    if command != "info":  # info's description is its result; -q only hides the progress bar
        assert after == (0, "", "")


def test_quiet_after_the_command_wins_over_verbose_before_it(run_cli, field, finished, tmp_path):
    args = _commands(field, finished, tmp_path / "out")["run"]
    assert run_cli("-v", *args, "-q") == (0, "", "")


#: The first words of a progress line of each command that tells its progress.
PROGRESS = {"run": "upscale: reading ", "compare": "upscale: [1/2] geometric",
            "plan": "upscale: 4x4 [1/2] geometric"}


@pytest.mark.parametrize("command", ["run", "compare", "plan"])
def test_verbose_after_the_command_tells_the_progress(run_cli, field, finished, tmp_path, command):
    code, _, err = run_cli(*_commands(field, finished, tmp_path / "out")[command], "-v")
    assert code == 0, err
    lines = err.splitlines()
    assert lines and all(line.startswith("upscale: ") for line in lines), lines
    assert any(line.startswith(PROGRESS[command]) for line in lines), lines


def test_without_verbose_a_log_gets_no_progress(run_cli, field, finished, tmp_path):
    assert run_cli(*_commands(field, finished, tmp_path / "out")["run"])[2] == ""


def test_every_verbose_counts_wherever_it_stands(run_cli, field):
    quiet_log = run_cli("-v", "info", field)
    assert quiet_log[0] == 0 and quiet_log[2] == ""
    code, _, err = run_cli("-v", "info", field, "-v")
    assert code == 0
    assert err.splitlines() and all(line.startswith("upscale: ") for line in err.splitlines())
    assert len(err.splitlines()) == len(run_cli("-vv", "info", field)[2].splitlines())


@pytest.mark.parametrize("command", COMMANDS)
def test_debug_after_the_command_raises_the_error(field, tmp_path, command):
    missing = tmp_path / "missing.tif"
    full = tmp_path / "full"
    full.mkdir()
    (full / "notes.txt").write_text("mine")
    argv = {
        "run": ["run", missing, "--block", "8x8", "--method", "geometric", "--out", tmp_path / "o"],
        "compare": ["compare", missing, "--block", "8x8", "--out", tmp_path / "o"],
        "plan": ["plan", missing, "--blocks", "4x4,8x8", "--out", tmp_path / "o"],
        "check": ["check", tmp_path],  # no summary.json here
        "info": ["info", missing],
        "demo": ["demo", "--out", full],  # holds files, and no --overwrite
    }[command]
    argv = [str(a) for a in argv]
    assert main(argv) != 0  # the one line, without --debug
    with pytest.raises(UpscaleError):
        main([*argv, "--debug"])


def test_debug_after_the_command_prints_the_traceback(tmp_path):
    missing = tmp_path / "missing.tif"
    done = subprocess.run([str(UPSCALE_EXE), "info", str(missing), "--debug"], capture_output=True,
                          text=True, timeout=120, cwd=tmp_path)  # fmt: skip
    lines = done.stderr.splitlines()
    assert lines[0] == "Traceback (most recent call last):"
    assert lines[-1] == f"upscale.errors.InputError: {missing}: no such file"
    assert done.returncode == 1


def test_an_option_value_like_a_global_option_stays_a_value(run_cli, field, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, stdout, err = run_cli("run", field, "--block", "8x8", "--method", "geometric", "--out", "-q")
    assert (code, err) == (0, "")
    assert (tmp_path / "-q" / "summary.json").is_file()
    assert stdout.splitlines()[-1].endswith(" to -q")  # not quiet: the result is printed
