"""records.json and records.csv, each written whole or not at all (write, then rename).

* ``records.json``: a list with one object per document, ``{"doc_id", "fields", <items_name>}``;
  ``fields`` maps each header label found to a value (a list of values where the label
  repeats), ``<items_name>`` is a list of line items, column -> value; every value is
  ``{"text", "page", "box": [x0, y0, x1, y1], "probability", "word_ids"}`` (probability: the
  least of its words').
* ``records.csv``: one row per line item: ``doc_id``, ``item`` (1, 2, ... in page and reading
  order), the document's header values (repeated values joined by ``" | "``), each item
  column's text, and ``probability``, the least over the item's values. A document without line
  items has one row with ``item`` empty, so every document appears.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from dochar.data.files import atomic_write, write_text_atomic
from dochar.records.assemble import Record
from dochar.records.shape import RecordShape

REPEAT_JOIN = " | "


def records_table(records: Sequence[Record], shape: RecordShape) -> pd.DataFrame:
    """records.csv's rows (module docstring)."""
    rows = []
    for record in records:
        header = {label: REPEAT_JOIN.join(v.text for v in record.fields.get(label, []))
                  for label in shape.header_fields}
        for number, item in enumerate(record.items, 1) if record.items else [(None, {})]:
            rows.append({"doc_id": record.doc_id, "item": number, **header,
                         **{c: item[c].text if c in item else "" for c in shape.item_columns},
                         "probability": round(min((v.probability for v in item.values()),
                                                  default=float("nan")), 4)})
    columns = ["doc_id", "item", *shape.header_fields, *shape.item_columns, "probability"]
    return pd.DataFrame(rows, columns=columns).astype({"item": "Int64"})


def write_records(records: Sequence[Record], shape: RecordShape, folder: str | Path
                  ) -> tuple[Path, Path]:
    """Write records.json and records.csv into ``folder``; returns their paths."""
    folder = Path(folder)
    json_path = write_text_atomic(folder / "records.json", json.dumps(
        [r.to_dict(shape) for r in records], indent=2, ensure_ascii=False))
    csv_path = folder / "records.csv"
    with atomic_write(csv_path) as scratch:
        records_table(records, shape).to_csv(scratch, index=False)
    return json_path, csv_path
