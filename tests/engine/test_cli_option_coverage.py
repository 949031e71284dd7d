"""Every option the CLI shows in ``loopwright <command> --help`` is run by some test
(tests of engine/cli.py, cli_analysis.py, cli_design.py).

The check reads the argparse parser itself, so an option added later without a test fails
here. An option counts as run when one of its spellings (``-o`` or ``--output``) appears
inside a string literal of some test module: the tests pass their argv as lists of
strings. Options with a fixed set of values must have each value in a test module that
also names the option. This module is left out of the search, so naming an option here
proves nothing; it runs ``--help``/``-h`` for every command and ``--version`` itself.
The options no other test ran (``time --settle``, ``design --all``, ``design --print``)
are run in test_cli_more_options.py, checked against values from outside the engine.
"""
from __future__ import annotations

import argparse
import io
import re
import tokenize
from importlib import metadata
from pathlib import Path

import pytest

from loopwright.engine.cli import COMMANDS, build_parser, main

TESTS = Path(__file__).resolve().parents[1]

#: Options no test can run, each with the reason. Empty today: every option runs in a
#: test process. (An entry here needs a comment saying why it cannot be run.)
CANNOT_BE_RUN: dict[tuple[str, str], str] = {}

#: argparse's own help action; every command's help is run by
#: test_every_command_prints_its_help_listing_each_option below.
HELP = ("-h", "--help")


def _subparsers() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


def _test_strings() -> dict[Path, list[str]]:
    """The string literals of every test module except this one (f-string parts included)."""
    out = {}
    for path in sorted(TESTS.rglob("*.py")):
        if path.resolve() == Path(__file__).resolve() or "__pycache__" in path.parts:
            continue
        strings = []
        for tok in tokenize.generate_tokens(io.StringIO(path.read_text(encoding="utf-8")).readline):
            if tok.type == tokenize.STRING or tok.type == getattr(tokenize, "FSTRING_MIDDLE", -1):
                strings.append(tok.string)
        out[path] = strings
    return out


def _mentions(strings: list[str], word: str) -> bool:
    pattern = re.compile(rf"(?<![\w-]){re.escape(word)}(?![\w-])")
    return any(pattern.search(s) for s in strings)


def test_the_command_list_is_the_parser_s():
    assert tuple(_subparsers()) == COMMANDS


def test_every_option_of_every_command_is_run_by_some_test():
    strings = _test_strings()
    missing, missing_values = [], []
    for command, sub in _subparsers().items():
        for action in sub._actions:
            names = [o for o in action.option_strings if o not in HELP]
            if not names or any((command, o) in CANNOT_BE_RUN for o in names):
                continue
            users = [p for p, s in strings.items() if any(_mentions(s, o) for o in names)]
            if not users:
                missing.append(f"{command} {'/'.join(names)}")
                continue
            for value in action.choices or ():
                if not any(_mentions(strings[p], str(value)) for p in users):
                    missing_values.append(f"{command} {names[-1]} {value}")
    assert missing == [], f"options no test runs: {missing}"
    assert missing_values == [], f"option values no test runs: {missing_values}"


def test_the_allow_list_names_real_options_only():
    known = {(c, o) for c, sub in _subparsers().items() for a in sub._actions for o in a.option_strings}
    assert set(CANNOT_BE_RUN) <= known


@pytest.mark.parametrize("flag", HELP)
@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_prints_its_help_listing_each_option(command, flag, capsys):
    assert main([command, flag]) == 0
    text = capsys.readouterr().out
    assert text.startswith(f"usage: loopwright {command}")
    for action in _subparsers()[command]._actions:
        for option in action.option_strings:
            assert _mentions([text], option), f"{command} --help does not show {option}"


def test_version_is_the_installed_distribution_s(capsys):
    # the version the package metadata carries (importlib.metadata, outside the CLI)
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"loopwright {metadata.version('loopwright')}"
