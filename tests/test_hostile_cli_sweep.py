"""Every numeric option of every command, found from the parser itself (so a new option is covered the day it
is added), refuses NaN and infinity with one line naming it — before any work is done."""

from __future__ import annotations

import argparse

import pytest

from ringgauge.cli import build_parser, main


def _numeric_options():
    out = []

    def walk(parser: argparse.ArgumentParser, path: list[str]) -> None:
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sp in action.choices.items():
                    if name in action._name_parser_map and sp is action._name_parser_map[name]:
                        walk(sp, path + [name])
            elif action.option_strings and action.type is not None and action.help != argparse.SUPPRESS:
                if action.type in (float, int) or getattr(action.type, "__name__", "") in (
                        "number", "integer", "_float", "_pos_float", "_nonneg_float", "_finite_float", "_pos_int"):
                    n = action.nargs if isinstance(action.nargs, int) else 1
                    out.append((" ".join(path), action.option_strings[-1], n))

    walk(build_parser(), [])
    return out


OPTIONS = _numeric_options()


def test_the_sweep_finds_the_options():
    assert len(OPTIONS) > 40
    assert ("analyze", "--pixel-size-u", 1) in OPTIONS and ("batch", "--radius-limits", 2) in OPTIONS


@pytest.mark.parametrize("command, option, nargs", OPTIONS, ids=[f"{c}:{o}" for c, o, _ in OPTIONS])
@pytest.mark.parametrize("value", ["nan", "1e400"])
def test_non_finite_refused(capsys, command, option, nargs, value):
    code = main([*command.split(), option, *[value] * nargs])
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.startswith(f"ringgauge: argument {option}: ") and err.count("\n") == 1, err
