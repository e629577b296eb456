"""A `dochar` command that kills itself (SIGKILL, as the out-of-memory killer or a pre-empted
job would) at one chosen instant, so a test can reach instants that timing alone rarely hits.

    python -m tests.runs.kill_points POINT [run|predict|import] [arguments ...]

(no command: `run`). POINT is one of

    call:DOTTED:N  before the N-th call in the process of a function or method (DOTTED is
                   module.function or module.Class.method, e.g. mlflow.log_artifacts)
    after:DOTTED:N right after the N-th call of it returned
    rename:NAME:N  inside the N-th atomic write of a file or folder named NAME (dochar.data.files):
                   its partial complete on disk, not yet renamed into place

    batch:N        before the N-th training batch of the process (mid-epoch)
    write:E:B      inside the checkpoint write of epoch E, once B bytes of the partial file are
                   on disk (if the file is shorter, once all of it is, before the rename)
    written:E      the partial file of epoch E complete and synced, not yet renamed
    saved:E        right after the checkpoint of epoch E is in place
    trained        training over, its checkpoint not yet removed

    pause:DOTTED:N before the N-th call of DOTTED, write the file ``paused`` in the working
                   folder and wait until a file ``release`` appears there (no signal)

The hooks wrap the functions the run calls; the run itself is the ordinary one. A point the run
never reaches lets it finish (exit code 0), which the caller can tell from -9.

`arm(point, signal, once)` installs a point for another signal (SIGUSR2: the pre-emption
signal submitit turns into a re-queue) and, with ``once`` (a file path), fires in only the
first process of several to reach it: the one that creates the file.
"""

from __future__ import annotations

import importlib
import os
import signal
import sys
import time
from pathlib import Path
from typing import Any

import torch

from dochar import cli
from dochar.data import files
from dochar.models import checkpoints, objectives

COMMANDS = {"run", "predict", "import"}
PAUSED, RELEASE = "paused", "release"
_ARMED = {"signal": signal.SIGKILL, "once": None}


def due() -> bool:
    """Whether the point fires in this process: always, or (``once``) in the first to get here."""
    if _ARMED["once"] is None:
        return True
    try:
        os.close(os.open(_ARMED["once"], os.O_CREAT | os.O_EXCL | os.O_WRONLY))
    except FileExistsError:
        return False
    return True


def kill() -> None:
    os.kill(os.getpid(), _ARMED["signal"])


def pause() -> None:
    Path(PAUSED).write_text(str(os.getpid()))
    while not Path(RELEASE).exists():
        time.sleep(0.2)


class KillingWriter:
    """A file handle that writes through to the real one and dies once `limit` bytes are on disk."""

    def __init__(self, handle: Any, limit: int) -> None:
        self.handle, self.limit, self.written = handle, limit, 0

    def write(self, data: bytes) -> int:
        room = self.limit - self.written
        if len(data) >= room:
            self.handle.write(bytes(memoryview(data)[:room]))
            self.handle.flush()
            kill()
        self.handle.write(data)
        self.written += len(data)
        return len(data)

    def flush(self) -> None:
        self.handle.flush()


def arm(point: str, signum: int = signal.SIGKILL, once: str | None = None) -> None:
    _ARMED.update(signal=signum, once=once)
    install(point)


def install(point: str) -> None:
    kind, *numbers = point.split(":")
    values = [int(n) for n in numbers if n.isdigit()]
    armed: list[int] = []     # the epoch whose checkpoint write is under way

    if kind == "batch":
        real_loss, calls = objectives.NodeClasses.loss, [0]

        def loss(self, model, batch):
            calls[0] += 1
            if calls[0] == values[0] and due():
                kill()
            return real_loss(self, model, batch)

        objectives.NodeClasses.loss = loss
    elif kind in {"write", "written", "saved"}:
        real_save, real_torch_save = checkpoints.EpochCheckpoint.save, torch.save

        def save(self, epoch, *args):
            armed[:] = [epoch] if epoch == values[0] and due() else []
            real_save(self, epoch, *args)
            if kind == "saved" and armed:
                kill()
            armed.clear()

        def torch_save(obj, handle, *args, **kwargs):
            if not armed or kind == "saved":
                return real_torch_save(obj, handle, *args, **kwargs)
            limit = values[1] if kind == "write" else sys.maxsize
            real_torch_save(obj, KillingWriter(handle, limit), *args, **kwargs)
            handle.flush()
            os.fsync(handle.fileno())
            kill()

        checkpoints.EpochCheckpoint.save = save
        torch.save = torch_save
    elif kind == "trained":
        real_remove = checkpoints.EpochCheckpoint.remove

        def remove(self):
            if due():
                kill()
            real_remove(self)

        checkpoints.EpochCheckpoint.remove = remove
    elif kind in {"call", "after", "pause"}:
        dotted, count = point.split(":")[1], int(point.split(":")[2])
        wrap_call(dotted, count, before=kind != "after", act=pause if kind == "pause" else kill)
    elif kind == "rename":
        name, count = point.split(":")[1], int(point.split(":")[2])
        files.os = RenameKiller(name, count)
    else:
        raise SystemExit(f"unknown kill point {point!r}")


def resolve(dotted: str) -> tuple[Any, str]:
    """(owner, attribute) of module.function or module.Class.method, importing the module."""
    parts = dotted.split(".")
    for split in range(len(parts) - 1, 0, -1):
        try:
            owner = importlib.import_module(".".join(parts[:split]))
        except ImportError:
            continue
        for name in parts[split:-1]:
            owner = getattr(owner, name)
        return owner, parts[-1]
    raise SystemExit(f"kill point: cannot find {dotted!r}")


def wrap_call(dotted: str, count: int, before: bool, act=kill) -> None:
    owner, name = resolve(dotted)
    real, calls = getattr(owner, name), [0]

    def wrapper(*args, **kwargs):
        calls[0] += 1
        fire = calls[0] == count and due()
        if before and fire:
            act()
        result = real(*args, **kwargs)
        if not before and fire:
            act()
        return result

    if isinstance(owner, type) and isinstance(owner.__dict__.get(name), (staticmethod,
                                                                         classmethod)):
        raise SystemExit(f"kill point: {dotted} is not a plain function or method")
    setattr(owner, name, wrapper)
    for module in list(sys.modules.values()):   # names bound by `from module import function`
        if getattr(module, "__name__", "").startswith("dochar") and \
                getattr(module, name, None) is real:
            setattr(module, name, wrapper)


class RenameKiller:
    """``os`` for dochar.data.files, whose ``replace`` dies before the N-th rename onto NAME."""

    def __init__(self, name: str, count: int) -> None:
        self.name, self.count, self.seen = name, count, 0

    def __getattr__(self, attribute: str) -> Any:
        return getattr(os, attribute)

    def replace(self, source, destination) -> None:
        if os.path.basename(destination) == self.name and \
                str(source).endswith(".partial"):
            self.seen += 1
            if self.seen == self.count and due():
                kill()
        os.replace(source, destination)


if __name__ == "__main__":
    install(sys.argv[1])
    arguments = sys.argv[2:]
    if arguments[:1] and arguments[0] in COMMANDS:
        raise SystemExit(cli.main(arguments))
    raise SystemExit(cli.main(["run", *arguments]))
