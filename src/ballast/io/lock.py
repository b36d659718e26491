"""One process at a time on a run folder: an advisory lock on ``<run>/.lock``.

The lock is ``fcntl.flock`` on an open file, so the kernel releases it when the holder exits,
however it exits: a lock left by a killed process is simply taken over. The file records who
holds it (process id, host, command, start time) so a refused second run can name the holder.
Re-entrant within one process (``ballast run`` holds it across stages).
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
import sys
import time
from collections.abc import Iterator
from pathlib import Path

from ballast.core.errors import StageError

LOCK_FILE = ".lock"
_held: dict[Path, int] = {}


def holder(folder: Path) -> dict:
    try:
        return json.loads((folder / LOCK_FILE).read_text("utf-8"))
    except (OSError, ValueError):
        return {}


@contextlib.contextmanager
def run_lock(folder: str | Path) -> Iterator[None]:
    """Hold the run folder's lock; a StageError (exit 2) naming the holder if another process
    has it."""
    import fcntl

    folder = Path(folder).resolve()
    if folder in _held:
        _held[folder] += 1
        try:
            yield
        finally:
            _held[folder] -= 1
        return
    folder.mkdir(parents=True, exist_ok=True)
    fd = os.open(folder / LOCK_FILE, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            h = holder(folder)
            who = (
                f"process {h.get('pid')} on {h.get('host')} ({h.get('command')}), "
                f"started {h.get('started')}"
                if h
                else "another process"
            )
            raise StageError(
                f"run folder {folder} is in use by {who}; wait for it to finish or stop it "
                "(two runs on one folder would mix their results)"
            ) from None
        info = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "command": " ".join(sys.argv)[:300],
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        }
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(info).encode(), 0)
        _held[folder] = 1
        try:
            yield
        finally:
            del _held[folder]
            os.ftruncate(fd, 0)
    finally:
        os.close(fd)  # releases the flock
