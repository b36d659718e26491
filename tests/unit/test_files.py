"""ballast.io.files and ballast.io.lock: atomic writes keep the user's umask (POSIX: a new file's
mode is 0666 & ~umask, a new folder's 0777 & ~umask), and one process at a time holds a run
folder."""

from __future__ import annotations

import multiprocessing as mp
import os
import stat
from pathlib import Path

import numpy as np
import pytest

from ballast.core.errors import StageError
from ballast.io.files import atomic_dir, atomic_path, write_json, write_jsonl, write_text_atomic
from ballast.io.lock import holder, run_lock
from ballast.models.encode import EmbeddingCache


@pytest.fixture
def umask_022():
    old = os.umask(0o022)
    yield
    os.umask(old)


def mode(p: Path) -> int:
    return stat.S_IMODE(p.stat().st_mode)


def test_atomic_writes_follow_the_umask(tmp_path: Path, umask_022: None) -> None:
    write_json(tmp_path / "a.json", {"x": 1})
    write_jsonl(tmp_path / "b.jsonl", [{"x": 1}])
    write_text_atomic(tmp_path / "c.txt", "x")
    with atomic_path(tmp_path / "d.npy") as tmp:
        np.save(tmp, np.zeros(2))
    EmbeddingCache(tmp_path / "cache").put("fp" * 12, ["t"], 128, np.zeros((1, 2), np.float32))
    with atomic_dir(tmp_path / "bundle") as d:
        (d / "m.json").write_text("{}")
    files = [tmp_path / n for n in ("a.json", "b.jsonl", "c.txt", "d.npy")]
    files += list((tmp_path / "cache").rglob("*.npy"))
    assert {mode(f) for f in files} == {0o644}
    assert mode(tmp_path / "bundle") == 0o755
    os.umask(0o077)
    write_json(tmp_path / "private.json", {})
    assert mode(tmp_path / "private.json") == 0o600


def test_a_failed_block_leaves_the_target_untouched(tmp_path: Path) -> None:
    target = tmp_path / "t.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        tmp.write_text("half")
        raise RuntimeError("killed")
    assert target.read_text() == "old" and [p.name for p in tmp_path.iterdir()] == ["t.txt"]


def _hold(folder: str, ready, release) -> None:
    with run_lock(folder):
        ready.set()
        release.wait(30)


def test_a_second_process_is_refused_and_a_dead_holder_frees_the_lock(tmp_path: Path) -> None:
    ctx = mp.get_context("fork")
    ready, release = ctx.Event(), ctx.Event()
    p = ctx.Process(target=_hold, args=(str(tmp_path), ready, release))
    p.start()
    try:
        assert ready.wait(30)
        with pytest.raises(StageError, match=f"in use by process {p.pid}"), run_lock(tmp_path):
            pass
        assert holder(tmp_path)["pid"] == p.pid
    finally:
        p.kill()  # killed while holding: the kernel drops the lock
        p.join()
    with run_lock(tmp_path), run_lock(tmp_path):  # re-entrant within one process
        assert holder(tmp_path)["pid"] == os.getpid()
