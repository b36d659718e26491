"""Stage gate: metrics.json -> gate.json (the release decision)."""

from __future__ import annotations

from typing import Any

from ballast.io.files import write_json
from ballast.stages.base import Run, Stage


def gate(run: Run) -> dict[str, Any]:
    import json

    from ballast.core.gate import decide

    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    verdict = decide(metrics, run.cfg.gate)
    if metrics.get("encoding") == "onnx-int8":
        from ballast.models.encode import INT8_CAUTION

        verdict["caution"] = INT8_CAUTION
        run.progress.info(f"gate: caution: {INT8_CAUTION}")
    write_json(run.path("gate.json"), verdict)
    return {"passed": verdict["passed"], "summary": verdict["summary"]}


STAGE = Stage("gate", gate, keys=("gate",), inputs=("metrics.json",), outputs=("gate.json",))
