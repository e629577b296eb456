"""Where the Hydra config groups live, and the schema every group's YAML starts from.

``configs/`` sits at the top of the repository; a wheel carries the same folder inside the package
as ``dochar/configs`` (mapped by setup.py), which is looked for first. ``DOCHAR_CONFIG_DIR`` points
elsewhere, e.g. to a team's own copy. Paths *inside* configs (data files, the gate's
``reports/baseline/reference.yaml``) stay relative to the working directory.

Each config group has a dataclass schema registered in Hydra's ConfigStore (``base_<name>`` in
the group); every YAML file lists it first in its defaults. Composition then rejects a key the
schema does not name and a value of the wrong type before any data is loaded, and
``config_error_message`` turns Hydra's and OmegaConf's errors into one line naming the key, the
value and what was expected. Open-ended options of one builder, layer or estimator stay a
``Dict[str, Any]`` (``graph.options``, ``model.layer_options``, ``model.options``): the module
that reads them checks them, and :func:`dochar.runs.checks.check_config` has it do so before any
data loads.
"""

from __future__ import annotations

import dataclasses
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Dict, List, Optional

from omegaconf import MISSING

from dochar.errors import did_you_mean

_PACKAGED = Path(__file__).resolve().parent / "configs"
_CHECKOUT = Path(__file__).resolve().parents[1] / "configs"

CONFIG_DIR = Path(os.environ.get("DOCHAR_CONFIG_DIR")
                  or (_PACKAGED if _PACKAGED.is_dir() else _CHECKOUT)).resolve()

REPAIRS = (None, "clip")   # data.repair: nothing, or clip boxes within data.clip_tolerance


# --- data: one schema per source kind -------------------------------------------------------

@dataclass
class RecordSchema:
    """``data.record``: the record's shape (dochar.records.shape), checked by check_config;
    naming no header field and no item column means the data has no records."""

    header_fields: List[str] = field(default_factory=list)
    item_columns: List[str] = field(default_factory=list)
    items_name: str = "items"
    date_fields: List[str] = field(default_factory=list)
    amount_fields: List[str] = field(default_factory=list)
    single_fields: List[str] = field(default_factory=list)  # one value each: the likeliest
    row_anchor: str = ""                  # the item column that opens a line item ("": layout)
    once_per_item: List[str] = field(default_factory=list)  # a second value opens an item
    required_columns: List[str] = field(default_factory=list)  # an item lacking one: left out
    sub_item_columns: Dict[str, str] = field(default_factory=dict)  # sub-item -> item column
    line_arithmetic: Dict[str, str] = field(default_factory=dict)  # count, unit_price, amount


@dataclass
class DataSchema:
    """What every source shares: the label set, lexicons, the word-table repair, and the shape
    of the records its documents carry (none: no record scores)."""

    source: str = MISSING
    name: str = MISSING
    labels: List[str] = MISSING
    lexicons: Dict[str, List[str]] = field(default_factory=dict)
    table_labels: List[str] = field(default_factory=list)   # classes of table cells (graph-stats)
    repair: Optional[str] = None          # null | clip (boxes a little past the page edge)
    clip_tolerance: float = 0.01          # clip: fraction of the page width/height allowed
    record: RecordSchema = field(default_factory=RecordSchema)   # none named: no records


@dataclass
class NoiseSchema:
    box_jitter: float = 0.0
    split_rate: float = 0.0
    merge_rate: float = 0.0
    char_confusion_rate: float = 0.0


@dataclass
class SynthDataSchema(DataSchema):
    source: str = "synth"
    documents: int = 300
    generator_seed: int = 0
    noise: NoiseSchema = field(default_factory=NoiseSchema)


@dataclass
class FormJsonDataSchema(DataSchema):
    source: str = "form_json"
    path: str = MISSING
    empty_text: str = "drop"


@dataclass
class ReceiptJsonDataSchema(DataSchema):
    """Receipt JSON (CORD's layout, :mod:`dochar.data.importers.cord`)."""

    source: str = "receipt_json"
    path: str = MISSING
    label_map: str = "fine"               # fine: the categories | coarse: the mapped names


@dataclass
class WordTableDataSchema(DataSchema):
    source: str = "word_table"
    path: str = MISSING
    links_path: Optional[str] = None      # the links table beside it (key -> value links)


@dataclass
class LabelTransferSchema:
    min_iou: float = 0.5
    matching: str = "hungarian"
    unmatched_label: Optional[str] = None


@dataclass
class ImportedDataSchema(DataSchema):
    """PDF, hOCR, ALTO and page images, read at run time; ``path`` is a file, folder or list."""

    path: Any = MISSING
    labels_from: Optional[str] = None
    label_transfer: LabelTransferSchema = field(default_factory=LabelTransferSchema)


@dataclass
class PdfDataSchema(ImportedDataSchema):
    source: str = "pdf"
    ocr: bool = False


# --- the other groups -----------------------------------------------------------------------

@dataclass
class GraphSchema:
    name: str = MISSING
    options: Dict[str, Any] = field(default_factory=dict)
    self_loops: bool = False
    reverse_edges: bool = False
    prune_gutters: bool = False


