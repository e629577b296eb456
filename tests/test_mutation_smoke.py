"""`make mutate` in smoke mode: mutmut, the scratch copy of the project and the report work
together. One small module (dochar/metrics/seen_unseen.py) against one test, which must kill
every mutant: the report's row then reads all killed, none surviving."""

from __future__ import annotations

import re

from mutation.run import main


def test_smoke_mutation_run_kills_every_mutant_and_writes_the_report(tmp_path):
    out = tmp_path / "mutation.md"
    assert main(["--smoke", "--out", str(out), "--workdir", str(tmp_path / "work"),
                 "--min-rate", "100"]) == 0
    text = out.read_text(encoding="utf-8")
    row = re.search(r"^\| dochar/metrics/seen_unseen\.py \| (\d+) \| (\d+) \| 0 \| 0 \| 0 \| 0 "
                    r"\| 0 \| 100\.0% \|$", text, re.MULTILINE)
    assert row, text
    mutants, killed = map(int, row.groups())
    assert mutants == killed >= 20
    assert "Surviving mutants (not marked equivalent): 0" in text
