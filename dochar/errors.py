"""The one root of every input and config error dochar reports.

A ``DocharError`` is a problem with what the user gave (a file, a row, a config value), located
in its message; the command line turns exactly these into one line and exit code 2. Any other
exception is a bug and shows its traceback.
"""

from __future__ import annotations


class DocharError(ValueError):
    """An input or config problem, with a message that says where and what was expected."""
