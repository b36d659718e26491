"""Configuration: one frozen dataclass per stage (sections.py), loaded from TOML, overridden
with --set.

Every key is checked before any stage runs; an error names the key, the bad value and what is
allowed. Paths in a config file are relative to the folder of that file.
"""

from __future__ import annotations

import dataclasses
import difflib
import os
import tomllib
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ballast.config.sections import (
    EVAL_SPLITS,
    GATE_SPLITS,
    PACKAGED_BASE,
    SUPERIORITY_SPLITS,
    EvaluateConfig,
    ExportConfig,
    GateConfig,
    GuardConfig,
    IngestConfig,
    MineConfig,
    SplitConfig,
    SynthConfig,
    TeachConfig,
    TrainConfig,
    _fail,
    _range,
)
from ballast.core.errors import ConfigError


@dataclass(frozen=True)
class Config:
    name: str = "run"
    seed: int = 0
    run_dir: str = ""
    base_model: str = PACKAGED_BASE
    ingest: IngestConfig = field(default_factory=IngestConfig)
    synth: SynthConfig = field(default_factory=SynthConfig)
    split: SplitConfig = field(default_factory=SplitConfig)
    mine: MineConfig = field(default_factory=MineConfig)
    teach: TeachConfig = field(default_factory=TeachConfig)
    train: TrainConfig = field(default_factory=TrainConfig)
    evaluate: EvaluateConfig = field(default_factory=EvaluateConfig)
    guard: GuardConfig = field(default_factory=GuardConfig)
    gate: GateConfig = field(default_factory=GateConfig)
    export: ExportConfig = field(default_factory=ExportConfig)

    def __post_init__(self) -> None:
        if not self.name or not all(c.isalnum() or c in "._-" for c in self.name):
            _fail("name", self.name, "a non-empty name of letters, digits, '.', '_' or '-'")
        _range("seed", self.seed, 0, 2**32 - 1)
        self._resolve_auto_splits()
        for s in self.gate.splits:
            if s not in self.evaluate.splits:
                _fail(
                    "gate.splits",
                    s,
                    f"a split that evaluate.splits lists {list(self.evaluate.splits)}",
                )
        if "guard" in self.evaluate.splits and not self.guard.enabled:
            _fail(
                "evaluate.splits",
                "guard",
                "guard.queries, guard.qrels and guard.passages set when 'guard' is evaluated",
            )
        if "judge" in self.evaluate.splits and not self.synth.judge_generators:
            _fail(
                "evaluate.splits",
                "judge",
                "synth.judge_generators set when the 'judge' split is evaluated",
            )
        if self.teach.teacher != "none" and self.train.mode == "adapter":
            _fail("train.mode", "adapter", "'full' or 'lora' when teach.teacher is set")
        if self.teach.teacher != "none" and self.train.matryoshka_dims:
            _fail(
                "train.matryoshka_dims",
                list(self.train.matryoshka_dims),
                "[] when teach.teacher is set (the distillation losses are not nested)",
            )
        human = [s for s in self.evaluate.splits if s.startswith("human")]
        if human and not self.synth.questions:
            _fail(
                "evaluate.splits",
                human[0],
                "synth.questions set to a questions file when the 'human' split is evaluated",
            )

    def _resolve_auto_splits(self) -> None:
        """evaluate.splits = [] and gate.splits = [] mean "what the evidence allows": with
        real questions, the gate judges them on both sides (human must gain, human_heldout must
        not lose) and the synthetic test split is only reported."""
        real = ("human", "human_dev", "human_heldout") if self.synth.questions else ()
        judge = ("judge",) if self.synth.judge_generators else ()
        guard = ("guard",) if self.guard.enabled else ()
        if not self.evaluate.splits:
            ev = dataclasses.replace(self.evaluate, splits=("dev", "test", *judge, *real, *guard))
            object.__setattr__(self, "evaluate", ev)
        if not self.gate.splits:
            judged = ("human", "human_heldout") if real else judge or ("test",)
            gate = dataclasses.replace(self.gate, splits=(*judged, *guard))
            object.__setattr__(self, "gate", gate)
        if guard and "guard" not in self.evaluate.splits:  # a guard set that nothing reads
            _fail("evaluate.splits", list(self.evaluate.splits),
                  "a list with 'guard' in it, since guard.* is set (or [] to follow the "
                  "evidence)")  # fmt: skip

    def to_dict(self) -> dict[str, Any]:
        return _to_plain(dataclasses.asdict(self))

    @property
    def run_path(self) -> Path:
        return Path(self.run_dir or f"runs/{self.name}")


SECTIONS: dict[str, type] = {
    "ingest": IngestConfig,
    "synth": SynthConfig,
    "split": SplitConfig,
    "mine": MineConfig,
    "teach": TeachConfig,
    "train": TrainConfig,
    "evaluate": EvaluateConfig,
    "guard": GuardConfig,
    "gate": GateConfig,
    "export": ExportConfig,
}
PATH_KEYS = {
    ("guard", "queries"),
    ("guard", "qrels"),
    ("guard", "passages"),
    ("ingest", "docs"),
    ("synth", "questions"),
    ("synth", "prompts"),
    ("synth", "llm_model"),
    ("mine", "rescorer_model"),
    ("teach", "model"),
    ("", "run_dir"),
    ("", "base_model"),
    ("export", "dir"),
}


