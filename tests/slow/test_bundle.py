"""The hand-off to the index builder: the manifest against its JSON Schema, `ballast verify`
(hashes and a re-embedded sample), `ballast embed` (npy + ids, parquet), and the README's
loading code run as written. The bundle is exported from a synthetic run folder whose "tuned"
model is the packaged base model (nothing is trained here)."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from ballast.cli import app
from tests.conftest import REPO
from tests.runfolder import make_run, read_manifest

pytestmark = pytest.mark.slow
runner = CliRunner()
SCHEMA = REPO / "schemas" / "manifest.schema.json"


def invoke(*args: str):
    return runner.invoke(app, list(args), catch_exceptions=False)


@pytest.fixture(scope="module")
def bundle(tmp_path_factory: pytest.TempPathFactory) -> Path:
    run = make_run(tmp_path_factory.mktemp("bundle"), with_model=True)
    r = invoke("export", str(run), "--json", "-q")
    assert r.exit_code == 0, r.output
    return Path(json.loads(r.stdout)["summary"]["bundle"])


@pytest.fixture
def copy(bundle: Path, tmp_path: Path) -> Path:
    out = tmp_path / bundle.name
    shutil.copytree(bundle, out)
    return out


def validator():
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads(SCHEMA.read_text("utf-8"))
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_manifest_matches_its_schema(bundle: Path) -> None:
    manifest = read_manifest(bundle)
    errors = [f"{e.json_path}: {e.message}" for e in validator().iter_errors(manifest)]
    assert errors == []
    assert manifest["onnx"] is None
    assert set(manifest["files_sha256"]) >= {"model.safetensors", "tokenizer.json"}
    assert "manifest.json" not in manifest["files_sha256"]


def test_the_bundle_carries_a_model_card_and_the_base_licence(bundle: Path) -> None:
    manifest = read_manifest(bundle)
    # the packaged base model's README front matter says "license: apache-2.0"
    assert manifest["base_model"]["license"] == "apache-2.0"
    assert manifest["model_card"] == "README.md" and "README.md" in manifest["files_sha256"]
    card = (bundle / "README.md").read_text("utf-8")
    for part in ("## Verdict", "## Metrics", "licence: **apache-2.0**", "## Intended use",
                 "## Limits and cautions", "qualified person"):  # fmt: skip
        assert part in card, part
    test = manifest["metrics"]["test"]["ndcg@10"]
    assert f"{test['tuned']:.4f}" in card and f"{test['diff']:+.4f}" in card


def test_schema_rejects_broken_manifests(bundle: Path) -> None:
    # common practice: a schema test must also see the schema say no
    v, good = validator(), read_manifest(bundle)
    for broken in (
        {k: x for k, x in good.items() if k != "gate"},
        good | {"unknown_field": 1},
        good | {"model": good["model"] | {"weights_sha256": {"model.safetensors": "abc"}}},
        good | {"gate": good["gate"] | {"forced": "no"}},
    ):
        assert list(v.iter_errors(broken)), broken.keys()


def test_verify_passes_on_the_exported_bundle(bundle: Path) -> None:
    r = invoke("verify", str(bundle), "--json", "-q")
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["ok"] is True and r.stderr == ""
    kinds = [c["check"] for c in doc["checks"]]
    assert kinds.count("sha256") == len(read_manifest(bundle)["files_sha256"])
    assert "embeddings (pytorch)" in kinds
    text = invoke("verify", str(bundle))
    assert text.exit_code == 0 and "bundle verified" in text.stdout and "verify:" in text.stderr


def test_verify_names_a_changed_file(copy: Path) -> None:
    target = copy / "tokenizer_config.json"
    target.write_bytes(target.read_bytes().replace(b"{", b"{ ", 1))
    r = invoke("verify", str(copy), "-q")
    assert r.exit_code == 2
    assert f"{target}:" in r.stderr and "differs from manifest files_sha256" in r.stderr
    assert "not computed" in r.stderr  # nothing is loaded from files that do not match


def test_verify_names_changed_weights(copy: Path) -> None:
    weights = copy / "model.safetensors"
    data = bytearray(weights.read_bytes())
    data[-1] ^= 1
    weights.write_bytes(bytes(data))
    r = invoke("verify", str(copy), "-q", "--json")
    assert r.exit_code == 2
    failed = [c for c in json.loads(r.stdout)["checks"] if not c["ok"]]
    assert any(c["file"] == str(weights) and "model.weights_sha256" in c["detail"] for c in failed)


def test_verify_catches_different_embeddings(copy: Path) -> None:
    # the files match their hashes but the manifest's sample does not match what they compute
    manifest = read_manifest(copy)
    manifest["verification"]["embeddings"][0][0] += 0.01
    (copy / "manifest.json").write_text(json.dumps(manifest), "utf-8")
    r = invoke("verify", str(copy), "-q")
    assert r.exit_code == 2
    assert "model.safetensors" in r.stderr and "verification.embeddings" in r.stderr


def test_verify_bad_bundle_folder(tmp_path: Path) -> None:
    r = invoke("verify", str(tmp_path))
    assert r.exit_code == 2 and "manifest.json" in r.stderr


def _passages(tmp_path: Path) -> tuple[Path, list[str], list[str]]:
    ids = [f"doc-{i}" for i in range(9)]
    texts = [f"Passage {i}: the filter of pump {i} is cleaned every {i + 1} weeks."
             for i in range(9)]
    p = tmp_path / "passages.jsonl"
    rows = [json.dumps({"id": i, "text": t}) + "\n" for i, t in zip(ids, texts, strict=True)]
    p.write_text("".join(rows), "utf-8")
    return p, ids, texts


def test_embed_npy_matches_sentence_transformers(bundle: Path, tmp_path: Path) -> None:
    from sentence_transformers import SentenceTransformer

    passages, ids, texts = _passages(tmp_path)
    out = tmp_path / "out" / "vectors"
    r = invoke("embed", str(bundle), str(passages), "-o", str(out), "--batch-size", "4")
    assert r.exit_code == 0, r.output
    assert "embedding passages: 9/9" in r.stderr and "vectors.npy" in r.stdout
    vectors = np.load(tmp_path / "out" / "vectors.npy")
    assert (tmp_path / "out" / "vectors.ids.txt").read_text("utf-8").splitlines() == ids
    # the oracle: sentence-transformers itself, loading the bundle as the README shows
    want = SentenceTransformer(str(bundle), device="cpu", local_files_only=True).encode(
        texts, normalize_embeddings=True
    )
    assert vectors.dtype == np.float32 and vectors.shape == (9, 384)
    assert np.abs(vectors - want).max() < 1e-5
    assert np.allclose(np.linalg.norm(vectors, axis=1), 1.0, atol=1e-5)
    assert not [p for p in (tmp_path / "out").iterdir() if p.name.endswith(".tmp")]


def test_embed_parquet_from_tsv(bundle: Path, tmp_path: Path) -> None:
    import pyarrow.parquet as pq

    _, ids, texts = _passages(tmp_path)
    tsv = tmp_path / "passages.tsv"
    tsv.write_text("".join(f"{i}\t{t}\n" for i, t in zip(ids, texts, strict=True)), "utf-8")
    r = invoke("embed", str(bundle), str(tsv), "-o", str(tmp_path / "v"), "--format", "parquet",
               "--json", "-q")
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["passages"] == 9 and doc["dimension"] == 384 and r.stderr == ""
    table = pq.read_table(tmp_path / "v.parquet")
    assert table.column("id").to_pylist() == ids
    vec = np.array(table.column("embedding").to_pylist(), dtype=np.float32)
    invoke("embed", str(bundle), str(tsv), "-o", str(tmp_path / "n"), "-q")
    assert np.array_equal(vec, np.load(tmp_path / "n.npy"))


@pytest.mark.parametrize(
    ("content", "args", "expect"),
    [
        ("doc-1 no tab here\n", [], "passages.tsv:1"),
        ("a\tone\na\ttwo\n", [], "duplicate passage id 'a'"),
        ("a\tone\n", ["--format", "csv"], "--format"),
        ("a\tone\n", ["--backend", "onnx"], "ballast export --onnx"),
    ],
)
def test_embed_bad_input(bundle: Path, tmp_path: Path, content: str, args: list[str],
                         expect: str) -> None:
    tsv = tmp_path / "passages.tsv"
    tsv.write_text(content, "utf-8")
    r = invoke("embed", str(bundle), str(tsv), "-o", str(tmp_path / "v"), *args)
    assert r.exit_code == 2 and expect in r.stderr, r.stderr
    assert not list(tmp_path.glob("v*"))


def readme_block(after: str) -> str:
    text = (REPO / "README.md").read_text("utf-8")
    start = text.index(after)
    m = re.search(r"```python\n(.*?)```", text[start:], re.S)
    assert m, after
    return m.group(1)


def test_readme_loading_code_runs(bundle: Path) -> None:
    code = readme_block("In Python, with sentence-transformers")
    assert "runs/demo/bundle/demo-v-0123456789ab" in code
    scope: dict = {}
    exec(code.replace("runs/demo/bundle/demo-v-0123456789ab", str(bundle)), scope)  # noqa: S102
    assert scope["vectors"].shape == (1, 384)
