"""Help layout shared by the sub-commands: an epilog that starts with "Example:" is wrapped only between
options (never inside an option's name), with shell line continuations so it can be pasted as it stands."""

from __future__ import annotations

import argparse
import re


def wrap_example(text: str, width: int) -> str:
    """``Example: ringgauge cmd ARG --opt V ...`` laid out on lines of at most ``width`` characters (where the
    pieces allow), broken only before an option, each continued line ending in `` \\``."""
    head, _, cmd = text.partition(":")
    pieces = re.split(r" (?=--?[A-Za-z])", cmd.strip())
    lines, cur = [], head + ":"
    for piece in pieces:
        if cur.strip() and len(cur) + 1 + len(piece) + 2 > width and cur != head + ":":
            lines.append(cur + " \\")
            cur = "    " + piece
        else:
            cur = f"{cur} {piece}"
    lines.append(cur)
    return "\n".join(lines)


class ExampleFormatter(argparse.HelpFormatter):
    """argparse's formatter, except that an "Example: ..." text keeps each option whole."""

    def _fill_text(self, text, width, indent):
        if text.lstrip().startswith("Example:"):
            return "\n".join(indent + line for line in wrap_example(" ".join(text.split()), width).splitlines())
        return super()._fill_text(text, width, indent)
