"""Typer commands. Heavy libraries are imported inside commands, so --help answers at once."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated, Any

import typer

from ballast.cli.output import StderrProgress, emit_json, gate_text, metrics_table, stage_line
from ballast.core.errors import BallastError


class _Group(typer.core.TyperGroup):
    """The command list shows each command's first paragraph whole, not cut at 45 characters."""

    def format_commands(self, ctx: Any, formatter: Any) -> None:
        for cmd in self.commands.values():
            if not cmd.short_help and cmd.help:
                cmd.short_help = " ".join(cmd.help.split("\n\n")[0].split())
        super().format_commands(ctx, formatter)


app = typer.Typer(
    cls=_Group,
    add_completion=False,
    invoke_without_command=True,
    context_settings={"help_option_names": ["-h", "--help"]},
    rich_markup_mode=None,
    help="Adapt a sentence-embedding model to your documents on a CPU, and prove the gain "
    "on every evaluation split before it ships.\n\n"
    "Exit codes: 0 ok (the gate passed on real questions), 1 the release gate failed, 2 bad "
    "input, usage or config, 3 the gate passed on synthetic queries only (no real question "
    "checked the model).",
)

@app.callback()
def _main(
    ctx: typer.Context,
    version: Annotated[
        bool, typer.Option("--version", help="Print ballast's version and exit.")
    ] = False,
) -> None:
    if version:
        from ballast import __version__

        sys.stdout.write(f"ballast {__version__}\n")
        raise typer.Exit(0)
    if ctx.invoked_subcommand is None:  # bare `ballast`: the help, and success
        sys.stdout.write(ctx.get_help() + "\n")
        raise typer.Exit(0)


Target = Annotated[
    Path, typer.Argument(metavar="TARGET", help="A config file (.toml) or a run folder.")
]
Sets = Annotated[
    list[str] | None,
    typer.Option(
        "--set", "-s", metavar="KEY=VALUE", help="Override a config key, e.g. train.epochs=2."
    ),
]
Json = Annotated[bool, typer.Option("--json", help="Print one JSON document on stdout.")]
Quiet = Annotated[bool, typer.Option("--quiet", "-q", help="No progress on stderr.")]
Force = Annotated[
    bool, typer.Option("--force", help="Export even if the gate failed (recorded in the manifest).")
]

Onnx = Annotated[
    bool,
    typer.Option(
        "--onnx", help="Also write model.onnx (pooling and normalisation inside the graph)."
    ),
]
Int8 = Annotated[
    bool,
    typer.Option(
        "--quantize-int8",
        help="Also write model_int8.onnx (implies --onnx); its metric change is measured.",
    ),
]

SHOWN = ["ndcg@10", "mrr@10", "recall@10"]


def _fail(exc: BallastError, as_json: bool = False) -> None:
    """The error on stderr, and with --json also as one JSON document on stdout."""
    sys.stderr.write(f"error: {exc}\n")
    if as_json:
        fields = {k: getattr(exc, k, None) for k in ("path", "line", "field", "key")}
        emit_json({"error": str(exc), "exit_code": exc.exit_code,
                   **{k: v for k, v in fields.items() if v is not None}})  # fmt: skip
    raise typer.Exit(exc.exit_code)


def _load(target: Path, sets: list[str] | None) -> Any:
    from ballast.config import load_config, load_run_config

    if target.is_dir():
        return load_run_config(target, sets or [])
    if not target.exists():
        from ballast.core.errors import ConfigError

        raise ConfigError("no such config file or run folder", source=str(target))
    return load_config(target, sets or [])


def _stage(
    stage: str,
    target: Path,
    sets: list[str] | None,
    as_json: bool,
    quiet: bool,
    force: bool = False,
) -> None:
    from ballast.pipeline import run_stage
    from ballast.stages import Run

    try:
        cfg = _load(target, sets)
        run = Run(cfg, StderrProgress(quiet or as_json), force_export=force)
        run.persist_config = not (target.is_dir() and sets)  # a one-off --set does not stick
        result = run_stage(run, stage)
    except BallastError as exc:
        _fail(exc, as_json)
    except KeyboardInterrupt:
        _interrupted(run)
    if as_json:
        emit_json(result)
    else:
        from ballast.stages import STAGES

        typer.echo(stage_line(result))
        # export declares no run-folder outputs: it writes the bundle its summary names
        wrote = [str(run.path(o)) for o in STAGES[stage].outputs]
        wrote = wrote or [str(result.get("summary", {}).get("bundle", ""))]
        typer.echo("wrote " + ", ".join(w for w in wrote if w))
        if stage == "evaluate":
            typer.echo(metrics_table(_read(run.path("metrics.json")), SHOWN))
        if stage == "gate":
            typer.echo(gate_text(_read(run.path("gate.json"))))
    if stage == "gate":
        _exit_for(_read(run.path("gate.json")))


