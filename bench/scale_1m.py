"""Scale: ingest, split (with its leakage audit) and evaluate 10k, 100k and 1M passages.

A synthetic collection: N documents of 24-48 words (Zipf-distributed over a 20,000-word
vocabulary, in three sentences), each one passage; 1% are near-copies of an earlier document
(last word changed, Jaccard about 0.95, so the leakage audit has pairs to find) and 0.5% are
looser copies (a middle word changed, about 0.85, below the 0.9 threshold). One query per
passage for the split. Each step runs in a fresh process, so its peak resident memory
(ru_maxrss) is its own:

- ingest: ``corpus.iter_passages`` streamed into ``files.write_jsonl``, as ``ballast ingest``
  does, with whitespace word counts in place of the model's tokenizer (whose cost is per text).
- split: the ``ballast split`` stage itself (``stages.split.split``) on the run folder.
- evaluate: what ``ballast evaluate`` does after encoding: the corpus read from passages.jsonl,
  random unit vectors (dim 384, like MiniLM) for the passages, 1000 queries near their relevant
  passage, two "models" (noisier and less noisy queries), exact top-k (``evaluate.rank``), the
  default metrics, TREC run files, and the paired bootstrap summary. Encoding 1M texts with a
  real model is left out (hours on a CPU, linear in N by construction).

Time is the step itself (imports and making the vectors excluded): the best of three runs up to
100k passages, one run above; time per passage is relative to the smallest size (1.00 = linear
growth). Peak RSS is the largest of the runs, read in the child (``ru_maxrss``).

    .venv/bin/python bench/scale_1m.py                       # 10k, 100k, 1M (~10 minutes)
    .venv/bin/python bench/scale_1m.py --sizes 10000 50000   # a quick run
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

DIM, QUERIES, VOCAB, LIMIT_MB, SMALL_REPEATS = 384, 1000, 20_000, 4096, 3
STEPS = ("ingest", "split", "evaluate")


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _vocabulary(rng: np.random.Generator) -> np.ndarray:
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    lens = rng.integers(3, 10, size=VOCAB)
    words = {"".join(rng.choice(letters, size=int(k))) for k in lens}
    return np.array(sorted(words))


def make_documents(n: int, path: Path, seed: int = 0, chunk: int = 50_000) -> None:
    """N synthetic documents as JSONL ({"id", "title", "text"}), written a chunk at a time."""
    rng = np.random.default_rng(seed)
    vocab = _vocabulary(rng)
    p = 1.0 / (np.arange(len(vocab)) + 10.0)
    p /= p.sum()
    with open(path, "w", encoding="utf-8") as fh:
        for s in range(0, n, chunk):
            m = min(chunk, n - s)
            idx = rng.choice(len(vocab), size=(m, 48), p=p)
            lens = rng.integers(24, 49, size=m)
            kind = rng.random(m)
            docs: list[list[str]] = []
            for r in range(m):
                if r > 0 and kind[r] < 0.015:  # a near-copy of an earlier document
                    words = list(docs[int(rng.integers(r))])
                    at = len(words) - 1 if kind[r] < 0.01 else len(words) // 2
                    words[at] = str(vocab[idx[r, 0]])
                else:
                    words = [str(w) for w in vocab[idx[r, : lens[r]]]]
                docs.append(words)
                k = len(words) // 3
                sents = [words[:k], words[k : 2 * k], words[2 * k :]]
                text = " ".join(" ".join(x).capitalize() + "." for x in sents)
                row = {"id": f"d{s + r:07d}", "title": f"Document {s + r}", "text": text}
                fh.write(json.dumps(row) + "\n")


def make_queries(passages: Path, path: Path) -> int:
    """One query per passage (its first five words), origin ``ict``."""
    from ballast.io.files import read_jsonl

    n = 0
    with open(path, "w", encoding="utf-8") as fh:
        for _, p in read_jsonl(passages):
            q = {"id": f"q{n:07d}", "text": " ".join(p["text"].split()[:5]), "origin": "ict"}
            q["passage_id"] = p["id"]
            fh.write(json.dumps(q, sort_keys=True) + "\n")
            n += 1
    return n


def _unit(x: np.ndarray) -> np.ndarray:
    return x / np.linalg.norm(x, axis=1, keepdims=True)


def step_ingest(work: Path) -> dict:
    from ballast.config import IngestConfig
    from ballast.io.files import write_jsonl
    from ballast.stages.ingest.documents import iter_passages

    cfg = IngestConfig(docs=str(work / "docs"))
    stats: dict = {}
    t = time.perf_counter()
    write_jsonl(
        work / "run" / "passages.jsonl",
        iter_passages(work / "docs", cfg, lambda texts: [len(x.split()) for x in texts], stats),
    )
    return {"seconds": time.perf_counter() - t, "passages": stats["passages"]}


def step_split(work: Path) -> dict:
    from ballast.config import Config
    from ballast.stages.base import Run
    from ballast.stages.split import split

    run = Run(Config(run_dir=str(work / "run")))
    t = time.perf_counter()
    out = split(run)
    return {"seconds": time.perf_counter() - t, "leakage_pairs": out["leakage_pairs"]}


def step_evaluate(work: Path) -> dict:
    from ballast.config import EvaluateConfig
    from ballast.core.metrics import compute
    from ballast.core.scoring import depth, rank
    from ballast.io.files import read_jsonl
    from ballast.io.trec import format_run
    from ballast.stages.evaluate.compute import Corpus, EvalSet, summarise

    cfg = EvaluateConfig()
    metrics = list(cfg.metrics)
    t0 = time.perf_counter()
    ids: list[str] = []
    texts: list[str] = []
    for _, p in read_jsonl(work / "run" / "passages.jsonl"):  # as the evaluate stage reads it
        ids.append(p["id"])
        texts.append(p["text"])
    corpus = Corpus(ids, texts)
    read_s = time.perf_counter() - t0
    n = len(ids)
    rng = np.random.default_rng(1)
    p_emb = np.empty((n, DIM), dtype=np.float32)  # stands for the encoded (cached) passages
    for s in range(0, n, 50_000):
        block = rng.standard_normal((min(50_000, n - s), DIM), dtype=np.float32)
        p_emb[s : s + len(block)] = _unit(block)
    rel = rng.choice(n, size=QUERIES, replace=False)
    evalset = EvalSet(
        "test", "main", [f"q{i}" for i in range(QUERIES)], [""] * QUERIES,
        ["ict"] * QUERIES, [{corpus.ids[r]: 1} for r in rel],
    )  # fmt: skip
    noise = _unit(rng.standard_normal((QUERIES, DIM), dtype=np.float32))
    t = time.perf_counter()
    per_query, run_files = {}, {}
    for name, scale in (("base", 4.5), ("tuned", 3.5)):
        q_emb = _unit(p_emb[rel] + scale * noise).astype(np.float32)
        ranked, scores = rank(q_emb, p_emb, corpus.ids, depth(metrics))
        per_query[name] = compute(metrics, ranked, evalset.qrels)
        run_files[name] = format_run(evalset.qids, ranked, scores, f"ballast-{name}")
    seconds = read_s + time.perf_counter() - t
    t = time.perf_counter()
    models = {"base": (Path("."), ""), "tuned": (Path("."), "")}
    summary = summarise(
        {"test": per_query}, [evalset], metrics, models, baseline="base", seed=0,
        resamples=cfg.bootstrap_resamples, confidence=cfg.confidence,
    )  # fmt: skip
    summary_s = time.perf_counter() - t  # the bootstrap: per query, the same at every N
    ndcg = summary["splits"]["test"]["models"]["tuned"]["ndcg@10"]["mean"]
    return {"seconds": seconds, "ndcg@10 tuned": round(ndcg, 3), "summary s": round(summary_s, 1)}


def _vm_hwm_mb() -> float:
    """Peak RSS of this process image alone (ru_maxrss also keeps the parent's at fork/exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def child(step: str, work: str, n: int) -> None:
    w = Path(work)
    if step == "make-documents":
        make_documents(n, w / "docs" / "docs.jsonl")
        return
    if step == "make-queries":
        make_queries(w / "run" / "passages.jsonl", w / "run" / "queries.jsonl")
        return
    got = {"ingest": step_ingest, "split": step_split, "evaluate": step_evaluate}[step](w)
    got["peak_mb"] = _peak_mb()
    got["hwm_mb"] = _vm_hwm_mb()
    print(json.dumps(got))


def _run_child(step: str, work: Path, n: int) -> str:
    proc = subprocess.run(
        [sys.executable, __file__, "--child", step, str(work), str(n)],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    return proc.stdout


def main(sizes: list[int]) -> None:
    # every step, the data making too, runs in a child, so this process stays small: a child's
    # ru_maxrss starts from its parent's resident size at the fork
    rows = []
    for n in sizes:
        with tempfile.TemporaryDirectory(prefix="ballast-scale-") as tmp:
            work = Path(tmp)
            (work / "docs").mkdir()
            (work / "run").mkdir()
            _run_child("make-documents", work, n)
            for step in STEPS:
                if step == "split":
                    _run_child("make-queries", work, n)
                # the best of a few at the small sizes (the machine may be shared): a small
                # baseline that is too slow would flatter the ratios of the large ones
                tries = [
                    json.loads(_run_child(step, work, n).strip().splitlines()[-1])
                    for _ in range(SMALL_REPEATS if n <= 100_000 else 1)
                ]
                row = min(tries, key=lambda r: r["seconds"])
                row["peak_mb"] = max(r["peak_mb"] for r in tries)
                row["hwm_mb"] = max(r["hwm_mb"] for r in tries)
                rows.append({"n": n, "step": step, **row})
                print(f"{n:>9,} {step:<8} {row['seconds']:8.1f} s {row['peak_mb']:7.0f} MB",
                      file=sys.stderr)  # fmt: skip
    first = {r["step"]: r["seconds"] / r["n"] for r in rows if r["n"] == sizes[0]}
    print(f"{QUERIES} evaluation queries, dim {DIM}; one query per passage for the split")
    print(f"parent process peak RSS {_peak_mb():.0f} MB (a child's ru_maxrss starts from it)")
    print()
    print(
        f"| passages | step | seconds | time/passage vs {sizes[0] // 1000}k | peak RSS MB "
        f"| of {LIMIT_MB // 1024} GB | notes |"
    )
    print("|" + "---|" * 7)
    for r in rows:
        ratio = (r["seconds"] / r["n"]) / first[r["step"]]
        notes = ", ".join(
            f"{k} {v:,}" if isinstance(v, int) else f"{k} {v}"
            for k, v in r.items()
            if k not in ("n", "step", "seconds", "peak_mb", "hwm_mb")
        )
        print(
            f"| {r['n']:,} | {r['step']} | {r['seconds']:.1f} | {ratio:.2f} | "
            f"{r['peak_mb']:.0f} | {100 * r['peak_mb'] / LIMIT_MB:.0f}% | {notes} |"
        )


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        child(sys.argv[2], sys.argv[3], int(sys.argv[4]))
    else:
        parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
        parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
        main(parser.parse_args().sizes)
