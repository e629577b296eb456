"""The committed baseline: what the reference experiment scored, and under which conditions.

One YAML file per gate (``reports/baseline/<name>.yaml``) with sorted keys and one metric per
block, so a baseline update reads as a small diff in review. Values are written at full float
precision: a rerun on the same machine, libraries and thread count reproduces them bit for bit;
so the file also records the libraries and the machine (CPU model, the vector instructions
torch's kernels use), and the config its thread count (``train.threads``).
"""

from __future__ import annotations

import datetime as dt
import platform
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from dochar import __version__
from dochar.gate.rules import CLASS_PREFIX, DEFAULT_HEADLINE, GateConfigError, Score
from dochar.metrics.intervals import bootstrap_scores
from dochar.metrics.scorers import WordF1
from dochar.metrics.words import f1_from_confusion
from dochar.runs import tracking
from dochar.runs.bundle import RunBundle

FORMAT = 1
END_LINE = "# end of baseline"   # last line: a file cut short anywhere lacks it
LIBRARIES = ("torch", "torch-geometric", "scikit-learn", "numpy")   # distribution names
HEADER = ("# dochar gate baseline: written by `dochar gate --update`, read by `dochar gate`.\n"
          "# Review changes to this file like code: each one moves the bar a model must clear.\n")


class ClassF1(WordF1):
    """Every class's word F1 at once from confusion counts (shape (..., L)), for resampling."""

    def from_counts(self, counts):
        return f1_from_confusion(counts)


def class_intervals(bundle: RunBundle, *, resamples: int, confidence: float,
                    seed: int) -> dict[str, tuple[float, float]]:
    """Percentile bootstrap over test documents of each class's F1 (as the headline intervals)."""
    scores = bootstrap_scores(bundle.predictions, ClassF1(bundle.labels), n_resamples=resamples,
                              seed=seed)
    tail = 100 * (1 - confidence) / 2
    low, high = np.percentile(scores, [tail, 100 - tail], axis=0)
    return {label: (float(lo), float(hi)) for label, lo, hi in zip(bundle.labels, low, high)}


def run_scores(bundle: RunBundle,
               headline: Sequence[str] = DEFAULT_HEADLINE) -> dict[str, Score]:
    """The gated scores of a run: the ``headline`` values with their intervals, and every class
    with test support, with a per-class interval drawn the way the run drew its headline ones."""
    metrics = bundle.metrics
    scores = {name: Score(metrics[name], metrics.get(f"{name}_low"), metrics.get(f"{name}_high"))
              for name in headline if name in metrics}
    evaluation = bundle.config.get("evaluation", {})
    intervals = class_intervals(bundle, resamples=int(evaluation.get("bootstrap_resamples", 1000)),
                                confidence=float(evaluation.get("confidence", 0.95)),
                                seed=int(bundle.config.get("seed", 0)))
    for label in bundle.labels:
        support = metrics.get(f"support/{label}", 0.0)
        if f"{CLASS_PREFIX}{label}" in metrics and support > 0:
            low, high = intervals[label]
            scores[f"{CLASS_PREFIX}{label}"] = Score(metrics[f"{CLASS_PREFIX}{label}"], low, high,
                                                     support)
    return scores


def library_versions() -> dict[str, str]:
    """Versions of the libraries whose arithmetic the scores depend on."""
    return tracking.library_versions(LIBRARIES)


