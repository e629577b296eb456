"""The figures the README states as properties of dochar, recomputed from dochar's own code.

Each figure is a named block of README.md between ``<!-- figures: NAME -->`` and
``<!-- /figures -->``; ``python -m reports.readme_figures`` rewrites the blocks from fresh
computations (``--check`` recomputes the cheap ones and fails when the README differs).
Outside the installed package, like ``benchmarks/``.
"""
