"""The generation cache: what a language model wrote, kept so a rerun regenerates nothing.

One JSONL file a generator identity under ``<run>/cache/synth/``. Each finished generation is
appended as one line and flushed to disk before the next is reported, so a run killed midway
loses at most the generations in flight. A torn last line (a kill during the write) is
ignored when read, and the next append starts on a fresh line.

An entry's key hashes the generator's identity (model, endpoint, sampling settings, seed), the
prompt template, the passage text and the sample index; never an API key.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from ballast.core.text import sha256_bytes
from ballast.io.files import dumps, fingerprint_obj


def generator_identity(settings: dict[str, Any]) -> str:
    """A hash of everything that decides what a generator writes (no secrets go in)."""
    return fingerprint_obj(settings)


def entry_key(identity: str, prompt_hash: str, passage_text: str, sample: int) -> str:
    passage_hash = sha256_bytes(passage_text.encode("utf-8"))
    return sha256_bytes("\0".join((identity, prompt_hash, passage_hash, str(sample))).encode())


class GenerationCache:
    """Append-only store of generations for one generator identity."""

    def __init__(self, root: str | Path, kind: str, identity: str) -> None:
        self.path = Path(root) / f"{kind}-{identity[:24]}.jsonl"
        self.entries: dict[str, dict[str, Any]] = {}
        if self.path.is_file():
            for line in self.path.read_bytes().split(b"\n"):
                try:
                    row = json.loads(line)
                except (ValueError, UnicodeDecodeError):
                    continue  # blank, or torn by a kill during a write
                if isinstance(row, dict) and isinstance(row.get("key"), str):
                    self.entries[row["key"]] = row

    def __contains__(self, key: str) -> bool:
        return key in self.entries

    def __len__(self) -> int:
        return len(self.entries)

    def get(self, key: str) -> dict[str, Any] | None:
        return self.entries.get(key)

    def put(self, key: str, value: dict[str, Any]) -> None:
        """Append one entry and flush it to disk (one write of one whole line)."""
        row = {**value, "key": key}
        self.path.parent.mkdir(parents=True, exist_ok=True)
        line = (dumps(row) + "\n").encode("utf-8")
        fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        try:
            size = os.fstat(fd).st_size
            if size:
                with open(self.path, "rb") as fh:
                    fh.seek(size - 1)
                    if fh.read(1) != b"\n":
                        line = b"\n" + line  # the last write was torn: start a fresh line
            os.write(fd, line)
            os.fsync(fd)
        finally:
            os.close(fd)
        self.entries[key] = row
