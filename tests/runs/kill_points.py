"""`dochar run` that kills itself (SIGKILL, as the out-of-memory killer or a pre-empted job
would) at one chosen instant, so a test can reach instants that timing alone rarely hits.

    python -m tests.runs.kill_points POINT [key=value ...]

POINT is one of

    batch:N        before the N-th training batch of the process (mid-epoch)
    write:E:B      inside the checkpoint write of epoch E, once B bytes of the partial file are
                   on disk (if the file is shorter, once all of it is, before the rename)
    written:E      the partial file of epoch E complete and synced, not yet renamed
    saved:E        right after the checkpoint of epoch E is in place
    trained        training over, its checkpoint not yet removed

The hooks wrap the functions the run calls; the run itself is the ordinary one. A point the run
never reaches lets it finish (exit code 0), which the caller can tell from -9.
"""

from __future__ import annotations

import os
import signal
import sys
from typing import Any

import torch

from dochar import cli
from dochar.models import checkpoints, objectives


def kill() -> None:
    os.kill(os.getpid(), signal.SIGKILL)


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


def install(point: str) -> None:
    kind, *numbers = point.split(":")
    values = [int(n) for n in numbers]
    armed: list[int] = []     # the epoch whose checkpoint write is under way

    if kind == "batch":
        real_loss, calls = objectives.NodeClasses.loss, [0]

        def loss(self, model, batch):
            calls[0] += 1
            if calls[0] == values[0]:
                kill()
            return real_loss(self, model, batch)

        objectives.NodeClasses.loss = loss
    elif kind in {"write", "written", "saved"}:
        real_save, real_torch_save = checkpoints.EpochCheckpoint.save, torch.save

        def save(self, epoch, *args):
            armed[:] = [epoch] if epoch == values[0] else []
            real_save(self, epoch, *args)
            armed.clear()
            if kind == "saved" and epoch == values[0]:
                kill()

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
        def remove(self):
            kill()

        checkpoints.EpochCheckpoint.remove = remove
    else:
        raise SystemExit(f"unknown kill point {point!r}")


if __name__ == "__main__":
    install(sys.argv[1])
    raise SystemExit(cli.main(["run", *sys.argv[2:]]))
