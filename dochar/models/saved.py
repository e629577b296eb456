"""A trained model as one loadable unit: a folder that can label new pages on its own.

Folder layout (``manifest.json`` first, then one model file)::

    manifest.json     format, task (its whole config), labels, graph / feature / model config,
                      the featurizer's constructor arguments and fitted scales, edge relations,
                      the arguments the model was built from (:mod:`dochar.models.builders`),
                      the link threshold of pair tasks, library versions, SHA-256 of each file
    weights.pt        a GNN's state dict (tensors only)
    estimator.skops   a scikit-learn baseline in skops' format
    templates.json    layout templates as plain lists

**Loading never executes code from the files.** The manifest is JSON. Weights are read with
``torch.load(weights_only=True)``, whose unpickler only rebuilds tensors and plain containers.
Baselines are stored with skops rather than joblib: skops writes a zip of JSON and arrays and
rebuilds only types on a trusted list (its own scikit-learn/NumPy defaults plus the two tree
types named in ``TRUSTED_ESTIMATOR_TYPES``); any other type in the file is refused before
anything is built. Each file's SHA-256 is checked against the manifest first, so a file changed
after dochar wrote it is refused before it is parsed at all.

The unit is written into a temporary folder beside its destination and renamed into place, so a
reader never sees half a model.
"""

from __future__ import annotations

import hashlib
import json
import zipfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd
import torch

from dochar import graphs, tasks
from dochar.data.files import atomic_folder
from dochar.data.word_table import Page, iter_pages
from dochar.errors import DocharError
from dochar.features import CHAR_VOCAB, WordFeaturizer
from dochar.models.builders import build_gnn, build_template
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, stacked_graph, to_graphs, to_matrix
from dochar.graphs.candidates import CandidateOptions
from dochar.models.objectives import NodeClasses, PairLinks
from dochar.models.pairs import PageCandidates, page_candidates, pair_matrix, with_pairs
from dochar.tasks import NODES, PAIRS, Task

FORMAT = "dochar-model/2"
MANIFEST = "manifest.json"
WEIGHTS = "weights.pt"
ESTIMATOR = "estimator.skops"
TEMPLATES = "templates.json"
MODEL_FILES = {"gnn": WEIGHTS, "baseline": ESTIMATOR, "template": TEMPLATES}
# Types beyond skops' defaults that the baselines hold: the fitted trees of a random forest and
# of histogram gradient boosting (found with skops.io.get_untrusted_types on each baseline).
TRUSTED_ESTIMATOR_TYPES: tuple[str, ...] = (
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
)
TOP = 3   # labels kept per word in predictions
BOX_COLUMNS = ("x0", "y0", "x1", "y1")
LIBRARIES = ("torch", "torch-geometric", "scikit-learn", "numpy", "skops", "dochar")


# a later stage's decoding of node probabilities: (node pages, probabilities, labels) -> same
Settle = Callable[[Sequence[Page], list[np.ndarray], Sequence[str]], list[np.ndarray]]


class SavedModelError(DocharError):
    """A model folder that cannot be used: missing, changed, unsafe, or for other labels."""


def library_versions() -> dict[str, str]:
    versions = {}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def featurizer_state(featurizer: WordFeaturizer, hash_features: int) -> dict[str, Any]:
    """Everything the featurizer needs to turn a page into the same columns again: its
    constructor's arguments (all of them, read off ``__init__``) and what fitting learnt."""
    return {"params": featurizer.get_params(),
            "mean": None if featurizer.mean_ is None else featurizer.mean_.tolist(),
            "scale": None if featurizer.scale_ is None else featurizer.scale_.tolist(),
            "feature_names": featurizer.feature_names, "char_vocab": CHAR_VOCAB,
            "hash_features": int(hash_features)}


def featurizer_from_state(state: Mapping[str, Any]) -> WordFeaturizer:
    if state["char_vocab"] != CHAR_VOCAB:
        raise SavedModelError("the model was trained with another character vocabulary than "
                              "this dochar's; character ids would mean other characters")
    params = dict(state["params"])
    lexicons = params.pop("lexicons")
    featurizer = WordFeaturizer(**params)
    # the stored keys are already normalised; set them as they were, not re-normalised
    featurizer.lexicons = {name: frozenset(keys) for name, keys in lexicons.items()}
    if state["mean"] is not None:
        featurizer.mean_ = np.asarray(state["mean"], dtype=np.float64)
        featurizer.scale_ = np.asarray(state["scale"], dtype=np.float64)
    featurizer.fitted_ = True
    if featurizer.feature_names != list(state["feature_names"]):
        raise SavedModelError(f"the featurizer rebuilt from the model gives columns "
                              f"{featurizer.feature_names}, the model was trained on "
                              f"{state['feature_names']}")
    return featurizer


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _record_block(data: Mapping[str, Any]) -> dict[str, Any]:
    """The data's ``record:`` block as plain values (what ``dochar predict`` assembles)."""
    block = data.get("record") or {}
    return {str(k): (v if isinstance(v, str) else
                     {str(a): str(b) for a, b in v.items()} if isinstance(v, Mapping) else
                     [str(x) for x in v])
            for k, v in dict(block).items() if v is not None}


