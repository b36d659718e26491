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
