"""Near-duplicate pairs between two sets of texts, by word-shingle Jaccard, in bounded memory.

The same sets as ``corpus.shingles`` (lowercased word n-grams, punctuation ignored, a short text
one shingle), but each shingle is a 64-bit hash in a numpy array, so a million passages take a
few hundred MB instead of a Python set of strings each. Pairs are found exactly with a prefix
filter (Bayardo et al. 2007, "Scaling up all pairs similarity search"): with every set sorted
rarest shingle first, two sets with Jaccard >= t share a shingle among the first
``|A| - ceil(t |A|) + 1`` of each. Only those prefixes are indexed; every candidate pair is then
verified on its full sets, a batch at a time, so a step holds at most a fixed budget of entries
(or one set's own candidates, if those alone exceed it). Equal to the set computation except
where two different shingles share a 64-bit hash (odds about n^2 / 2^65 for n distinct
shingles: 1 in 25,000 at 40 million).
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterator, Sequence

import numpy as np

_WORD = re.compile(r"\w+")
_PAD = np.uint64(0x9E3779B97F4A7C15)  # stands for a missing word in a text shorter than n
_MULT = (0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F, 0x165667B19E3779F9, 0x27D4EB2F165667C5)
_WORD_CACHE_MAX = 2_000_000


def _fmix(x: np.ndarray) -> np.ndarray:
    """splitmix64's finaliser: every input bit reaches every output bit."""
    x = x ^ (x >> np.uint64(30))
    x = x * np.uint64(0xBF58476D1CE4E5B9)
    x = x ^ (x >> np.uint64(27))
    x = x * np.uint64(0x94D049BB133111EB)
    return x ^ (x >> np.uint64(31))


class ShingleHasher:
    """Texts -> sorted unique 64-bit shingle hashes per text, as one flat array and offsets.
    Word hashes are cached (blake2b, so the same on every machine and run)."""

    def __init__(self, n: int = 3) -> None:
        if not 1 <= n <= len(_MULT):
            raise ValueError(f"n must be in 1..{len(_MULT)}, got {n}")
        self.n = n
        self._words: dict[str, int] = {}

    def _word(self, w: str) -> int:
        h = self._words.get(w)
        if h is None:
            if len(self._words) >= _WORD_CACHE_MAX:
                self._words.clear()
            h = self._words[w] = int.from_bytes(
                hashlib.blake2b(w.encode("utf-8"), digest_size=8).digest(), "little"
            )
        return h

    def __call__(self, texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
        n = self.n
        flat: list[int] = []
        lens = np.empty(len(texts), dtype=np.int64)
        for i, t in enumerate(texts):
            words = _WORD.findall(t.lower())
            flat.extend(self._word(w) for w in words)
            if len(words) < n:  # a short text is one shingle: its words, padded
                flat.extend([int(_PAD)] * (n - len(words)))
            lens[i] = max(len(words), n)
        w = np.array(flat, dtype=np.uint64)
        counts = lens - n + 1
        starts = np.concatenate([[0], np.cumsum(lens)[:-1]]).astype(np.int64)
        pos = _ragged(starts, counts)
        h = np.zeros(len(pos), dtype=np.uint64)
        for j in range(n):
            h = _fmix(h ^ (w[pos + j] * np.uint64(_MULT[j])))
        owner = np.repeat(np.arange(len(texts), dtype=np.int64), counts)
        order = np.lexsort((h, owner))
        h, owner = h[order], owner[order]
        keep = np.ones(len(h), dtype=bool)
        keep[1:] = (h[1:] != h[:-1]) | (owner[1:] != owner[:-1])
        sizes = np.bincount(owner[keep], minlength=len(texts))
        return h[keep], np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)


