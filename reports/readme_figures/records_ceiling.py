"""The records ceiling: record scores when every word label is right.

True labels go through the same assembly as a model's predictions (runs of words, header
values joined over lines, rows by the layout rule) and are scored against the generator's
records (entity ids and row links). Whatever is lost here is lost by the decoding rules, not by
a model. ``python -m reports.readme_figures.records_ceiling [documents]`` prints one line per
score (raw and normalised) with its 95% bootstrap interval over documents.

``python -m reports.readme_figures.records_ceiling cord [train|val|test]`` does the same on CORD's
receipts of one part (validation unless named; ``DOCHAR_DATASETS`` or ``../shared/datasets``),
with true labels and the true line groups, once per row rule: the layout rule and the anchor
rule of the data's ``row_anchor``. Rules are chosen on the training and validation parts; the
test part is there to say how much of a model's test score the rule itself costs.
"""

from __future__ import annotations

import dataclasses
import sys

from hydra import compose, initialize_config_dir

from dochar.config import CONFIG_DIR
from dochar.data.sources import load_data
from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.records import record_frame, record_scorers
from dochar.records.assemble import assemble_records, parses, true_records
from dochar.records.normalise import NORMALISATIONS, RAW
from dochar.records.shape import RecordShape
from dochar.runs.checks import record_shape


def _print(perfect, truth, shape: RecordShape, how: str, tag: str) -> None:
    frame = record_frame(parses(perfect, shape, how), parses(truth, shape, how),
                         list(shape.labels), shape.items_name)
    for name, scorer in record_scorers().items():
        point, low, high = bootstrap_interval(frame, scorer, n_resamples=1000, seed=0)
        print(f"{tag:10s} {name:16s} {point:.3f} [{low:.3f}, {high:.3f}]  "
              f"({len(frame)} documents)")


def main(documents: int = 300) -> None:
    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        cfg = compose("config", overrides=[f"data.documents={documents}"])
    shape = record_shape(cfg.data)
    data = load_data(cfg.data, progress=False)
    words = data.table
    truth = true_records(words, shape, data.links)
    perfect = assemble_records(words, shape, label_col="label")
    for how in NORMALISATIONS:
        _print(perfect, truth, shape, how, how)


def receipts(part: str = "val") -> None:
    """CORD's receipts of one part: the layout rule against the anchor rule, raw values."""
    with initialize_config_dir(str(CONFIG_DIR), version_base=None):
        cfg = compose("config", overrides=["data=cord"])
    shape = record_shape(cfg.data)
    data = load_data(cfg.data, progress=False)
    words = data.table[data.table["split"] == part]
    truth = true_records(words, shape, data.links)
    for rule, anchor in (("layout", ""), ("anchor", shape.row_anchor)):
        ruled = dataclasses.replace(shape, row_anchor=anchor)
        perfect = assemble_records(words, ruled, label_col="label", group_col="entity_id")
        _print(perfect, truth, ruled, RAW, rule)


if __name__ == "__main__":
    if sys.argv[1:2] == ["cord"]:
        receipts(*sys.argv[2:3])
    else:
        main(*(int(a) for a in sys.argv[1:]))
