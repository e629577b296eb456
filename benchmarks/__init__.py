"""`make bench`: dochar's speed and memory figures against their targets.

Outside the installed package: it times the package, including against the old builders kept in
:mod:`benchmarks.reference_builders`.
"""