def cpu_model() -> str:
    """The CPU's model name (Linux /proc/cpuinfo, else what the platform says)."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def machine_info() -> dict[str, str]:
    """What besides code, data, libraries and thread count decides a GNN's last bits: the CPU
    and the vector instructions torch picked for it (another CPU sums in another order)."""
    import torch

    return {"cpu": cpu_model(), "architecture": platform.machine(),
            "cpu_instructions": str(torch.backends.cpu.get_cpu_capability()),
            "python": platform.python_version()}


def machine_differences(old: Mapping[str, str], new: Mapping[str, str]) -> list[str]:
    """``cpu A -> B`` for each machine property that differs (none if unrecorded)."""
    return version_differences(old, new)


def version_differences(old: Mapping[str, str], new: Mapping[str, str]) -> list[str]:
    """``torch 2.13.0 -> 2.14.0`` for each library whose version moved (none if unrecorded)."""
    if not old:
        return []
    return [f"{name} {old.get(name, '(absent)')} -> {new.get(name, '(absent)')}"
            for name in sorted(set(old) | set(new)) if old.get(name) != new.get(name)]


def config_differences(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[str]:
    keys = sorted(set(old) | set(new))
    missing = object()
    return [f"{k}: {old.get(k, '(absent)')!r} -> {new.get(k, '(absent)')!r}" for k in keys
            if old.get(k, missing) != new.get(k, missing)]


@dataclass
class Baseline:
    name: str
    scores: dict[str, Score]
    data_fingerprint: str
    experiment_config: dict[str, Any] = field(default_factory=dict)
    overrides: list[str] = field(default_factory=list)
    source: str = ""
    git_commit: str = "unknown"
    git_dirty: bool | None = None      # True: uncommitted changes when the baseline was written
    dochar_version: str = __version__
    libraries: dict[str, str] = field(default_factory=dict)
    machine: dict[str, str] = field(default_factory=dict)
    created: str = ""

    @classmethod
    def from_run(cls, name: str, bundle: RunBundle, *, overrides: Sequence[str], source: str,
                 git_commit: str, git_dirty: bool | None = None,
                 headline: Sequence[str] = DEFAULT_HEADLINE) -> Baseline:
        return cls(name=name, scores=run_scores(bundle, headline),
                   data_fingerprint=str(bundle.tags.get("data_fingerprint", "")),
                   experiment_config=tracking.computed_config(bundle.config),
                   overrides=list(overrides),
                   source=source, git_commit=git_commit, git_dirty=git_dirty,
                   libraries=library_versions(), machine=machine_info(),
                   created=dt.datetime.now(dt.timezone.utc).replace(microsecond=0).isoformat())

    def to_dict(self) -> dict[str, Any]:
        return {"format": FORMAT, "name": self.name, "created": self.created,
                "git_commit": self.git_commit, "git_dirty": self.git_dirty,
                "dochar_version": self.dochar_version, "libraries": dict(self.libraries),
                "machine": dict(self.machine),
                "source": self.source, "data_fingerprint": self.data_fingerprint,
                "overrides": list(self.overrides),
                "metrics": {m: s.to_dict() for m, s in self.scores.items()},
                "experiment_config": dict(self.experiment_config)}

    def write(self, path: str | Path) -> Path:
        from dochar.data.files import write_text_atomic

        text = yaml.safe_dump(self.to_dict(), sort_keys=True, allow_unicode=True,
                              default_flow_style=None, width=100)
        return write_text_atomic(path, HEADER + text + END_LINE + "\n")

    @classmethod
    def read(cls, path: str | Path) -> Baseline:
        path = Path(path)
        if not path.is_file():
            raise FileNotFoundError(f"no baseline at {path}; create it with `dochar gate --update`")
        try:
            text = path.read_text(encoding="utf-8")
            data = yaml.safe_load(text)
        except (yaml.YAMLError, UnicodeDecodeError) as error:
            raise GateConfigError(f"{path}: not valid YAML ({error})") from None
        if not isinstance(data, Mapping) or not isinstance(data.get("metrics"), Mapping):
            raise GateConfigError(f"{path}: not a dochar gate baseline (no 'metrics' mapping)")
        if "libraries" in data and text.rstrip().splitlines()[-1] != END_LINE:
            raise GateConfigError(f"{path}: cut short (its last line is not {END_LINE!r}); "
                                  f"restore it from version control or rerun `dochar gate "
                                  f"--update`")
        if data.get("format") != FORMAT:
            raise GateConfigError(f"{path}: baseline format {data.get('format')!r}, this dochar "
                                  f"reads format {FORMAT}")
        scores = {str(m): Score.from_dict(s, f"{path}: metrics.{m}")
                  for m, s in data["metrics"].items()}
        return cls(name=str(data.get("name", path.stem)), scores=scores,
                   data_fingerprint=str(data.get("data_fingerprint", "")),
                   experiment_config=dict(data.get("experiment_config") or {}),
                   overrides=[str(o) for o in data.get("overrides") or []],
                   source=str(data.get("source", "")), git_commit=str(data.get("git_commit", "")),
                   git_dirty=data.get("git_dirty"),
                   dochar_version=str(data.get("dochar_version", "")),
                   libraries={str(k): str(v) for k, v in (data.get("libraries") or {}).items()},
                   machine={str(k): str(v) for k, v in (data.get("machine") or {}).items()},
                   created=str(data.get("created", "")))


def describe_update(old: Baseline | None, new: Baseline) -> list[str]:
    """What an update changes, one line each: scores first, then the run's conditions."""
    if old is None:
        return [f"new baseline with {len(new.scores)} metrics"]
    lines = []
    for metric in sorted(set(old.scores) | set(new.scores)):
        before, after = old.scores.get(metric), new.scores.get(metric)
        if before is None:
            lines.append(f"{metric}: added ({after.value:.4f})")
        elif after is None:
            lines.append(f"{metric}: removed (was {before.value:.4f})")
        elif before != after:
            lines.append(f"{metric}: {before.value:.4f} -> {after.value:.4f} "
                         f"({after.value - before.value:+.4f})")
    if not lines:
        lines.append("scores unchanged")
    if old.data_fingerprint != new.data_fingerprint:
        lines.append(f"data fingerprint: {old.data_fingerprint} -> {new.data_fingerprint}")
    if old.overrides != new.overrides:
        lines.append(f"overrides: {old.overrides} -> {new.overrides}")
    lines += [f"config {line}" for line in config_differences(old.experiment_config,
                                                              new.experiment_config)]
    if old.git_commit != new.git_commit:
        lines.append(f"git commit: {old.git_commit[:12]} -> {new.git_commit[:12]}")
    if new.git_dirty:
        lines.append("warning: the working tree has uncommitted changes (git_dirty: true)")
    lines += [f"library {line}" for line in version_differences(old.libraries, new.libraries)]
    lines += [f"machine {line}" for line in machine_differences(old.machine, new.machine)]
    if new.machine and not old.machine:
        lines.append("machine recorded: " + "; ".join(f"{key} {value}" for key, value in
                                                      sorted(new.machine.items())))
    return lines
