"""Stage chaining: fingerprints, done markers, and skipping what is unchanged.

A stage's fingerprint hashes its name, ballast's version, the config keys its declaration
(``STAGE`` in its package) lists, the contents of its run-folder inputs and of what it reads
from outside the run folder. ``<stage>.done.json`` is written last; a stage without it is not
done. Each stage runs against a config view that records the keys it reads: a key read but not
declared means its fingerprint is incomplete, so the stage is not marked done (it runs again
next time) and, with ``BALLAST_STRICT_READS=1`` (the tests), the run fails.
"""

from __future__ import annotations

import json
import os
import time
from pathlib import Path
from typing import Any

from ballast import __version__
from ballast.config.record import covered, unwrap
from ballast.core.errors import StageError
from ballast.io.files import (
    fingerprint_obj,
    fingerprint_tree,
    remove_stale_temps,
    write_bytes_atomic,
    write_json,
)
from ballast.io.lock import run_lock
from ballast.io.manifest import library_versions
from ballast.stages import ORDER, STAGES, Run, Stage

STRICT_READS = "BALLAST_STRICT_READS"


def config_part(cfg: dict[str, Any], keys: tuple[str, ...]) -> dict[str, Any]:
    """The values of ``keys`` (dotted keys or whole sections) in a config dict."""
    out = {}
    for k in keys:
        cur: Any = cfg
        for part in k.split("."):
            cur = cur[part]
        out[k] = cur
    return out


def declared_keys(stage: Stage) -> tuple[str, ...]:
    """The config keys a stage's fingerprint covers (a stage that loads the base model depends
    on ``base_model`` too)."""
    keys = stage.keys
    if stage.base_model and "base_model" not in keys:
        keys = (*keys, "base_model")
    return keys


