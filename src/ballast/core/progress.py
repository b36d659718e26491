"""How the core reports progress without printing: a callback the CLI implements."""

from __future__ import annotations

from typing import Protocol


class Progress(Protocol):
    def step(self, label: str, done: int, total: int) -> None: ...
    def info(self, message: str) -> None: ...


class Silent:
    """The default: report nothing."""

    def step(self, label: str, done: int, total: int) -> None:
        pass

    def info(self, message: str) -> None:
        pass


SILENT = Silent()
