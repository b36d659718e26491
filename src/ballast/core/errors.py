"""Errors the CLI turns into exit codes: bad input and bad config are exit 2."""

from __future__ import annotations

from pathlib import Path


class BallastError(Exception):
    """Base class: something the user can fix; the CLI prints it without a traceback."""

    exit_code = 2


class InputError(BallastError):
    """A bad input file: names the file and, where known, the line and the field."""

    def __init__(
        self,
        message: str,
        *,
        path: str | Path | None = None,
        line: int | None = None,
        field: str | None = None,
    ) -> None:
        self.path = None if path is None else str(path)
        self.line = line
        self.field = field
        self.detail = message
        where = []
        if self.path is not None:
            where.append(self.path + (f":{line}" if line is not None else ""))
        if field is not None:
            where.append(f"field '{field}'")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class ConfigError(BallastError):
    """A bad configuration key or value: names the key, the value and what is allowed."""

    def __init__(self, message: str, *, key: str | None = None, source: str | None = None) -> None:
        self.key = key
        self.source = source
        self.detail = message
        where = ", ".join(x for x in (source, f"key '{key}'" if key else None) if x)
        super().__init__(f"{where}: {message}" if where else message)


class StageError(BallastError):
    """A stage cannot run: a missing input from an earlier stage, say."""


class GateFailed(BallastError):
    """The release gate said no; exit code 1."""

    exit_code = 1
