"""Mining at scale: search time and peak memory for 10k, 100k and 1M passages, both engines.

Random unit vectors (dim 384, like MiniLM), 1000 queries, top 30 (the default window). Each
(size, engine) runs in its own process, so its peak resident memory (ru_maxrss) is its own;
"over corpus" is that peak minus the resident size once the corpus is built, i.e. what the
search itself held. The screen column times the rules over the 30 candidates of every query.
Search time is the best of five. Ratios are measured side by side in one run: time per
passage relative to the smallest size (1.0 = linear growth).

    .venv/bin/python bench/mining_scale.py            # 10k, 100k, 1M (~2-4 GB, a few minutes)
    .venv/bin/python bench/mining_scale.py 10000 50000
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

DIM, QUERIES, TOP, REPEATS = 384, 1000, 30, 5


def _rss_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def unit_vectors(n: int, rng: np.random.Generator, chunk: int = 10_000) -> np.ndarray:
    out = np.empty((n, DIM), dtype=np.float32)
    for s in range(0, n, chunk):
        block = rng.standard_normal((min(chunk, n - s), DIM), dtype=np.float32)
        block /= np.linalg.norm(block, axis=1, keepdims=True)
        out[s : s + len(block)] = block
    return out


def child(n: int, engine: str, out: str) -> None:
    from ballast.config import MineConfig
    from ballast.core.mining import LazyShingles, mine_one
    from ballast.core.search import top_k, top_k_faiss

    rng = np.random.default_rng(0)
    corpus = unit_vectors(n, rng)
    queries = unit_vectors(QUERIES, rng)
    ids = [f"p{i:07d}" for i in range(n)]
    if engine == "faiss":
        import faiss  # noqa: F401  (loaded before the baseline, like numpy)
    base_rss = _rss_mb()
    fn = top_k_faiss if engine == "faiss" else top_k
    times = []
    for _ in range(REPEATS):  # the best of a few: the machine may be shared
        t = time.perf_counter()
        idx, sc = fn(queries, corpus, TOP, ids)
        times.append(time.perf_counter() - t)
    seconds = min(times)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    # the rules over every query's window (positive: passage 0 with score 1.0, texts short)
    texts = [f"passage {i}" for i in range(n)]
    cfg = MineConfig(negatives=1)
    t = time.perf_counter()
    for qi in range(QUERIES):
        mine_one(
            idx[qi], sc[qi], 0, 1.0, doc_of=ids, text_key=texts, shingles_of=LazyShingles(texts),
            cfg=cfg, rng=np.random.default_rng(qi),
        )  # fmt: skip
    screen = time.perf_counter() - t
    np.save(out, idx)
    print(json.dumps({
        "n": n, "engine": engine, "seconds": seconds, "screen": screen, "peak_mb": peak,
        "base_mb": base_rss, "corpus_mb": corpus.nbytes / 2**20,
    }))  # fmt: skip


def main(sizes: list[int]) -> None:
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            got = {}
            for engine in ("exact", "faiss"):
                out = f"{tmp}/{n}-{engine}.npy"
                proc = subprocess.run(
                    [sys.executable, __file__, "--child", str(n), engine, out],
                    check=True, capture_output=True, text=True,
                )  # fmt: skip
                row = json.loads(proc.stdout.strip().splitlines()[-1])
                got[engine] = np.load(out)
                rows.append(row)
            same = float((got["exact"] == got["faiss"]).mean())
            rows[-1]["agree"] = rows[-2]["agree"] = same
    first = {r["engine"]: r["seconds"] / r["n"] for r in rows if r["n"] == sizes[0]}
    head = (
        f"| passages | engine | search s | time/passage vs {sizes[0] // 1000}k | screen s "
        "| corpus MB | peak RSS MB | over corpus MB | same top-30 as exact |"
    )
    print(f"{QUERIES} queries, top {TOP}, dim {DIM}, random unit vectors, best of {REPEATS}")
    print()
    print(head)
    print("|" + "---|" * 9)
    for r in rows:
        ratio = (r["seconds"] / r["n"]) / first[r["engine"]]
        print(
            f"| {r['n']:,} | {r['engine']} | {r['seconds']:.2f} | {ratio:.2f} | "
            f"{r['screen']:.2f} | {r['corpus_mb']:.0f} | {r['peak_mb']:.0f} | "
            f"{r['peak_mb'] - r['base_mb']:.0f} | {100 * r['agree']:.2f}% |"
        )


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        child(int(sys.argv[2]), sys.argv[3], sys.argv[4])
    else:
        main([int(a) for a in sys.argv[1:]] or [10_000, 100_000, 1_000_000])
