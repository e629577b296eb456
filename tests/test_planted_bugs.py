"""`python -m mutation.planted` re-plants bugs that once went unnoticed; it takes minutes, so
the default suite runs only its cheap half: every bug's text still occurs exactly once in its
file (else the tool would stop: the code moved) and every test named for it still exists."""

from __future__ import annotations

import re

import pytest

from mutation.planted import BUGS
from mutation.run import ROOT


@pytest.mark.parametrize("bug", BUGS, ids=[bug.name for bug in BUGS])
def test_each_planted_bug_still_fits_its_code_and_names_existing_tests(bug):
    source = (ROOT / bug.path).read_text(encoding="utf-8")
    assert source.count(bug.old) == 1, f"{bug.path}: the text of {bug.name!r} moved"
    assert bug.old != bug.new
    for node in bug.tests:
        path, _, name = node.partition("::")
        function = re.sub(r"\[.*\]$", "", name)
        text = (ROOT / path).read_text(encoding="utf-8")
        assert re.search(rf"^def {re.escape(function)}\(", text, re.MULTILINE), node


def test_every_named_test_node_is_collected():
    # a parametrized id that changed (``[one-past]`` -> ``[one-past-True]``) passes the check
    # above and stops the tool; pytest's own collection is the reference
    import subprocess
    import sys

    nodes = [node for bug in BUGS for node in bug.tests]
    done = subprocess.run([sys.executable, "-m", "pytest", "--collect-only", "-q",
                           "-p", "no:cacheprovider", *nodes], cwd=ROOT, capture_output=True,
                          text=True)
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]   # 4: not found
