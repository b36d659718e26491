"""Checking a bundle against its manifest: every file's sha256, the weights' sha256, and a
fixed sample of embeddings re-computed and compared within a tolerance.

The sample texts are fixed and generic (never document text), so the manifest holds no
passage of the collection.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ballast.core.errors import InputError
from ballast.core.progress import SILENT, Progress
from ballast.io.files import sha256_file
from ballast.io.manifest import MANIFEST, UNSIGNED, inside, read_manifest, unlisted
from ballast.models.verification import INT8_TOLERANCE, TOLERANCE


def _check(name: str, file: Path, ok: bool, detail: str) -> dict[str, Any]:
    return {"check": name, "file": str(file), "ok": bool(ok), "detail": detail}


def _hash_checks(bundle: Path, wanted: dict[str, str], field: str) -> list[dict[str, Any]]:
    out = []
    for rel, sha in sorted(wanted.items()):
        f = inside(bundle, rel, field)
        if not f.is_file():
            out.append(_check("sha256", f, False, f"missing (listed in manifest {field})"))
        else:
            got = sha256_file(f)
            out.append(
                _check(
                    "sha256",
                    f,
                    got == sha,
                    f"matches manifest {field}"
                    if got == sha
                    else f"sha256 {got[:16]}… differs from manifest {field} {sha[:16]}…",
                )
            )
    return out


def _compare(
    name: str, file: Path, got: np.ndarray, want: Any, tol: float, field: str
) -> dict[str, Any]:
    want_arr = np.asarray(want, dtype=np.float64)
    if want_arr.shape != got.shape:
        return _check(
            name, file, False, f"shape {got.shape} differs from manifest {field} {want_arr.shape}"
        )
    diff = float(np.max(np.abs(got - want_arr))) if got.size else 0.0
    ok = diff <= tol
    return _check(
        name,
        file,
        ok,
        f"max |difference| {diff:.2e} {'within' if ok else 'exceeds'} {tol:.0e} ({field})",
    )


def verify_bundle(bundle: Path, *, progress: Progress = SILENT) -> dict[str, Any]:
    """Every check, passed or failed; ``ok`` is true only if all passed."""
    manifest = read_manifest(bundle)
    mpath = bundle / MANIFEST
    _named_graphs(bundle, manifest)
    checks: list[dict[str, Any]] = []
    progress.info(f"verify: hashing the files of {bundle}")
    checks += _hash_checks(bundle, manifest["model"]["weights_sha256"], "model.weights_sha256")
    if isinstance(manifest.get("files_sha256"), dict):
        weights = set(manifest["model"]["weights_sha256"])
        others = {k: v for k, v in manifest["files_sha256"].items() if k not in weights}
        checks += _hash_checks(bundle, others, "files_sha256")
    stray = unlisted(bundle, manifest)
    for rel in stray:
        why = "a file the manifest does not name; remove it or re-export"
        checks.append(_check("unlisted", bundle / rel, False, why))
    hashes_ok = all(c["ok"] for c in checks)
    ver = manifest["verification"]
    texts, want = ver.get("texts"), ver.get("embeddings")
    if not isinstance(texts, list) or not isinstance(want, list) or len(texts) != len(want):
        raise InputError(
            "expected lists 'texts' and 'embeddings' of the same length",
            path=mpath,
            field="verification",
        )
    tol = float(ver.get("tolerance", TOLERANCE))
    if not hashes_ok:
        checks.append(
            _check("embeddings", bundle, False, "not computed: the files do not match the manifest")
        )
        return {"bundle": str(bundle), "ok": False, "checks": checks, "note": UNSIGNED}
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder

    progress.info(f"verify: re-embedding {len(texts)} sample texts")
    model = load_encoder(bundle)
    weights = bundle / next(iter(sorted(manifest["model"]["weights_sha256"])), "")
    got = encode(model, [str(t) for t in texts], batch_size=max(1, len(texts)))
    checks.append(
        _compare("embeddings (pytorch)", weights, got, want, tol, "verification.embeddings")
    )
    onnx = manifest.get("onnx")
    if isinstance(onnx, dict):
        checks += _onnx_checks(bundle, manifest, onnx, texts, want, tol, progress)
    ok = all(c["ok"] for c in checks)
    return {"bundle": str(bundle), "ok": ok, "checks": checks, "note": UNSIGNED}


def _named_graphs(bundle: Path, manifest: dict[str, Any]) -> None:
    """Every graph the manifest names lies inside the bundle and is among the hashed files;
    otherwise the manifest is refused before anything is loaded (exit 2, naming the field)."""
    onnx = manifest.get("onnx")
    if not isinstance(onnx, dict):
        return
    hashed = manifest.get("files_sha256") or {}
    named = [("onnx.path", onnx.get("path"))]
    if isinstance(onnx.get("int8"), dict):
        named.append(("onnx.int8.path", onnx["int8"].get("path")))
    for field, rel in named:
        inside(bundle, rel, field)
        if rel not in hashed:
            raise InputError(
                f"{rel!r} is not among the files the manifest hashes (files_sha256)",
                path=bundle / MANIFEST,
                field=field,
            )


def _onnx_checks(
    bundle: Path,
    manifest: dict[str, Any],
    onnx: dict[str, Any],
    texts: list[Any],
    want: list[Any],
    tol: float,
    progress: Progress,
) -> list[dict[str, Any]]:
    try:
        import onnxruntime  # noqa: F401
    except ImportError:
        return [
            _check(
                "embeddings (onnx)",
                bundle / str(onnx.get("path", "model.onnx")),
                True,
                "skipped: onnxruntime is not installed (pip install 'ballast[onnx]')",
            )
        ]
    from ballast.models.onnx import open_onnx

    out = []
    msl = int(onnx.get("max_seq_length") or manifest["model"].get("max_seq_length") or 512)
    entries = [("embeddings (onnx)", onnx.get("path"), want, tol, "verification.embeddings")]
    int8 = onnx.get("int8")
    if isinstance(int8, dict):
        entries.append(
            (
                "embeddings (onnx int8)",
                int8.get("path"),
                int8.get("verification_embeddings"),
                float(int8.get("verification_tolerance", INT8_TOLERANCE)),
                "onnx.int8.verification_embeddings",
            )
        )
    for name, rel, expected, t, field in entries:
        # listed in files_sha256 (_named_graphs) and hashed with the rest before this runs
        f = inside(bundle, rel, "onnx.int8.path" if "int8" in name else "onnx.path")
        progress.info(f"verify: re-embedding the sample with {f.name}")
        got = open_onnx(bundle, str(rel), msl).encode([str(x) for x in texts])
        out.append(_compare(name, f, got, expected, t, field))
    return out
