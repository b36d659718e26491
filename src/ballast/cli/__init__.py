"""The command line: one command a stage, plus run, demo, init, and the people's commands (write,
judge, agreement). The only place that prints."""

from __future__ import annotations

import sys

from ballast.cli import people as _people  # noqa: F401 - registers write, judge, agreement
from ballast.cli.app import app


def main() -> None:
    try:
        app(standalone_mode=True)
    except KeyboardInterrupt:  # pragma: no cover - interactive
        sys.stderr.write("interrupted; finished stages are kept, the current one will rerun\n")
        sys.exit(130)


__all__ = ["app", "main"]
