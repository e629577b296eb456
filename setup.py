"""Packaging beyond pyproject.toml: the top-level configs/ folder ships inside the package.

In a wheel the Hydra config groups live at ``dochar/configs`` (``dochar/config.py`` looks there
first, then at the checkout's ``configs/``); the repository keeps them at the top, where
``configs/graph/knn.yaml`` sits beside ``dochar/graphs/knn.py`` for the reader.
"""

from setuptools import find_namespace_packages, find_packages, setup

CONFIGS = ["dochar.configs",
           *(f"dochar.configs.{group}" for group in find_namespace_packages(where="configs"))]

setup(packages=[*find_packages(include=["dochar*", "data_synth*"]), *CONFIGS],
      package_dir={"dochar.configs": "configs"},
      package_data={name: ["*.yaml"] for name in CONFIGS})
