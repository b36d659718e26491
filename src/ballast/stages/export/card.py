"""The bundle's model card (README.md): what a person reads before using the model — the base
model and its licence, the data it was tuned on, the metrics with their intervals, the verdict
and what it rests on, the intended use, the limits and the cautions. Everything in it comes from
the manifest and the run's stage summaries; nothing is written by hand."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

CARD = "README.md"
UNKNOWN_LICENCE = "unknown: the base model folder names none; check its own terms"


def base_licence(base_dir: Path) -> str:
    """The ``license:`` of the base model's README front matter (the model hub's convention),
    or ``UNKNOWN_LICENCE``."""
    readme = base_dir / "README.md"
    try:
        text = readme.read_text("utf-8", errors="replace")
    except OSError:
        return UNKNOWN_LICENCE
    front = re.match(r"---\n(.*?)\n---", text, re.S)
    found = re.search(r"^license:\s*['\"]?([^'\"\n]+)", front.group(1), re.M) if front else None
    return found.group(1).strip() if found else UNKNOWN_LICENCE


def _cell(v: Any) -> str:
    return "" if v is None else f"{v:+.4f}" if isinstance(v, float) else str(v)


def model_card(manifest: dict[str, Any], summaries: dict[str, dict[str, Any]]) -> str:
    gate, base, train = manifest["gate"], manifest["base_model"], manifest["training"]
    metric = gate["primary_metric"]
    ingest, synth = summaries.get("ingest", {}), summaries.get("synth", {})
    teacher = train.get("teacher") or {}
    written = ", ".join(
        f"{k} {v}" for k, v in synth.items() if isinstance(v, int) and k not in ("human", "total")
    )
    verdict = ("PASSED" if gate["passed"] else "FAILED") + (
        " on real questions" if gate["evidence"] == "real" else " on synthetic queries only")
    lines = [
        f"# {manifest['name']} {manifest['version']}",
        "",
        f"A sentence-embedding model tuned by ballast from `{base['id']}` on one "
        "organisation's documents. Load it with `SentenceTransformer(path)`; check it first "
        "with `ballast verify`.",
        "",
        "## Verdict",
        "",
        f"**{verdict}.** {gate['summary']}",
        "",
    ]
    if gate.get("forced"):
        lines += ["**Exported with --force although the gate failed.**", ""]
    lines += [
        "| split | rule | gain in " + metric + " | 95% interval | passed |",
        "|---|---|---|---|---|",
        *(f"| {s['split']} | {s['rule']} | {_cell(s.get('gain'))} | "
          f"[{_cell(s.get('ci_low'))}, {_cell(s.get('ci_high'))}] | "
          f"{'yes' if s['passed'] else 'no'} |" for s in gate["splits"]),  # fmt: skip
        "",
        "## Metrics (base vs tuned, every split evaluated)",
        "",
        "| split | queries | base | tuned | difference | 95% interval | p |",
        "|---|---|---|---|---|---|---|",
    ]
    for split, info in manifest["metrics"].items():
        m = info.get(metric)
        if m:
            lines.append(
                f"| {split} | {info['n_queries']} | {m['base']:.4f} | {m['tuned']:.4f} "
                f"| {m['diff']:+.4f} | [{m['ci'][0]:+.4f}, {m['ci'][1]:+.4f}] "
                f"| {m['p_value']:.4f} |"
            )
    mix = (train.get("mix") or {}).get("weight")
    lines += [
        "",
        "## Base model and licence",
        "",
        f"- base model: `{base['id']}`; licence: **{base.get('license', UNKNOWN_LICENCE)}**. "
        "The tuned weights derive from it: its licence applies to them.",
        f"- embedding dimension {manifest['model'].get('dimension')}, reads up to "
        f"{manifest['model'].get('max_seq_length')} tokens (trained on up to "
        f"{manifest['model'].get('trained_max_seq_length')}).",
        "",
        "## Data",
        "",
        f"- {ingest.get('documents', '?')} documents, {ingest.get('passages', '?')} passages.",
        f"- {train.get('pairs', '?')} training queries, written from the training documents "
        f"by ballast's generators ({written}); "
        f"{synth.get('human', 0)} real questions, which never train the model.",
        f"- training: {train.get('steps', '?')} steps, seed {train.get('seed')}"
        + (f"; weights mixed with the base model at {mix:g} (the safety net, chosen on dev)"
           if mix is not None else "")  # fmt: skip
        + (f"; taught by the {teacher['teacher']} teacher ({teacher.get('loss')})"
           if teacher.get("used") else "") + ".",  # fmt: skip
        "",
        "## Intended use",
        "",
        "Retrieval over the same collection (and documents like it): embedding passages and "
        "questions for semantic search or retrieval-augmented generation.",
        "",
        "## Limits and cautions",
        "",
        "- The figures hold for this collection and questions like those evaluated; on other "
        "text the model may do worse than the base model. The held-out splits say how it did "
        "on documents it never saw.",
        "- A retrieval model finds passages; it does not check that they are correct, current "
        "or safe to act on. Where answers guide maintenance, health or legal decisions, a "
        "qualified person checks the source before anyone acts on it.",
        "- Passages of the training documents shaped the weights: treat the bundle with the "
        "same confidentiality as those documents.",
        "- Verify the files before use (`ballast verify`); the manifest is not signed.",
        "",
    ]
    return "\n".join(lines)
