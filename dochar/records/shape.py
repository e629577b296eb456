"""The shape of a record, read from a data config's ``record:`` block. ``header_fields`` are word
labels whose values belong to the document as a whole (a certificate number, its dates);
``item_columns`` are the labels of table cells, one column each, that make up a line item;
``items_name`` is the key the list of line items goes under. ``date_fields`` and
``amount_fields`` name the labels (of either kind) whose values normalisation reads as dates or
amounts. ``single_fields`` are header fields a document has one value of: of several pieces
predicted, the one whose least word probability is highest is kept. ``row_anchor`` (optional) is
the item column that opens a line item: every line holding it starts a new item, and the lines
under it join that item until the next one (a receipt's item name;
:func:`dochar.records.rows.rows_by_anchor`); ``once_per_item`` (optional, with ``row_anchor``)
are the item columns an item holds one value of (a receipt item's price and unit price): a line
holding one the current item has already starts a new item. ``required_columns`` (optional, some
of ``item_columns``) are the cells every line item has (a certificate's analyte and result): a
predicted item lacking one is left out of the record, since a stray table word (a column header
read as a cell) would otherwise stand as an item of its own; its words keep their labels in
``words.csv``. The truth's items are never left out. ``sub_item_columns`` (optional, a mapping
between item columns: sub-item column -> the item column it stands for, a receipt's
``menu.sub_nm: menu.nm``) makes decoding read each printed line whole, as an item or as a
sub-item (:mod:`dochar.records.line_status`). ``line_arithmetic`` (optional, with
``row_anchor``: ``count``, ``unit_price`` and ``amount``, three item columns) lets a line of a
count and a unit price go to the item below it when their product is that item's amount
(:func:`dochar.records.rows.rows_by_anchor`). A label may be in one role only, and every
label named must be one of the data's labels: :func:`check_shape` says which key names what,
before any data loads.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any

from dochar.errors import DocharError, did_you_mean

SHAPE_KEYS: tuple[str, ...] = ("header_fields", "item_columns", "items_name", "date_fields",
                               "amount_fields", "single_fields", "row_anchor",
                               "once_per_item", "required_columns", "sub_item_columns",
                               "line_arithmetic")
ARITHMETIC_KEYS = ("count", "unit_price", "amount")


class RecordShapeError(DocharError):
    """A ``record:`` block that names no label, an unknown label, or a label in two roles."""


@dataclass(frozen=True)
class RecordShape:
    """Which labels are header fields, which are line-item columns, and how values read."""

    header_fields: tuple[str, ...]
    item_columns: tuple[str, ...] = ()
    items_name: str = "items"
    date_fields: tuple[str, ...] = ()
    amount_fields: tuple[str, ...] = ()
    single_fields: tuple[str, ...] = ()   # header fields with one value: the likeliest piece
    row_anchor: str = ""             # "": rows by the layout rule
    once_per_item: tuple[str, ...] = ()      # a second value of one opens a new item
    required_columns: tuple[str, ...] = ()   # a predicted item lacking one is left out
    sub_item_columns: tuple[tuple[str, str], ...] = ()   # (sub-item column, item column)
    line_arithmetic: tuple[str, ...] = ()   # count, unit price, amount columns (or none)

    @property
    def labels(self) -> tuple[str, ...]:
        return (*self.header_fields, *self.item_columns)

    def to_dict(self) -> dict[str, Any]:
        """Plain values, as a model manifest and a YAML file hold them."""
        plain = {f.name: (list(value) if isinstance(value := getattr(self, f.name), tuple)
                          else value) for f in fields(self)}
        plain["sub_item_columns"] = dict(self.sub_item_columns)
        plain["line_arithmetic"] = dict(zip(ARITHMETIC_KEYS, self.line_arithmetic))
        return plain

    @classmethod
    def from_mapping(cls, block: Mapping[str, Any], *, where: str = "data.record",
                     labels: Sequence[str] | None = None) -> RecordShape:
        """Read and check a ``record:`` block; ``labels``, when given, are the data's labels."""
        unknown = sorted(set(block) - set(SHAPE_KEYS))
        if unknown:
            raise RecordShapeError(f"config key {where}.{unknown[0]}: unknown; {where} takes "
                                   f"{', '.join(SHAPE_KEYS)}")
        values: dict[str, Any] = {}
        for key in SHAPE_KEYS:
            if key not in block or block[key] is None:
                continue
            value = block[key]
            if key == "items_name":
                if not isinstance(value, str) or not value.strip():
                    raise RecordShapeError(f"config key {where}.items_name={value!r}: expected "
                                           "a non-empty name")
                values[key] = value.strip()
                continue
            if key == "sub_item_columns":
                if not isinstance(value, Mapping) or not all(
                        isinstance(k, str) and isinstance(v, str) for k, v in value.items()):
                    raise RecordShapeError(f"config key {where}.sub_item_columns={value!r}: "
                                           "expected a mapping, sub-item column: item column")
                values[key] = tuple((k.strip(), v.strip()) for k, v in value.items())
                continue
            if key == "line_arithmetic":
                if not value:
                    continue
                if not isinstance(value, Mapping) or set(value) != set(ARITHMETIC_KEYS) or not all(
                        isinstance(v, str) for v in value.values()):
                    raise RecordShapeError(f"config key {where}.line_arithmetic={value!r}: "
                                           "expected a mapping of count, unit_price and "
                                           "amount to item columns")
                values[key] = tuple(value[k].strip() for k in ARITHMETIC_KEYS)
                continue
            if key == "row_anchor":
                if not isinstance(value, str):
                    raise RecordShapeError(f"config key {where}.row_anchor={value!r}: expected "
                                           "one label")
                values[key] = value.strip()
                continue
            if isinstance(value, str) or not all(isinstance(v, str) for v in value):
                raise RecordShapeError(f"config key {where}.{key}={value!r}: expected a list "
                                       "of labels")
            values[key] = tuple(value)
        shape = cls(**{"header_fields": (), **values})
        check_shape(shape, labels, where=where)
        return shape


