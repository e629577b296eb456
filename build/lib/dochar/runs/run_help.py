"""`dochar run --help` (and `curve`, `graph-stats`): what the command does, the config groups
with the choices a user can name, and an example; read from the config folder itself, so a new
choice appears here the moment its YAML file exists. Internal schemas (``base_*``) are left
out: they are what every choice starts from, not choices."""

from __future__ import annotations

import textwrap
from pathlib import Path

from dochar.config import CONFIG_DIR, INTERNAL_SCHEMA


WIDTH = 100
OTHER_COMMANDS = {"gate"}   # groups read by another command (`dochar gate`), not by a run
WHAT = {
    "run": "Train one system on one split of the data, score it on the test documents and record "
           "the run (run folder under outputs/, MLflow store). With -m and comma-separated "
           "choices, a sweep: one run per combination, then a ranked table.",
    "curve": "A learning curve: the same run on nested training subsets (curve.sizes), scored "
             "against the number of training documents.",
    "graph-stats": "Graph diagnostics for a data and graph choice (edges per word, reach, "
                   "candidate-link recall); nothing is trained.",
}
EXAMPLES = {
    "run": ["dochar run model=random_forest split=seen_and_unseen_layouts",
            "dochar run -m model=relational,random_forest graph=knn,sector seed=0,1,2"],
    "curve": ["dochar curve model=relational curve.sizes=[10,50,null]"],
    "graph-stats": ["dochar graph-stats graph=knn data=funsd"],
}


def choices(config_dir: Path = CONFIG_DIR) -> dict[str, list[str]]:
    """Config group -> the names a user may choose (its YAML files, internal schemas left out)."""
    groups = {}
    for folder in sorted(p for p in config_dir.iterdir()
                         if p.is_dir() and p.name not in OTHER_COMMANDS):
        names = sorted(p.stem for p in folder.glob("*.yaml")
                       if not p.stem.startswith(INTERNAL_SCHEMA) and p.stem != "common")
        if names:
            groups[folder.name] = names
    return groups


def defaults(config_dir: Path = CONFIG_DIR) -> dict[str, str]:
    """Each group's default choice, from the top config's defaults list."""
    import yaml

    listed = yaml.safe_load((config_dir / "config.yaml").read_text()).get("defaults", [])
    return {group: str(name) for item in listed if isinstance(item, dict)
            for group, name in item.items()}


def help_text(command: str, config_dir: Path = CONFIG_DIR) -> str:
    """The help page of a config-driven command."""
    chosen = defaults(config_dir)
    lines = [f"usage: dochar {command} [-m] [GROUP=CHOICE | KEY=VALUE ...]", "",
             textwrap.fill(WHAT[command], WIDTH), "",
             "config groups (GROUP=CHOICE; * marks the default; +GROUP adds a group that is off "
             "by default):"]
    for group, names in choices(config_dir).items():
        marked = [f"{name}*" if chosen.get(group) == name else name for name in names]
        label = group if group in chosen else f"+{group}"
        lines.append(textwrap.fill(", ".join(marked), WIDTH, initial_indent=f"  {label:<12}",
                                   subsequent_indent=" " * 14))
    lines += ["", "any key can be set too: KEY=VALUE, e.g. seed=1 data.documents=60 "
              "train.max_epochs=20", "  -m, --multirun   run every combination of "
              "comma-separated choices (a sweep)", "  --cfg job       print the composed "
              "config and stop", "", "examples:", *(f"  {line}" for line in EXAMPLES[command])]
    return "\n".join(lines) + "\n"
