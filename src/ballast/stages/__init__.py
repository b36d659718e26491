"""The stages, in pipeline order: each is one package holding its logic, its file glue and its
declaration (``STAGE``: the config keys and files it reads, the files it writes).

A stage reads what earlier stages wrote into the run folder and writes its outputs atomically;
``pipeline.py`` decides whether a stage needs to run. Stages never import each other.
"""

from __future__ import annotations

from ballast.stages import check as _check
from ballast.stages import evaluate as _evaluate
from ballast.stages import export as _export
from ballast.stages import gate as _gate
from ballast.stages import ingest as _ingest
from ballast.stages import mine as _mine
from ballast.stages import report as _report
from ballast.stages import split as _split
from ballast.stages import synth as _synth
from ballast.stages import teach as _teach
from ballast.stages import train as _train
from ballast.stages.base import Run, Stage

STAGES: dict[str, Stage] = {
    s.name: s
    for s in (
        _ingest.STAGE,
        _synth.STAGE,
        _split.STAGE,
        _check.STAGE,
        _mine.STAGE,
        _teach.STAGE,
        _train.STAGE,
        _evaluate.STAGE,
        _gate.STAGE,
        _report.STAGE,
        _export.STAGE,
    )
}
ORDER = tuple(STAGES)

__all__ = ["ORDER", "STAGES", "Run", "Stage"]