def save_model(destination: str | Path, fitted: FittedModel, config: Mapping[str, Any], *,
               name: str = "", labels: Sequence[str] | None = None) -> Path:
    """Write the unit for a fitted model and the resolved run config it was trained with.

    ``labels`` are the classes the model predicts (a task's tags; default: the data's labels).
    """
    destination = Path(destination)
    labels = [str(label) for label in (labels or config["data"]["labels"])]
    featurizer = fitted.featurizer
    if featurizer is None:   # templates read positions only; the unit still records features
        featurizer = WordFeaturizer.from_config(config["features"], config["data"]).fit([])
    builder = graphs.from_config(config["graph"], config.get("edges"))
    kind = str(fitted.arguments["kind"])
    task = dict(config.get("task") or {"name": "word_labels"})
    manifest: dict[str, Any] = {
        "format": FORMAT, "kind": kind, "task": task, "labels": labels,
        "name": name or str(config.get("run_name") or ""), "seed": config.get("seed"),
        "data": {"name": str(config["data"].get("name", "")),
                 "labels": [str(label) for label in config["data"]["labels"]],
                 "record": _record_block(config["data"])},
        "graph": dict(config["graph"]), "relations": list(builder.relations),
        "edges": dict(config.get("edges") or {}), "edge_attr_names": list(builder.edge_attr_names),
        "features": dict(config["features"]), "model": dict(config["model"]),
        "entity_ignore": list((config.get("evaluation") or {}).get("entity_ignore", ["other"])),
        "featurizer": featurizer_state(featurizer, int(config["features"]["hash_features"])),
        "arguments": fitted.arguments, "threshold": fitted.threshold,
        "trained_on": list(fitted.trained_on),
        "libraries": library_versions(), "files": {},
    }
    with atomic_folder(destination) as staging:     # manifest last, then one rename
        path = staging / MODEL_FILES[kind]
        if kind == "gnn":
            state = {k: v.detach().cpu() for k, v in fitted.model.state_dict().items()}
            build_gnn(fitted.arguments).load_state_dict(state, strict=True)
            torch.save(state, path)
        elif kind == "template":
            path.write_text(json.dumps(fitted.model.fitted_state()))
        else:
            import skops.io

            skops.io.dump(fitted.model, path, compression=zipfile.ZIP_DEFLATED)
        manifest["files"][path.name] = _sha256(path)
        (staging / MANIFEST).write_text(json.dumps(manifest, indent=2, default=str))
    return destination