def _to_plain(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {k: _to_plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_to_plain(v) for v in obj]
    return obj


def _unknown(key: str, allowed: list[str]) -> ConfigError:
    close = difflib.get_close_matches(key.rsplit(".", 1)[-1], allowed, n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    return ConfigError(f"no such key{hint}; allowed keys: {', '.join(allowed)}", key=key)


def _coerce(key: str, value: Any, tp: Any) -> Any:
    origin = typing.get_origin(tp)
    if origin is tuple:
        item = typing.get_args(tp)[0]
        kind = {int: "whole numbers", float: "numbers"}.get(item, "strings")
        accepted = (int, float) if item is float else item  # 0 and 1 are numbers too
        if not isinstance(value, (list, tuple)):
            _fail(key, value, f"a list of {kind}")
        if not all(isinstance(v, accepted) and not isinstance(v, bool) for v in value):
            _fail(key, value, f"a list of {kind}")
        return tuple(float(v) for v in value) if item is float else tuple(value)
    if tp is bool:
        if not isinstance(value, bool):
            _fail(key, value, "true or false")
        return value
    if tp == bool | str:  # a switch with an "auto" setting
        if not isinstance(value, bool) and value != "auto":
            _fail(key, value, 'true, false or "auto"')
        return value
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            _fail(key, value, "an integer")
        return value
    if tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            _fail(key, value, "a number")
        return float(value)
    if tp is str:
        if not isinstance(value, str):
            _fail(key, value, "a string")
        return value
    raise AssertionError(f"unhandled config type {tp}")  # pragma: no cover - programming error


def _build(cls: type, data: dict[str, Any], prefix: str) -> Any:
    hints = typing.get_type_hints(cls)
    names = [f.name for f in dataclasses.fields(cls)]
    kwargs = {}
    for key, value in data.items():
        full = f"{prefix}{key}"
        if key not in names:
            raise _unknown(full, names)
        tp = hints[key]
        if isinstance(tp, type) and dataclasses.is_dataclass(tp):
            if not isinstance(value, dict):
                _fail(full, value, f"a table [{full}]")
            kwargs[key] = _build(tp, value, f"{full}.")
        else:
            kwargs[key] = _coerce(full, value, tp)
    return cls(**kwargs)


def _parse_override(item: str) -> tuple[list[str], Any]:
    if "=" not in item:
        raise ConfigError(f"--set {item!r}: expected KEY=VALUE, like train.epochs=2")
    key, raw = item.split("=", 1)
    key = key.strip()
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw
    return key.split("."), value


def _resolve_paths(data: dict[str, Any], base: Path) -> None:
    for section, key in PATH_KEYS:
        table = data.get(section, {}) if section else data
        if not isinstance(table, dict):
            continue
        value = table.get(key)
        if not isinstance(value, str) or not value or value.startswith("packaged:"):
            continue
        p = Path(value).expanduser()
        table[key] = os.path.normpath(p if p.is_absolute() else (base / p))


def load_config(
    path: str | Path | None = None, overrides: list[str] | tuple[str, ...] = ()
) -> Config:
    """Load a TOML config (or the defaults), apply ``KEY=VALUE`` overrides, validate."""
    data: dict[str, Any] = {}
    source = None
    if path is not None:
        path = Path(path)
        source = str(path)
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise ConfigError(f"cannot read config: {exc.strerror}", source=source) from None
        try:
            data = tomllib.loads(raw.decode("utf-8"))
        except UnicodeDecodeError:
            raise ConfigError("not valid UTF-8", source=source) from None
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"not valid TOML: {exc}", source=source) from None
        _resolve_paths(data, path.parent)
    return build_config(data, overrides, source=source, folder=path.parent if path else None)


def load_run_config(run_dir: str | Path, overrides: list[str] | tuple[str, ...] = ()) -> Config:
    """The config a run folder was made with (its ``config.json``), plus overrides."""
    import json

    p = Path(run_dir) / "config.json"
    try:
        data = json.loads(p.read_text("utf-8"))
    except FileNotFoundError:
        raise ConfigError(
            "no config.json here: give the config file, or a run folder that a stage has written",
            source=str(run_dir),
        ) from None
    except (ValueError, UnicodeDecodeError):
        raise ConfigError("config.json is damaged; give the config file", source=str(p)) from None
    data["run_dir"] = str(run_dir)
    return build_config(data, overrides, source=str(p))


def build_config(
    data: dict[str, Any],
    overrides: list[str] | tuple[str, ...] = (),
    *,
    source: str | None = None,
    folder: Path | None = None,
) -> Config:
    """A checked config from ``data`` and ``KEY=VALUE`` overrides. ``folder``: the config
    file's folder, where the run folder defaults to (``runs/<name>`` beside the file, as the
    template says; without a file, under the current directory)."""
    for item in overrides:
        parts, value = _parse_override(item)
        table = data
        for p in parts[:-1]:
            table = table.setdefault(p, {})
            if not isinstance(table, dict):
                raise ConfigError("is not a table", key=".".join(parts[:-1]))
        table[parts[-1]] = value
    if folder is not None and not data.get("run_dir") and isinstance(data.get("name", ""), str):
        data["run_dir"] = os.path.normpath(folder / "runs" / data.get("name", "run"))
    try:
        return _build(Config, data, "")
    except ConfigError as exc:
        if source and not exc.source:
            raise ConfigError(exc.detail, key=exc.key, source=source) from None
        raise


__all__ = [
    "EVAL_SPLITS",
    "GATE_SPLITS",
    "SUPERIORITY_SPLITS",
    "PACKAGED_BASE",
    "Config",
    "EvaluateConfig",
    "ExportConfig",
    "GateConfig",
    "GuardConfig",
    "IngestConfig",
    "MineConfig",
    "SplitConfig",
    "SynthConfig",
    "TeachConfig",
    "TrainConfig",
    "build_config",
    "load_config",
    "load_run_config",
]