def shape_or_none(block: Mapping[str, Any] | None, *, where: str = "data.record",
                  labels: Sequence[str] | None = None) -> RecordShape | None:
    """The shape of a ``record:`` block; None when it names no header field and no item
    column (the data has no record)."""
    if not block or not (block.get("header_fields") or block.get("item_columns")):
        return None
    return RecordShape.from_mapping(block, where=where, labels=labels)


def check_shape(shape: RecordShape, labels: Sequence[str] | None, *,
                where: str = "data.record") -> None:
    """Raise a RecordShapeError naming the key of the first label that cannot be used."""
    if not shape.labels:
        raise RecordShapeError(f"config key {where}: names no header_fields and no "
                               "item_columns")
    seen: dict[str, str] = {}
    for key in ("header_fields", "item_columns"):
        for label in getattr(shape, key):
            if label in seen:
                raise RecordShapeError(f"config key {where}.{key}: label {label!r} is also in "
                                       f"{where}.{seen[label]}; a label has one role")
            seen[label] = key
    for key in ("date_fields", "amount_fields"):
        for label in getattr(shape, key):
            if label not in seen:
                raise RecordShapeError(f"config key {where}.{key}: label {label!r} is neither "
                                       "a header field nor an item column")
    for label in shape.single_fields:
        if seen.get(label) != "header_fields":
            raise RecordShapeError(f"config key {where}.single_fields: label {label!r} is not "
                                   f"one of {where}.header_fields")
    for key in ("required_columns", "once_per_item"):
        for label in getattr(shape, key):
            if seen.get(label) != "item_columns":
                raise RecordShapeError(f"config key {where}.{key}: label {label!r} is not one "
                                       f"of {where}.item_columns")
    for sub, item in shape.sub_item_columns:
        for label in (sub, item):
            if seen.get(label) != "item_columns":
                raise RecordShapeError(f"config key {where}.sub_item_columns: label {label!r} "
                                       f"is not one of {where}.item_columns")
        if sub == item:
            raise RecordShapeError(f"config key {where}.sub_item_columns: {sub!r} names "
                                   "itself; map a sub-item column to another item column")
    for role, label in zip(ARITHMETIC_KEYS, shape.line_arithmetic):
        if seen.get(label) != "item_columns":
            raise RecordShapeError(f"config key {where}.line_arithmetic.{role}: label "
                                   f"{label!r} is not one of {where}.item_columns")
    if shape.line_arithmetic and not shape.row_anchor:
        raise RecordShapeError(f"config key {where}.line_arithmetic: it moves lines between "
                               f"the items of a row_anchor; set {where}.row_anchor")
    if shape.row_anchor and shape.row_anchor not in shape.item_columns:
        raise RecordShapeError(f"config key {where}.row_anchor: label {shape.row_anchor!r} is "
                               f"not one of {where}.item_columns")
    if labels is None:
        return
    for key in ("header_fields", "item_columns"):
        for label in getattr(shape, key):
            if label not in labels:
                raise RecordShapeError(f"config key {where}.{key}: label {label!r} is not one "
                                       f"of data.labels{did_you_mean(label, labels)}")
