"""Usage errors: one line on standard error, exit 2, no traceback, for every command."""

from __future__ import annotations

import pytest

from reporter.cli import cli, main

COMMANDS = sorted(cli.commands)


def test_every_command_is_covered():
    # the list below is taken from the group itself: a new command is covered automatically
    assert {"build", "build-all", "check", "preview", "repair", "sign-off", "site",
            "verify"} <= set(COMMANDS)


@pytest.mark.parametrize("command", COMMANDS)
def test_unknown_option_is_one_line_and_exit_2(command, capsys):
    code = main([command, "--no-such-option"])
    out, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"reporter {command}: No such option '--no-such-option'")
    assert f"see 'reporter {command} --help'" in lines[0]
    assert "Traceback" not in err and out == ""


@pytest.mark.parametrize("command", COMMANDS)
def test_missing_argument_or_option_is_one_line_and_exit_2(command, capsys):
    code = main([command])
    out, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"reporter {command}: Missing ")
    assert "Traceback" not in err and out == ""


def test_unknown_command_is_one_line_and_exit_2(capsys):
    code = main(["publish"])
    _, err = capsys.readouterr()
    assert code == 2
    assert err.strip() == "reporter: No such command 'publish' (see 'reporter --help')"


def test_bad_value_names_the_option(capsys, tmp_path):
    code = main(["build-all", str(tmp_path), "--out", str(tmp_path / "o"), "--workers", "0"])
    _, err = capsys.readouterr()
    assert code == 2
    assert len(err.strip().splitlines()) == 1
    assert "'--workers'" in err and "0 is not in the range" in err


def test_no_arguments_prints_the_help_and_exits_0(capsys):
    code = main([])
    out, err = capsys.readouterr()
    assert code == 0
    assert out.startswith("Usage: reporter [OPTIONS] COMMAND")
    assert "sign-off" in out and err == ""


@pytest.mark.parametrize("port", ["abc", "99999", "-1", "1.5", "", "٣"])
def test_a_bad_port_says_what_a_port_is(port, tmp_path, capsys):
    code = main(["preview", str(tmp_path), "--port", port])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    assert err.splitlines() == ["reporter preview: Invalid value for '--port' / '-p': the port "
                                "must be a whole number from 0 to 65535 (0 picks a free one) "
                                "(see 'reporter preview --help')"]
