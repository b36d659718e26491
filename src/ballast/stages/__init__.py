"""Each stage as file-in, file-out glue around the pure core modules, one module a stage.

A stage reads what earlier stages wrote into the run folder, calls the core, and writes its
outputs atomically. ``pipeline.py`` decides whether a stage needs to run.
"""

from __future__ import annotations

from .evaluate import evaluate, evaluate_files
from .export import export
from .gate import gate
from .ingest import ingest
from .mine import mine
from .report import report
from .run import Run
from .split import split
from .synth import synth
from .train import train

STAGE_FUNCS = {
    "ingest": ingest,
    "synth": synth,
    "split": split,
    "mine": mine,
    "train": train,
    "evaluate": evaluate,
    "gate": gate,
    "report": report,
    "export": export,
}

__all__ = ["STAGE_FUNCS", "Run", "evaluate_files"]
