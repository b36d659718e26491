"""Text utilities shared by every stage: normalising, sentences, word shingles, hashes."""

from __future__ import annotations

import hashlib
import re
import unicodedata

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


def split_sentences(paragraph: str) -> list[str]:
    text = " ".join(paragraph.split())
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
