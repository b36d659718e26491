"""Stage export: the versioned bundle with manifest.json."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ballast.config.record import section_dict
from ballast.core.errors import GateFailed, StageError
from ballast.core.records import metric_rows
from ballast.io.files import atomic_dir, sha256_file, write_json
from ballast.stages.base import Run, Stage


def export(run: Run) -> dict[str, Any]:
    import json

    from ballast.io.manifest import SCHEMA_VERSION, library_versions, safe_name
    from ballast.models.loading import weights_hash
    from ballast.models.query_map import adapter_facts
    from ballast.stages.export.bundle import copy_model, model_facts, restore_length
    from ballast.stages.export.card import CARD, base_licence, model_card

    model_dir = run.need("model", "train")
    verdict = json.loads(run.need("gate.json", "gate").read_text("utf-8"))
    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    if not verdict["passed"] and not run.force_export:
        raise GateFailed(
            f"export refused: {verdict['summary']}. Use --force to export anyway "
            "(the manifest will say so)"
        )
    tuned_hash = weights_hash(model_dir)
    version = run.cfg.export.version or "v-" + next(iter(tuned_hash.values()))[:12]
    name = safe_name(f"{run.cfg.name}-{version}")
    root = Path(run.cfg.export.dir) if run.cfg.export.dir else run.path("bundle")
    target = root / name
    if target.resolve().parent != root.resolve():
        raise StageError(f"bundle path {target} would leave the export folder {root}")
    import shutil

    for stale in [*root.glob(f".{safe_name(run.cfg.name)}-*.tmp"),
                  *root.glob(f".{safe_name(run.cfg.name)}-*.old")]:  # fmt: skip
        shutil.rmtree(stale, ignore_errors=True)  # what a killed export left half-built
    gated = {}
    for s, info in metrics["splits"].items():
        gated[s] = {
            r.metric: {
                "base": r.base,
                "tuned": r.tuned,
                "diff": r.diff,
                "ci": [r.ci_low, r.ci_high],
                "p_value": r.p_value,
            }
            for r in metric_rows(info, metrics["metrics"])
        } | {"n_queries": info["n_queries"]}
    train_stats = (
        json.loads(run.path("train.json").read_text("utf-8"))
        if run.path("train.json").is_file()
        else {}
    )
    data = {
        n: sha256_file(run.path(n))
        for n in ("passages.jsonl", "queries.jsonl", "splits.json", "negatives.jsonl")
    }
    manifest = {
        "schema_version": SCHEMA_VERSION,
        "name": run.cfg.name,
        "version": version,
        "model": {
            "path": ".",
            "format": "sentence-transformers",
            **model_facts(model_dir),
            "weights_sha256": tuned_hash,
            "adapter": adapter_facts(model_dir),  # train.mode = "adapter": the matrix
        },
        "base_model": {
            "id": run.cfg.base_model,
            "fingerprint": run.base_fp,
            "weights_sha256": weights_hash(run.base_path),
            "license": base_licence(run.base_path),
        },
        "training": {
            "config": section_dict(run.cfg.train),
            "mining": section_dict(run.cfg.mine),
            "synthesis": section_dict(run.cfg.synth),
            "seed": run.cfg.seed,
            **{
                k: train_stats.get(k)
                for k in ("pairs", "steps", "hard_negatives_per_pair")
            },
            # the base/tuned interpolation kept by the safety net (None: the tuned model as
            # trained)
            "mix": train_stats.get("mix"),
            # teacher labels (None: no teacher set); "used" is false when the check refused it
            "teacher": train_stats.get("teacher") and (
                train_stats["teacher"] | {"config": section_dict(run.cfg.teach)}
            ),
        },
        "data_sha256": data,
        "metrics": gated,
        "gate": {
            "passed": verdict["passed"],
            "evidence": verdict.get("evidence", "synthetic"),
            "summary": verdict["summary"],
            "primary_metric": verdict["primary_metric"],
            "min_gain": verdict["min_gain"],
            "splits": [
                {
                    k: s.get(k)
                    for k in ("split", "passed", "rule", "gain", "ci_low", "ci_high", "reason")
                }
                for s in verdict["splits"]
            ],
            "forced": bool(run.force_export and not verdict["passed"]),
        },
        "libraries": library_versions(),
    }
    with atomic_dir(target) as tmp:
        copy_model(model_dir, tmp)
        wanted = run.cfg.export.max_seq_length
        lengths = restore_length(tmp, run.base_path, wanted)
        if lengths:
            manifest["model"]["max_seq_length"] = lengths["bundle"]
            source = "export.max_seq_length" if wanted else "as the base model does"
            run.progress.info(
                f"export: the bundle reads up to {lengths['bundle']} tokens ({source}; trained "
                f"on up to {lengths['trained']}: train.max_seq_length)"
            )
        manifest["model"]["trained_max_seq_length"] = run.cfg.train.max_seq_length
        from ballast.io.manifest import files_hash
        from ballast.models.verification import verification_sample

        run.progress.info("export: embedding the verification sample")
        manifest["verification"] = verification_sample(tmp)
        manifest["onnx"] = None
        if run.cfg.export.onnx or run.cfg.export.quantize_int8:
            from ballast.stages.export.onnx import bundle_onnx

            manifest["onnx"] = bundle_onnx(run, tmp, quantize=run.cfg.export.quantize_int8)
        summaries = {}
        for stage in ("ingest", "synth"):
            done = run.path(f"{stage}.done.json")
            summaries[stage] = json.loads(done.read_text("utf-8")).get("summary", {}) \
                if done.is_file() else {}  # fmt: skip
        (tmp / CARD).write_text(model_card(manifest, summaries), "utf-8")
        manifest["model_card"] = CARD
        manifest["files_sha256"] = files_hash(tmp)
        write_json(tmp / "manifest.json", manifest)
    onnx = manifest["onnx"]
    return {
        "bundle": str(target),
        "version": version,
        "forced": manifest["gate"]["forced"],
        "onnx": bool(onnx),
        "int8": bool(onnx and onnx["int8"]),
    }


STAGE = Stage(
    "export",
    export,
    keys=(
        "export",
        "name",
        "seed",
        "base_model",
        "train",
        "mine",
        "synth",
        "teach",
        "evaluate.batch_size",  # the int8 measurement
        "gate.primary_metric",
        "gate.splits",
    ),
    inputs=("model", "gate.json", "metrics.json", "ingest.done.json", "synth.done.json"),
)