def _interrupted(run: Any) -> None:
    """Ctrl-C: say what is kept and how to go on, then exit 130 (128 + SIGINT)."""
    from ballast.stages import ORDER

    kept = [s for s in ORDER if run.path(f"{s}.done.json").is_file()]
    left = [s for s in ORDER if s not in kept]
    sys.stderr.write(
        f"\ninterrupted. Finished stages are kept ({', '.join(kept) or 'none'}); the stage that "
        f"was running will run again. Continue with `ballast run` on the same config "
        f"({len(left)} stage(s) to go).\n"
    )
    raise typer.Exit(130)


def _read(p: Path) -> Any:
    return json.loads(p.read_text("utf-8"))


def _make_stage_command(stage: str, doc: str) -> None:
    if stage == "export":

        def command(
            target: Target,
            set_: Sets = None,
            as_json: Json = False,
            quiet: Quiet = False,
            force: Force = False,
            onnx: Onnx = False,
            quantize_int8: Int8 = False,
        ) -> None:
            extra = ["export.onnx=true"] * onnx + ["export.quantize_int8=true"] * quantize_int8
            _stage(stage, target, [*(set_ or []), *extra], as_json, quiet, force)
    else:

        def command(
            target: Target, set_: Sets = None, as_json: Json = False, quiet: Quiet = False
        ) -> None:
            _stage(stage, target, set_, as_json, quiet)

    command.__doc__ = doc
    app.command(stage)(command)


for _name, _doc in [
    ("ingest", "Read the documents folder and cut it into passages (passages.jsonl)."),
    ("synth", "Write training queries for the passages; import human questions (queries.jsonl)."),
    ("split", "Split by document into train/dev/test, write TREC qrels and a leakage audit."),
    ("check", "Pre-flight: can each gated split decide (enough queries; the smallest gain it "
     "can detect)? check.json; exit 2 before any training if not."),
    ("mine", "Mine hard negatives for the training pairs with the base model (negatives.jsonl)."),
    ("teach", "Check a teacher on dev and score the training candidates with it (labels.jsonl)."),
    ("train", "Fine-tune the base model on the training pairs (model/)."),
    ("gate", "Decide whether the tuned model ships (gate.json); exit 1 if it does not."),
    ("report", "Write report.html (charts, examples, verdict) and report.md for the run."),
    ("export", "Write the versioned bundle with its manifest for the index builder."),
]:
    _make_stage_command(_name, _doc)


@app.command("evaluate")
def evaluate_command(
    target: Annotated[
        Path | None,
        typer.Argument(
            help="A config file or run folder; or leave out and give --qrels/--queries/--passages."
        ),
    ] = None,
    model: Annotated[
        list[str] | None,
        typer.Option(
            "--model",
            "-m",
            metavar="NAME=PATH",
            help="A model to compare (a local sentence-transformers folder or packaged:NAME); "
            "repeat; the first is the baseline. Only with --qrels.",
        ),
    ] = None,
    queries: Annotated[Path | None, typer.Option(help="Queries: JSONL {id,text} or TSV.")] = None,
    qrels: Annotated[Path | None, typer.Option(help="TREC qrels file.")] = None,
    passages: Annotated[Path | None, typer.Option(help="Passages: JSONL {id,text} or TSV.")] = None,
    out: Annotated[
        Path | None,
        typer.Option(help="Folder for metrics.json, per_query.csv, runs/ (with --qrels)."),
    ] = None,
    set_: Sets = None,
    as_json: Json = False,
    quiet: Quiet = False,
) -> None:
    """Score base and tuned models on every evaluation split (metrics.json); or compare any
    models on any TREC-style set (--model, --queries, --qrels, --passages, --out)."""
    files = [queries, qrels, passages]
    if not any(files) and not model:
        if target is None:
            sys.stderr.write(
                "error: give a config file or run folder, or --qrels, --queries, "
                "--passages, --model and --out\n"
            )
            raise typer.Exit(2)
        _stage("evaluate", target, set_, as_json, quiet)
        return
    from ballast.config import load_config
    from ballast.stages.evaluate import evaluate_files

    try:
        if not all(files) or not out or not model:
            from ballast.core.errors import ConfigError

            raise ConfigError(
                "comparing models on a set of files needs --queries, --qrels, "
                "--passages, --out and at least one --model"
            )
        cfg = _load(target, set_) if target is not None else load_config(None, set_ or [])
        summary = evaluate_files(
            model,
            queries,
            qrels,
            passages,
            out,
            cfg,  # type: ignore[arg-type]
            StderrProgress(quiet or as_json),
        )
    except BallastError as exc:
        _fail(exc, as_json)
    if as_json:
        emit_json(summary)
    else:
        typer.echo(metrics_table(summary, SHOWN))
        typer.echo(f"wrote {out / 'metrics.json'}, {out / 'per_query.csv'}, {out / 'runs'}/")