def _ragged(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(s, s + l)`` for every (s, l), without a Python loop."""
    lengths = np.asarray(lengths, dtype=np.int64)
    total = int(lengths.sum())
    if total == 0:
        return np.empty(0, dtype=np.int64)
    ends = np.cumsum(lengths)
    shift = np.repeat(np.asarray(starts, dtype=np.int64) - (ends - lengths), lengths)
    return np.arange(total, dtype=np.int64) + shift


def _batches(weights: np.ndarray, budget: int) -> Iterator[tuple[int, int]]:
    """Consecutive [a, b) ranges whose weights sum to at most ``budget`` (or one item)."""
    cum = np.cumsum(weights, dtype=np.int64)
    a, n = 0, len(weights)
    while a < n:
        base = cum[a - 1] if a else 0
        b = int(np.searchsorted(cum, base + budget, side="right"))
        b = max(b, a + 1)
        yield a, b
        a = b


DF_BITS = 22  # the shingle-frequency table: 4M counters (32 MB), however large the corpus


class RarestFirst:
    """The global order the prefix filter needs: shingles that few sets hold come first.

    Frequencies are counted per hash bucket (``2**DF_BITS`` counters), so memory is fixed; a
    bucket shared by two shingles only blurs the order, which stays one total order (frequency
    of the bucket, then the hash), and any total order gives exact results. Feed every set with
    ``count`` first, then sort each with ``sort``."""

    def __init__(self, bits: int = DF_BITS) -> None:
        self.mask = np.uint64((1 << bits) - 1)
        self.df = np.zeros(1 << bits, dtype=np.int64)

    def count(self, flat: np.ndarray) -> None:
        self.df += np.bincount((flat & self.mask).astype(np.int64), minlength=len(self.df))

    def sort(self, flat: np.ndarray, offsets: np.ndarray) -> np.ndarray:
        """``flat`` with every set (``offsets``) reordered rarest first."""
        owner = np.repeat(np.arange(len(offsets) - 1, dtype=np.int64), np.diff(offsets))
        df = self.df[(flat & self.mask).astype(np.int64)]
        return flat[np.lexsort((flat, df, owner))]


def prefix_lengths(sizes: np.ndarray, threshold: float) -> np.ndarray:
    """How many rarest-first tokens of each set to index: ``s - ceil(t s) + 1`` (a hair longer
    where float rounding could cut it short; longer prefixes only add candidates)."""
    need = np.maximum(1, np.ceil(sizes * threshold - 1e-9)).astype(np.int64)
    return np.maximum(1, sizes - need + 1)


def similar_pairs(
    tok: np.ndarray,
    offsets: np.ndarray,
    left: np.ndarray,
    right: np.ndarray,
    threshold: float,
    *,
    budget: int = 4_000_000,
) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Every pair (i in ``left``, j in ``right``) with Jaccard >= ``threshold``, in batches of
    (i, j, intersection, union). ``tok``/``offsets`` are the hashed sets, each sorted in one
    global order (``RarestFirst``); ``budget`` bounds the entries any step holds."""
    if not 0 < threshold <= 1:
        raise ValueError(f"threshold must be in (0, 1], got {threshold}")
    left = np.asarray(left, dtype=np.int64)
    right = np.asarray(right, dtype=np.int64)
    if len(left) == 0 or len(right) == 0:
        return
    sizes = np.diff(offsets)
    plen = prefix_lengths(sizes, threshold)
    n_sets = len(sizes)
    # the index: right sets' prefix tokens, sorted by token
    r_tok = tok[_ragged(offsets[right], plen[right])]
    r_set = np.repeat(right, plen[right])
    order = np.argsort(r_tok, kind="stable")
    r_tok, r_set = r_tok[order], r_set[order]
    del order
    l_len = plen[left]
    for a, b in _batches(l_len, budget):
        ids = left[a:b]
        q_tok = tok[_ragged(offsets[ids], l_len[a:b])]
        q_set = np.repeat(ids, l_len[a:b])
        lo = np.searchsorted(r_tok, q_tok, side="left")
        hits = np.searchsorted(r_tok, q_tok, side="right") - lo
        # how many candidate entries each left set expands to; group whole sets per batch
        per_set = np.bincount(np.repeat(np.arange(b - a), l_len[a:b]), weights=hits)
        ends = np.cumsum(l_len[a:b])
        for sa, sb in _batches(per_set.astype(np.int64), budget):
            e0 = int(ends[sa - 1]) if sa else 0
            e1 = int(ends[sb - 1])
            h = hits[e0:e1]
            cand_l = np.repeat(q_set[e0:e1], h)
            cand_r = r_set[_ragged(lo[e0:e1], h)]
            pair = np.unique(cand_l * n_sets + cand_r)
            del cand_l, cand_r
            pi, pj = pair // n_sets, pair % n_sets
            si, sj = sizes[pi], sizes[pj]
            ok = np.minimum(si, sj) >= threshold * np.maximum(si, sj) - 1e-9
            yield from _verify(tok, offsets, pi[ok], pj[ok], threshold, budget)


def _verify(
    tok: np.ndarray,
    offsets: np.ndarray,
    pi: np.ndarray,
    pj: np.ndarray,
    threshold: float,
    budget: int,
) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Exact intersections of candidate pairs, a batch of at most ``budget`` tokens at a time."""
    sizes = np.diff(offsets)
    for a, b in _batches(sizes[pi] + sizes[pj], budget):
        i, j = pi[a:b], pj[a:b]
        m = np.arange(b - a, dtype=np.int64)
        owner = np.concatenate([np.repeat(m, sizes[i]), np.repeat(m, sizes[j])])
        t = np.concatenate([tok[_ragged(offsets[i], sizes[i])], tok[_ragged(offsets[j], sizes[j])]])
        order = np.lexsort((t, owner))
        owner, t = owner[order], t[order]
        same = (owner[1:] == owner[:-1]) & (t[1:] == t[:-1])  # a set holds a shingle once
        inter = np.bincount(owner[1:][same], minlength=b - a)
        union = sizes[i] + sizes[j] - inter
        jac = inter / union
        keep = jac >= threshold
        if keep.any():
            yield i[keep], j[keep], inter[keep], union[keep]


def shingle_sets(texts: Sequence[str], n: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Hashed shingle sets of ``texts``, each sorted rarest first, for ``similar_pairs``."""
    flat, offsets = ShingleHasher(n)(texts)
    order = RarestFirst()
    order.count(flat)
    return order.sort(flat, offsets), offsets
