"""``dochar predict --model RUN --input SRC... --out DIR``: a trained model labels new documents.

The model is a run folder (or its ``model/``) on disk, or a run id (or its first characters)
in the MLflow store, whose model is downloaded. Inputs are word tables or anything
``dochar import`` reads; graphs and features are built by the saved builder and featurizer.
Writes, into DIR:

    words.csv|parquet   one row per word: box, predicted label and probability, next two labels
    fields.json         per document, the grouped fields, decoded through the model's task:
                        for word-label models, runs of consecutive words in reading order with
                        one predicted label (the entity rule of dochar.metrics.entities); for
                        tag models, the decoded entities (chunks); for segment models, the
                        segments; each with its text, page, box (the union of the words'
                        boxes), least word probability and word ids
    fields.csv          the same fields, one row each
    records.json        with a record shape (the training data's ``record:`` block, saved with
    records.csv         the model, or ``--record-shape FILE.yaml``): one record per document,
                        header fields and line items (dochar.records.output)

When the input has a ``label`` column, prints word accuracy and macro-F1 over the words whose
label the model knows, and reports (document, page, word) the labels it does not know.

A links model writes ``links.csv`` instead: one row per candidate pair it predicts as a link (at
the threshold chosen on validation pairs in training), with both nodes' ids and the probability.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import sys
import tempfile
from collections.abc import Sequence
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd

from dochar.data.files import write_text_atomic
from dochar.data.importers import FORMATS, import_sources
from dochar.data.importers.label_transfer import TransferSettings
from dochar.data.word_table import (
    WordTableError,
    iter_pages,
    read_word_table,
    validate_word_table,
    write_word_table,
)
from dochar.errors import DocharError, SuggestingParser
from dochar.metrics.entities import reading_order
from dochar.metrics.words import score_words
from dochar.models.saved import SavedModel, SavedModelError, load_model
from dochar.records.assemble import assemble_records
from dochar.records.line_status import settle_pages
from dochar.records.output import write_records
from dochar.records.shape import RecordShape, RecordShapeError, shape_or_none
from dochar.runs.bundle import PROBABILITY_PREFIX
from dochar.runs.frames import pair_frame
from dochar.runs.tracking import MODEL_DIR, resolve_uri
from dochar.tasks import PAIRS
from dochar.tasks.links import LINK

TABLE_SUFFIXES = (".csv", ".tsv", ".parquet")
SHOWN = 5   # unknown-label words listed by location before "... and N more"


def _parser() -> argparse.ArgumentParser:
    parser = SuggestingParser(
        prog="dochar predict", description="Label the words of new documents with a trained "
        "model; write per-word labels and per-document fields.")
    parser.add_argument("--model", required=True, metavar="RUN",
                        help="run folder, its model/ folder, or an MLflow run id (or prefix)")
    parser.add_argument("--input", required=True, nargs="+", type=Path, metavar="SRC",
                        help="word tables (.csv/.parquet), PDFs, hOCR, ALTO, page images, "
                             "form JSON; folders are searched")
    parser.add_argument("--out", required=True, type=Path, metavar="DIR")
    parser.add_argument("--format", choices=(*FORMATS, "word_table"), default="auto",
                        help="input format (default: by file suffix)")
    parser.add_argument("--words-format", choices=("csv", "parquet"), default="csv",
                        help="file format of the per-word table (default csv)")
    parser.add_argument("--tracking-uri", default=None,
                        help="MLflow store for a run id (default $MLFLOW_TRACKING_URI, else "
                             "sqlite:///mlflow.db here)")
    parser.add_argument("--labels-from", type=Path, metavar="TABLE",
                        help="labelled word table of the same pages, moved on by box IoU, to "
                             "score the predictions")
    parser.add_argument("--ocr", action="store_true", help="OCR PDF pages without text layer")
    parser.add_argument("--task", help="refuse unless the model was trained for this task")
    parser.add_argument("--labels", help="comma-separated label set the model must have "
                                         "(same labels, same order)")
    parser.add_argument("--record-shape", type=Path, metavar="FILE",
                        help="YAML file with a record shape (header_fields, item_columns, ...) "
                             "to write records.json/records.csv with; default: the shape of "
                             "the model's training data, if it had one")
    return parser


def resolve_model(reference: str, tracking_uri: str | None, workdir: Path) -> Path:
    """A folder as it is; otherwise a run id (or prefix) from any experiment, downloaded."""
    if Path(reference).exists():
        return Path(reference)
    if not re.fullmatch(r"[0-9a-f]{4,32}", reference):
        raise SavedModelError(f"--model {reference}: no such folder, and not a run id")
    os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
    import mlflow
    from mlflow.tracking import MlflowClient

    uri = resolve_uri(tracking_uri)
    client = MlflowClient(tracking_uri=uri)
    experiments = [e.experiment_id for e in client.search_experiments()]
    runs = [run for start in range(0, len(experiments), 100)
            for run in client.search_runs(experiments[start:start + 100], max_results=50000)
            if run.info.run_id.startswith(reference)] if experiments else []
    if len(runs) != 1:
        raise SavedModelError(f"--model {reference}: matches {len(runs)} runs in {uri}; "
                              "give more of the run id" if runs else
                              f"--model {reference}: no run with this id in {uri}")
    run_id = runs[0].info.run_id
    try:
        return Path(mlflow.artifacts.download_artifacts(
            run_id=run_id, artifact_path=MODEL_DIR, dst_path=str(workdir), tracking_uri=uri))
    except Exception as error:   # MLflow raises its own exception types for a missing path
        raise SavedModelError(f"run {run_id} in {uri}: no model/ among its artifacts ({error})"
                              ) from None


def read_inputs(args: argparse.Namespace) -> pd.DataFrame:
    """Word tables directly, every other source through the importers, then validated."""
    tables, sources = [], []
    for path in args.input:
        is_table = args.format == "word_table" or (
            args.format == "auto" and path.suffix.lower() in TABLE_SUFFIXES)
        (tables if is_table else sources).append(path)
    frames = [read_word_table(path) for path in tables]
    if sources:
        imported, summary = import_sources(
            sources, format="auto" if args.format == "word_table" else args.format,
            ocr=args.ocr, labels_from=args.labels_from, transfer=TransferSettings())
        for line in summary.lines():
            print(line)
        frames.append(imported)
    elif args.labels_from:
        raise WordTableError("--labels-from moves labels onto imported documents; the word "
                             "tables given have their own label column")
    table = pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]
    checked = validate_word_table(table, source=", ".join(map(str, args.input)))
    for problem in checked.problems:
        print(f"set aside: {problem}")
    if checked.documents_used == 0:
        raise WordTableError(f"no valid documents in the input ({checked.summary()})")
    return checked.table


FIELD_COLUMNS = ["doc_id", "page", "label", "text", "x0", "y0", "x1", "y1", "probability",
                 "word_ids"]


def fields(words: pd.DataFrame, ignore: Sequence[str]) -> pd.DataFrame:
    """One row per field: the task's groups (``entity``) where it has them, else runs of
    consecutive same-label words in reading order (the entity rule of
    :mod:`dochar.metrics.entities`: a new page or a new label starts a run); labels in
    ``ignore`` are no field. Computed on whole columns: one sort, then one reduction per
    column over the fields' member rows (arrays, not frames)."""
    order = reading_order(words)
    column = {name: words[name].to_numpy()[order] for name in ("doc_id", "page", "word_id",
                                                                "x0", "y0", "x1", "y1",
                                                                "probability")}
    texts_in_order = words["text"].to_numpy()[order]
    predicted = words["predicted"].astype(str).to_numpy(dtype=object)[order]
    kept = ~np.isin(predicted, list(ignore))
    if "entity" in words:
        kept &= (words["entity"].fillna("") != "").to_numpy()[order]
        group = pd.DataFrame({name: values[kept] for name, values in (
            ("doc_id", column["doc_id"]), ("page", column["page"]),
            ("entity", words["entity"].to_numpy()[order]))}).groupby(
            ["doc_id", "page", "entity"], sort=False).ngroup().to_numpy()
        members = np.flatnonzero(kept)[np.argsort(group, kind="stable")]
        starts = np.flatnonzero(np.diff(np.sort(group), prepend=-1))
    else:   # reading order keeps each page's words together: a page starts where a key changes
        doc, page = column["doc_id"], column["page"]
        new_run = np.ones(len(order), dtype=bool)
        new_run[1:] = ((doc[1:] != doc[:-1]) | (page[1:] != page[:-1])
                       | (predicted[1:] != predicted[:-1]))
        members = np.flatnonzero(kept)
        starts = np.flatnonzero(new_run[members])
    if len(members) == 0:
        return pd.DataFrame(columns=FIELD_COLUMNS)
    ends = np.append(starts[1:], len(members))
    texts = texts_in_order[members].tolist()
    ids = list(map(str, column["word_id"][members].tolist()))
    heads = members[starts]
    lowest = np.minimum.reduceat(column["probability"][members], starts)
    return pd.DataFrame({
        "doc_id": column["doc_id"][heads], "page": column["page"][heads].astype(int),
        "label": predicted[heads].tolist(),
        "text": [" ".join(texts[a:b]) for a, b in zip(starts, ends)],
        **{name: np.round(reduce.reduceat(column[name][members], starts), 2)
           for name, reduce in (("x0", np.minimum), ("y0", np.minimum), ("x1", np.maximum),
                                ("y1", np.maximum))},
        "probability": [round(float(value), 4) for value in lowest],
        "word_ids": [" ".join(ids[a:b]) for a, b in zip(starts, ends)]}, columns=FIELD_COLUMNS)


