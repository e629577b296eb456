"""`make bench`: dochar's speed and memory figures against the targets of issue 14.

Outside the installed package: it times the package, including against the old builders kept in
:mod:`benchmarks.reference_builders`.
"""