@dataclass
class SavedModel:
    """A loaded unit: the model, the task, the featurizer and graph builder it was trained with."""

    folder: Path
    manifest: dict[str, Any]
    model: Any
    featurizer: WordFeaturizer
    builder: graphs.GraphBuilder

    @property
    def labels(self) -> list[str]:
        return list(self.manifest["labels"])

    @property
    def word_labels(self) -> list[str]:
        """The word labels predictions decode to (the data's labels the model was trained on)."""
        return list(self.manifest["data"]["labels"])

    @property
    def task(self) -> Task:
        return tasks.from_config(self.manifest["task"])

    @property
    def kind(self) -> str:
        return str(self.manifest["kind"])

    @property
    def trained_on(self) -> tuple[str, ...]:
        """The split parts the model learned from: ``("train", "val")`` after
        ``train.retrain_on_val``, whose validation scores then say nothing."""
        return tuple(self.manifest.get("trained_on", ["train"]))

    def expect(self, *, labels: Sequence[str] | None = None, task: str | None = None) -> None:
        """Refuse a config whose task or label set differs from the one the model learned."""
        if task is not None and task != self.task.name:
            raise SavedModelError(f"{self.folder}: the model was trained for task "
                                  f"{self.task.name!r}, the config asks for task {task!r}")
        if labels is not None and list(labels) != self.labels:
            missing = [label for label in labels if label not in self.labels]
            extra = [label for label in self.labels if label not in labels]
            detail = (f"labels the model does not know: {missing}; " if missing else "") + (
                f"labels the config lacks: {extra}" if extra else "the same labels in another order")
            raise SavedModelError(f"{self.folder}: the model was trained on the label set "
                                  f"{self.labels}, the config gives {list(labels)} ({detail})")

    def version_notes(self) -> list[str]:
        """Libraries whose version differs from the one the model was saved with."""
        now = library_versions()
        return [f"{name} {saved} when saved, {now.get(name)} now"
                for name, saved in self.manifest["libraries"].items() if now.get(name) != saved]

    def predict_proba(self, pages: Sequence[Page]) -> list[np.ndarray]:
        """Per-page (nodes, classes) probabilities of the task's node pages, graphs and
        features built as in training."""
        if self.task.target != NODES:
            raise SavedModelError(f"{self.folder}: a {self.task.name} model scores pairs of "
                                  "nodes; dochar predict labels nodes (word, tag or segment "
                                  "models)")
        page_set = PageSet.build(pages, self.builder)
        if self.kind == "gnn" and not pages:
            return []
        if self.kind == "gnn":   # one graph of all pages: the model's rows, cut per page
            whole, = NodeClasses(len(self.labels)).outputs(
                self.model, [stacked_graph(page_set, self.featurizer)])
            return np.split(whole, np.cumsum([len(page) for page in pages])[:-1])
        if self.kind == "template":
            found = self.model.predict_proba(page_set.pages)
            return np.split(found, np.cumsum([len(page) for page in pages])[:-1])
        seen = self.model.predict_proba(to_matrix(page_set, self.featurizer,
                                                  **self._row_options()))
        full = np.zeros((len(seen), len(self.labels)))
        full[:, self.model.classes_] = seen   # classes absent from training keep probability 0
        return np.split(full, np.cumsum([len(page) for page in pages])[:-1])

    def score_pairs(self, pages: Sequence[Page]) -> tuple[list, list[PageCandidates],
                                                          list[np.ndarray]]:
        """A pair model on new word pages: the task's link pages, their candidate pairs (as in
        training) and each candidate's link probability."""
        task = self.task
        if task.target != PAIRS:
            raise SavedModelError(f"{self.folder}: a {task.name} model labels nodes, it scores "
                                  "no pairs")
        link_pages = task.input_pages(pages)
        page_set = PageSet.build([task.graph_page(p) for p in link_pages], self.builder)
        options = CandidateOptions(str(task.candidates["source"]),
                                   float(task.candidates["max_distance"]))
        candidates = [page_candidates(page, edges, options)
                      for page, edges in zip(link_pages, page_set.edges)]
        if self.kind == "gnn":
            graphs = [with_pairs(g, c) for g, c in zip(to_graphs(page_set, self.featurizer, None),
                                                        candidates)]
            return link_pages, candidates, PairLinks().outputs(self.model, graphs)
        rows = pair_matrix(page_set, candidates, self.featurizer, **self._row_options())
        seen = self.model.predict_proba(rows) if len(rows) else np.zeros((0, 2))
        link = (seen[:, list(self.model.classes_).index(1)] if 1 in self.model.classes_
                else np.zeros(len(seen)))
        return link_pages, candidates, np.split(link, np.cumsum(
            [c.pairs.shape[1] for c in candidates])[:-1])

    def _row_options(self) -> dict[str, Any]:
        return dict(hash_features=int(self.manifest["featurizer"]["hash_features"]),
                    neighbour_features=bool(self.manifest["model"].get("neighbour_features")))

    def label_words(self, table: pd.DataFrame, settle: Settle | None = None) -> pd.DataFrame:
        """One row per word of a validated word table: its box, the word label the task decodes
        from the model's predictions (``predicted``, with the node's ``probability`` and, where
        the task groups words, the ``entity`` it put the word in), and, for word nodes, the next
        two labels. ``settle`` (node pages, their probabilities, labels -> probabilities) is a
        later stage's decoding applied first, e.g. the record's line status
        (:func:`dochar.records.line_status.settle_pages`)."""
        words = list(iter_pages(table))
        if not words:
            raise SavedModelError("no words to label")
        task = self.task
        nodes = task.input_pages(words)
        probabilities = self.predict_proba(nodes)
        if settle is not None:
            probabilities = settle(nodes, probabilities, self.labels)
        node_frame = node_predictions(nodes, probabilities, self.labels)
        decoded = task.word_predictions(nodes, node_frame).drop(columns=["label"])
        columns = page_columns(words)
        labelled = all(page.labels is not None for page in words)
        found = pd.DataFrame({**{k: columns[k] for k in ("doc_id", "page", "word_id")},
                              "text": [text for page in words for text in page.texts],
                              **{k: columns[k] for k in BOX_COLUMNS},
                              **({"label": [label for page in words for label in page.labels]}
                                 if labelled else {})})
        found = _join_on_words(found, decoded, validate="one_to_one")
        if task.nodes_are_word_labels:   # the runners-up are word labels too
            runners_up = node_frame.drop(columns=["label", "predicted", "confidence", "x0", "y0",
                                                  "x1", "y1"])
            found = _join_on_words(found, runners_up)
        return found.rename(columns={"confidence": "probability"})


