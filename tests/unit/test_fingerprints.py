"""Which stages run again when a setting changes (common practice of build tools: a step reruns
exactly when something it reads changes). The expectations below are written from what each
stage does, not copied from the declarations; the recording config view (strict in the tests)
catches a stage that reads a key it does not declare."""

from __future__ import annotations

import copy
import dataclasses
from pathlib import Path

import pytest

from ballast import pipeline
from ballast.config import Config, load_config
from ballast.config.record import ConfigView, covered, section_dict, unwrap
from ballast.stages import ORDER, STAGES, Run

ALL_AFTER_TRAIN = {"train", "export"}

# section -> stages whose own fingerprint a change of any key in it changes
SECTION = {
    "ingest": {"ingest"},
    "synth": {"synth", "export"},
    "split": {"split"},
    "mine": {"mine", "export"},
    "teach": {"teach", "train", "export"},
    "train": {"train", "export"},
    "evaluate": {"evaluate"},
    "guard": {"evaluate", "report"},
    "gate": {"gate"},
    "export": {"export"},
}
# keys read outside their own section, or top-level keys
KEY = {
    "name": {"report", "export"},
    "seed": {"synth", "split", "mine", "teach", "train", "evaluate", "export"},
    "run_dir": set(),  # where the run lives, not what it computes
    "base_model": {"ingest", "check", "mine", "teach", "train", "evaluate", "export"},
    "mine.negatives": {"mine", "train", "export"},
    "synth.judge_generators": {"synth", "split", "export"},  # split sets their queries aside
    "train.max_seq_length": {"synth", "check", "mine", "teach", "train", "evaluate", "export"},
    "train.matryoshka_dims": {"train", "evaluate", "export"},
    "evaluate.batch_size": {"synth", "check", "mine", "teach", "train", "evaluate", "export"},
    "evaluate.encode_devices": {"mine", "evaluate"},
    "evaluate.bf16": {"synth", "check", "mine", "teach", "train", "evaluate"},  # every encoding
    # the search encodings; train and its safety net encode with PyTorch always
    "evaluate.backend": {"synth", "check", "mine", "teach", "evaluate"},
    # train keeps the best dev checkpoint by it; check estimates the detectable gain in it
    "gate.primary_metric": {"check", "teach", "train", "gate", "export"},
    "gate.splits": {"check", "train", "gate", "export"},  # export measures int8 on a gated split
    "gate.min_queries": {"split", "check", "train", "gate"},  # human keeps as many; pre-flight
    "train.mix_queries": {"check", "train", "export"},  # check refuses "real" with no human_dev
    "gate.alpha": {"check", "gate"},  # the detectable gain is computed at the gate's level
}


def leaves(d: dict, prefix: str = "") -> list[str]:
    out = []
    for k, v in d.items():
        if isinstance(v, dict):
            out += leaves(v, f"{prefix}{k}.")
        else:
            out.append(prefix + k)
    return out


KEYS = leaves(Config().to_dict())


def changed_stages(key: str) -> set[str]:
    base = Config().to_dict()
    other = copy.deepcopy(base)
    *path, last = key.split(".")
    cur = other
    for p in path:
        cur = cur[p]
    cur[last] = ["changed", cur[last]]
    return {
        name
        for name, stage in STAGES.items()
        if pipeline.config_part(base, pipeline.declared_keys(stage))
        != pipeline.config_part(other, pipeline.declared_keys(stage))
    }


def downstream(first: set[str]) -> set[str]:
    """Stages that run again: those whose settings changed, and then every stage reading a file
    one of them rewrote."""
    rerun = set(first)
    for name in ORDER:
        stage = STAGES[name]
        made = {o for s in rerun for o in STAGES[s].outputs}
        made |= {f"{s}.done.json" for s in rerun}
        if made & set(stage.inputs):
            rerun.add(name)
    return rerun


def test_every_key_is_known_to_the_table() -> None:
    assert len(KEYS) > 80
    for key in KEYS:
        assert key in KEY or key.split(".")[0] in SECTION, key


@pytest.mark.parametrize("key", KEYS)
def test_a_changed_key_reruns_exactly_the_stages_that_read_it(key: str) -> None:
    expected = KEY.get(key, SECTION.get(key.split(".")[0], set()))
    assert changed_stages(key) == expected


