"""Files written whole or not at all.

Artifacts, run folders and the gate's baseline are written to a scratch file beside their final
name and renamed over it only once complete: ``os.replace`` is atomic on one file system, so a
crash, a full disk or a killed job leaves the old file (or none), never half of a new one.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path


@contextlib.contextmanager
def atomic_write(path: str | Path) -> Iterator[Path]:
    """Yield a scratch path in ``path``'s folder; on success it replaces ``path``.

    On an exception the scratch file is removed and ``path`` is left as it was."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, scratch = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial",
                                       dir=path.parent)
    os.close(handle)
    try:
        yield Path(scratch)
        with open(scratch, "rb+") as written:
            os.fsync(written.fileno())
        os.chmod(scratch, 0o644)
        os.replace(scratch, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(scratch)
        raise


def write_text_atomic(path: str | Path, text: str) -> Path:
    with atomic_write(path) as scratch:
        scratch.write_text(text, encoding="utf-8")
    return Path(path)