@dataclass
class EdgesSchema:
    """Continuous edge attributes: groups of ``dochar.graphs.transforms.EDGE_FEATURE_GROUPS``."""

    name: str = MISSING
    groups: List[str] = field(default_factory=list)


@dataclass
class CharCnnSchema:
    embedding_dim: int = 16
    channels: int = 32
    kernel_sizes: List[int] = field(default_factory=lambda: [2, 3, 4])
    out_dim: int = 32


@dataclass
class CropCnnSchema:
    channels: int = 8
    out_dim: int = 16


@dataclass
class FeaturesSchema:
    groups: List[str] = MISSING
    max_chars: int = 16
    char_cnn: CharCnnSchema = field(default_factory=CharCnnSchema)
    crop_cnn: CropCnnSchema = field(default_factory=CropCnnSchema)
    hash_features: int = 256
    line_context: bool = False
    pool_words: List[str] = field(default_factory=list)
    embedding_cache: Optional[str] = None
    image_cache: Optional[str] = None


@dataclass
class GnnModelSchema:
    kind: str = "gnn"
    layer: str = MISSING
    hidden_dim: int = 64
    depth: int = 2
    dropout: float = 0.2
    norm: Optional[str] = "batch"
    residual: bool = True
    members: int = 1
    layer_options: Dict[str, Any] = field(default_factory=dict)


@dataclass
class BaselineModelSchema:
    kind: str = "baseline"
    estimator: str = MISSING
    neighbour_features: bool = False
    options: Dict[str, Any] = field(default_factory=dict)


@dataclass
class TemplateModelSchema:
    kind: str = "template"
    estimator: str = MISSING
    options: Dict[str, Any] = field(default_factory=dict)


@dataclass
class SignatureSchema:
    grid: List[int] = field(default_factory=lambda: [12, 12])
    keywords: int = 256
    text_weight: float = 0.5


@dataclass
class SplitSchema:
    protocol: str = MISSING
    test_size: float = 0.25
    val_size: float = 0.15
    n_folds: int = 5
    fold: int = 0
    train_documents: Optional[int] = None
    infer_layouts: bool = False
    signature: SignatureSchema = field(default_factory=SignatureSchema)
    family_threshold: Optional[float] = 0.3
    leakage_threshold: Optional[float] = 0.25
    pages_per_layout: Optional[int] = None
    seen_test_fraction: Optional[float] = None


@dataclass
class TrainSchema:
    learning_rate: float = 0.003
    weight_decay: float = 0.0001
    schedule: str = "constant"
    warmup_epochs: int = 0
    max_epochs: int = 120
    patience: int = 20
    pages_per_batch: int = 8
    class_weighting: str = "balanced"
    label_smoothing: float = 0.0
    threads: int = 1
    progress: bool = True
    retrain_on_val: bool = False
    checkpoint_dir: Optional[str] = "outputs/checkpoints"


@dataclass
class TrackingSchema:
    enabled: bool = True
    experiment: str = "my-runs"
    uri: Optional[str] = None
    skip_finished: bool = True


@dataclass
class EvaluationSchema:
    bootstrap_resamples: int = 1000
    confidence: float = 0.95
    entity_ignore: List[str] = field(default_factory=lambda: ["other"])
    calibration_bins: int = 15


@dataclass
class CurveSchema:
    sizes: List[Optional[int]] = field(default_factory=lambda: [10, 25, 50, 100, None])
    seeds: Optional[List[int]] = None
    axis: str = "train_documents"


@dataclass
class DocharSchema:
    """The composed run config. Groups are filled by their own schemas (``Any`` here, so a
    group's variant keeps its own type); ``task`` is a group another module may add."""

    data: Any = MISSING
    graph: Any = MISSING
    edges: Any = None          # continuous edge attributes; absent in configs older than them
    features: Any = MISSING
    model: Any = MISSING
    split: Any = MISSING
    train: Any = MISSING
    task: Any = MISSING        # task options are checked by dochar.tasks.from_config
    tuning: Any = None         # +tuning=<system>: Optuna budget and search space
    seed: int = 0
    run_name: Optional[str] = None
    strict: bool = False
    tracking: TrackingSchema = field(default_factory=TrackingSchema)
    evaluation: EvaluationSchema = field(default_factory=EvaluationSchema)
    curve: CurveSchema = field(default_factory=CurveSchema)
    overlay_pages: int = 3


SCHEMAS: dict[tuple[str | None, str], type] = {
    (None, "base_config"): DocharSchema,
    ("data", "base_synth"): SynthDataSchema,
    ("data", "base_form_json"): FormJsonDataSchema,
    ("data", "base_receipt_json"): ReceiptJsonDataSchema,
    ("data", "base_word_table"): WordTableDataSchema,
    ("data", "base_imported"): ImportedDataSchema,
    ("data", "base_pdf"): PdfDataSchema,
    ("graph", "base_graph"): GraphSchema,
    ("edges", "base_edges"): EdgesSchema,
    ("features", "base_features"): FeaturesSchema,
    ("model", "base_gnn"): GnnModelSchema,
    ("model", "base_baseline"): BaselineModelSchema,
    ("model", "base_template"): TemplateModelSchema,
    ("split", "base_split"): SplitSchema,
    ("train", "base_train"): TrainSchema,
}


