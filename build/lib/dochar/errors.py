"""The one root of every input and config error dochar reports.

A ``DocharError`` is a problem with what the user gave (a file, a row, a config value), located
in its message; the command line turns exactly these into one line and exit code 2. Any other
exception is a bug and shows its traceback.
"""

from __future__ import annotations

import argparse
import difflib
from collections.abc import Iterable


class DocharError(ValueError):
    """An input or config problem, with a message that says where and what was expected."""


def did_you_mean(given: str, known: Iterable[str]) -> str:
    """' (did you mean --experiment?)' for the closest known spelling, else ''."""
    close = difflib.get_close_matches(given, list(known), n=1, cutoff=0.6)
    return f" (did you mean {close[0]}?)" if close else ""


class SuggestingParser(argparse.ArgumentParser):
    """An argument parser whose 'unrecognized arguments' error names the closest option of the
    command that was actually given, with that command's own usage line."""

    def parse_known_args(self, args=None, namespace=None):
        if self._subparsers is None:   # a command's own options (the top level dispatches)
            import sys

            given = list(sys.argv[1:] if args is None else args)
            options = [o for o in self._option_string_actions if o.startswith("--")]
            def known(name: str) -> bool:   # an option, or an unambiguous abbreviation of one
                return name in options or (self.allow_abbrev and sum(
                    o.startswith(name) for o in options) == 1)

            unknown = [a for a in given if a.startswith("--") and a != "--"
                       and not known(a.split("=", 1)[0])]
            if unknown:
                hints = "".join(did_you_mean(a.split("=", 1)[0], options) for a in unknown)
                self.error(f"unrecognized arguments: {' '.join(unknown)}{hints}")
        return super().parse_known_args(args, namespace)
