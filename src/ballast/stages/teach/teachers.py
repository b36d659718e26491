"""The teachers: each scores (query, passage) pairs of one corpus, higher = more relevant.

- ``hybrid``: reciprocal rank fusion of BM25 and the base model over the whole corpus
  (core.teaching.fused_scores); needs nothing but the documents. It can teach the exact-term
  matching that general embedders miss on codes and jargon (SPAR, Chen et al., Findings of
  EMNLP 2022); where questions are phrased unlike the documents it is usually worse than the
  embedder alone, and the teacher check refuses it.
- ``bi-encoder``: a larger sentence-transformers model of the user's (a local folder); cosine.
- ``cross-encoder``: a sentence-transformers CrossEncoder folder of the user's; its logit.
- ``query-likelihood``: a local causal language model (or the packaged Gemma-3-270M); the
  mean log-probability of the query's tokens given the passage (Sachan et al. 2022).

The pairwise teachers (cross-encoder, query likelihood) are slow; their scores are kept in a
content-addressed cache in the run folder (``cache/teacher-<fingerprint>.jsonl``: one line per
(query, passage) scored, appended batch by batch), so a killed stage resumes where it stopped
and a rerun with other settings scores nothing twice.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from ballast.core.progress import SILENT, Progress
from ballast.core.text import sha256_bytes

BATCH = 64  # pairs scored (and cached) at a time by a pairwise teacher


class Teacher(Protocol):
    kind: str

    def score(
        self, queries: Sequence[str], candidates: Sequence[Sequence[int]], progress: Progress
    ) -> list[np.ndarray]:
        """The score of each query's candidates (passage indices), one array per query."""
        ...


class HybridTeacher:
    kind = "hybrid"

    def __init__(self, passages: Sequence[str], passage_emb: np.ndarray, encode_queries: Any):
        from ballast.core.lexical import BM25

        self.bm25 = BM25(passages)
        self.emb = passage_emb
        self.encode_queries = encode_queries  # texts -> unit embeddings (the base model)

    def score(
        self, queries: Sequence[str], candidates: Sequence[Sequence[int]], progress: Progress
    ) -> list[np.ndarray]:
        from ballast.core.teaching import fused_scores

        q_emb = self.encode_queries(list(queries))
        out = []
        for i, (q, cands) in enumerate(zip(queries, candidates, strict=True)):
            dense = self.emb @ q_emb[i]
            out.append(fused_scores(dense, self.bm25.scores(q), cands))
            progress.step("teacher (hybrid)", i + 1, len(queries))
        return out


class BiEncoderTeacher:
    kind = "bi-encoder"

    def __init__(self, path: Path, passages: Sequence[str], batch_size: int, cache: Any) -> None:
        from ballast.models.loading import load_encoder, model_fingerprint

        self.model = load_encoder(path)
        self.fp = model_fingerprint(path)
        self.passages, self.batch_size, self.cache = passages, batch_size, cache

    def score(
        self, queries: Sequence[str], candidates: Sequence[Sequence[int]], progress: Progress
    ) -> list[np.ndarray]:
        from ballast.models.encode import encode_cached

        used = sorted({i for c in candidates for i in c})
        pos = {i: j for j, i in enumerate(used)}

        def enc(texts: list[str], label: str) -> np.ndarray:
            return encode_cached(
                self.model, self.fp, texts, self.cache,
                batch_size=self.batch_size, label=label, progress=progress,
            )  # fmt: skip

        p = enc([self.passages[i] for i in used], "encoding candidates (teacher)")
        q = enc(list(queries), "encoding queries (teacher)")
        return [p[[pos[i] for i in c]] @ q[k] for k, c in enumerate(candidates)]


class PairTeacher:
    """A cross-encoder or a query-likelihood language model (models/rescore.py), its scores
    turned back from 0..1 into an unbounded scale: the logit for a cross-encoder, the mean
    log-probability for query likelihood."""

    def __init__(self, kind: str, spec: str, passages: Sequence[str], cache_file: Path,
                 progress: Progress = SILENT) -> None:  # fmt: skip
        from ballast.models.rescore import load_rescorer

        self.kind = kind
        self.rescorer = load_rescorer(kind, spec, progress)
        self.passages = passages
        self.cache = PairCache(cache_file)

    def _unbounded(self, p: np.ndarray) -> np.ndarray:
        p = np.clip(p, 1e-12, 1 - 1e-12)
        return np.log(p / (1 - p)) if self.kind == "cross-encoder" else np.log(p)

    def score(
        self, queries: Sequence[str], candidates: Sequence[Sequence[int]], progress: Progress
    ) -> list[np.ndarray]:
        pairs = [
            (q, self.passages[i]) for q, c in zip(queries, candidates, strict=True) for i in c
        ]
        keys = [PairCache.key(q, p) for q, p in pairs]
        missing = sorted({k: n for n, k in enumerate(keys) if k not in self.cache}.values())
        if len(missing) < len(keys):
            progress.info(f"teacher: {len(keys) - len(missing)} of {len(keys)} pair scores cached")
        for s in range(0, len(missing), BATCH):
            rows = missing[s : s + BATCH]
            got = self._unbounded(self.rescorer.score([pairs[n] for n in rows]))
            self.cache.add({keys[n]: float(v) for n, v in zip(rows, got, strict=True)})
            progress.step(f"teacher ({self.kind})", min(s + BATCH, len(missing)), len(missing))
        flat = np.array([self.cache[k] for k in keys], dtype=np.float64)
        out, at = [], 0
        for c in candidates:
            out.append(flat[at : at + len(c)])
            at += len(c)
        return out


class PairCache:
    """(query, passage) -> score, one JSON line a pair, appended and flushed batch by batch; a
    line cut short by a kill is ignored when read back."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.scores: dict[str, float] = {}
        if path.exists():
            text = path.read_text("utf-8", errors="replace")
            if text and not text.endswith("\n"):  # a line cut short: the next starts afresh
                with open(path, "a", encoding="utf-8") as fh:
                    fh.write("\n")
            for line in text.splitlines():
                try:
                    row = json.loads(line)
                    self.scores[str(row["k"])] = float(row["s"])
                except (ValueError, KeyError, TypeError):
                    continue

    @staticmethod
    def key(query: str, passage: str) -> str:
        return sha256_bytes(json.dumps([query, passage]).encode("utf-8"))[:32]

    def __contains__(self, key: str) -> bool:
        return key in self.scores

    def __getitem__(self, key: str) -> float:
        return self.scores[key]

    def add(self, scores: dict[str, float]) -> None:
        self.scores.update(scores)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.writelines(json.dumps({"k": k, "s": v}) + "\n" for k, v in scores.items())
            fh.flush()
            os.fsync(fh.fileno())