def test_the_two_gaps_of_the_hand_kept_list_are_closed() -> None:
    # train picks its best dev checkpoint by the gate's metric: changing it retrains and
    # everything after; the guard's settings reach evaluate (and the report)
    assert downstream(changed_stages("gate.primary_metric")) == {
        "check", "teach", "train", "evaluate", "gate", "report", "export"
    }
    assert downstream(changed_stages("guard.qrels")) == {"evaluate", "gate", "report", "export"}
    assert downstream(changed_stages("split.dev_fraction")) == set(ORDER) - {"ingest", "synth"}
    assert downstream(changed_stages("gate.min_gain")) == {"gate", "report", "export"}


def test_guard_file_contents_are_fingerprinted(tmp_path: Path) -> None:
    files = {}
    for name in ("queries", "qrels", "passages"):
        files[name] = tmp_path / f"guard.{name}"
        files[name].write_text("x\n", "utf-8")
    cfg = Config(
        name="g",
        run_dir=str(tmp_path / "run"),
        guard=dataclasses.replace(Config().guard, **{k: str(v) for k, v in files.items()}),
        evaluate=dataclasses.replace(Config().evaluate, splits=("dev", "test", "guard")),
    )
    run = Run(cfg)
    run.__dict__["base_fp"] = "stand-in"  # the base model's weights are not the point here
    before = {s: pipeline.fingerprint(run, s)[0] for s in ("evaluate", "report")}
    files["qrels"].write_text("y\n", "utf-8")
    after = {s: pipeline.fingerprint(run, s)[0] for s in ("evaluate", "report")}
    assert before["evaluate"] != after["evaluate"] and before["report"] != after["report"]


def test_the_view_records_what_is_read() -> None:
    reads: set[str] = set()
    view = ConfigView(Config(), reads)
    assert view.train.epochs == Config().train.epochs
    assert view.seed == 0
    _ = view.guard.enabled  # a property: the whole section counts as read
    assert reads == {"train.epochs", "seed", "guard"}
    assert section_dict(view.mine)["negatives"] == Config().mine.negatives and "mine" in reads
    assert unwrap(view) == Config() and covered("train.epochs", ("train",))
    assert not covered("training.epochs", ("train",)) and not covered("train", ("train.epochs",))
    with pytest.raises(dataclasses.FrozenInstanceError):
        view.seed = 3


def _stand_in(tmp_path: Path, reads_key: str) -> tuple[Run, str]:
    cfg = Config(name="s", run_dir=str(tmp_path / "run"))

    def stage(run: Run) -> dict:
        assert run.cfg.gate.min_gain is not None  # declared
        getattr(run.cfg.train, reads_key)  # not declared by the gate stage
        return {}

    return Run(cfg), stage


def test_an_undeclared_read_fails_in_strict_mode_and_is_never_marked_done(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    run, stage = _stand_in(tmp_path, "epochs")
    monkeypatch.setitem(STAGES, "gate", dataclasses.replace(STAGES["gate"], run=stage))
    with pytest.raises(RuntimeError, match="train.epochs"):
        pipeline.run_stage(run, "gate")
    monkeypatch.delenv(pipeline.STRICT_READS)
    first = pipeline.run_stage(run, "gate", skip_unchanged=True)
    again = pipeline.run_stage(run, "gate", skip_unchanged=True)
    assert not first["skipped"] and not again["skipped"]  # never served from a stale marker


def test_a_real_run_reruns_only_what_a_change_touches(tmp_path: Path) -> None:
    """ingest, synth and split run for real on a small folder; then one setting changes."""
    docs = tmp_path / "docs"
    docs.mkdir()
    for i in range(6):
        sentences = " ".join(
            f"Valve {i}{j} is checked every {j + 2} days by the crew." for j in range(8)
        )
        (docs / f"d{i}.md").write_text(f"# Doc {i}\n\n{sentences}\n", "utf-8")
    cfg_file = tmp_path / "ballast.toml"
    cfg_file.write_text(f'name = "r"\nrun_dir = "run"\n[ingest]\ndocs = "{docs}"\n', "utf-8")

    def ran(*sets: str) -> list[str]:
        run = Run(load_config(cfg_file, list(sets)))
        return [r["stage"] for r in pipeline.run_all(run, stop_before="check") if not r["skipped"]]

    assert ran() == ["ingest", "synth", "split"]
    assert ran() == []
    assert ran("split.dev_fraction=0.3") == ["split"]
    assert ran("split.dev_fraction=0.3", "synth.keywords_max_terms=3") == ["synth", "split"]
    assert ran("split.dev_fraction=0.3", "synth.keywords_max_terms=3", "gate.min_gain=0.5") == []
