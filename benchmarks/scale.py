"""Scale: training cost against the number of synthetic documents, and its peak memory.

Each size runs in a fresh process (``python -m benchmarks.scale --documents N``), so its peak
resident memory is its own. Training cost = building the graphs, the features and one epoch of
the default R-GCN (``model=relational``, sector graph, all features) over every document: the
stages whose cost grows with the data. The exponent is the least-squares slope of log time
against log documents.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time

import numpy as np
from omegaconf import OmegaConf

import data_synth
from benchmarks.inputs import compose_config
from benchmarks.report import Figure
from dochar.models.inputs import PageSet, to_graphs
from dochar.data.word_table import iter_pages, validate_word_table
from dochar import graphs as graph_builders
from dochar.features import CharCNNEncoder, WordFeaturizer
from dochar.models.gnn import GNNStack
from dochar.models.objectives import NodeClasses
from dochar.models.training import seed_everything, train


def measure(documents: int) -> dict[str, float]:
    cfg = compose_config(["train.threads=1", "train.progress=false"])
    seed_everything(0, 1)
    table = validate_word_table(data_synth.generate(documents, seed=0), data_synth.LABELS).table
    pages = list(iter_pages(table))
    started = time.process_time()
    page_set = PageSet.build(pages, graph_builders.from_config(cfg.graph))
    featurizer = WordFeaturizer(groups=list(cfg.features.groups),
                                lexicons=OmegaConf.to_container(cfg.data.lexicons),
                                max_chars=int(cfg.features.max_chars)).fit(pages)
    labels = list(cfg.data.labels)
    graphs = to_graphs(page_set, featurizer, {label: i for i, label in enumerate(labels)})
    encoder = CharCNNEncoder(**OmegaConf.to_container(cfg.features.char_cnn))
    model = GNNStack(len(featurizer.feature_names), len(labels), len(page_set.relations),
                     layer=cfg.model.layer, hidden_dim=cfg.model.hidden_dim,
                     depth=cfg.model.depth, dropout=cfg.model.dropout, char_encoder=encoder,
                     char_dim=int(cfg.features.char_cnn.out_dim))
    one_epoch = {**OmegaConf.to_container(cfg.train), "max_epochs": 1}
    train(model, graphs, [], NodeClasses(len(labels)), one_epoch, 0)
    return {"documents": documents, "words": len(table), "seconds": time.process_time() - started,
            "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def scale_figures(sizes: list[int], judged: bool) -> list[Figure]:
    """Sizes in fresh processes; unjudged (smoke) runs stay in this one, memory then being the
    whole process's."""
    runs = []
    for documents in sizes:
        if not judged:
            runs.append(measure(documents))
            continue
        out = subprocess.run([sys.executable, "-m", "benchmarks.scale", "--documents",
                              str(documents)], check=True, capture_output=True, text=True)
        runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    docs = np.array([r["documents"] for r in runs], float)
    seconds = np.array([r["seconds"] for r in runs])
    exponent = float(np.polyfit(np.log(docs), np.log(seconds), 1)[0])
    largest = runs[-1]
    timeline = ", ".join(f"{r['documents']:,}: {r['seconds']:.1f} s" for r in runs)
    return [
        Figure("training cost against documents: fitted exponent", f"{exponent:.2f}",
               timeline, comparison="<=", threshold=1.1, judged=judged, number=exponent),
        Figure(f"peak memory training {largest['documents']:,} documents "
               f"({largest['words']:,} words), MB", f"{largest['peak_mb']:.0f} MB",
               comparison="<=", threshold=4096, judged=judged, number=largest["peak_mb"]),
    ]


if __name__ == "__main__":
    parser = argparse.ArgumentParser(prog="python -m benchmarks.scale")
    parser.add_argument("--documents", type=int, required=True)
    print(json.dumps(measure(parser.parse_args().documents)))
