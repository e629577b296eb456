"""The figures the README and docs/ state as properties of dochar, recomputed by dochar's code.

Each figure is a named block of README.md or of a page under docs/, between
``<!-- figures: NAME -->`` and ``<!-- /figures -->``; ``python -m reports.readme_figures``
rewrites the blocks from fresh computations (``--check`` recomputes the cheap ones and fails
when a page differs).
Outside the installed package, like ``benchmarks/``.
"""