def _run(cfg: Any, as_json: bool, quiet: bool, force: bool) -> None:
    from ballast.pipeline import run_all
    from ballast.stages import Run

    progress = StderrProgress(quiet or as_json)
    run = Run(cfg, progress, force_export=force)
    try:
        results = run_all(run)
    except BallastError as exc:
        _fail(exc, as_json)
    except KeyboardInterrupt:
        _interrupted(run)
    verdict = _read(run.path("gate.json"))
    exported = next((r for r in results if r["stage"] == "export" and not r["skipped"]), None)
    if as_json:
        emit_json(
            {
                "stages": results,
                "metrics": _read(run.path("metrics.json")),
                "gate": verdict,
                "bundle": exported["summary"]["bundle"] if exported else None,
            }
        )
    else:
        for r in results:
            typer.echo(stage_line(r))
        typer.echo("")
        typer.echo(metrics_table(_read(run.path("metrics.json")), SHOWN, verdict))
        typer.echo("")
        typer.echo(gate_text(verdict))
        if run.path("report.html").is_file():
            typer.echo(f"report: {run.path('report.html')}")
        if exported:
            typer.echo(f"bundle: {exported['summary']['bundle']}")
        else:
            typer.echo(
                "bundle: not exported (the gate failed; `ballast export --force` "
                "overrides, and the manifest records it)"
            )
        typer.echo(next_step(verdict, exported["summary"]["bundle"] if exported else None))
    _exit_for(verdict)


def next_step(verdict: dict[str, Any], bundle: str | None) -> str:
    """One line: what to do now, by the verdict."""
    if not verdict["passed"]:
        return (
            "next: read report.html (where the tuned model lost, query by query), then try "
            "another recipe chosen on the dev splits (docs/training.md, docs/teaching.md)"
        )
    if verdict.get("evidence") != "real":
        return ("next: write 30-100 real questions (`ballast write`, README) so the verdict "
                "rests on them, not on queries like those the model trained on")  # fmt: skip
    return (f"next: `ballast verify {bundle}`, then hand the bundle to the index builder "
            "(README, 'Loading a bundle in an index builder')")  # fmt: skip


# A pass that rests on synthetic queries alone is not a plain pass: scripts that check for 0
# see it; 3 says "passed, but no real question checked it".
SYNTHETIC_PASS = 3


def _exit_for(verdict: dict[str, Any]) -> None:
    if not verdict["passed"]:
        raise typer.Exit(1)
    if verdict.get("evidence") == "synthetic":
        raise typer.Exit(SYNTHETIC_PASS)


@app.command("run")
def run_command(
    config: Annotated[Path, typer.Argument(help="A config file (.toml).")],
    set_: Sets = None,
    as_json: Json = False,
    quiet: Quiet = False,
    force: Force = False,
) -> None:
    """Run every stage in order, skipping those whose inputs and settings are unchanged."""
    try:
        cfg = _load(config, set_)
    except BallastError as exc:
        _fail(exc, as_json)
    _run(cfg, as_json, quiet, force)


def demo_config() -> Path:
    """configs/demo.toml of the source checkout: the current folder's, else the one beside an
    editable install's src/. The demo documents ship with the source, not with the wheel."""
    for base in (Path.cwd(), Path(__file__).resolve().parents[3]):
        if (base / "configs" / "demo.toml").is_file():
            return base / "configs" / "demo.toml"
    raise BallastError(
        "the demo needs ballast's source checkout (configs/demo.toml and data_demo/); run "
        "`ballast demo` from its folder"
    )


@app.command("demo")
def demo_command(set_: Sets = None, as_json: Json = False, quiet: Quiet = False) -> None:
    """The whole pipeline on the bundled demo domain (configs/demo.toml into runs/demo/)."""
    from ballast.config import load_config

    try:
        cfg = load_config(demo_config(), set_ or [])
    except BallastError as exc:
        _fail(exc, as_json)
    if not quiet and not as_json:
        sys.stderr.write(
            "ballast demo: the invented Kestrel Hollow Cider Works handbook "
            "(fiction, not operational or food-safety guidance)\n"
        )
    _run(cfg, as_json, quiet, False)