WORD_KEYS = ["doc_id", "page", "word_id"]


def _join_on_words(words: pd.DataFrame, found: pd.DataFrame, **options: Any) -> pd.DataFrame:
    """``words.merge(found, on=WORD_KEYS, how="left")``; when ``found`` holds the same words in
    the same order (one node per word), its columns are set beside them instead of matched."""
    aligned = (len(words) == len(found) and not (set(words) & set(found)) - set(WORD_KEYS)
               and all(np.array_equal(words[key].to_numpy(), found[key].to_numpy())
                       for key in WORD_KEYS))
    if not aligned:
        return words.merge(found, on=WORD_KEYS, how="left", **options)
    return pd.concat([words, found.drop(columns=WORD_KEYS).set_axis(words.index)], axis=1)


def page_columns(pages: Sequence[Page]) -> dict[str, np.ndarray]:
    """``doc_id``, ``page``, ``word_id`` and the box columns of pages laid end to end, one row
    per node, built from whole arrays (not a frame per page)."""
    sizes = [len(page) for page in pages]
    boxes = np.concatenate([page.boxes for page in pages]).reshape(-1, 4)
    return {"doc_id": np.repeat(np.array([page.doc_id for page in pages], dtype=object), sizes),
            "page": np.repeat(np.array([page.page for page in pages], dtype=np.int64), sizes),
            "word_id": np.concatenate([page.word_ids for page in pages]),
            **{name: boxes[:, i] for i, name in enumerate(BOX_COLUMNS)}}


def node_predictions(pages: Sequence[Page], probabilities: Sequence[np.ndarray],
                     labels: Sequence[str]) -> pd.DataFrame:
    """One row per node with its box: the best class (``predicted``, ``confidence``) and the
    next two."""
    columns: dict[str, Any] = {**page_columns(pages)}
    columns["label"] = ""
    proba = np.concatenate(list(probabilities))
    best = np.argsort(-proba, axis=1, kind="stable")[:, :TOP]
    names = np.asarray(labels, dtype=object)
    for rank in range(best.shape[1]):
        name, chance = (("predicted", "confidence") if rank == 0 else
                        (f"top{rank + 1}", f"top{rank + 1}_probability"))
        columns[name] = names[best[:, rank]].tolist()
        columns[chance] = np.take_along_axis(proba, best[:, rank:rank + 1], axis=1)[:, 0]
    return pd.DataFrame(columns)   # one frame built whole, not a column added at a time


def find_unit(path: str | Path) -> Path:
    """The unit inside a unit folder, a run folder (``model/``) or an MLflow model folder."""
    path = Path(path)
    for candidate in (path, path / "model", *sorted(path.glob("**/" + MANIFEST))):
        candidate = candidate.parent if candidate.name == MANIFEST else candidate
        if (candidate / MANIFEST).is_file():
            return candidate
    raise SavedModelError(f"{path}: no dochar model here (no {MANIFEST} in it, in model/ or "
                          "below)")


def _read_manifest(folder: Path) -> dict[str, Any]:
    try:
        manifest = json.loads((folder / MANIFEST).read_text())
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        raise SavedModelError(f"{folder / MANIFEST}: not a readable model manifest ({error})"
                              ) from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        found = manifest.get("format") if isinstance(manifest, dict) else type(manifest).__name__
        raise SavedModelError(f"{folder / MANIFEST}: format {found!r}, this dochar reads "
                              f"{FORMAT!r}")
    return manifest


def _check_files(folder: Path, manifest: Mapping[str, Any]) -> None:
    expected = MODEL_FILES.get(str(manifest["kind"]))
    files = manifest.get("files") or {}
    if expected is None or set(files) != {expected}:
        raise SavedModelError(f"{folder / MANIFEST}: a {manifest['kind']} model lists files "
                              f"{sorted(files)}, expected [{expected!r}]")
    path = folder / expected
    if not path.is_file():
        raise SavedModelError(f"{path}: missing from the model folder")
    if _sha256(path) != files[expected]:
        raise SavedModelError(f"{path}: refused, its SHA-256 differs from the one dochar "
                              f"recorded in {MANIFEST} when it saved the model (the file was "
                              "changed or replaced); nothing was loaded from it")


