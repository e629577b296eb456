"""Which modules `make mutate` mutates, and the tests that must catch each module's mutants.

The full run covers the code whose mistakes would change dochar's numbers without a crash:
scores and their intervals, the decoding of task outputs onto words, document splits, the
resume of training and the loading of saved models, and the candidate pairs links are scored
on. The smoke run mutates one small function with its own tests: enough to show that the tool,
the copy of the project and the report still work together.
"""

from __future__ import annotations

FULL: dict[str, list[str]] = {
    "dochar/metrics/links.py": ["tests/metrics/test_links.py"],
    "dochar/metrics/tags.py": ["tests/metrics/test_tags.py"],
    "dochar/metrics/intervals.py": ["tests/metrics/test_intervals.py",
                                    "tests/metrics/test_links.py"],
    "dochar/metrics/seen_unseen.py": ["tests/splits/test_seen_unseen.py"],
    "dochar/runs/compare.py": ["tests/runs/test_compare.py"],
    "dochar/tasks/entity_tags.py": ["tests/tasks/test_entity_tags.py",
                                    "tests/metrics/test_tags.py"],
    "dochar/splits/protocols.py": ["tests/splits/test_protocols.py",
                                   "tests/splits/test_seen_unseen.py",
                                   "tests/splits/test_documents_per_layout_errors.py",
                                   "tests/splits/test_seen_and_unseen_cuts.py",
                                   "tests/splits/test_document_list_checks.py"],
    "dochar/models/checkpoints.py": ["tests/runs/test_resume.py",
                                     "tests/models/test_checkpoint_files.py"],
    "dochar/models/template.py": ["tests/models/test_template.py"],
    "dochar/models/saved.py": ["tests/models/test_saved.py", "tests/models/test_saved_tasks.py",
                               "tests/models/test_saved_edges.py",
                               "tests/test_predict_batched.py"],
    "dochar/graphs/candidates.py": ["tests/graphs/test_candidates.py"],
}

# Left out of every mutant's run: a check with a Monte Carlo tolerance against scipy (a minute
# and more per mutant) whose exact counterpart, the plain paired loop, stays in; and the resume
# test that kills real `dochar run` processes (half a minute and more per mutant; its child
# processes import the mutated code outside the test process, where mutmut cannot follow), whose
# in-process counterparts (stopped after a save, resumed in the same process) stay in.
DESELECTED: list[str] = [
    "tests/metrics/test_intervals.py::test_paired_bootstrap_agrees_with_scipy_paired_bootstrap",
    "tests/runs/test_resume.py::test_a_run_killed_three_times_resumes_to_identical_scores",
]

SMOKE: dict[str, list[str]] = {
    "dochar/metrics/seen_unseen.py": [
        "tests/splits/test_seen_unseen.py::test_a_side_of_two_documents_gets_its_interval"],
}
