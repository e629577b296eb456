"""Record decoding levers on the validation documents of a saved model: the choices of
docs/records.md made on validation scores only.

    python -m reports.readme_figures.record_levers MODEL_FOLDER [OVERRIDE ...]

composes the run config of OVERRIDE (e.g. ``+experiment=cord_labels``, or
``split=seen_and_unseen_layouts`` for the demo's certificates), loads and splits its data, labels
the validation documents with the saved model (the same decoding as ``dochar predict``) and
prints the raw record scores with the data's record shape as configured, without its
``single_fields``, without its ``required_columns`` (when it has them), and (when it has a
``row_anchor``) with rows by the layout rule.
"""

from __future__ import annotations

import dataclasses
import sys
from functools import partial

from dochar.data.sources import load_data
from dochar.metrics.records import record_frame, record_scorers
from dochar.models.saved import load_model
from dochar.records.assemble import assemble_records, parses, true_records
from dochar.records.line_status import settle_pages
from dochar.runs.checks import record_shape
from dochar.splits import split_run
from reports.readme_figures.cheap import compose


def main(model: str, *overrides: str) -> None:
    saved = load_model(model)
    if "val" in saved.trained_on:
        raise SystemExit(f"{model}: this model also learned from the validation documents "
                         "(train.retrain_on_val=true), so validation cannot score its decoding; "
                         "score the model of a run with train.retrain_on_val=false instead")
    cfg = compose(*overrides)
    shape = record_shape(cfg.data)
    data = load_data(cfg.data, progress=False)
    validation = split_run(data.table, cfg.split, int(cfg.seed)).assignment.val
    words = data.table[data.table["doc_id"].isin(validation)]
    labelled = saved.label_words(words, settle=partial(settle_pages, shape=shape))
    keep = [c for c in ("predicted", "probability", "entity") if c in labelled]
    words = words.merge(labelled[["doc_id", "page", "word_id", *keep]],
                        on=["doc_id", "page", "word_id"])
    truth = parses(true_records(words, shape, data.links), shape)
    variants = {"as configured": shape,
                "no single_fields": dataclasses.replace(shape, single_fields=())}
    if shape.required_columns:
        variants["no required_columns"] = dataclasses.replace(shape, required_columns=())
    if shape.row_anchor:
        variants["layout rule rows"] = dataclasses.replace(shape, row_anchor="")
        variants["layout rule rows, no single_fields"] = dataclasses.replace(
            shape, row_anchor="", single_fields=())
    print(f"{len(truth)} validation documents")
    for name, variant in variants.items():
        guessed = assemble_records(words, variant, label_col="predicted",
                                   group_col="entity" if "entity" in words else None)
        frame = record_frame(parses(guessed, variant), truth, list(variant.labels),
                             variant.items_name)
        print(f"{name:36s} " + "  ".join(f"{score} {scorer(frame):.3f}"
                                         for score, scorer in record_scorers().items()))


if __name__ == "__main__":
    main(*sys.argv[1:])