def fingerprint(run: Run, name: str) -> tuple[str, dict[str, Any]]:
    stage = STAGES[name]
    inputs = {
        n: fingerprint_tree(run.path(n)) if run.path(n).exists() else "missing"
        for n in stage.inputs
    }
    if stage.external is not None:
        inputs |= stage.external(run)
    if stage.base_model:
        inputs["base_model"] = run.base_fp
    parts = {
        "stage": name,
        "ballast": __version__,
        "config": config_part(unwrap(run.cfg).to_dict(), declared_keys(stage)),
        "inputs": inputs,
        "force": run.force_export if name == "export" else False,
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
    if not all(run.path(o).exists() for o in STAGES[stage].outputs):
        return None
    return done


def run_stage(run: Run, stage: str, *, skip_unchanged: bool = False) -> dict[str, Any]:
    """Run one stage; with ``skip_unchanged``, reuse its last result if nothing changed.

    The run folder is locked for the whole stage (a second process is refused). Under torchrun
    (PyTorch DDP) only the train stage may run; every process trains, and only rank 0 writes
    files (and takes the lock)."""
    from ballast.stages.train.full import process_rank

    rank, world = process_rank()
    if world > 1:
        if stage != "train":
            raise StageError(
                f"only `ballast train` runs under torchrun (WORLD_SIZE={world}); run the "
                f"{stage} stage as a single process"
            )
        if rank != 0:
            started = time.perf_counter()
            summary = STAGES[stage].run(run)
            seconds = round(time.perf_counter() - started, 3)
            return {"stage": stage, "skipped": False, "seconds": seconds, "summary": summary}
    run.dir.mkdir(parents=True, exist_ok=True)
    with run_lock(run.dir):
        return _run_locked(run, stage, skip_unchanged)


def _say_what_changed(run: Run, stage: str, parts: dict[str, Any]) -> None:
    """When a stage runs again because settings it reads changed, say which (never silently:
    a dropped questions file, say, changes what the gate judges)."""
    try:
        old = json.loads(done_path(run, stage).read_text("utf-8")).get("config")
    except (OSError, ValueError, AttributeError):
        return
    if not isinstance(old, dict):
        return
    changed = [k for k in parts["config"] if k in old and old[k] != parts["config"][k]]
    if changed:

        def short(v: Any) -> str:
            text = json.dumps(v, sort_keys=True)
            return text if len(text) <= 60 else text[:57] + "..."

        diffs = []
        for k in changed:
            a, b = old[k], parts["config"][k]
            if isinstance(a, dict) and isinstance(b, dict):
                diffs += [f"{k}.{x} {short(a.get(x))} -> {short(b.get(x))}"
                          for x in sorted(set(a) | set(b)) if a.get(x) != b.get(x)]  # fmt: skip
            else:
                diffs.append(f"{k} {short(a)} -> {short(b)}")
        run.progress.info(f"{stage}: settings changed since its last run: {'; '.join(diffs)}")


def stage_title(spec: Stage) -> str:
    """What a stage does, from the first line of its package's docstring ("Stage mine: hard
    negatives for the training pairs -> negatives.jsonl, ...")."""
    import sys

    doc = (sys.modules[spec.run.__module__].__doc__ or spec.name).strip().splitlines()[0]
    return doc.split(":", 1)[1].strip().rstrip(".") if doc.startswith("Stage ") else doc


def _outputs_state(run: Run, spec: Stage) -> dict[str, tuple[int, int, int]]:
    """Each output file's inode, size and modification time (a folder's, file by file): any
    replacement, by rename or in place, changes one of them."""
    state = {}
    for out in spec.outputs:
        path = run.path(out)
        files = sorted(path.rglob("*")) if path.is_dir() else [path]
        for f in files:
            try:
                st = f.lstat()
            except OSError:
                continue
            state[str(f)] = (st.st_ino, st.st_size, st.st_mtime_ns)
    return state


def _run_locked(run: Run, stage: str, skip_unchanged: bool) -> dict[str, Any]:
    spec = STAGES[stage]
    fp, parts = fingerprint(run, stage)
    if skip_unchanged and stage != "export":
        done = is_current(run, stage, fp)
        if done is not None:
            run.progress.info(f"{stage}: unchanged, skipped")
            return {"stage": stage, "skipped": True, "summary": done["summary"]}
    run.progress.info(f"── {stage} ({ORDER.index(stage) + 1}/{len(ORDER)}): {stage_title(spec)}")
    _say_what_changed(run, stage, parts)
    # the marker goes first, so that a run killed between two outputs is never taken as done;
    # a stage that fails (a bad input found while reading) before replacing any output gets it
    # back: its outputs still match it. An interrupted stage (Ctrl-C) does not: it is reported
    # as not finished, and runs again.
    marker = done_path(run, stage)
    kept = marker.read_bytes() if marker.is_file() else None
    outputs_before = _outputs_state(run, spec) if kept is not None else None
    marker.unlink(missing_ok=True)
    for out in spec.outputs:  # what a killed run of this stage left half-built
        remove_stale_temps(run.dir, Path(out).name)
    reads: set[str] = set()
    started = time.perf_counter()
    try:
        summary = spec.run(run.recording(reads))
    except Exception:
        if outputs_before is not None and _outputs_state(run, spec) == outputs_before:
            write_bytes_atomic(marker, kept)
        raise
    seconds = round(time.perf_counter() - started, 3)
    keys = declared_keys(spec)
    undeclared = sorted(k for k in reads if not covered(k, keys))
    if undeclared:
        message = (
            f"{stage}: read config key(s) {', '.join(undeclared)} that its declaration does not "
            "list, so its fingerprint misses them; it will run again next time (a bug in "
            "ballast: please report it)"
        )
        if os.environ.get(STRICT_READS) == "1":
            raise RuntimeError(message)
        run.progress.info(message)
    # the settings the outputs were made with: written only once the stage has succeeded, so
    # a refused setting never replaces the record of the files that are there
    if run.persist_config:
        write_json(run.path("config.json"), unwrap(run.cfg).to_dict())
    write_json(
        done_path(run, stage),
        {
            "stage": stage,
            "fingerprint": None if undeclared else fp,
            **parts,
            "keys_read": sorted(reads),
            "libraries": library_versions(),
            "seconds": seconds,
            "summary": summary,
        },
    )
    return {"stage": stage, "skipped": False, "seconds": seconds, "summary": summary}


def run_all(run: Run, *, stop_before: str | None = None) -> list[dict[str, Any]]:
    """Every stage in order, skipping unchanged ones; stops after the gate if it failed. The run
    folder stays locked from the first stage to the last."""
    from ballast.stages.train.full import process_rank

    if process_rank()[1] > 1:
        return _run_all(run, stop_before)
    run.dir.mkdir(parents=True, exist_ok=True)
    with run_lock(run.dir):
        return _run_all(run, stop_before)


def _run_all(run: Run, stop_before: str | None) -> list[dict[str, Any]]:
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