def fields_json(table: pd.DataFrame, documents: Sequence[str]) -> list[dict]:
    by_document = {doc: [] for doc in documents}
    for row in table.itertuples(index=False):
        by_document[row.doc_id].append({
            "label": row.label, "text": row.text, "page": row.page,
            "box": [row.x0, row.y0, row.x1, row.y1], "probability": row.probability,
            "word_ids": [int(w) for w in row.word_ids.split()]})
    return [{"doc_id": doc, "fields": found} for doc, found in by_document.items()]


def score(words: pd.DataFrame, saved: SavedModel) -> list[str]:
    """Lines on the words with a known label; words with unknown labels located, not scored."""
    truth = words["label"].astype(str)
    labelled = truth != ""
    unknown = labelled & ~truth.isin(saved.word_labels)
    lines = []
    if unknown.any():
        where = [f"{r.doc_id} page {r.page} word {r.word_id} {r.label!r}"
                 for r in words[unknown].head(SHOWN).itertuples()]
        more = f", ... and {int(unknown.sum()) - SHOWN} more" if unknown.sum() > SHOWN else ""
        lines.append(f"labels the model does not know, not scored: "
                     f"{sorted(set(truth[unknown]))} on {int(unknown.sum())} words "
                     f"({'; '.join(where)}{more})")
    scored = labelled & ~unknown
    if scored.any():
        result = score_words(truth[scored], words.loc[scored, "predicted"], saved.word_labels)
        lines.append(f"scored {int(scored.sum())} of {len(words)} words against the input's "
                     f"labels: word accuracy {result.accuracy:.4f}, macro-F1 {result.macro_f1:.4f}")
    return lines


