"""Text utilities shared by every stage: normalising, sentences, word shingles, hashes."""

from __future__ import annotations

import hashlib
import re
import unicodedata
from collections.abc import Sequence

_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\u200b-\u200f\u2028\u2029\ufeff]")


_SPACES = re.compile(r"[ \t\r\f\v\u00a0]+")


# A sentence ends after . ! or ? and any closing quotes or brackets, before a space and a capital
# or digit (optionally after an opening quote or bracket); the closing marks stay with it.
_SENTENCE_END = re.compile(r"(?<=[.!?])[\"')\]]*(?=\s+[\"'(\[]?[A-Z0-9])")


def normalise(text: str) -> str:
    """NFKC, control characters to spaces, runs of blanks to one space (newlines kept)."""
    text = unicodedata.normalize("NFKC", text)
    text = _CONTROL.sub(" ", text)
    lines = [_SPACES.sub(" ", ln).strip() for ln in text.split("\n")]
    return "\n".join(lines).strip()


def collapse(text: str) -> str:
    """One line, single spaces: the form used to compare texts and locate quotes."""
    return " ".join(normalise(text).split())


_SPACES = re.compile(r"\s+")


def split_sentences(paragraph: str) -> list[str]:
    text = _SPACES.sub(" ", paragraph).strip()  # no list of every word: bounded memory
    cuts = [m.end() for m in _SENTENCE_END.finditer(text)]
    pieces = [text[a:b] for a, b in zip([0, *cuts], [*cuts, len(text)], strict=True)]
    return [s.strip() for s in pieces if s.strip()]


def shingles(text: str, n: int = 3) -> frozenset[str]:
    """Word n-grams of the lowercased text, punctuation ignored (short texts: one shingle)."""
    words = re.findall(r"\w+", text.lower())
    if len(words) < n:
        return frozenset({" ".join(words)})
    return frozenset(" ".join(words[i : i + n]) for i in range(len(words) - n + 1))


def passage_id(doc_id: str, text: str) -> str:
    return "p-" + sha256_bytes(f"{doc_id}\0{text}".encode())[:16]


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


_WORD = re.compile(r"\w+", re.UNICODE)


def words(text: str) -> list[str]:
    return _WORD.findall(text.lower())


def ngrams(tokens: Sequence[str], n: int) -> set[tuple[str, ...]]:
    return {tuple(tokens[i : i + n]) for i in range(len(tokens) - n + 1)}


def copy_overlap(query: str, passage: str, n: int = 3) -> float:
    """Share of the query's word n-grams that also occur in the passage (n shrinks to the
    query's length for very short queries). 1.0 = every n-gram is copied."""
    q, p = words(query), words(passage)
    n = max(1, min(n, len(q)))
    qg = ngrams(q, n)
    if not qg:
        return 0.0
    return len(qg & ngrams(p, n)) / len(qg)


def cap_length(sentence: str, limit: int) -> list[str]:
    """``sentence`` cut at spaces into pieces of at most ``limit`` characters (a word longer
    than ``limit`` is cut inside), so no later step holds a whole over-long "sentence" (a file
    of one line, or with no punctuation) at once."""
    if len(sentence) <= limit:
        return [sentence]
    out, start = [], 0
    while start < len(sentence):
        end = min(start + limit, len(sentence))
        if end < len(sentence):
            space = sentence.rfind(" ", start + 1, end + 1)
            end = space if space > start else end
        piece = sentence[start:end].strip()
        if piece:
            out.append(piece)
        start = end
    return out
