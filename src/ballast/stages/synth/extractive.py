"""Generators that need no model.

- Inverse cloze task (Lee, Chang & Toutanova, ACL 2019): one sentence of the passage is the
  pseudo-query; with probability ``ict_remove_prob`` it is removed from the training positive,
  so the model learns context rather than string matching.
- Keyword queries: a few of the passage's most distinctive terms (TF-IDF over the corpus), in
  the order they appear, as a short keyword search.

``synthesize`` runs these and, for "llm" and "http", the model-written generators
(``generate.py``).
"""

from __future__ import annotations

import re

import numpy as np

from ballast.config import SynthConfig
from ballast.core.text import sha256_bytes, split_sentences

TOKEN_PATTERN = r"(?u)\b\w[\w\-]*\w\b|\b\w\b"


def query_id(origin: str, passage_id: str, k: int) -> str:
    key = "\0".join((origin, passage_id, str(k))).encode()
    return f"{origin}-{sha256_bytes(key)[:14]}"


def ict_queries(passages: list[dict], cfg: SynthConfig, rng: np.random.Generator) -> list[dict]:
    out = []
    for p in passages:
        sents = split_sentences(p["text"])
        usable = [s for s in sents if len(s.split()) >= cfg.ict_min_words]
        if len(sents) < 2 or not usable:
            continue
        picks = rng.permutation(len(usable))[: cfg.ict_per_passage]
        for k, i in enumerate(sorted(int(x) for x in picks)):
            masked = bool(rng.random() < cfg.ict_remove_prob)
            out.append(
                {
                    "id": query_id("ict", p["id"], k),
                    "text": usable[i],
                    "passage_id": p["id"],
                    "origin": "ict",
                    "meta": {"masked": masked},
                }
            )
    return out


def keyword_queries(passages: list[dict], cfg: SynthConfig, rng: np.random.Generator) -> list[dict]:
    from sklearn.feature_extraction.text import TfidfVectorizer

    if not passages:
        return []
    vec = TfidfVectorizer(
        token_pattern=TOKEN_PATTERN,
        stop_words="english",
        sublinear_tf=True,
        min_df=1,
        max_df=0.5 if len(passages) >= 20 else 1.0,
    )
    try:
        matrix = vec.fit_transform([p["text"] for p in passages]).tocsr()
    except ValueError:  # every term is a stop word
        return []
    vocab = vec.get_feature_names_out()
    out = []
    for row, p in enumerate(passages):
        start, end = matrix.indptr[row], matrix.indptr[row + 1]
        idx, w = matrix.indices[start:end], matrix.data[start:end]
        order = np.lexsort((idx, -w))[:8]  # top 8 by weight, ties by term index
        if len(order) < cfg.keywords_min_terms:
            continue
        cand, weight = idx[order], w[order]
        for k in range(cfg.keywords_per_passage):
            n = int(
                rng.integers(cfg.keywords_min_terms, min(cfg.keywords_max_terms, len(cand)) + 1)
            )
            chosen = rng.choice(len(cand), size=n, replace=False, p=weight / weight.sum())
            terms = []
            for c in chosen:
                term = str(vocab[cand[c]])
                m = re.search(rf"(?<![\w-]){re.escape(term)}(?![\w-])", p["text"], re.IGNORECASE)
                terms.append((m.start() if m else 10**9, m.group(0) if m else term))
            text = " ".join(t for _, t in sorted(terms))
            out.append(
                {
                    "id": query_id("keywords", p["id"], k),
                    "text": text,
                    "passage_id": p["id"],
                    "origin": "keywords",
                    "meta": {},
                }
            )
    return out


def heading_queries(passages: list[dict], cfg: SynthConfig, rng: np.random.Generator) -> list[dict]:
    """The section heading, prefixed by the document title, as one query per section
    (title-as-query pairs): people write headings to say what a section answers, so they
    read like a search. Every passage of the section is judged relevant; the training
    positive is one of them, drawn with ``rng``. One query a section, so no query text is
    counted twice in an evaluation."""
    sections: dict[tuple[str, str], list[dict]] = {}
    for p in passages:
        heading = (p.get("meta") or {}).get("section") or ""
        if len(heading.split()) >= 2:
            sections.setdefault((p["doc_id"], heading), []).append(p)
    out = []
    for (_, heading), members in sorted(sections.items()):
        title = members[0].get("title", "").split(" — ")[0]
        text = f"{title}: {heading}" if title and title != heading else heading
        ids = [m["id"] for m in members]
        pos = ids[int(rng.integers(len(ids)))]
        out.append(
            {
                "id": query_id("heading", ids[0], 0),
                "text": text,
                "passage_id": pos,
                "origin": "heading",
                "meta": {"relevant": ids},
            }
        )
    return out


GENERATORS = {"ict": ict_queries, "keywords": keyword_queries, "headings": heading_queries}


def budget(passages: list[dict], n: int, seed: int) -> list[dict]:
    """At most ``n`` passages (all when ``n`` is 0), in their original order: those whose
    seeded hash of the id ranks lowest. A passage's place in the draw depends on its id and the
    seed only, so the choice does not depend on the order of the input, and the stage's random
    stream is left untouched (runs without a budget are unchanged)."""
    if not n or n >= len(passages):
        return passages
    rank = sorted(
        range(len(passages)), key=lambda i: sha256_bytes(f"{seed}\0{passages[i]['id']}".encode())
    )
    keep = set(rank[:n])
    return [p for i, p in enumerate(passages) if i in keep]


