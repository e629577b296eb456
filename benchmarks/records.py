"""Record scoring: the tree edit distance behind TED accuracy, against the ``zss`` package.

Every imperfect test record of every run with a record shape pays one distance search per
normalisation, so its cost is part of each run's. The reference is ``zss`` (the published
Zhang–Shasha implementation, a test dependency) with the same costs; both must agree.
"""

from __future__ import annotations

import copy
import time

import zss

from benchmarks.report import Figure
from dochar.metrics.records import _insert_cost, _label_cost, to_tree, tree_distance

COLUMNS = ("analyte", "method", "result", "unit", "limit", "verdict")


def certificate_record(fields: int, items: int) -> dict:
    """A certificate-shaped record: header fields and a table of test results."""
    record: dict = {f"field_{i}": f"header value {i} of the certificate" for i in range(fields)}
    record["items"] = [{c: f"{c} {row} 12.5 mg/L" for c in COLUMNS} for row in range(items)]
    return record


def _as_zss(node: tuple[str, list]) -> zss.Node:
    out = zss.Node(node[0])
    for kid in node[1]:
        out.addkid(_as_zss(kid))
    return out


def _reference(pred: dict, true: dict) -> float:
    return zss.distance(_as_zss(to_tree(pred)), _as_zss(to_tree(true)),
                        get_children=zss.Node.get_children,
                        insert_cost=lambda n: _insert_cost(n.label),
                        remove_cost=lambda n: _insert_cost(n.label),
                        update_cost=lambda a, b: _label_cost(a.label, b.label))


def _least_cpu(call, repeats: int) -> tuple[float, float]:
    best, value = float("inf"), 0.0
    for _ in range(repeats):
        start = time.process_time()
        value = call()
        best = min(best, time.process_time() - start)
    return best, value


def record_figures(fields: int, items: int, repeats: int, judged: bool) -> list[Figure]:
    true = certificate_record(fields, items)
    pred = copy.deepcopy(true)
    pred["field_3"] = "header value 3 of the certificat"
    pred["items"][items // 2]["unit"] = "ug/L"
    ours, distance = _least_cpu(lambda: tree_distance(pred, true), repeats)
    theirs, expected = _least_cpu(lambda: _reference(pred, true), repeats)
    if distance != expected:
        raise AssertionError(f"record tree distance {distance} != zss {expected}")
    label = f"record TED, {fields} header fields + {items}x{len(COLUMNS)} table, two wrong values"
    return [Figure(f"{label}: CPU s against zss (same costs, same distance {distance:g})",
                   f"{ours:.3f} s", f"{theirs:.3f} s", ours / theirs, "<=", 0.2, judged)]
