"""Where the Hydra config groups live.

``configs/`` sits at the top of the repository (and ships beside the package in a wheel);
``DOCHAR_CONFIG_DIR`` points elsewhere, e.g. to a team's own copy.
"""

from __future__ import annotations

import os
from pathlib import Path

_PACKAGED = Path(__file__).resolve().parent / "configs"
_CHECKOUT = Path(__file__).resolve().parents[1] / "configs"

CONFIG_DIR = Path(os.environ.get("DOCHAR_CONFIG_DIR")
                  or (_PACKAGED if _PACKAGED.is_dir() else _CHECKOUT)).resolve()