def _load_weights(path: Path) -> dict[str, torch.Tensor]:
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as error:   # the safe unpickler refuses anything but tensors and containers
        lines = [line.strip() for line in str(error).splitlines() if line.strip()]
        reason = next((line for line in lines if "GLOBAL" in line or "Unpickler" in line),
                      lines[0] if lines else type(error).__name__)
        raise SavedModelError(f"{path}: refused, not a plain tensor file; torch's weights-only "
                              f"loader stopped at: {reason}") from None
    if not isinstance(state, dict) or not all(isinstance(v, torch.Tensor)
                                              for v in state.values()):
        raise SavedModelError(f"{path}: refused, expected a mapping of names to tensors")
    return state


def _load_estimator(path: Path) -> Any:
    import skops.io

    try:
        found = skops.io.get_untrusted_types(file=path)
    except Exception as error:   # not a skops zip at all (e.g. a pickle put in its place)
        raise SavedModelError(f"{path}: refused, not a skops model file ({type(error).__name__}: "
                              f"{error})") from None
    unknown = sorted(set(found) - set(TRUSTED_ESTIMATOR_TYPES))
    if unknown:
        raise SavedModelError(f"{path}: refused, it holds types outside dochar's trusted list: "
                              f"{unknown}")
    try:
        return skops.io.load(path, trusted=list(found))
    except Exception as error:
        raise SavedModelError(f"{path}: refused by skops ({type(error).__name__}: {error})"
                              ) from None


def _load_templates(path: Path, arguments: Mapping[str, Any]) -> Any:
    try:
        state = json.loads(path.read_text())
        return build_template(arguments).load_state(state)
    except (OSError, ValueError, KeyError, TypeError) as error:
        raise SavedModelError(f"{path}: not a readable template file ({type(error).__name__}: "
                              f"{error})") from None


def load_model(path: str | Path) -> SavedModel:
    """Load a unit safely (see the module docstring) and check that its parts agree."""
    folder = find_unit(path)
    manifest = _read_manifest(folder)
    _check_files(folder, manifest)
    labels = list(manifest["labels"])
    featurizer = featurizer_from_state(manifest["featurizer"])
    builder = graphs.from_config(manifest["graph"], manifest.get("edges"))
    if list(builder.edge_attr_names) != list(manifest.get("edge_attr_names", [])):
        raise SavedModelError(f"{folder}: this dochar's edge features are "
                              f"{list(builder.edge_attr_names)}, the model was trained on "
                              f"{manifest.get('edge_attr_names', [])}")
    if list(builder.relations) != list(manifest["relations"]):
        raise SavedModelError(f"{folder}: this dochar's {manifest['graph']['name']} builder makes "
                              f"relations {list(builder.relations)}, the model was trained on "
                              f"{manifest['relations']}")
    arguments = manifest["arguments"]
    if manifest["kind"] == "gnn":
        outputs = arguments["stack"]["num_classes"]
        if arguments["pair_head"] is None and outputs != len(labels):
            raise SavedModelError(f"{folder}: the network has {outputs} outputs for "
                                  f"{len(labels)} labels")
        edge_dim = len(builder.edge_attr_names)
        if int(arguments["stack"].get("edge_dim", 0)) != edge_dim:
            raise SavedModelError(f"{folder}: the network reads "
                                  f"{arguments['stack'].get('edge_dim', 0)} edge attributes, "
                                  f"this dochar's graph config gives {edge_dim}")
        model = build_gnn(arguments)
        try:
            model.load_state_dict(_load_weights(folder / WEIGHTS), strict=True)
        except RuntimeError as error:
            raise SavedModelError(f"{folder / WEIGHTS}: does not fit the architecture in "
                                  f"{MANIFEST}: {str(error).splitlines()[0]}") from None
        model.eval()
    elif manifest["kind"] == "template":
        model = _load_templates(folder / TEMPLATES, arguments)
    else:
        model = _load_estimator(folder / ESTIMATOR)
        classes = np.asarray(getattr(model, "classes_", []))
        if classes.size == 0 or classes.min() < 0 or classes.max() >= len(labels):
            raise SavedModelError(f"{folder / ESTIMATOR}: estimator classes {classes.tolist()} "
                                  f"do not index the {len(labels)} labels")
    return SavedModel(folder, manifest, model, featurizer, builder)
