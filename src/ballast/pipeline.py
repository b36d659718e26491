"""Stage chaining: fingerprints, done markers, and skipping what is unchanged.

A stage's fingerprint hashes its name, ballast's version, the config sections it reads, and the
contents of its inputs. ``<stage>.done.json`` is written last; a stage without it is not done.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import __version__
from .export import library_versions
from .files import fingerprint_obj, fingerprint_tree, remove_stale_temps, write_json
from .stages import STAGE_FUNCS, Run

ORDER = ("ingest", "synth", "split", "mine", "train", "evaluate", "gate", "report", "export")


@dataclass(frozen=True)
class StageSpec:
    name: str
    sections: tuple[str, ...]  # config sections (and top-level keys) the stage reads
    inputs: tuple[str, ...]  # run-folder files it reads
    outputs: tuple[str, ...]  # run-folder files or folders it writes
    base_model: bool = False


SPECS = {
    "ingest": StageSpec("ingest", ("ingest", "base_model"), (), ("passages.jsonl",), True),
    "synth": StageSpec("synth", ("synth", "seed"), ("passages.jsonl",), ("queries.jsonl",)),
    "split": StageSpec(
        "split", ("split", "seed"), ("passages.jsonl", "queries.jsonl"), ("splits.json", "qrels")
    ),
    "mine": StageSpec(
        "mine",
        ("mine", "seed", "train.max_seq_length", "evaluate.batch_size"),
        ("passages.jsonl", "queries.jsonl", "splits.json"),
        ("negatives.jsonl", "negatives_sample.md"),
        True,
    ),
    "train": StageSpec(
        "train",
        ("train", "seed", "mine.negatives", "evaluate.batch_size"),
        ("passages.jsonl", "queries.jsonl", "splits.json", "negatives.jsonl"),
        ("model", "train.json"),
        True,
    ),
    "evaluate": StageSpec(
        "evaluate",
        ("evaluate", "seed", "train.max_seq_length"),
        ("passages.jsonl", "queries.jsonl", "splits.json", "model"),
        ("metrics.json", "per_query.csv", "runs"),
        True,
    ),
    "gate": StageSpec("gate", ("gate",), ("metrics.json",), ("gate.json",)),
    "report": StageSpec(
        "report",
        ("name", "guard"),
        (
            "metrics.json",
            "per_query.csv",
            "runs",
            "qrels",
            "gate.json",
            "train.json",
            "queries.jsonl",
            "passages.jsonl",
            *(f"{s}.done.json" for s in ("ingest", "synth", "split", "mine", "train")),
        ),
        ("report.html", "report.md"),
    ),
    "export": StageSpec("export", ("export", "name"), ("model", "gate.json", "metrics.json"), ()),
}


def _config_part(run: Run, keys: tuple[str, ...]) -> dict[str, Any]:
    d = run.cfg.to_dict()
    out = {}
    for k in keys:
        cur: Any = d
        for part in k.split("."):
            cur = cur[part]
        out[k] = cur
    return out


def external_inputs(run: Run, stage: str) -> dict[str, str]:
    """Fingerprints of inputs that live outside the run folder."""
    out = {}
    if stage == "ingest":
        out["docs"] = (
            fingerprint_tree(run.cfg.ingest.docs)
            if Path(run.cfg.ingest.docs).exists()
            else "missing"
        )
    if stage == "synth" and run.cfg.synth.questions:
        q = Path(run.cfg.synth.questions)
        out["questions"] = fingerprint_tree(q) if q.exists() else "missing"
    if stage == "synth":
        from .synth.generate import outside_inputs

        out |= outside_inputs(run)
    if stage == "mine" and run.cfg.mine.rescorer_model:
        r = Path(run.cfg.mine.rescorer_model)
        out["rescorer_model"] = fingerprint_tree(r) if r.exists() else str(r)  # or packaged:
    if SPECS[stage].base_model:
        out["base_model"] = run.base_fp
    return out


def fingerprint(run: Run, stage: str) -> tuple[str, dict[str, Any]]:
    spec = SPECS[stage]
    inputs = {
        name: fingerprint_tree(run.path(name)) if run.path(name).exists() else "missing"
        for name in spec.inputs
    }
    inputs |= external_inputs(run, stage)
    parts = {
        "stage": stage,
        "ballast": __version__,
        "config": _config_part(run, spec.sections),
        "inputs": inputs,
        "force": run.force_export if stage == "export" else False,
    }
    return fingerprint_obj(parts), parts


def done_path(run: Run, stage: str) -> Path:
    return run.path(f"{stage}.done.json")


def is_current(run: Run, stage: str, fp: str) -> dict[str, Any] | None:
    p = done_path(run, stage)
    if not p.is_file():
        return None
    try:
        done = json.loads(p.read_text("utf-8"))
    except ValueError:
        return None
    if done.get("fingerprint") != fp:
        return None
    if not all(run.path(o).exists() for o in SPECS[stage].outputs):
        return None
    return done


def run_stage(run: Run, stage: str, *, skip_unchanged: bool = False) -> dict[str, Any]:
    """Run one stage; with ``skip_unchanged``, reuse its last result if nothing changed.

    Under torchrun (PyTorch DDP) only the train stage may run; every process trains, and only
    rank 0 writes files."""
    from .train import process_rank

    rank, world = process_rank()
    if world > 1:
        from .errors import StageError

        if stage != "train":
            raise StageError(
                f"only `ballast train` runs under torchrun (WORLD_SIZE={world}); run the "
                f"{stage} stage as a single process"
            )
        if rank != 0:
            started = time.perf_counter()
            summary = STAGE_FUNCS[stage](run)
            seconds = round(time.perf_counter() - started, 3)
            return {"stage": stage, "skipped": False, "seconds": seconds, "summary": summary}
    fp, parts = fingerprint(run, stage)
    if skip_unchanged and stage != "export":
        done = is_current(run, stage, fp)
        if done is not None:
            run.progress.info(f"{stage}: unchanged, skipped")
            return {"stage": stage, "skipped": True, "summary": done["summary"]}
    run.dir.mkdir(parents=True, exist_ok=True)
    done_path(run, stage).unlink(missing_ok=True)
    for out in SPECS[stage].outputs:  # what a killed run of this stage left half-built
        remove_stale_temps(run.dir, Path(out).name)
    write_json(run.path("config.json"), run.cfg.to_dict())
    started = time.perf_counter()
    summary = STAGE_FUNCS[stage](run)
    seconds = round(time.perf_counter() - started, 3)
    write_json(
        done_path(run, stage),
        {
            "stage": stage,
            "fingerprint": fp,
            **parts,
            "libraries": library_versions(),
            "seconds": seconds,
            "summary": summary,
        },
    )
    return {"stage": stage, "skipped": False, "seconds": seconds, "summary": summary}


def run_all(run: Run, *, stop_before: str | None = None) -> list[dict[str, Any]]:
    """Every stage in order, skipping unchanged ones; stops after the gate if it failed."""
    results = []
    for stage in ORDER:
        if stage == stop_before:
            break
        if stage == "export":
            verdict = json.loads(run.path("gate.json").read_text("utf-8"))
            if not verdict["passed"] and not run.force_export:
                results.append(
                    {"stage": "export", "skipped": True, "summary": {"refused": verdict["summary"]}}
                )
                break
        results.append(run_stage(run, stage, skip_unchanged=True))
    return results
