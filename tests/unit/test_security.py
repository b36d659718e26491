"""Security rules: models load only from local folders, safetensors only, no remote code;
bundle names cannot climb out of their export folder (common practice: unpickling runs
arbitrary code, and `auto_map` in a model's config.json asks to import code shipped with it)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from ballast.config import load_config
from ballast.core.errors import ConfigError, InputError
from ballast.io.manifest import safe_name
from ballast.models.loading import check_model_folder, resolve_model


def _folder(tmp_path: Path, files: dict[str, bytes]) -> Path:
    d = tmp_path / "model"
    d.mkdir()
    for name, data in files.items():
        (d / name).write_bytes(data)
    return d


def test_pickled_weights_are_refused(tmp_path: Path) -> None:
    d = _folder(tmp_path, {"pytorch_model.bin": b"\x80\x04pickle", "config.json": b"{}"})
    with pytest.raises(InputError, match="pickle"):
        check_model_folder(d)


def test_no_weights_is_refused(tmp_path: Path) -> None:
    d = _folder(tmp_path, {"config.json": b"{}"})
    with pytest.raises(InputError, match="safetensors"):
        check_model_folder(d)


def test_remote_code_is_refused(tmp_path: Path) -> None:
    cfg = json.dumps({"auto_map": {"AutoModel": "modeling_evil.Model"}}).encode()
    d = _folder(tmp_path, {"model.safetensors": b"x", "config.json": cfg})
    with pytest.raises(InputError, match="remote code"):
        check_model_folder(d)


def test_a_hub_name_is_not_a_model(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError, match="never downloads"):
        resolve_model("sentence-transformers/all-MiniLM-L6-v2")
    with pytest.raises(InputError, match="unknown packaged model"):
        resolve_model("packaged:nope")


def test_packaged_base_model_is_clean() -> None:
    path = resolve_model("packaged:all-MiniLM-L6-v2")
    assert (path / "model.safetensors").is_file()


@pytest.mark.parametrize("name", ["..", ".", "a/b", "../up", "a\\b", ""])
def test_bundle_names_cannot_escape(name: str) -> None:
    with pytest.raises(InputError):
        safe_name(name)


@pytest.mark.parametrize("version", ["../../etc", "v1/../../x", "a b"])
def test_export_version_is_validated(tmp_path: Path, version: str) -> None:
    with pytest.raises(ConfigError, match="export.version"):
        load_config(None, [f'export.version="{version}"'])


def _base_copy(tmp_path: Path) -> Path:
    import shutil

    src = resolve_model("packaged:all-MiniLM-L6-v2")
    return Path(shutil.copytree(src, tmp_path / "base"))


def test_a_truncated_weights_file_is_refused(tmp_path: Path) -> None:
    # the safetensors format: 8-byte header length, JSON header, then the tensors' bytes
    d = _base_copy(tmp_path)
    w = d / "model.safetensors"
    w.write_bytes(w.read_bytes()[: w.stat().st_size // 2])
    with pytest.raises(InputError, match="truncated"):
        check_model_folder(d)
    w.write_bytes(b"\x05\x00")
    with pytest.raises(InputError, match="not a valid safetensors"):
        check_model_folder(d)


def test_pickled_weights_beside_a_decoy_safetensors_are_refused(tmp_path: Path) -> None:
    d = _base_copy(tmp_path)
    (d / "model.safetensors").rename(d / "decoy.safetensors")
    (d / "pytorch_model.bin").write_bytes(b"\x80\x04pickle")
    with pytest.raises(InputError, match="pickled: pytorch_model.bin"):
        check_model_folder(d)


def test_a_module_type_from_elsewhere_is_refused(tmp_path: Path) -> None:
    d = _base_copy(tmp_path)
    mods = json.loads((d / "modules.json").read_text("utf-8"))
    mods[1]["type"] = "evil_package.Pooling"
    (d / "modules.json").write_text(json.dumps(mods), "utf-8")
    with pytest.raises(InputError, match="evil_package.Pooling"):
        check_model_folder(d)
