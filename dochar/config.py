"""Where the Hydra config groups live.

``configs/`` sits at the top of the repository; a wheel carries the same folder inside the package
as ``dochar/configs`` (mapped by setup.py), which is looked for first. ``DOCHAR_CONFIG_DIR`` points
elsewhere, e.g. to a team's own copy. Paths *inside* configs (data files, the gate's
``reports/baseline/reference.yaml``) stay relative to the working directory.
"""

from __future__ import annotations

import os
from pathlib import Path

_PACKAGED = Path(__file__).resolve().parent / "configs"
_CHECKOUT = Path(__file__).resolve().parents[1] / "configs"

CONFIG_DIR = Path(os.environ.get("DOCHAR_CONFIG_DIR")
                  or (_PACKAGED if _PACKAGED.is_dir() else _CHECKOUT)).resolve()
