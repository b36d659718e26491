"""ballast.stages.ingest.documents (readers, normalising, chunking, ids) and ballast.io.files
(strict reading, atomic
writes). Common practice throughout; a whitespace token counter stands in for the tokenizer."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ballast import InputError
from ballast.config import IngestConfig
from ballast.core.text import collapse, normalise, passage_id, split_sentences
from ballast.io.files import atomic_dir, read_jsonl, write_json, write_jsonl, write_text_atomic
from ballast.stages.ingest.documents import chunk_sentences, ingest, parse_html, parse_markdown


def count(texts: list[str]) -> list[int]:
    return [len(t.split()) for t in texts]


SMALL = IngestConfig(max_tokens=16, overlap_tokens=4, min_tokens=1)


def make_docs(folder: Path, files: dict[str, str | bytes]) -> Path:
    for name, content in files.items():
        p = folder / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    return folder


def input_error(
    folder: Path, files: dict[str, str | bytes], cfg: IngestConfig = SMALL
) -> InputError:
    make_docs(folder, files)
    with pytest.raises(InputError) as info:
        ingest(folder, cfg, count)
    return info.value


# ---------------------------------------------------------------- normalising and sentences


def test_normalise() -> None:
    # NFKC folds the "fi" ligature and the non-breaking space; controls and zero-width become
    # spaces; blank runs collapse; newlines are kept, line ends stripped
    assert normalise("\ufb01ne\u00a0day\t\tx\x00y\u200bz  \r\n  next\n\n") == "fine day x y z\nnext"
    assert normalise("\ufeffcaf\u0065\u0301") == "caf\u00e9"  # BOM dropped, e + accent composed
    assert collapse(" a \n\n b\tc ") == "a b c"


def test_split_sentences() -> None:
    text = 'Press the apples. Is it cold? Yes! 3 bins remain. "Stop." (Then wait.) done. and more.'
    assert split_sentences(text) == [
        "Press the apples.",
        "Is it cold?",
        "Yes!",
        "3 bins remain.",
        '"Stop."',
        "(Then wait.) done. and more.",  # no cut before a lower-case word
    ]


def test_split_sentences_keeps_every_character() -> None:
    text = 'He said "stop." Then it ended (really.) After that, nothing. Fine?'
    assert " ".join(split_sentences(text)) == text


@given(st.lists(st.sampled_from(["Word", "word", ".", "!", '"', ")", "(", "3", " ", "  "])))
@settings(max_examples=200, deadline=None)
def test_split_sentences_loses_nothing(parts: list[str]) -> None:
    text = "".join(parts)
    assert " ".join(split_sentences(text)) == " ".join(text.split())


# ---------------------------------------------------------------- readers


def test_markdown() -> None:
    md = (
        "# Cider Guide\n\n"
        "Intro with a [link](http://example.com/x) and **bold** `code`.\n\n"
        "## Pressing\n\n"
        "- First item.\n"
        "- Second item.\n"
        "1. Numbered item.\n\n"
        "```\n# not a heading\n```\n\n"
        "## Storage ##\n\n"
        "> Keep it cold.\n"
    )
    title, sections = parse_markdown(md, "fallback")
    assert title == "Cider Guide"
    assert sections == [
        ("Cider Guide", ["Intro with a link and bold code."]),
        ("Pressing", ["First item.", "Second item.", "Numbered item.", "# not a heading"]),
        ("Storage", ["Keep it cold."]),
    ]


def test_markdown_without_title_uses_fallback() -> None:
    title, sections = parse_markdown("Just text.\n\n## Part\n\nMore.", "notes")
    assert title == "notes"
    assert sections == [("", ["Just text."]), ("Part", ["More."])]


def test_html() -> None:
    html = (
        "<html><head><title>Fish &amp; Chips</title>"
        "<style>body { color: red }</style></head><body>"
        "<script>var hidden = 1;</script>"
        "<p>Before any heading.</p>"
        "<h1>Main</h1><p>Caf&eacute; &lt;open&gt; &#8211; daily.</p>"
        "<h2>Sub <b>part</b></h2><p>Two</p><ul><li>alpha</li><li>beta</li></ul>"
        "<noscript>no js</noscript></body></html>"
    )
    title, sections = parse_html(html, "fallback")
    assert title == "Fish & Chips"
    assert sections == [
        ("", ["Before any heading."]),
        ("Main", ["Caf\u00e9 <open> \u2013 daily."]),
        ("Sub part", ["Two", "alpha", "beta"]),
    ]
    text = json.dumps(sections)
    assert "hidden" not in text and "color" not in text and "no js" not in text


def test_html_title_falls_back_to_h1_then_name() -> None:
    assert parse_html("<h1>Head</h1><p>x</p>", "f")[0] == "Head"
    assert parse_html("<p>x</p>", "f")[0] == "f"


# ---------------------------------------------------------------- chunking


@given(
    lens=st.lists(st.integers(1, 20), max_size=25),
    max_tokens=st.integers(20, 60),
    overlap=st.integers(0, 30),
)
@settings(max_examples=300, deadline=None)
def test_chunk_sentences_properties(lens: list[int], max_tokens: int, overlap: int) -> None:
    overlap = min(overlap, max_tokens // 2)
    chunks = chunk_sentences([f"s{i}" for i in range(len(lens))], lens, max_tokens, overlap)
    assert all(c for c in chunks)
    assert all(sum(lens[i] for i in c) <= max_tokens for c in chunks)
    assert all(c == list(range(c[0], c[-1] + 1)) for c in chunks)  # contiguous, in order
    assert sorted({i for c in chunks for i in c}) == list(range(len(lens)))  # all covered
    for a, b in zip(chunks, chunks[1:], strict=False):
        shared = [i for i in b if i in a]
        assert shared == a[len(a) - len(shared) :]  # overlap = a's trailing whole sentences
        assert shared == b[: len(shared)]
        assert sum(lens[i] for i in shared) <= overlap
        assert len(shared) < len(a)  # the chunk moves on
        assert b[len(shared)] == a[-1] + 1  # nothing skipped


def test_chunk_sentences_example() -> None:
    # sentences of 5 tokens, max 12, overlap 5: [0,1] [1,2] [2,3]
    assert chunk_sentences(list("abcd"), [5, 5, 5, 5], 12, 5) == [[0, 1], [1, 2], [2, 3]]
    assert chunk_sentences(list("abcd"), [5, 5, 5, 5], 12, 0) == [[0, 1], [2, 3]]
    assert chunk_sentences([], [], 12, 0) == []


def test_ingest_chunks_fit_and_overlap(tmp_path: Path) -> None:
    sentences = [f"Sentence number {i} has exactly six words." for i in range(10)]
    sentences = [s.replace("six", "seven") for s in sentences]  # 7 tokens each
    make_docs(tmp_path, {"a.txt": " ".join(sentences)})
    cfg = IngestConfig(max_tokens=16, overlap_tokens=8, min_tokens=1)
    res = ingest(tmp_path, cfg, count)
    texts = [p["text"] for p in res.passages]
    assert all(p["meta"]["tokens"] == len(p["text"].split()) <= 16 for p in res.passages)
    assert texts[0] == " ".join(sentences[0:2])
    assert texts[1] == " ".join(sentences[1:3])  # one 7-token sentence repeated
    assert [p["meta"]["index"] for p in res.passages] == list(range(len(texts)))
    assert res.stats["passages"] == len(texts) == 9


def test_long_sentence_is_cut_at_words(tmp_path: Path) -> None:
    long = " ".join(f"w{i}" for i in range(40)) + "."
    make_docs(tmp_path, {"a.txt": long})
    res = ingest(tmp_path, IngestConfig(max_tokens=16, overlap_tokens=0, min_tokens=1), count)
    assert all(p["meta"]["tokens"] <= 16 for p in res.passages)
    assert " ".join(p["text"] for p in res.passages) == long


def test_passages_never_cross_a_heading(tmp_path: Path) -> None:
    make_docs(tmp_path, {"a.md": "# Guide\n\nOne two three.\n\n## Next\n\nFour five six.\n"})
    res = ingest(tmp_path, SMALL, count)
    assert [(p["title"], p["text"]) for p in res.passages] == [
        ("Guide", "One two three."),
        ("Guide \u2014 Next", "Four five six."),
    ]


def test_short_passages_dropped_and_counted(tmp_path: Path) -> None:
    make_docs(tmp_path, {"a.md": "# T\n\nToo short.\n\n## B\n\nThis one is long enough to keep.\n"})
    res = ingest(tmp_path, IngestConfig(max_tokens=16, overlap_tokens=0, min_tokens=4), count)
    assert [p["text"] for p in res.passages] == ["This one is long enough to keep."]
    assert res.stats["too_short_dropped"] == 1


# ---------------------------------------------------------------- ids and duplicates


def test_passage_ids_stable_and_content_addressed(tmp_path: Path) -> None:
    files = {"a.txt": "Alpha beta gamma.\n\nDelta epsilon.", "b.md": "# B\n\nZeta eta theta."}
    cfg = IngestConfig(max_tokens=16, overlap_tokens=0, min_tokens=1)
    first = ingest(make_docs(tmp_path / "one", files), cfg, count).passages
    again = ingest(make_docs(tmp_path / "two", files), cfg, count).passages
    assert first == again
    assert len({p["id"] for p in first}) == len(first)
    assert all(p["id"] == passage_id(p["doc_id"], p["text"]) for p in first)

    changed = dict(files, **{"b.md": "# B\n\nZeta eta iota."})
    third = ingest(make_docs(tmp_path / "three", changed), cfg, count).passages
    assert [p["id"] for p in third if p["doc_id"] == "a.txt"] == [
        p["id"] for p in first if p["doc_id"] == "a.txt"
    ]
    assert {p["id"] for p in third if p["doc_id"] == "b.md"}.isdisjoint(
        p["id"] for p in first if p["doc_id"] == "b.md"
    )
    # the same text in another document is another passage
    assert passage_id("a", "x") != passage_id("b", "x")


def test_duplicate_passages_dropped_and_counted(tmp_path: Path) -> None:
    make_docs(
        tmp_path, {"a.txt": "Same text here.", "b.txt": "Same   text HERE.", "c.txt": "Other."}
    )
    res = ingest(tmp_path, SMALL, count)
    assert [(p["doc_id"], p["text"]) for p in res.passages] == [
        ("a.txt", "Same text here."),
        ("c.txt", "Other."),
    ]
    assert res.stats["duplicates_dropped"] == 1
    assert res.stats["documents"] == 3


def test_hidden_files_skipped_and_order_stable(tmp_path: Path) -> None:
    make_docs(tmp_path, {".git/x.bin": b"\xff", "z/b.txt": "Bee.", "a.txt": "Ay."})
    res = ingest(tmp_path, SMALL, count)
    assert [p["doc_id"] for p in res.passages] == ["a.txt", "z/b.txt"]


# ---------------------------------------------------------------- record files


def test_jsonl_documents(tmp_path: Path) -> None:
    make_docs(
        tmp_path,
        {
            "d.jsonl": json.dumps({"id": "d1", "text": "Alpha beta.\nGamma.", "title": "T1"})
            + "\n\n"
            + json.dumps({"id": 7, "text": "Delta epsilon."})
            + "\n"
        },
    )
    res = ingest(tmp_path, SMALL, count)
    assert [(p["doc_id"], p["title"], p["text"]) for p in res.passages] == [
        ("d1", "T1", "Alpha beta. Gamma."),
        ("7", "7", "Delta epsilon."),  # numeric id as a string; the id stands in for a title
    ]


def test_csv_documents_with_configured_fields(tmp_path: Path) -> None:
    make_docs(tmp_path, {"d.csv": 'doc,body,head\nd1,"Hello, world. Next one.",Greeting\n'})
    cfg = IngestConfig(
        max_tokens=16,
        overlap_tokens=0,
        min_tokens=1,
        id_field="doc",
        text_field="body",
        title_field="head",
    )
    res = ingest(tmp_path, cfg, count)
    assert [(p["doc_id"], p["title"], p["text"]) for p in res.passages] == [
        ("d1", "Greeting", "Hello, world. Next one.")
    ]


def test_jsonl_with_configured_fields(tmp_path: Path) -> None:
    make_docs(tmp_path, {"d.jsonl": '{"key": "k1", "body": "Some words here."}\n'})
    cfg = IngestConfig(
        max_tokens=16, overlap_tokens=0, min_tokens=1, id_field="key", text_field="body"
    )
    assert [p["doc_id"] for p in ingest(tmp_path, cfg, count).passages] == ["k1"]
    err = input_error(tmp_path / "other", {"d.jsonl": '{"id": "k1", "text": "Some words."}\n'}, cfg)
    assert (err.line, err.field) == (1, "key")


# ---------------------------------------------------------------- bad input


def test_malformed_jsonl_line(tmp_path: Path) -> None:
    err = input_error(
        tmp_path, {"d.jsonl": '{"id": "a", "text": "x"}\n\n{"id": "b", "text": \n{"id": "c"}\n'}
    )
    assert (err.path, err.line, err.field) == (str(tmp_path / "d.jsonl"), 3, None)
    assert "d.jsonl:3" in str(err)


def test_jsonl_line_that_is_not_an_object(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"d.jsonl": '{"id": "a", "text": "x"}\n[1, 2]\n'})
    assert err.line == 2
    assert "list" in str(err)


def test_jsonl_missing_text_field(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"d.jsonl": '{"id": "a", "text": "x"}\n{"id": "b", "body": "y"}\n'})
    assert (err.path, err.line, err.field) == (str(tmp_path / "d.jsonl"), 2, "text")


def test_jsonl_empty_text_and_bad_title(tmp_path: Path) -> None:
    err = input_error(tmp_path / "a", {"d.jsonl": '{"id": "a", "text": "  "}\n'})
    assert (err.line, err.field) == (1, "text")
    err = input_error(tmp_path / "b", {"d.jsonl": '{"id": "a", "text": "x", "title": 3}\n'})
    assert (err.line, err.field) == (1, "title")


@pytest.mark.parametrize("name", ["d.jsonl", "d.txt", "d.md", "d.csv"])
def test_empty_file(tmp_path: Path, name: str) -> None:
    err = input_error(tmp_path, {name: "\n\n" if name != "d.csv" else ""})
    assert err.path == str(tmp_path / name)
    assert "empty" in str(err)


def test_csv_header_only(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"d.csv": "id,text\n"})
    assert err.path == str(tmp_path / "d.csv")


def test_csv_row_with_too_many_fields(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"d.csv": "id,text\nd1,hello world\nd2,hi,extra\n"})
    assert (err.path, err.line) == (str(tmp_path / "d.csv"), 3)
    assert "more fields" in str(err)


def test_csv_row_missing_text(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"d.csv": "id,text\nd1,hello\nd2\n"})
    assert (err.line, err.field) == (3, "text")


def test_unknown_extension(tmp_path: Path) -> None:
    err = input_error(tmp_path, {"a.txt": "Fine.", "b.xlsx": "PK"})
    assert err.path == str(tmp_path / "b.xlsx")
    assert "'.xlsx'" in str(err) and "ingest.extensions" in str(err)
    # a known type left out of ingest.extensions is refused too
    cfg = IngestConfig(max_tokens=16, overlap_tokens=0, min_tokens=1, extensions=(".txt",))
    err = input_error(tmp_path / "md", {"a.md": "# x"}, cfg)
    assert "'.md'" in str(err)


def test_duplicate_document_ids_across_files(tmp_path: Path) -> None:
    err = input_error(
        tmp_path,
        {
            "a.jsonl": '{"id": "d1", "text": "Alpha."}\n',
            "sub/b.jsonl": '{"id": "d1", "text": "Beta."}\n',
        },
    )
    assert (err.path, err.line, err.field) == (str(tmp_path / "sub/b.jsonl"), 1, "id")
    assert "'d1'" in str(err) and "a.jsonl:1" in str(err)


def test_duplicate_document_ids_in_one_file(tmp_path: Path) -> None:
    err = input_error(
        tmp_path,
        {
            "a.jsonl": '{"id": "x", "text": "Gamma."}\n'
            '{"id": "d1", "text": "Alpha."}\n'
            '{"id": "d1", "text": "Beta."}\n'
        },
    )
    assert (err.path, err.line, err.field) == (str(tmp_path / "a.jsonl"), 3, "id")


@pytest.mark.parametrize("name", ["a.txt", "a.jsonl", "a.md"])
def test_non_utf8_names_the_line(tmp_path: Path, name: str) -> None:
    body = (
        b'{"id": "a", "text": "ok"}\n{"id": "b", "text": "ok"}\n{"id": "c", "text": "bad \xff"}\n'
    )
    err = input_error(tmp_path, {name: body})
    assert (err.path, err.line) == (str(tmp_path / name), 3)
    assert "UTF-8" in str(err) and "0xff" in str(err)


def test_missing_or_empty_folder(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        ingest(tmp_path / "nope", SMALL, count)
    assert info.value.field == "ingest.docs"
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no files"):
        ingest(tmp_path / "empty", SMALL, count)


def test_all_too_short_is_an_error(tmp_path: Path) -> None:
    err = input_error(
        tmp_path, {"a.txt": "Tiny."}, IngestConfig(max_tokens=16, overlap_tokens=0, min_tokens=5)
    )
    assert "no passages" in str(err)


def test_read_jsonl_allow_empty(tmp_path: Path) -> None:
    p = tmp_path / "e.jsonl"
    p.write_text("\n")
    assert list(read_jsonl(p, allow_empty=True)) == []
    with pytest.raises(InputError):
        list(read_jsonl(p))


# ---------------------------------------------------------------- atomic writes


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def test_write_text_atomic_leaves_no_temp_files(tmp_path: Path) -> None:
    target = tmp_path / "sub" / "out.txt"
    write_text_atomic(target, "one\n")
    write_text_atomic(target, "two\n")
    write_json(tmp_path / "sub" / "x.json", {"b": 1, "a": "\u00e9"})
    write_jsonl(tmp_path / "sub" / "x.jsonl", [{"b": 1, "a": 2}, {"c": 3}])
    assert target.read_text() == "two\n"
    assert (tmp_path / "sub" / "x.json").read_text("utf-8") == '{\n  "a": "\u00e9",\n  "b": 1\n}\n'
    assert (tmp_path / "sub" / "x.jsonl").read_text() == '{"a": 2, "b": 1}\n{"c": 3}\n'
    assert _leftovers(tmp_path / "sub") == []


def test_write_text_atomic_failure_keeps_old_file(tmp_path: Path) -> None:
    target = tmp_path / "out.txt"
    write_text_atomic(target, "old")
    with pytest.raises(UnicodeEncodeError):
        write_text_atomic(target, "bad \ud800 surrogate")
    assert target.read_text() == "old"
    assert _leftovers(tmp_path) == []


def test_atomic_dir_swaps_in_on_success(tmp_path: Path) -> None:
    target = tmp_path / "bundle"
    target.mkdir()
    (target / "old.txt").write_text("old")
    with atomic_dir(target) as tmp:
        assert tmp != target and tmp.parent == tmp_path
        (tmp / "new.txt").write_text("new")
        assert (target / "old.txt").exists()  # the old folder stays until the swap
    assert sorted(p.name for p in target.iterdir()) == ["new.txt"]
    assert _leftovers(tmp_path) == []


def test_atomic_dir_on_exception_keeps_previous(tmp_path: Path) -> None:
    target = tmp_path / "bundle"
    target.mkdir()
    (target / "old.txt").write_text("old")
    with pytest.raises(RuntimeError), atomic_dir(target) as tmp:
        (tmp / "half.txt").write_text("half")
        raise RuntimeError("boom")
    assert sorted(p.name for p in target.iterdir()) == ["old.txt"]
    assert (target / "old.txt").read_text() == "old"
    assert _leftovers(tmp_path) == []
    with pytest.raises(RuntimeError), atomic_dir(tmp_path / "fresh"):
        raise RuntimeError("boom")
    assert not (tmp_path / "fresh").exists()


def test_an_over_long_sentence_is_cut_at_spaces_before_it_is_tokenized() -> None:
    from ballast.core.text import cap_length

    text = "alpha beta gamma delta epsilon"
    assert cap_length(text, 100) == [text]
    pieces = cap_length(text, 11)
    assert pieces == ["alpha beta", "gamma", "delta", "epsilon"]
    assert " ".join(pieces) == text and all(len(p) <= 11 for p in pieces)
    assert cap_length("x" * 25, 10) == ["x" * 10, "x" * 10, "x" * 5]  # one long word: cut inside


def test_a_file_of_one_line_without_punctuation_becomes_bounded_passages(tmp_path: Path) -> None:
    words = " ".join(f"w{i}" for i in range(20_000))  # 20,000 words, no sentence end
    make_docs(tmp_path, {"a.txt": words})
    res = ingest(tmp_path, IngestConfig(max_tokens=40, overlap_tokens=0, min_tokens=1), count)
    assert all(p["meta"]["tokens"] <= 40 for p in res.passages)
    assert " ".join(p["text"] for p in res.passages) == words  # nothing lost, nothing repeated
