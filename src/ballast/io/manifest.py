"""The bundle's manifest: its schema version, the library versions it records, reading it back
and hashing the files it lists."""

from __future__ import annotations

import json
import platform
from importlib import metadata
from pathlib import Path
from typing import Any

from ballast.core.errors import InputError
from ballast.io.files import sha256_file

SCHEMA_VERSION = 1


LIBRARIES = (
    "ballast",
    "torch",
    "sentence-transformers",
    "transformers",
    "numpy",
    "scipy",
    "scikit-learn",
    "datasets",
    "accelerate",
)


def library_versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def safe_name(name: str) -> str:
    """A bundle folder name that cannot climb out of the export folder."""
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\0" in name:
        raise InputError(
            f"bad bundle name {name!r}: expected a plain folder name", field="export.version"
        )
    return name


MANIFEST = "manifest.json"


def read_manifest(bundle: Path) -> dict[str, Any]:
    path = bundle / MANIFEST
    if not bundle.is_dir():
        raise InputError("not a bundle folder", path=bundle)
    if not path.is_file():
        raise InputError("no manifest.json: not a ballast bundle", path=path)
    try:
        data = json.loads(path.read_text("utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", path=path) from None
    if not isinstance(data, dict):
        raise InputError("expected a JSON object", path=path)
    for key in ("model", "verification"):
        if not isinstance(data.get(key), dict):
            raise InputError("missing or not an object", path=path, field=key)
    if not isinstance(data["model"].get("weights_sha256"), dict):
        raise InputError("missing or not an object", path=path, field="model.weights_sha256")
    return data


def files_hash(bundle: Path) -> dict[str, str]:
    """sha256 of every file in the bundle but the manifest itself."""
    return {
        p.relative_to(bundle).as_posix(): sha256_file(p)
        for p in sorted(bundle.rglob("*"))
        if p.is_file() and p.relative_to(bundle).as_posix() != MANIFEST
    }


UNSIGNED = (
    "the manifest is not signed: these checks prove the files are the ones the manifest lists, "
    "not who wrote the manifest; keep bundles where only trusted people can write"
)


def inside(bundle: Path, rel: Any, field: str) -> Path:
    """The file a manifest names: a relative path that stays inside the bundle once links are
    followed. Anything else (absolute, '..', a link leading out) is refused, naming the field."""
    where = bundle / MANIFEST
    if not isinstance(rel, str) or not rel or "\\" in rel or Path(rel).is_absolute():
        raise InputError(f"{rel!r} is not a relative path inside the bundle", path=where,
                         field=field)  # fmt: skip
    if ".." in Path(rel).parts or not (bundle / rel).resolve().is_relative_to(bundle.resolve()):
        raise InputError(f"{rel!r} leads outside the bundle; refused", path=where, field=field)
    return bundle / rel


def hashed_file(bundle: Path, manifest: dict[str, Any], rel: Any, field: str) -> Path:
    """A file the manifest names for loading (an ONNX graph): inside the bundle, listed in
    ``files_sha256``, and with that hash now; else refused (InputError, exit 2)."""
    f = inside(bundle, rel, field)
    want = (manifest.get("files_sha256") or {}).get(rel)
    if not isinstance(want, str):
        raise InputError(f"{rel!r} is not among the files the manifest hashes (files_sha256)",
                         path=bundle / MANIFEST, field=field)  # fmt: skip
    if not f.is_file():
        raise InputError(f"{rel!r} is missing from the bundle", path=bundle / MANIFEST,
                         field=field)  # fmt: skip
    if sha256_file(f) != want:
        raise InputError(f"{rel!r} differs from the sha256 the manifest lists", path=f,
                         field="files_sha256")  # fmt: skip
    return f


def unlisted(bundle: Path, manifest: dict[str, Any]) -> list[str]:
    """Files in the bundle that the manifest does not name (a stray pickle or script)."""
    named = {MANIFEST, *(manifest.get("model", {}).get("weights_sha256") or {}),
             *(manifest.get("files_sha256") or {})}  # fmt: skip
    return [
        p.relative_to(bundle).as_posix()
        for p in sorted(bundle.rglob("*"))
        if p.is_file() and p.relative_to(bundle).as_posix() not in named
    ]