def label_table(saved: SavedModel, table: pd.DataFrame, shape: RecordShape | None = None
                ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A validated word table to per-word predictions and the grouped fields: graphs,
    features, one forward pass over all pages, labels (each line settled as an item or a
    sub-item when ``shape`` names sub-item columns), fields (what ``make bench`` times)."""
    words = saved.label_words(table, settle=partial(settle_pages, shape=shape))
    return words, fields(words, saved.manifest["entity_ignore"])


def run(args: argparse.Namespace) -> int:
    with tempfile.TemporaryDirectory(prefix="dochar-predict-") as workdir:
        saved = load_model(resolve_model(args.model, args.tracking_uri, Path(workdir)))
        saved.folder = Path(args.model)   # messages name the model as given, not a download
        saved.expect(task=args.task,
                     labels=[x.strip() for x in args.labels.split(",")] if args.labels else None)
    print(f"model: {saved.manifest.get('name') or saved.kind} ({saved.kind}, task "
          f"{saved.task.name}, {len(saved.labels)} labels, graph {saved.manifest['graph']['name']}, "
          f"features {'+'.join(saved.featurizer.groups)})")
    for note in saved.version_notes():
        print(f"note: library version differs: {note}")
    table = read_inputs(args)
    if saved.task.target == PAIRS:
        return write_links(saved, table, args.out)
    shape = record_shape(args.record_shape, saved)
    words, found = label_table(saved, table, shape)
    words_path = write_word_table(words, args.out / f"words.{args.words_format}")
    write_text_atomic(args.out / "fields.csv", found.to_csv(index=False))
    documents = list(dict.fromkeys(words["doc_id"]))
    write_text_atomic(args.out / "fields.json", json.dumps(fields_json(found, documents),
                                                           indent=2, ensure_ascii=False))
    print(f"labelled {len(words)} words on {words.groupby('doc_id')['page'].nunique().sum()} "
          f"pages of {len(documents)} documents; {len(found)} fields")
    if "label" in words.columns:
        for line in score(words, saved):
            print(line)
    written = [words_path, args.out / "fields.json", args.out / "fields.csv"]
    if shape is not None:
        records = assemble_records(words, shape, label_col="predicted",
                                   group_col="entity" if "entity" in words else None)
        written.extend(write_records(records, shape, args.out))
        print(f"{len(records)} records, {sum(len(r.items) for r in records)} line items")
    print(f"wrote {', '.join(map(str, written))}")
    return 0


def record_shape(path: Path | None, saved: SavedModel) -> RecordShape | None:
    """The shape from ``--record-shape`` (a YAML mapping, or one under a ``record:`` key), else
    the one saved with the model; its labels must be labels the model predicts."""
    if path is None:
        return shape_or_none(saved.manifest["data"].get("record"), labels=saved.word_labels)
    import yaml

    try:
        block = yaml.safe_load(path.read_text())
    except (OSError, yaml.YAMLError) as error:
        raise RecordShapeError(f"--record-shape {path}: not a readable YAML file ({error})"
                               ) from None
    if isinstance(block, dict) and isinstance(block.get("record"), dict):
        block = block["record"]
    if not isinstance(block, dict):
        raise RecordShapeError(f"--record-shape {path}: expected a mapping of "
                               "header_fields, item_columns, ...")
    return RecordShape.from_mapping(block, where=f"{path}: record", labels=saved.word_labels)


LINK_COLUMNS = ["doc_id", "page", "source_id", "target_id", "text", "probability"]


def write_links(saved: SavedModel, table: pd.DataFrame, out: Path) -> int:
    """A links model: every candidate pair it predicts as a link, at its validation threshold,
    named by the nodes' ids (word ids, or entity ids for key -> value segments)."""
    pages = list(iter_pages(table))
    link_pages, candidates, probabilities = saved.score_pairs(pages)
    rows = pair_frame(link_pages, candidates, probabilities, float(saved.manifest["threshold"]))
    found = rows[rows["predicted"] == LINK].rename(columns={f"{PROBABILITY_PREFIX}{LINK}":
                                                            "probability"})
    write_text_atomic(out / "links.csv", found[LINK_COLUMNS].to_csv(index=False))
    print(f"scored {int(rows['candidate'].sum())} candidate pairs on {len(pages)} pages; "
          f"{len(found)} predicted links")
    print(f"wrote {out / 'links.csv'}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return run(args)
    except (DocharError, ValueError, FileNotFoundError) as error:
        print(f"dochar predict: error: {error}", file=sys.stderr)
        return 2
