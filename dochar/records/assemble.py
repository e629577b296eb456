"""Records from labelled words: one per document, header fields and line items.

:func:`assemble_records` reads a word table with a label column (predicted labels and their
``probability``, or the truth's ``label``), cuts it into pieces (:mod:`dochar.records.pieces`),
joins header values written over several lines and groups item pieces into rows
(:mod:`dochar.records.rows`): from row links when given, else by the layout rule.
:func:`true_records` is the same from the word table's truth: true labels, ``entity_id`` groups
and the links table's ``row`` links. A record's :meth:`Record.parse` is the plain tree the scores
compare: header label -> text (a list where the label repeats), and the shape's ``items_name`` ->
a list of column -> text.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field, replace

import pandas as pd

from dochar.data.links_table import ROW_KIND
from dochar.records.normalise import RAW, normalise
from dochar.records.pieces import Value, cut_pieces
from dochar.records.rows import (Row, join_header_lines, page_slope, rows_by_anchor,
                                 rows_by_layout, rows_from_links)
from dochar.records.shape import RecordShape


@dataclass
class Record:
    """One document's header values (label -> values in reading order) and line items."""

    doc_id: str
    fields: dict[str, list[Value]] = field(default_factory=dict)
    items: list[Row] = field(default_factory=list)

    def parse(self, shape: RecordShape, how: str = RAW) -> dict:
        """The plain tree of texts the scores compare (raw or normalised values)."""
        tree: dict = {}
        for label in shape.header_fields:
            texts = [normalise(label, v.text, shape, how) for v in self.fields.get(label, [])]
            if texts:
                tree[label] = texts[0] if len(texts) == 1 else texts
        items = [{c: normalise(c, row[c].text, shape, how) for c in shape.item_columns
                  if c in row} for row in self.items]
        if items:
            tree[shape.items_name] = items
        return tree

    def to_dict(self, shape: RecordShape) -> dict:
        """records.json's object: every value with its text, page, box, probability, words."""
        fields_out = {label: ([v.to_dict() for v in values] if len(values) > 1
                              else values[0].to_dict())
                      for label in shape.header_fields if (values := self.fields.get(label))}
        return {"doc_id": self.doc_id, "fields": fields_out,
                shape.items_name: [{c: row[c].to_dict() for c in shape.item_columns if c in row}
                                   for row in self.items]}


def assemble_records(words: pd.DataFrame, shape: RecordShape, *, label_col: str = "predicted",
                     group_col: str | None = None,
                     row_links: pd.DataFrame | None = None) -> list[Record]:
    """One record per document of ``words``, in the order documents first appear.

    ``group_col`` names the words' groups (the task's entities), else values are runs of
    words; ``row_links`` (``doc_id, page, source, target`` between groups) gives the rows,
    else the shape's ``row_anchor`` does (an item per line holding it), else the layout rule.
    A ``single_fields`` label found in several pieces keeps the one whose least word
    probability is highest (the first of equals); an item lacking one of the shape's
    ``required_columns`` is left out.
    """
    links = _links_by_document(row_links)
    records = []
    for doc_id, document in words.groupby(words["doc_id"].astype(str), sort=False):
        record = Record(str(doc_id))
        items: list[Value] = []
        slopes: dict[int, float] = {}
        for page_no, page in document.groupby("page", sort=True):
            if row_links is None and shape.item_columns:   # only the row rules read it
                slopes[int(page_no)] = page_slope(page[["x0", "y0", "x1", "y1"]].to_numpy(float))
            pieces = cut_pieces(page, shape.labels, label_col, group_col)
            header = [p for p in pieces if p.label in shape.header_fields]
            if group_col is None:
                used = {w for p in header for w in p.word_ids}
                others = page.loc[~page["word_id"].isin(used), ["x0", "y0", "x1", "y1"]]
                header = join_header_lines(header, others.to_numpy(dtype=float))
            for value in header:
                record.fields.setdefault(value.label, []).append(value)
            items.extend(p for p in pieces if p.label in shape.item_columns)
        for label in shape.single_fields:
            if len(record.fields.get(label, ())) > 1:
                record.fields[label] = [max(record.fields[label], key=lambda v: v.probability)]
        if items:
            if row_links is not None:
                record.items = rows_from_links(items, links.get(str(doc_id), []))
            elif shape.row_anchor:
                record.items = rows_by_anchor(items, shape.row_anchor, shape.once_per_item,
                                              slopes, shape.line_arithmetic)
            else:
                record.items = rows_by_layout(items, slopes)
            record.items = [row for row in record.items
                            if all(column in row for column in shape.required_columns)]
        records.append(record)
    return records


def _links_by_document(links: pd.DataFrame | None) -> dict[str, list[tuple[int, str, str]]]:
    if links is None or links.empty:
        return {}
    found: dict[str, list[tuple[int, str, str]]] = {}
    for row in links.itertuples(index=False):
        found.setdefault(str(row.doc_id), []).append((int(row.page), str(row.source),
                                                      str(row.target)))
    return found


def row_links_of(links: pd.DataFrame | None) -> pd.DataFrame:
    """The links table's rows of kind ``row`` (empty when there are none)."""
    if links is None or links.empty:
        return pd.DataFrame(columns=["doc_id", "page", "source", "target", "kind"])
    return links[links["kind"].astype(str) == ROW_KIND]


def true_records(words: pd.DataFrame, shape: RecordShape,
                 links: pd.DataFrame | None = None) -> list[Record]:
    """Records from the truth: true labels, ``entity_id`` groups, rows from ``row`` links; a
    repeated single field stays repeated and an item lacking a required column stays (the truth
    is what it is)."""
    return assemble_records(words, replace(shape, single_fields=(), required_columns=()),
                            label_col="label",
                            group_col="entity_id", row_links=row_links_of(links))


def parses(records: Iterable[Record], shape: RecordShape, how: str = RAW) -> dict[str, dict]:
    """doc_id -> parse tree, for the scores."""
    return {r.doc_id: r.parse(shape, how) for r in records}
