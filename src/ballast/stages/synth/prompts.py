"""Few-shot prompt templates, one TOML file a query style, that users edit.

A template holds an instruction, the labels that introduce a passage and a query, and a few
worked examples. The same template renders two ways: as plain text for a local base model
(the examples one after another, then the target passage and an open query label), and as chat
messages for a chat-completions endpoint (the instruction as the system message, each example
as a user/assistant turn). Few-shot prompting of a base model is common practice.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ballast.core.errors import ConfigError
from ballast.io.files import fingerprint_obj, read_text

# Bumped when the rendering below changes, so cached generations from the old prompt are not
# reused for the new one.
RENDER_VERSION = 1


@dataclass(frozen=True)
class Example:
    passage: str
    query: str


@dataclass(frozen=True)
class PromptTemplate:
    style: str
    instruction: str
    passage_label: str
    query_label: str
    examples: tuple[Example, ...]
    source: str = ""

    @property
    def hash(self) -> str:
        """A hash of what the model sees (not the file's comments or layout)."""
        return fingerprint_obj(
            {
                "render": RENDER_VERSION,
                "style": self.style,
                "instruction": self.instruction,
                "passage_label": self.passage_label,
                "query_label": self.query_label,
                "examples": [[e.passage, e.query] for e in self.examples],
            }
        )

    def completion(self, passage: str) -> str:
        """Plain-text few-shot prompt for a base model; the query follows the last label."""
        parts = [self.instruction.strip(), ""]
        for e in self.examples:
            parts += [f"{self.passage_label}: {_one_line(e.passage)}"]
            parts += [f"{self.query_label}: {_one_line(e.query)}", ""]
        parts.append(f"{self.passage_label}: {_one_line(passage)}")
        parts.append(f"{self.query_label}:")
        return "\n".join(parts)

    def messages(self, passage: str) -> list[dict[str, str]]:
        """Chat messages: instruction as system, each example as a user/assistant turn."""
        out = [{"role": "system", "content": self.instruction.strip()}]
        for e in self.examples:
            out.append({"role": "user", "content": f"{self.passage_label}: {_one_line(e.passage)}"})
            out.append({"role": "assistant", "content": _one_line(e.query)})
        out.append({"role": "user", "content": f"{self.passage_label}: {_one_line(passage)}"})
        return out


def _one_line(text: str) -> str:
    return " ".join(text.split())


def default_prompts_dir() -> Path:
    """The default prompts, shipped inside the package (``ballast/data/prompts``)."""
    from importlib import resources

    return Path(str(resources.files("ballast").joinpath("data", "prompts")))


def prompts_dir(setting: str) -> Path:
    path = Path(setting) if setting else default_prompts_dir()
    if not path.is_dir():
        raise ConfigError(
            f"no prompt folder at {path}; expected a folder holding one <style>.toml a "
            "query style (`ballast init` writes a copy of the defaults to edit)",
            key="synth.prompts",
        )
    return path


def _text(data: dict[str, Any], key: str, source: str, where: str = "") -> str:
    value = data.get(key)
    if not isinstance(value, str) or not value.strip():
        raise ConfigError(
            f"got {value!r:.60}; expected a non-empty string", key=f"{where}{key}", source=source
        )
    return value


def load_template(path: Path) -> PromptTemplate:
    """Read and check one prompt file; errors name the file and the key."""
    source = str(path)
    try:
        data = tomllib.loads(read_text(path))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", source=source) from None
    allowed = {"style", "instruction", "passage_label", "query_label", "examples"}
    for key in data:
        if key not in allowed:
            raise ConfigError(
                f"no such key; allowed keys: {', '.join(sorted(allowed))}", key=key, source=source
            )
    style = _text(data, "style", source)
    if style != path.stem:
        raise ConfigError(
            f"got {style!r}; expected {path.stem!r}, the file's name", key="style", source=source
        )
    raw = data.get("examples", [])
    if not isinstance(raw, list) or not all(isinstance(e, dict) for e in raw):
        raise ConfigError("expected [[examples]] tables", key="examples", source=source)
    examples = []
    for i, e in enumerate(raw):
        where = f"examples[{i}]."
        extra = set(e) - {"passage", "query"}
        if extra:
            raise ConfigError(
                "no such key; allowed keys: passage, query",
                key=where + sorted(extra)[0],
                source=source,
            )
        query = _text(e, "query", source, where)
        if "\n" in query.strip():
            raise ConfigError("expected a query on one line", key=where + "query", source=source)
        examples.append(Example(_text(e, "passage", source, where), query.strip()))
    return PromptTemplate(
        style=style,
        instruction=_text(data, "instruction", source),
        passage_label=_text(data, "passage_label", source).strip(),
        query_label=_text(data, "query_label", source).strip(),
        examples=tuple(examples),
        source=source,
    )


def load_templates(setting: str, styles: tuple[str, ...]) -> dict[str, PromptTemplate]:
    """The template of every style the config draws from, read from the prompt folder."""
    folder = prompts_dir(setting)
    out = {}
    for style in dict.fromkeys(styles):
        path = folder / f"{style}.toml"
        if not path.is_file():
            known = sorted(p.stem for p in folder.glob("*.toml"))
            raise ConfigError(
                f"got {style!r}, but {folder} has no {style}.toml; styles there: "
                f"{', '.join(known) or 'none'}",
                key="synth.styles",
            )
        out[style] = load_template(path)
    return out