@app.command("init")
def init_command(folder: Annotated[Path, typer.Argument(help="Folder for a new project.")]) -> None:
    """Write a commented config template, an empty documents folder and a copy of the default
    query-writing prompts to edit (prompts/)."""
    from ballast.cli.template import TEMPLATE
    from ballast.io.files import write_text_atomic
    from ballast.stages.synth.prompts import default_prompts_dir

    cfg = folder / "ballast.toml"
    if cfg.exists():
        sys.stderr.write(f"error: {cfg} already exists; not overwritten\n")
        raise typer.Exit(2)
    (folder / "docs").mkdir(parents=True, exist_ok=True)
    prompts = folder / "prompts"
    if not prompts.exists():
        prompts.mkdir()
        for f in sorted(default_prompts_dir().glob("*.toml")):
            write_text_atomic(prompts / f.name, f.read_text("utf-8"))
    write_text_atomic(cfg, TEMPLATE.replace("{name}", _slug(folder.resolve().name)))
    typer.echo(
        f"wrote {cfg}, {folder / 'docs'}/ and {prompts}/ (the default prompts, to edit); put "
        f"your documents in docs/, then run `ballast run {cfg}`"
    )


def _slug(name: str) -> str:
    s = "".join(c if c.isalnum() or c in "._-" else "-" for c in name).strip("-.")
    return s or "project"


Bundle = Annotated[Path, typer.Argument(help="A bundle folder (with manifest.json).")]


@app.command("embed")
def embed_command(
    bundle: Bundle,
    passages: Annotated[Path, typer.Argument(help="Passages: JSONL {id,text} or TSV id<TAB>text.")],
    out: Annotated[
        Path,
        typer.Option(
            "--out",
            "-o",
            help="Output path without extension: OUT.npy + OUT.ids.txt, or OUT.parquet.",
        ),
    ] = Path("embeddings"),
    fmt: Annotated[str, typer.Option("--format", help="npy or parquet.")] = "npy",
    backend: Annotated[
        str, typer.Option("--backend", help="pytorch, onnx or onnx-int8 (if exported).")
    ] = "pytorch",
    batch_size: Annotated[int, typer.Option("--batch-size", help="Texts per batch.")] = 64,
    queries: Annotated[
        bool,
        typer.Option("--queries", help="The texts are queries (a query-side adapter maps them)."),
    ] = False,
    as_json: Json = False,
    quiet: Quiet = False,
) -> None:
    """Write the bundle's embeddings of a passages (or queries) file, in batches, with
    progress."""
    from ballast.bundle.embed import embed_file

    try:
        result = embed_file(
            bundle,
            passages,
            out,
            fmt=fmt,
            backend=backend,
            batch_size=batch_size,
            queries=queries,
            progress=StderrProgress(quiet or as_json),
        )
    except BallastError as exc:
        _fail(exc, as_json)
    if as_json:
        emit_json(result)
    else:
        typer.echo(
            f"embedded {result['passages']} {result['texts']} ({result['dimension']}-d, "
            f"{result['backend']}): {', '.join(result['files'])}"
        )


@app.command("verify")
def verify_command(bundle: Bundle, as_json: Json = False, quiet: Quiet = False) -> None:
    """Check a bundle against its manifest: file and weight hashes, and a sample of
    embeddings re-computed; exit 2 on any mismatch."""
    from ballast.bundle.verify import verify_bundle

    try:
        result = verify_bundle(bundle, progress=StderrProgress(quiet or as_json))
    except BallastError as exc:
        _fail(exc, as_json)
    if as_json:
        emit_json(result)
    else:
        hashed = [c for c in result["checks"] if c["check"] == "sha256" and c["ok"]]
        if hashed:
            typer.echo(f"ok    sha256 of {len(hashed)} files matches the manifest")
        for c in result["checks"]:
            if c not in hashed:
                state = "ok  " if c["ok"] else "FAIL"
                typer.echo(f"{state}  {c['check']}: {c['file']}: {c['detail']}")
        typer.echo(f"bundle {'verified' if result['ok'] else 'does NOT match its manifest'}")
        typer.echo(f"note: {result['note']}")
    if not result["ok"]:
        for c in result["checks"]:
            if not c["ok"]:
                sys.stderr.write(f"error: {c['file']}: {c['detail']}\n")
        raise typer.Exit(2)
