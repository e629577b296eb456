"""Records: what a business consumes, assembled from labelled words and table rows.

A record is one document's header fields (label -> value text, a list where the label repeats)
and its line items (one mapping column -> value per table row). The data config's ``record:``
block names the shape (:mod:`dochar.records.shape`); values can be normalised
(:mod:`dochar.records.normalise`); :mod:`dochar.records.assemble` builds records from predicted
or true words, :mod:`dochar.records.rows` groups table cells into rows, and
:mod:`dochar.records.output` writes ``records.json`` and ``records.csv``.
"""
