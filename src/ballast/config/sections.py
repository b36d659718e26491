"""The config sections: one frozen dataclass per stage, each key checked when it is built.

Every key is checked before any stage runs; an error names the key, the bad value and what is
allowed. Paths in a config file are relative to the folder of that file.
"""

from __future__ import annotations

import typing
from dataclasses import dataclass
from typing import Any

from ballast.core.errors import ConfigError
from ballast.core.metrics import parse_metric

PACKAGED_BASE = "packaged:all-MiniLM-L6-v2"
EVAL_SPLITS = (
    "train", "human_train", "dev", "test", "judge", "human", "human_dev", "human_heldout", "guard"
)  # fmt: skip
GATE_SPLITS = ("test", "judge", "human", "human_heldout", "guard")
SUPERIORITY_SPLITS = ("test", "judge", "human")  # must gain; human_heldout and guard must not lose


def _fail(key: str, value: Any, expected: str) -> typing.NoReturn:
    raise ConfigError(f"got {value!r}; expected {expected}", key=key)


def _range(
    key: str,
    value: float,
    lo: float | None = None,
    hi: float | None = None,
    *,
    lo_open: bool = False,
    hi_open: bool = False,
) -> None:
    bad = value != value or (  # NaN compares false with everything: refuse it here
        (lo is not None and (value <= lo if lo_open else value < lo))
        or (hi is not None and (value >= hi if hi_open else value > hi))
    )
    if bad:
        left = "(" if lo_open else "["
        right = ")" if hi_open else "]"
        _fail(
            key,
            value,
            f"a number in {left}{lo if lo is not None else '-inf'}, "
            f"{hi if hi is not None else 'inf'}{right}",
        )


