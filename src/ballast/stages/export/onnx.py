"""The ONNX part of stage export: graph, check, optional int8 model and its measured cost.

The int8 model's cost is measured, not assumed: the evaluation split's queries are ranked over
the whole corpus with the float32 graph and with the int8 graph, and the primary metric of both
(from the stored qrels) goes into the manifest with the cosine agreement of the embeddings.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from ballast.io.files import sha256_file
from ballast.stages.base import Run


def _measure_split(run: Run, metrics: dict[str, Any]) -> str | None:
    evaluated = metrics.get("splits", {})
    order = ["test", *run.cfg.gate.splits, *evaluated]
    return next(
        (
            s
            for s in order
            if s != "guard" and s in evaluated and run.path("qrels", f"{s}.tsv").is_file()
        ),
        None,
    )


def measure_int8(
    fp32: Any,
    int8: Any,
    corpus: tuple[list[str], list[str]],
    queries: tuple[list[str], list[str]],
    qrels: dict[str, dict[str, int]],
    metric: str,
    *,
    batch_size: int,
    progress: Any,
) -> dict[str, Any]:
    """The metric with each encoder and how closely their embeddings agree."""
    from ballast.core.scoring import mean_metric

    pids, ptexts = corpus
    qids, qtexts = queries
    emb = {}
    for name, enc in (("fp32", fp32), ("int8", int8)):
        emb[name] = (
            enc.encode(
                ptexts,
                batch_size=batch_size,
                label=f"encoding passages (onnx {name})",
                progress=progress,
            ),
            enc.encode(
                qtexts,
                batch_size=batch_size,
                label=f"encoding queries (onnx {name})",
                progress=progress,
            ),
        )
    rels = [qrels.get(x, {}) for x in qids]
    values = {name: mean_metric(q, p, pids, rels, metric) for name, (p, q) in emb.items()}
    a = np.concatenate(emb["fp32"])
    b = np.concatenate(emb["int8"])
    cos = np.sum(a * b, axis=1) / np.maximum(
        np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1), 1e-12
    )
    return {
        "metric": metric,
        "queries": len(qids),
        "passages": len(pids),
        "fp32": values["fp32"],
        "int8": values["int8"],
        "change": values["int8"] - values["fp32"],
        "cosine_mean": float(cos.mean()) if cos.size else None,
        "cosine_min": float(cos.min()) if cos.size else None,
    }


def bundle_onnx(run: Run, bundle: Path, *, quantize: bool) -> dict[str, Any]:
    """Write model.onnx (and model_int8.onnx) into ``bundle``; the manifest's ``onnx`` part."""
    from ballast.io.trec import read_qrels
    from ballast.models.onnx import (
        INT8_FILE,
        ONNX_FILE,
        export_onnx,
        open_onnx,
        quantize_int8,
        require_onnx,
    )
    from ballast.models.verification import INT8_TOLERANCE, VERIFY_TEXTS, rounded

    require_onnx()
    info = export_onnx(bundle, bundle / ONNX_FILE, progress=run.progress)
    info["sha256"] = sha256_file(bundle / ONNX_FILE)
    info["int8"] = None
    if not quantize:
        return info
    run.progress.info("export: quantising the ONNX graph to int8")
    q = quantize_int8(bundle / ONNX_FILE, bundle / INT8_FILE)
    q["sha256"] = sha256_file(bundle / INT8_FILE)
    msl = info["max_seq_length"]
    fp32, int8 = open_onnx(bundle, ONNX_FILE, msl), open_onnx(bundle, INT8_FILE, msl)
    q["verification_embeddings"] = rounded(int8.encode(list(VERIFY_TEXTS)))
    q["verification_tolerance"] = INT8_TOLERANCE
    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    split = _measure_split(run, metrics)
    primary = run.cfg.gate.primary_metric
    if split is None:
        q["measured"] = None
        q["measured_note"] = "no evaluation split with stored qrels to measure on"
        return info | {"int8": q}
    run.progress.info(f"export: measuring the int8 model on split {split}")
    qrels = read_qrels(run.path("qrels", f"{split}.tsv"))
    by_qid = {x["id"]: x for x in run.queries()}
    qids = [x for x in run.splits()["queries"].get(split, []) if x in qrels and x in by_qid]
    passages = run.passages()
    measured = measure_int8(
        fp32,
        int8,
        ([p["id"] for p in passages], [p["text"] for p in passages]),
        (qids, [by_qid[x]["text"] for x in qids]),
        qrels,
        primary,
        batch_size=run.cfg.evaluate.batch_size,
        progress=run.progress,
    )
    tuned = metrics["splits"][split]["models"].get("tuned", {}).get(primary, {}).get("mean")
    q["measured"] = {"split": split, **measured, "pytorch": tuned}
    return info | {"int8": q}