def register_schemas() -> None:
    """Put every schema in Hydra's ConfigStore (idempotent; done when this module loads)."""
    from hydra.core.config_store import ConfigStore

    store = ConfigStore.instance()
    for (group, name), schema in SCHEMAS.items():
        store.store(group=group, name=name, node=schema)


INTERNAL_SCHEMA = "base_"   # the schemas registered in each group: not choices for a user
_UNKNOWN_CHOICE = re.compile(r"Could not find '([^'/]+)/([^']+)'.*Available options in "
                             r"'[^']+': (.*)$")


def config_error_message(error: BaseException) -> str:
    """One line for a Hydra or OmegaConf config error: the key, the value, what was expected."""
    from omegaconf.errors import OmegaConfBaseException

    cause: BaseException | None = error
    while cause is not None and not isinstance(cause, OmegaConfBaseException):
        cause = cause.__cause__ or cause.__context__
    if cause is None:
        text = " ".join(str(error).split()).split(" Config search path:")[0]
        choice = _UNKNOWN_CHOICE.search(text)
        if choice is None:
            return text
        group, name, listed = choice.groups()
        options = [o for o in listed.split() if not o.startswith(INTERNAL_SCHEMA)]
        return (f"config {group}={name}: no such choice{did_you_mean(name, options)}; "
                f"{group} choices: {', '.join(options)}")
    key = getattr(cause, "full_key", None)
    value = getattr(cause, "value", None)
    message = str(getattr(cause, "msg", None) or cause).strip().splitlines()[0]
    where = f"config key {key}" if key else "config"
    if value is not None and key:
        where += f"={value!r}"
    schema = getattr(cause, "object_type", None)
    if key and dataclasses.is_dataclass(schema) and " not in " in message:
        # an unknown key: name the keys of its group, not the schema class behind them
        group, _, name = key.rpartition(".")
        names = [f.name for f in dataclasses.fields(schema)]
        close = did_you_mean(name, names).replace("did you mean ",
                                                  f"did you mean {group + '.' if group else ''}")
        return (f"{where}: unknown key{close}; {group or 'the top level'} takes "
                f"{', '.join(sorted(names))}")
    return f"{where}: {message}"


def check_schema(cfg: Any) -> None:
    """What composition lets through: keys forced in with ``+key=`` that no schema names, a
    model kind that does not fit its model file, an unknown ``data.repair``. Raises DocharError
    naming the key."""
    from omegaconf import DictConfig, OmegaConf

    from dochar.errors import DocharError

    def walk(node: Any, prefix: str) -> None:
        if not isinstance(node, DictConfig):
            return
        schema = OmegaConf.get_type(node)
        fields = ({f.name: f for f in dataclasses.fields(schema)}
                  if schema is not None and dataclasses.is_dataclass(schema) else None)
        for key in node.keys():
            name = f"{prefix}{key}"
            if fields is not None and key not in fields:
                group = prefix.rstrip(".") or "the top level"
                close = did_you_mean(str(key), fields).replace("mean ", f"mean {prefix}")
                raise DocharError(f"config key {name}: unknown{close}; {group} takes "
                                  f"{', '.join(sorted(fields))}")
            if fields is None or fields[key].type not in ("Dict[str, Any]", "Any"):
                walk(node._get_node(key), f"{name}.")

    for group in ("data", "graph", "features", "model", "split", "train", "tracking",
                  "evaluation", "curve"):
        if group not in cfg:
            raise DocharError(f"config group {group!r} is missing from the composed config")
        walk(cfg._get_node(group), f"{group}.")
    if cfg.get("edges") is not None:
        walk(cfg._get_node("edges"), "edges.")
    unknown = set(cfg.keys()) - {f.name for f in dataclasses.fields(DocharSchema)}
    if unknown:
        raise DocharError(f"config key(s) {sorted(unknown)}: unknown at the top level")
    model_kind = {GnnModelSchema: "gnn", BaselineModelSchema: "baseline",
                  TemplateModelSchema: "template"}.get(
        OmegaConf.get_type(cfg.model))
    if model_kind and cfg.model.kind != model_kind:
        raise DocharError(f"config key model.kind={cfg.model.kind!r}: this model file is a "
                          f"{model_kind!r} model; pick a {cfg.model.kind} model with model=NAME")
    if cfg.data.get("repair") not in REPAIRS:
        raise DocharError(f"config key data.repair={cfg.data.repair!r}: expected null or 'clip'")
    if not 0 <= float(cfg.data.get("clip_tolerance", 0.0)) <= 0.1:
        raise DocharError(f"config key data.clip_tolerance={cfg.data.clip_tolerance!r}: "
                          f"expected a fraction of the page between 0 and 0.1")


register_schemas()