@dataclass(frozen=True)
class IngestConfig:
    docs: str = "docs"
    extensions: tuple[str, ...] = (
        ".txt", ".md", ".html", ".htm", ".pdf", ".docx", ".jsonl", ".csv", ".parquet"
    )  # fmt: skip
    # "stop": a file that cannot be read stops the ingest (the default); "skip": it is left out
    # and listed with the reason in skipped.jsonl and the stage summary
    on_error: str = "stop"
    max_tokens: int = 120
    overlap_tokens: int = 24
    min_tokens: int = 8
    id_field: str = "id"
    text_field: str = "text"
    title_field: str = "title"

    def __post_init__(self) -> None:
        _range("ingest.max_tokens", self.max_tokens, 16, 512)
        _range("ingest.overlap_tokens", self.overlap_tokens, 0, self.max_tokens // 2)
        _range("ingest.min_tokens", self.min_tokens, 1, self.max_tokens)
        for ext in self.extensions:
            if not ext.startswith("."):
                _fail("ingest.extensions", ext, "extensions that start with a dot, like '.md'")
        if self.on_error not in ("stop", "skip"):
            _fail("ingest.on_error", self.on_error, "'stop' or 'skip'")


@dataclass(frozen=True)
class SynthConfig:
    generators: tuple[str, ...] = ("ict", "keywords")
    # generators whose queries never train: on held-out documents they form the "judge" split,
    # an independent synthetic judge (e.g. ["headings"] or ["llm"]) when there are no real
    # questions; on training and dev documents they are set aside
    judge_generators: tuple[str, ...] = ()
    ict_per_passage: int = 1
    ict_remove_prob: float = 0.9
    ict_min_words: int = 6
    keywords_per_passage: int = 1
    keywords_min_terms: int = 2
    keywords_max_terms: int = 4
    questions: str = ""
    # a budget: the generators write for at most this many passages, a seeded sample (0 = all)
    max_passages: int = 0
    # model-written queries: "llm" (a local model) and "http" (a chat-completions endpoint)
    prompts: str = ""
    styles: tuple[str, ...] = ("question", "keywords", "troubleshooting")
    # real questions (from `questions`) that become the worked examples of the "question"
    # style's prompt, replacing the template's; they are set aside and never judge (0 = off)
    question_examples: int = 0
    llm_per_passage: int = 1
    llm_model: str = "packaged:gemma-3-270m"
    llm_batch_size: int = 4
    llm_max_new_tokens: int = 32
    llm_temperature: float = 0.7
    http_base_url: str = ""
    http_model: str = ""
    http_api_key_env: str = ""
    http_concurrency: int = 4
    http_timeout_s: float = 60.0
    http_retries: int = 3
    http_backoff_s: float = 1.0
    # filters of model-written queries; round_trip_k judges every generated query (0 = off)
    min_words: int = 2
    max_words: int = 32
    copy_overlap: float = 0.75
    round_trip_k: int = 0

    @property
    def all_generators(self) -> tuple[str, ...]:
        return (*self.generators, *self.judge_generators)

    def __post_init__(self) -> None:
        lists = (("generators", self.generators), ("judge_generators", self.judge_generators))
        for key, names in lists:
            for g in names:
                if g not in ("ict", "keywords", "headings", "llm", "http"):
                    _fail(
                        f"synth.{key}",
                        g,
                        "a list drawn from 'ict', 'keywords', 'headings', 'llm', 'http'",
                    )
        for g in self.judge_generators:
            if g in self.generators:
                _fail(
                    "synth.judge_generators",
                    g,
                    "a generator the training does not use (it is in synth.generators too)",
                )
        _check_model_synth(self)
        _range("synth.ict_per_passage", self.ict_per_passage, 0, 20)
        _range("synth.ict_remove_prob", self.ict_remove_prob, 0.0, 1.0)
        _range("synth.ict_min_words", self.ict_min_words, 1, 100)
        _range("synth.keywords_per_passage", self.keywords_per_passage, 0, 20)
        _range("synth.keywords_min_terms", self.keywords_min_terms, 1, 20)
        _range("synth.keywords_max_terms", self.keywords_max_terms, self.keywords_min_terms, 20)
        _range("synth.max_passages", self.max_passages, 0, 10**9)


def _check_model_synth(c: SynthConfig) -> None:
    """The settings of the model-written generators and their filters."""
    import re
    import urllib.parse

    if not c.styles:
        _fail("synth.styles", [], "at least one style, like 'question'")
    for st in c.styles:
        if not re.fullmatch(r"[A-Za-z0-9_-]+", st):
            _fail("synth.styles", st, "style names of letters, digits, '_' or '-' (file names)")
    _range("synth.llm_per_passage", c.llm_per_passage, 0, 20)
    _range("synth.llm_batch_size", c.llm_batch_size, 1, 256)
    _range("synth.llm_max_new_tokens", c.llm_max_new_tokens, 4, 512)
    _range("synth.llm_temperature", c.llm_temperature, 0.0, 2.0)
    _range("synth.http_concurrency", c.http_concurrency, 1, 64)
    _range("synth.http_timeout_s", c.http_timeout_s, 0.0, 3600.0, lo_open=True)
    _range("synth.http_retries", c.http_retries, 0, 10)
    _range("synth.http_backoff_s", c.http_backoff_s, 0.0, 60.0)
    _range("synth.min_words", c.min_words, 1, 100)
    _range("synth.max_words", c.max_words, c.min_words, 1000)
    _range("synth.copy_overlap", c.copy_overlap, 0.0, 1.0, lo_open=True)
    _range("synth.round_trip_k", c.round_trip_k, 0, 10_000)
    _range("synth.question_examples", c.question_examples, 0, 64)
    if c.question_examples:
        key, n = "synth.question_examples", c.question_examples
        if not c.questions:
            _fail(key, n, "0 without synth.questions (the examples are real questions)")
        if not any(g in ("llm", "http") for g in c.all_generators):
            _fail(key, n, "0 unless 'llm' or 'http' writes queries (they are prompt examples)")
        if "question" not in c.styles:
            _fail(key, n, "0 unless synth.styles has 'question', whose examples they replace")
    # Neither message below repeats the value: it may be a secret put in the wrong place.
    env_name = re.compile(r"[A-Za-z_][A-Za-z0-9_]{0,63}")
    looks_like_a_key = (
        len(c.http_api_key_env) >= 20
        and any(ch.islower() for ch in c.http_api_key_env)
        and any(ch.isdigit() for ch in c.http_api_key_env)
    )  # variable names are short and upper case; keys are long mixes of cases and digits
    if c.http_api_key_env and (not env_name.fullmatch(c.http_api_key_env) or looks_like_a_key):
        raise ConfigError(
            "expected the NAME of an environment variable that holds the API key (letters, "
            "digits, '_'), never the key itself",
            key="synth.http_api_key_env",
        )
    if c.http_base_url:
        parts = urllib.parse.urlsplit(c.http_base_url)
        if parts.username or parts.password or parts.query:
            raise ConfigError(
                "expected a URL without user name, password or query; put the API key in an "
                "environment variable and name it in synth.http_api_key_env",
                key="synth.http_base_url",
            )
        if parts.scheme not in ("http", "https") or not parts.hostname:
            _fail("synth.http_base_url", c.http_base_url, "a URL like 'http://127.0.0.1:8080/v1'")
    if "http" in c.all_generators:
        if not c.http_base_url:
            _fail("synth.http_base_url", "", "the endpoint's base URL when 'http' is a generator")
        if not c.http_model:
            _fail("synth.http_model", "", "the model name to ask for when 'http' is a generator")


@dataclass(frozen=True)
class SplitConfig:
    test_fraction: float = 0.2
    dev_fraction: float = 0.1
    leakage_threshold: float = 0.9
    # share of the real questions about training documents that train (as pairs, like the
    # generated queries) instead of judging; the "human" split always keeps gate.min_queries
    human_train_fraction: float = 0.0

    def __post_init__(self) -> None:
        _range("split.test_fraction", self.test_fraction, 0.0, 0.9, lo_open=True)
        _range("split.dev_fraction", self.dev_fraction, 0.0, 0.5)
        if self.test_fraction + self.dev_fraction >= 1.0:
            _fail(
                "split.dev_fraction",
                self.dev_fraction,
                "test_fraction + dev_fraction below 1, so some documents remain for training",
            )
        _range("split.leakage_threshold", self.leakage_threshold, 0.0, 1.0, lo_open=True)
        _range("split.human_train_fraction", self.human_train_fraction, 0.0, 1.0)


@dataclass(frozen=True)
class MineConfig:
    """Hard-negative mining; docs/mining.md explains every rule. A ceiling of 0 (1.0 for
    ``max_score``) is off."""

    negatives: int = 1
    window_start: int = 0
    window_end: int = 30
    max_relative: float = 0.95
    max_margin: float = 0.0
    max_score: float = 1.0
    ceiling_reference: str = "passage"
    near_duplicate: float = 0.5
    sample: str = "random"
    exclude_same_doc: bool = False
    rescorer: str = ""
    rescorer_model: str = ""
    rescorer_threshold: float = 0.95
    search: str = "auto"
    faiss_above: int = 200_000

    def __post_init__(self) -> None:
        _range("mine.negatives", self.negatives, 0, 64)
        _range("mine.window_start", self.window_start, 0, 10_000)
        _range("mine.window_end", self.window_end, self.window_start + 1, 10_000)
        if not 0.0 <= self.max_relative <= 1.0:
            _fail("mine.max_relative", self.max_relative, "0 (off) or a number in (0, 1]")
        _range("mine.max_margin", self.max_margin, 0.0, 2.0)
        _range("mine.max_score", self.max_score, -1.0, 1.0, lo_open=True)
        if self.ceiling_reference not in ("passage", "training"):
            _fail("mine.ceiling_reference", self.ceiling_reference, "'passage' or 'training'")
        _range("mine.near_duplicate", self.near_duplicate, 0.0, 1.0)
        if self.sample not in ("random", "top"):
            _fail("mine.sample", self.sample, "'random' or 'top'")
        if self.rescorer not in ("", "cross-encoder", "query-likelihood"):
            _fail("mine.rescorer", self.rescorer, "'', 'cross-encoder' or 'query-likelihood'")
        if self.rescorer and not self.rescorer_model:
            _fail("mine.rescorer_model", "", "a local model folder when mine.rescorer is set")
        if self.rescorer_model and not self.rescorer:
            _fail(
                "mine.rescorer",
                "",
                "'cross-encoder' or 'query-likelihood' when mine.rescorer_model is set",
            )
        _range("mine.rescorer_threshold", self.rescorer_threshold, 0.0, 10.0, lo_open=True)
        if self.search not in ("auto", "exact", "faiss"):
            _fail("mine.search", self.search, "'auto', 'exact' or 'faiss'")
        _range("mine.faiss_above", self.faiss_above, 1, 10**9)


TEACHERS = ("none", "hybrid", "bi-encoder", "cross-encoder", "query-likelihood")


@dataclass(frozen=True)
class TeachConfig:
    """Teacher labels (docs/teaching.md): each training query's candidates (its positive and the
    base model's best other passages of the training documents) scored by a teacher, and the
    student trained to match those scores. The teacher check reranks the base model's top
    ``check_depth`` on the dev queries with the teacher first; a teacher that does not beat the
    base model there is refused and training keeps the contrastive loss."""

    teacher: str = "none"
    model: str = ""  # a local folder (bi-encoder, cross-encoder) or a language model spec
    candidates: int = 4  # the positive and candidates - 1 others per query
    loss: str = "listwise_kl"  # or "margin_mse" (Hofstätter et al. 2020)
    temperature: float = 1.0  # the teacher's softmax temperature over standardised scores
    contrastive_weight: float = 0.0  # weight of the in-batch contrastive loss kept beside
    check: bool = True
    check_depth: int = 20

    def __post_init__(self) -> None:
        if self.teacher not in TEACHERS:
            _fail("teach.teacher", self.teacher, " ".join(f"'{t}'" for t in TEACHERS))
        needs_model = self.teacher in ("bi-encoder", "cross-encoder", "query-likelihood")
        if needs_model and not self.model:
            _fail("teach.model", "", f"a local model folder when teach.teacher = '{self.teacher}'")
        if self.model and not needs_model:
            _fail(
                "teach.teacher",
                self.teacher,
                "'bi-encoder', 'cross-encoder' or 'query-likelihood' when teach.model is set",
            )
        _range("teach.candidates", self.candidates, 2, 64)
        if self.loss not in ("listwise_kl", "margin_mse"):
            _fail("teach.loss", self.loss, "'listwise_kl' or 'margin_mse'")
        _range("teach.temperature", self.temperature, 0.0, 100.0, lo_open=True)
        _range("teach.contrastive_weight", self.contrastive_weight, 0.0, 100.0)
        _range("teach.check_depth", self.check_depth, 2, 1000)


@dataclass(frozen=True)
class TrainConfig:
    epochs: int = 1
    batch_size: int = 32
    # chosen on the real dev questions of two collections (docs/training.md, "Quantity and
    # mix"): 5e-5 gained +0.062 on the FAQ pool's 91 against +0.028 at 2e-5
    learning_rate: float = 5e-5
    warmup_ratio: float = 0.1
    max_seq_length: int = 128
    threads: int = 0
    checkpoint_steps: int = 0
    mode: str = "full"  # "full" fine-tune, "adapter" (frozen encoder), "lora" (peft)
    adapter_side: str = "query"  # "query" keeps a document index valid; or "both"
    adapter_rank: int = 0  # 0 = a full d x d matrix; else W = I + U V^T of this rank
    adapter_epochs: int = 30
    adapter_learning_rate: float = 1e-4
    lora_rank: int = 8
    lora_alpha: float = 16.0
    loss: str = "mnrl"  # or "cached_mnrl" (GradCache, Gao et al. 2021)
    mini_batch_size: int = 8  # cached_mnrl's chunk size
    # Matryoshka representation learning (Kusupati et al. 2022): the loss is also taken on the
    # first d dimensions of each embedding, for each d; evaluate scores the truncated ones too.
    matryoshka_dims: tuple[int, ...] = ()
    # Every eval_steps steps, score the dev split by gate.primary_metric and keep the best
    # checkpoint; stop after early_stopping_patience scores without a gain (0 = never stop).
    # mode = "adapter" scores dev after every epoch without eval_steps (the patience in epochs).
    eval_steps: int = 0
    early_stopping_patience: int = 0
    # bfloat16 autocast: true, false, or "auto" (on where the hardware has bfloat16 arithmetic:
    # a CPU with AVX-512 BF16 or AMX, a GPU that supports it). docs/training.md: no loss of
    # quality measured; emulated on other CPUs it is ~19x slower, so "auto" leaves it off there.
    bf16: bool | str = "auto"

    # the safety net: after training, these interpolations of base (0) and tuned (1) weights
    # are scored on the dev queries and the best kept (WiSE-FT); [] = keep the tuned model
    mix_weights: tuple[float, ...] = (0.0, 0.25, 0.5, 0.75, 1.0)
    # "descend": score from 1 down and stop once the score falls (the same weight on a curve
    # with one peak, in fewer encodings); "all": score every weight (stages/train/mix.py)
    mix_search: str = "descend"
    # the dev queries the net scores: "all" (the synthetic dev split and the real questions
    # about dev documents, human_dev) or "real" (human_dev alone: synthetic queries that
    # training made easy to match cannot outvote the real ones; docs/training.md)
    mix_queries: str = "all"
    # "random": batches drawn at random (without duplicate texts); "length": batches of similar
    # length, so fewer pad tokens are computed (stages/train/batches.py)
    batching: str = "random"
    # a budget (stages/train/budget.py): a short warm-up times a step on this machine; minutes
    # caps the training examples so the estimate fits, max_pairs caps them at a number (seeded
    # choice either way; 0 = no cap)
    minutes: float = 0.0
    max_pairs: int = 0
    # the token embeddings and the lowest N transformer layers keep the base weights: the
    # backward pass stops above them (stages/train/full.py; docs/training.md, "Frozen layers")
    frozen_layers: int = 0
    # at least this many optimizer steps: on a small collection the epochs are raised until
    # the training examples fill them (stages/train/full.py; docs/training.md, "A floor of
    # steps": off, it overfit four small FAQs); 0 = the epochs as set
    min_steps: int = 0

    def __post_init__(self) -> None:
        _range("train.minutes", self.minutes, 0.0, 100_000.0)
        _range("train.min_steps", self.min_steps, 0, 10**7)
        if self.min_steps and self.mode == "adapter":
            _fail("train.min_steps", self.min_steps, "0 when train.mode is 'adapter' "
                  "(its epochs are train.adapter_epochs)")  # fmt: skip
        _range("train.frozen_layers", self.frozen_layers, 0, 1000)
        if self.frozen_layers and self.mode != "full":
            _fail("train.frozen_layers", self.frozen_layers, "0 unless train.mode is 'full'")
        _range("train.max_pairs", self.max_pairs, 0, 10**9)
        if self.batching not in ("random", "length"):
            _fail("train.batching", self.batching, "'random' or 'length'")
        if self.mix_search not in ("descend", "all"):
            _fail("train.mix_search", self.mix_search, "'descend' or 'all'")
        if self.mix_queries not in ("all", "real"):
            _fail("train.mix_queries", self.mix_queries, "'all' or 'real'")
        for w in self.mix_weights:
            _range("train.mix_weights", w, 0.0, 1.0)
        if len(set(self.mix_weights)) != len(self.mix_weights):
            _fail("train.mix_weights", list(self.mix_weights), "distinct weights")
        if self.mode not in ("full", "adapter", "lora"):
            _fail("train.mode", self.mode, "'full', 'adapter' or 'lora'")
        if self.adapter_side not in ("query", "both"):
            _fail("train.adapter_side", self.adapter_side, "'query' or 'both'")
        _range("train.adapter_rank", self.adapter_rank, 0, 4096)
        _range("train.adapter_epochs", self.adapter_epochs, 1, 10_000)
        _range("train.adapter_learning_rate", self.adapter_learning_rate, 0.0, 1.0, lo_open=True)
        _range("train.lora_rank", self.lora_rank, 1, 1024)
        _range("train.lora_alpha", self.lora_alpha, 0.0, 4096.0, lo_open=True)
        if self.loss not in ("mnrl", "cached_mnrl"):
            _fail("train.loss", self.loss, "'mnrl' or 'cached_mnrl'")
        _range("train.mini_batch_size", self.mini_batch_size, 1, 4096)
        for d in self.matryoshka_dims:
            _range("train.matryoshka_dims", d, 1, 65_536)
        if list(self.matryoshka_dims) != sorted(set(self.matryoshka_dims), reverse=True):
            _fail(
                "train.matryoshka_dims",
                list(self.matryoshka_dims),
                "distinct dimensions, largest first, like [384, 256, 128, 64]",
            )
        if self.matryoshka_dims and self.mode == "adapter":
            _fail("train.mode", self.mode, "'full' or 'lora' when train.matryoshka_dims is set")
        _range("train.eval_steps", self.eval_steps, 0, 10**9)
        _range("train.early_stopping_patience", self.early_stopping_patience, 0, 10_000)
        if self.early_stopping_patience and not self.eval_steps and self.mode != "adapter":
            _fail(
                "train.eval_steps", 0, "a number of steps > 0 when early_stopping_patience is set"
            )
        if self.eval_steps and self.mode == "adapter":
            _fail("train.mode", self.mode, "'full' or 'lora' when train.eval_steps is set")
        if self.eval_steps and self.checkpoint_steps % self.eval_steps:
            _fail(
                "train.checkpoint_steps",
                self.checkpoint_steps,
                f"a multiple of train.eval_steps ({self.eval_steps}): the best checkpoint is "
                "chosen among saved ones",
            )
        _range("train.epochs", self.epochs, 1, 100)
        _range("train.batch_size", self.batch_size, 2, 4096)
        _range("train.learning_rate", self.learning_rate, 0.0, 1.0, lo_open=True)
        _range("train.warmup_ratio", self.warmup_ratio, 0.0, 0.5)
        _range("train.max_seq_length", self.max_seq_length, 16, 512)
        _range("train.threads", self.threads, 0, 512)
        _range("train.checkpoint_steps", self.checkpoint_steps, 0, 10**9)


# The encoders a model runs on: ``evaluate.backend`` for the stages, ``ballast embed
# --backend`` for a bundle (models/backend.py, bundle/embed.py).
BACKENDS = ("pytorch", "onnx", "onnx-int8")


@dataclass(frozen=True)
class EvaluateConfig:
    # () = every split there is: dev, test, the real-question splits when synth.questions is
    # set, guard when it is set (resolved when the config is built)
    splits: tuple[str, ...] = ()
    metrics: tuple[str, ...] = (
        "ndcg@10",
        "mrr@10",
        "recall@10",
        "precision@10",
        "map@10",
        "hit_rate@10",
    )
    bootstrap_resamples: int = 10_000
    confidence: float = 0.95
    batch_size: int = 64
    # Encode passages with one process per device (sentence-transformers' multi-process
    # encoding), e.g. ["cuda:0", "cuda:1"]; fewer than two = in this process. Used by mine
    # and evaluate.
    encode_devices: tuple[str, ...] = ()
    # bfloat16 autocast for every encoding the stages make with torch (synth's round trip,
    # check, mine, teach, the safety net's base passages, evaluate): true, false, or "auto"
    # (on where bfloat16 is native, as train.bf16). Rankings within a measured tolerance of
    # float32 (docs/scale.md); base and tuned are always encoded alike. false = float32.
    bf16: bool | str = "auto"
    # What the stages encode with for search (synth's round trip, check, mine, teach, judge,
    # evaluate): "pytorch" (the reference), "onnx" (the model exported to an ONNX graph, run
    # by onnxruntime: the same figures, no faster) or "onnx-int8" (that graph with int8
    # weights: 1.3-1.4x faster on CPUs without bfloat16, but it moved a gated gain by 0.022, so
    # for exploring, not for a verdict; docs/scale.md). Each model is exported once into the
    # run's cache. Training, the safety net and the adapter use PyTorch always.
    backend: str = "pytorch"
    # lexical reference rows, never gated: "bm25" (BM25 over the same passages) and "hybrid"
    # (each model fused with BM25 by reciprocal rank fusion, NAME+bm25)
    references: tuple[str, ...] = ("bm25", "hybrid")

    def __post_init__(self) -> None:
        for r in self.references:
            if r not in ("bm25", "hybrid"):
                _fail("evaluate.references", r, "a list drawn from bm25, hybrid")
        for s in self.splits:
            if s not in EVAL_SPLITS:
                _fail("evaluate.splits", s, f"a list drawn from {', '.join(EVAL_SPLITS)}")
        for m in self.metrics:
            try:
                parse_metric(m)
            except ValueError as exc:
                raise ConfigError(str(exc), key="evaluate.metrics") from None
        _range("evaluate.bootstrap_resamples", self.bootstrap_resamples, 100, 10**7)
        _range("evaluate.confidence", self.confidence, 0.0, 1.0, lo_open=True, hi_open=True)
        _range("evaluate.batch_size", self.batch_size, 1, 4096)
        import re

        if self.backend not in BACKENDS:
            _fail("evaluate.backend", self.backend, f"one of {', '.join(BACKENDS)}")
        if self.backend != "pytorch" and self.bf16 is True:
            _fail("evaluate.bf16", self.bf16, f'false or "auto" with evaluate.backend = '
                  f'"{self.backend}" (bfloat16 autocast applies to PyTorch only)')
        if self.backend != "pytorch" and len(self.encode_devices) > 1:
            _fail("evaluate.encode_devices", list(self.encode_devices),
                  f'one device or none with evaluate.backend = "{self.backend}"')
        for d in self.encode_devices:
            if not re.fullmatch(r"(cpu|cuda|npu|mps|xpu)(:\d+)?", d):
                _fail("evaluate.encode_devices", d, "devices like 'cpu', 'cuda:0', 'cuda:1'")


@dataclass(frozen=True)
class GuardConfig:
    """A general-domain set the tuned model must not get worse on (forgetting is caught)."""

    queries: str = ""
    qrels: str = ""
    passages: str = ""

    def __post_init__(self) -> None:
        given = [k for k in ("queries", "qrels", "passages") if getattr(self, k)]
        if given and len(given) != 3:
            missing = [k for k in ("queries", "qrels", "passages") if k not in given]
            _fail(
                f"guard.{missing[0]}", "", "a file: a guard set needs queries, qrels and passages"
            )

    @property
    def enabled(self) -> bool:
        return bool(self.queries)


@dataclass(frozen=True)
class GateConfig:
    # () = the real-question splits (human, human_heldout) when synth.questions is set, else
    # judge when synth.judge_generators is set, else test; and guard when it is set (resolved
    # when the config is built)
    splits: tuple[str, ...] = ()
    primary_metric: str = "ndcg@10"
    min_gain: float = 0.0
    alpha: float = 0.05
    guard_tolerance: float = 0.01
    # human_heldout (real questions about documents the model never saw) must not lose more
    # than this (non-inferiority, like guard)
    heldout_tolerance: float = 0.01
    min_queries: int = 30

    def __post_init__(self) -> None:
        for s in self.splits:
            if s not in GATE_SPLITS:
                allowed = ", ".join(GATE_SPLITS)
                _fail(
                    "gate.splits",
                    s,
                    f"a list drawn from {allowed} (dev and human_dev are never gated)",
                )
        if self.splits and not any(s in SUPERIORITY_SPLITS for s in self.splits):
            _fail(
                "gate.splits",
                list(self.splits),
                "at least one split the tuned model must win on: 'test', 'judge' or 'human'",
            )
        try:
            parse_metric(self.primary_metric)
        except ValueError as exc:
            raise ConfigError(str(exc), key="gate.primary_metric") from None
        _range("gate.min_gain", self.min_gain, 0.0, 1.0)
        _range("gate.alpha", self.alpha, 0.0, 0.5, lo_open=True)
        _range("gate.guard_tolerance", self.guard_tolerance, 0.0, 1.0)
        _range("gate.heldout_tolerance", self.heldout_tolerance, 0.0, 1.0)
        _range("gate.min_queries", self.min_queries, 2, 10**7)


@dataclass(frozen=True)
class ExportConfig:
    dir: str = ""
    version: str = ""
    onnx: bool = False  # also write model.onnx (pooling and normalisation in the graph)
    quantize_int8: bool = False  # also write model_int8.onnx (implies onnx), cost measured
    # the longest text the bundle reads, in tokens; 0 = as far as the base model reads (training
    # may have used fewer, train.max_seq_length)
    max_seq_length: int = 0

    def __post_init__(self) -> None:
        if self.version and not all(c.isalnum() or c in "._-" for c in self.version):
            _fail("export.version", self.version, "letters, digits, '.', '_' or '-' only")
        if self.max_seq_length:
            _range("export.max_seq_length", self.max_seq_length, 16, 512)


