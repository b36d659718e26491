"""The real FAQ set (bench/faqdata.py) built from Debian documentation packages.

Downloads ~43 MB of .deb files on the first run into ``$BALLAST_FAQ_CACHE`` (default
``~/.cache/ballast-faq``) and reuses them afterwards; skips where Debian's archive cannot be
reached and nothing is cached.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from bench import faqdata

pytestmark = pytest.mark.slow

FILES = ("faq/docs/faq.jsonl", "faq/questions.jsonl", "faq/sources.json")


def _cache_dir() -> Path:
    return Path(os.environ.get("BALLAST_FAQ_CACHE") or "~/.cache/ballast-faq").expanduser()


@pytest.fixture(scope="module")
def built() -> tuple[Path, dict]:
    cache = _cache_dir()
    try:
        sources = faqdata.build(cache)
    except faqdata.FetchError as e:
        pytest.skip(f"cannot download the Debian documentation packages (no network to "
                    f"Debian's archive?): {e}")
    return cache, sources


def _jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text("utf-8").splitlines()]


def test_questions_point_at_answers(built: tuple[Path, dict]) -> None:
    cache, sources = built
    docs = _jsonl(cache / "faq/docs/faq.jsonl")
    questions = _jsonl(cache / "faq/questions.jsonl")
    assert len(questions) >= 500
    assert sum(s["pairs"] for s in sources.values()) == len(questions)
    doc_ids = [d["id"] for d in docs]
    q_ids = [q["id"] for q in questions]
    assert len(set(doc_ids)) == len(doc_ids)
    assert len(set(q_ids)) == len(q_ids)
    assert len({q["text"] for q in questions}) == len(questions)
    text = {d["id"]: d["text"] for d in docs}
    for q in questions:
        assert q["doc_id"] in text, q
        answer = text[q["doc_id"]]
        assert answer == faqdata.collapse(answer)
        assert q["quote"] in answer, q
        assert 8 <= len(q["quote"].split()) <= 12
        assert len(q["text"].split()) >= faqdata.MIN_QUESTION_WORDS
        assert len(answer.split()) >= faqdata.MIN_ANSWER_WORDS
    for name in faqdata.PACKAGES:
        assert any(q["id"].startswith(f"{name}-q") for q in questions), name


def test_sources_record_versions(built: tuple[Path, dict]) -> None:
    cache, sources = built
    on_disk = json.loads((cache / "faq/sources.json").read_text("utf-8"))
    assert on_disk == sources
    assert set(sources) == set(faqdata.PACKAGES)
    for name, s in sources.items():
        assert s["package"] == faqdata.PACKAGES[name]
        assert s["version"]
        assert len(s["sha256"]) == 64 and int(s["sha256"], 16) >= 0
        assert s["files"] and all(len(f["sha256"]) == 64 for f in s["files"])
        assert s["pairs"] > 0


def test_rebuild_is_cached_and_identical(built: tuple[Path, dict],
                                         monkeypatch: pytest.MonkeyPatch) -> None:
    cache, sources = built
    before = {f: (cache / f).read_bytes() for f in FILES}
    debs = sorted((cache / "debs").glob("*.deb"))
    mtimes = {d: d.stat().st_mtime_ns for d in debs}

    def no_apt(*args: object, **kwargs: object) -> None:
        raise AssertionError("a cached rebuild called apt-get")

    monkeypatch.setattr(faqdata, "_run_apt", no_apt)
    again = faqdata.build(cache)
    assert again == sources
    assert {f: (cache / f).read_bytes() for f in FILES} == before
    assert sorted((cache / "debs").glob("*.deb")) == debs
    assert {d: d.stat().st_mtime_ns for d in debs} == mtimes
