"""A trained model as one loadable unit: a folder that can label new pages on its own.

Folder layout (``manifest.json`` first, then one model file)::

    manifest.json     format, task, labels, graph / feature / model config, featurizer state,
                      edge relations, GNN architecture, library versions, SHA-256 of each file
    weights.pt        a GNN's state dict (tensors only)
    estimator.skops   a scikit-learn baseline in skops' format

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

import dataclasses
import hashlib
import json
import os
import shutil
import tempfile
import zipfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import torch

from dochar import graphs
from dochar.data.word_table import Page, iter_pages
from dochar.errors import DocharError
from dochar.features import CHAR_VOCAB, CharCNNEncoder, CropCNNEncoder, WordFeaturizer
from dochar.models.gnn import GNNStack
from dochar.models.inputs import PageSet, to_graphs, to_matrix
from dochar.models.training import predict_proba

FORMAT = "dochar-model/1"
MANIFEST = "manifest.json"
WEIGHTS = "weights.pt"
ESTIMATOR = "estimator.skops"
DEFAULT_TASK = "word_labels"
SAVED_TASKS = ("word_labels", "entity_tags")   # tasks whose nodes are the words predict reads
SAVED_KINDS = ("gnn", "baseline")
# Types beyond skops' defaults that the baselines hold: the fitted trees of a random forest and
# of histogram gradient boosting (found with skops.io.get_untrusted_types on each baseline).
TRUSTED_ESTIMATOR_TYPES: tuple[str, ...] = (
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
)
TOP = 3   # labels kept per word in predictions
LIBRARIES = ("torch", "torch-geometric", "scikit-learn", "numpy", "skops", "dochar")


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
    """Everything the featurizer needs to turn a page into the same columns again."""
    return {"groups": list(featurizer.groups), "max_chars": featurizer.max_chars,
            "standardize": featurizer.standardize,
            "mean": None if featurizer.mean_ is None else featurizer.mean_.tolist(),
            "scale": None if featurizer.scale_ is None else featurizer.scale_.tolist(),
            "lexicons": {name: sorted(keys) for name, keys in featurizer.lexicons.items()},
            "feature_names": featurizer.feature_names, "char_vocab": CHAR_VOCAB,
            "hash_features": int(hash_features)}


def featurizer_from_state(state: Mapping[str, Any]) -> WordFeaturizer:
    if state["char_vocab"] != CHAR_VOCAB:
        raise SavedModelError("the model was trained with another character vocabulary than "
                              "this dochar's; character ids would mean other characters")
    featurizer = WordFeaturizer(groups=state["groups"], max_chars=int(state["max_chars"]),
                                standardize=bool(state["standardize"]))
    # the stored keys are already normalised; set them as they were, not re-normalised
    featurizer.lexicons = {name: frozenset(keys) for name, keys in state["lexicons"].items()}
    if state["mean"] is not None:
        featurizer.mean_ = np.asarray(state["mean"], dtype=np.float64)
        featurizer.scale_ = np.asarray(state["scale"], dtype=np.float64)
    featurizer.fitted_ = True
    if featurizer.feature_names != list(state["feature_names"]):
        raise SavedModelError(f"the featurizer rebuilt from the model gives columns "
                              f"{featurizer.feature_names}, the model was trained on "
                              f"{state['feature_names']}")
    return featurizer


def _architecture(model_cfg: Mapping[str, Any], features_cfg: Mapping[str, Any],
                  featurizer: WordFeaturizer, n_labels: int, n_relations: int) -> dict[str, Any]:
    """The GNNStack arguments of a run (as :func:`dochar.models.fit.fit_gnn` builds it)."""
    char_cnn = dict(features_cfg["char_cnn"]) if featurizer.uses_char_cnn else None
    return {"in_dim": len(featurizer.feature_names), "num_classes": n_labels,
            "num_relations": n_relations, "layer": str(model_cfg["layer"]),
            "hidden_dim": int(model_cfg["hidden_dim"]), "depth": int(model_cfg["depth"]),
            "dropout": float(model_cfg["dropout"]), "norm": str(model_cfg["norm"]),
            "residual": bool(model_cfg["residual"]),
            "layer_options": dict(model_cfg.get("layer_options") or {}),
            "char_cnn": None if char_cnn is None else {
                **char_cnn, "kernel_sizes": list(char_cnn["kernel_sizes"])},
            **({"crop_cnn": dict(features_cfg["crop_cnn"])} if featurizer.uses_crop_cnn else {})}


def _build_gnn(architecture: Mapping[str, Any]) -> GNNStack:
    arguments = dict(architecture)
    char_cnn = arguments.pop("char_cnn")
    encoder = CharCNNEncoder(**char_cnn) if char_cnn else None
    crop_cnn = arguments.pop("crop_cnn", None)   # absent in models saved without one
    crops = ({"crop_encoder": CropCNNEncoder(**crop_cnn), "crop_dim": int(crop_cnn["out_dim"])}
             if crop_cnn else {})
    return GNNStack(**arguments, char_encoder=encoder,
                    char_dim=int(char_cnn["out_dim"]) if char_cnn else 0, **crops)


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def save_model(destination: str | Path, model: Any, config: Mapping[str, Any],
               featurizer: WordFeaturizer | None = None, *, name: str = "",
               labels: Sequence[str] | None = None) -> Path:
    """Write the unit for a fitted model and the resolved run config it was trained with.

    ``featurizer`` is the fitted one when the caller has it; otherwise it is rebuilt from the
    config, which is exact because a featurizer made from a config learns nothing at fit time.
    ``labels`` are the classes the model predicts (a task's tags; default: the data's labels).
    """
    destination = Path(destination)
    labels = [str(label) for label in (labels or config["data"]["labels"])]
    if featurizer is None:
        featurizer = WordFeaturizer.from_config(config["features"], config["data"]).fit([])
    builder = graphs.from_config(config["graph"])
    kind = "gnn" if isinstance(model, torch.nn.Module) else "baseline"
    task = config.get("task") or {}
    manifest: dict[str, Any] = {
        "format": FORMAT, "kind": kind, "task": str(task.get("name") or DEFAULT_TASK),
        "labels": labels, "name": name or str(config.get("run_name") or ""), "seed": config.get("seed"),
        "data": {"name": str(config["data"].get("name", "")), "labels": labels},
        "graph": dict(config["graph"]), "relations": list(builder.relations),
        "features": dict(config["features"]), "model": dict(config["model"]),
        "entity_ignore": list((config.get("evaluation") or {}).get("entity_ignore", ["other"])),
        "featurizer": featurizer_state(featurizer, int(config["features"]["hash_features"])),
        "libraries": library_versions(), "files": {},
    }
    destination.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{destination.name}-", dir=destination.parent))
    try:
        if kind == "gnn":
            manifest["architecture"] = _architecture(config["model"], config["features"],
                                                     featurizer, len(labels),
                                                     len(builder.relations))
            state = {k: v.detach().cpu() for k, v in model.state_dict().items()}
            _build_gnn(manifest["architecture"]).load_state_dict(state, strict=True)
            torch.save(state, staging / WEIGHTS)
            manifest["files"][WEIGHTS] = _sha256(staging / WEIGHTS)
        else:
            import skops.io

            skops.io.dump(model, staging / ESTIMATOR, compression=zipfile.ZIP_DEFLATED)
            manifest["files"][ESTIMATOR] = _sha256(staging / ESTIMATOR)
        (staging / MANIFEST).write_text(json.dumps(manifest, indent=2, default=str))
        _replace(staging, destination)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return destination


def _replace(staging: Path, destination: Path) -> None:
    """Rename the finished folder into place; an older unit is moved aside first, then removed."""
    old = None
    if destination.exists():
        old = destination.with_name(f".{destination.name}-old-{os.getpid()}")
        os.replace(destination, old)
    os.replace(staging, destination)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


@dataclass
class SavedModel:
    """A loaded unit: the model, the featurizer and graph builder it was trained with."""

    folder: Path
    manifest: dict[str, Any]
    model: Any
    featurizer: WordFeaturizer
    builder: graphs.GraphBuilder

    @property
    def labels(self) -> list[str]:
        return list(self.manifest["labels"])

    @property
    def task(self) -> str:
        return str(self.manifest["task"])

    @property
    def kind(self) -> str:
        return str(self.manifest["kind"])

    def expect(self, *, labels: Sequence[str] | None = None, task: str | None = None) -> None:
        """Refuse a config whose task or label set differs from the one the model learned."""
        if task is not None and task != self.task:
            raise SavedModelError(f"{self.folder}: the model was trained for task {self.task!r}, "
                                  f"the config asks for task {task!r}")
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
        """Per-page (words, labels) probabilities, graphs and features built as in training."""
        page_set = PageSet.build(pages, self.builder)
        if self.kind == "gnn":
            # to_graphs wants targets; prediction has none, so pages get placeholders unread here
            placeholder = [dataclasses.replace(page, labels=[self.labels[0]] * len(page))
                           for page in page_set.pages]
            data = to_graphs(PageSet(placeholder, page_set.edges, page_set.relations),
                             self.featurizer, {self.labels[0]: 0})
            return predict_proba(self.model, data)
        options = dict(hash_features=int(self.manifest["featurizer"]["hash_features"]),
                       neighbour_features=bool(self.manifest["model"].get("neighbour_features")))
        seen = self.model.predict_proba(to_matrix(page_set, self.featurizer, **options))
        full = np.zeros((len(seen), len(self.labels)))
        full[:, self.model.classes_] = seen   # classes absent from training keep probability 0
        return np.split(full, np.cumsum([len(page) for page in pages])[:-1])

    def label_words(self, table: pd.DataFrame) -> pd.DataFrame:
        """One row per word of a validated word table: its box, the best three labels and
        their probabilities (``predicted``/``probability`` is the first)."""
        pages = list(iter_pages(table))
        if not pages:
            raise SavedModelError("no words to label")
        frames = []
        for page, proba in zip(pages, self.predict_proba(pages)):
            best = np.argsort(-proba, axis=1, kind="stable")[:, :TOP]
            frame = pd.DataFrame({
                "doc_id": page.doc_id, "page": page.page, "word_id": page.word_ids,
                "text": page.texts, "x0": page.boxes[:, 0], "y0": page.boxes[:, 1],
                "x1": page.boxes[:, 2], "y1": page.boxes[:, 3]})
            if page.labels is not None:
                frame["label"] = page.labels
            for rank in range(best.shape[1]):
                name, chance = (("predicted", "probability") if rank == 0 else
                                (f"top{rank + 1}", f"top{rank + 1}_probability"))
                frame[name] = [self.labels[i] for i in best[:, rank]]
                frame[chance] = np.take_along_axis(proba, best[:, rank:rank + 1], axis=1)[:, 0]
            frames.append(frame)
        return pd.concat(frames, ignore_index=True)


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
    expected = WEIGHTS if manifest["kind"] == "gnn" else ESTIMATOR
    files = manifest.get("files") or {}
    if set(files) != {expected}:
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


def load_model(path: str | Path) -> SavedModel:
    """Load a unit safely (see the module docstring) and check that its parts agree."""
    folder = find_unit(path)
    manifest = _read_manifest(folder)
    _check_files(folder, manifest)
    labels = list(manifest["labels"])
    featurizer = featurizer_from_state(manifest["featurizer"])
    builder = graphs.from_config(manifest["graph"])
    if list(builder.relations) != list(manifest["relations"]):
        raise SavedModelError(f"{folder}: this dochar's {manifest['graph']['name']} builder makes "
                              f"relations {list(builder.relations)}, the model was trained on "
                              f"{manifest['relations']}")
    if manifest["kind"] == "gnn":
        architecture = manifest["architecture"]
        if architecture["num_classes"] != len(labels):
            raise SavedModelError(f"{folder}: the network has {architecture['num_classes']} "
                                  f"outputs for {len(labels)} labels")
        model = _build_gnn(architecture)
        try:
            model.load_state_dict(_load_weights(folder / WEIGHTS), strict=True)
        except RuntimeError as error:
            raise SavedModelError(f"{folder / WEIGHTS}: does not fit the architecture in "
                                  f"{MANIFEST}: {str(error).splitlines()[0]}") from None
        model.eval()
    else:
        model = _load_estimator(folder / ESTIMATOR)
        classes = np.asarray(getattr(model, "classes_", []))
        if classes.size == 0 or classes.min() < 0 or classes.max() >= len(labels):
            raise SavedModelError(f"{folder / ESTIMATOR}: estimator classes {classes.tolist()} "
                                  f"do not index the {len(labels)} labels")
    return SavedModel(folder, manifest, model, featurizer, builder)
