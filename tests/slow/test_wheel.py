"""ballast installs as a real package: a wheel built from the checkout, installed into a fresh
virtualenv and run from a folder outside the checkout, finds its default prompts (package data)
and runs `ballast init` and `ballast demo --help` (common practice: test the built artefact, not
the source tree)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow


def _run(cmd: list, cwd: Path, **kw) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    return subprocess.run(
        [str(c) for c in cmd], cwd=cwd, capture_output=True, text=True, timeout=600, env=env, **kw
    )


@pytest.fixture(scope="module")
def fresh(tmp_path_factory: pytest.TempPathFactory) -> Path:
    tmp = tmp_path_factory.mktemp("wheel")
    built = _run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
         "-w", tmp / "dist", REPO],
        cwd=tmp,
    )  # fmt: skip
    assert built.returncode == 0, built.stderr[-2000:]
    wheel = next((tmp / "dist").glob("ballast-*.whl"))
    names = zipfile.ZipFile(wheel).namelist()
    assert "ballast/data/prompts/question.toml" in names
    assert not [n for n in names if n.startswith(("tests/", "bench/"))]
    venv = tmp / "venv"
    made = _run([sys.executable, "-m", "venv", venv], cwd=tmp)
    assert made.returncode == 0, made.stderr
    py = venv / "bin" / "python"
    inst = _run([py, "-m", "pip", "install", "-q", "--no-deps", "--no-index", wheel], cwd=tmp)
    assert inst.returncode == 0, inst.stderr[-2000:]
    # ballast's dependencies come from the test environment (a path, so its editable ballast
    # is not seen: .pth files are only read in site folders)
    site = Path(_run([py, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                     cwd=tmp).stdout.strip())
    (site / "deps.pth").write_text(sysconfig.get_paths()["purelib"] + "\n", "utf-8")
    return venv


def test_the_installed_package_is_the_wheel(fresh: Path, tmp_path: Path) -> None:
    py = fresh / "bin" / "python"
    r = _run([py, "-c", "import ballast, json; print(json.dumps(ballast.__file__))"], cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout).startswith(str(fresh))


def test_default_prompts_load_from_package_data(fresh: Path, tmp_path: Path) -> None:
    code = (
        "from ballast.stages.synth.prompts import load_templates, default_prompts_dir;"
        "t = load_templates('', ('question', 'keywords', 'troubleshooting'));"
        "print(len(t), default_prompts_dir())"
    )
    r = _run([fresh / "bin" / "python", "-c", code], cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    count, where = r.stdout.split()
    assert count == "3" and where.startswith(str(fresh))


def test_init_and_demo_help(fresh: Path, tmp_path: Path) -> None:
    exe = fresh / "bin" / "ballast"
    r = _run([exe, "init", "proj"], cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "proj" / "ballast.toml").is_file() and (tmp_path / "proj" / "docs").is_dir()
    assert sorted(p.name for p in (tmp_path / "proj" / "prompts").glob("*.toml")) == [
        "keywords.toml", "question.toml", "troubleshooting.toml"
    ]
    h = _run([exe, "demo", "--help"], cwd=tmp_path)
    assert h.returncode == 0 and "demo" in h.stdout
    # outside a source checkout the demo says where its data lives, exit 2, no traceback
    d = _run([exe, "demo", "-q"], cwd=tmp_path)
    assert d.returncode == 2 and "source checkout" in d.stderr and "Traceback" not in d.stderr
