"""A non-editable install works: the wheel carries every package and the config groups, and the
installed ``dochar`` runs an experiment and the gate from a folder outside the repository.

The fresh venv gets the wheel with ``--no-deps`` and borrows its dependencies (torch, MLflow...)
from the venv running the tests: a ``.pth`` file in its site-packages names that venv's
site-packages. Python adds a ``.pth`` line to ``sys.path`` *after* the venv's own site-packages
and does not run the ``.pth`` files of the added folder, so the editable dochar installed there
stays inactive and ``import dochar`` finds the wheel's copy (checked below).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

from tests.helpers import REPO


def sh(*args: str | Path, cwd: Path, env: dict | None = None) -> subprocess.CompletedProcess:
    result = subprocess.run([str(a) for a in args], cwd=cwd, env=env, capture_output=True,
                            text=True, timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return result


SOURCES = ("pyproject.toml", "setup.py", "MANIFEST.in", "README.md", "dochar", "data_synth",
           "configs")
# without the repository on the path: the installed copy must be the one found
CLEAN_ENV = {k: v for k, v in os.environ.items()
             if k not in ("PYTHONPATH", "DOCHAR_CONFIG_DIR", "MLFLOW_TRACKING_URI")}


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    """Built from a copy of the sources, so setuptools' build/ and egg-info stay out of the
    repository (and the copy shows these files are all a build needs)."""
    source = tmp_path_factory.mktemp("source")
    for name in SOURCES:
        copy = shutil.copytree if (REPO / name).is_dir() else shutil.copy2
        copy(REPO / name, source / name,
             **({"ignore": shutil.ignore_patterns("__pycache__")} if copy is shutil.copytree
                else {}))
    out = tmp_path_factory.mktemp("wheel")
    sh(sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
       "--wheel-dir", out, source, cwd=source, env=CLEAN_ENV)
    return next(out.glob("dochar-*.whl"))


def test_the_wheel_holds_every_package_and_config(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    packages = [p.relative_to(REPO).as_posix() for root in ("dochar", "data_synth")
                for p in (REPO / root).rglob("__init__.py")]
    configs = [f"dochar/configs/{p.relative_to(REPO / 'configs').as_posix()}"
               for p in (REPO / "configs").rglob("*.yaml")]
    assert packages and configs
    assert [p for p in packages + configs if p not in names] == []
    assert not any(name.startswith(("tests/", "benchmarks/")) for name in names)


def test_an_installed_wheel_runs_an_experiment_and_the_gate(wheel, tmp_path):
    venv = tmp_path / "venv"
    sh(sys.executable, "-m", "venv", "--without-pip", venv, cwd=tmp_path)
    python = venv / "bin" / "python"
    sh(sys.executable, "-m", "pip", "--python", python, "install", "--no-deps", "-q", wheel,
       cwd=tmp_path, env=CLEAN_ENV)
    site = Path(sh(python, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])",
                   cwd=tmp_path).stdout.strip())
    (site / "borrowed_dependencies.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    env = CLEAN_ENV
    work = tmp_path / "elsewhere"
    work.mkdir()
    where = sh(python, "-c", "import dochar, dochar.config as c; print(dochar.__file__); "
               "print(c.CONFIG_DIR)", cwd=work, env=env).stdout.split()
    assert all(Path(p).is_relative_to(site) for p in where), where

    dochar = venv / "bin" / "dochar"
    sh(dochar, "run", "data.documents=12", "model=random_forest", "model.options.n_estimators=10",
       "split=random", "tracking.enabled=false", "evaluation.bootstrap_resamples=20",
       "train.progress=false", cwd=work, env=env)
    run = next((work / "outputs" / "runs").glob("*/run"))
    assert (run / "summary.json").is_file() and (run / "model" / "manifest.json").is_file()
    # the gate reads configs/gate/reference.yaml from the wheel; its baseline path is relative
    # to the working folder (reports/baseline/reference.yaml), written here by --update
    sh(dochar, "gate", "--update", "--from-run", run, cwd=work, env=env)
    assert (work / "reports" / "baseline" / "reference.yaml").is_file()
    sh(dochar, "gate", "--from-run", run, cwd=work, env=env)
