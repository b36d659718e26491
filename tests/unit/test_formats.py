"""PDF and Word documents (stages/ingest/formats.py), and files that are not what their names
say. The PDFs are written by fpdf2 and the .docx files by python-docx (independent writers of
those open formats, ISO 32000 and ECMA-376); ingest reads them back with pypdf and python-docx.
The text is invented for these tests."""

from __future__ import annotations

from pathlib import Path

import pytest

from ballast import InputError
from ballast.config import IngestConfig
from ballast.stages.ingest.documents import ingest
from ballast.stages.ingest.formats import page_paragraphs

CFG = IngestConfig(max_tokens=40, overlap_tokens=0, min_tokens=1)
PAGE1 = ("The cider press is rinsed with hot water after each batch. "
         "Seals on the press are replaced every spring.")  # fmt: skip
PAGE2 = "The chiller keeps the juice below twelve degrees during fermentation."


def count(texts: list[str]) -> list[int]:
    return [len(t.split()) for t in texts]


def write_pdf(path: Path, pages: list[str], title: str = "Press manual") -> Path:
    from fpdf import FPDF

    pdf = FPDF()
    pdf.set_title(title)
    pdf.set_font("helvetica", size=11)
    for text in pages:
        pdf.add_page()
        pdf.multi_cell(0, 8, text)
    pdf.output(str(path))
    return path


def write_docx(path: Path) -> Path:
    import docx

    d = docx.Document()
    d.add_heading("Cellar handbook", level=0)
    d.add_heading("Pressing", level=1)
    d.add_paragraph(PAGE1)
    d.add_heading("Cooling", level=1)
    d.add_paragraph(PAGE2)
    table = d.add_table(rows=2, cols=2)
    for r, (a, b) in enumerate([("Tank", "Limit"), ("T4", "12 degrees")]):
        table.cell(r, 0).text, table.cell(r, 1).text = a, b
    d.save(str(path))
    return path


def test_pdf_pages_are_sections_with_their_page_number(tmp_path: Path) -> None:
    write_pdf(tmp_path / "manual.pdf", [PAGE1, PAGE2])
    res = ingest(tmp_path, CFG, count)
    assert [p["meta"]["page"] for p in res.passages] == [1, 2]
    assert [p["text"] for p in res.passages] == [PAGE1, PAGE2]
    assert res.passages[1]["title"] == "Press manual — p. 2"
    assert res.passages[0]["doc_id"] == "manual.pdf"


def test_docx_headings_open_sections_and_tables_are_read(tmp_path: Path) -> None:
    write_docx(tmp_path / "handbook.docx")
    res = ingest(tmp_path, CFG, count)
    by_section = {p["meta"]["section"]: p["text"] for p in res.passages}
    assert by_section["Pressing"] == PAGE1
    assert by_section["Cooling"] == PAGE2 + " Tank | Limit T4 | 12 degrees"
    assert res.passages[0]["title"] == "Cellar handbook — Pressing"


def test_hyphenated_line_breaks_are_joined() -> None:
    text = "The main-\ntenance log is\nsigned daily.\n\nNext para-\nGraph stays."
    assert page_paragraphs(text) == [
        "The maintenance log is signed daily.",
        "Next para- Graph stays.",  # a capital after the break: a real hyphen, kept
    ]


@pytest.mark.parametrize(
    ("name", "content", "says"),
    [
        ("fake.pdf", b"this is plain text, not a PDF\n", "not a PDF file"),
        ("fake.docx", b"plain text\n", "not a Word .docx file"),
        ("broken.pdf", b"%PDF-1.7\n garbage without objects", "PDF"),
    ],
)
def test_a_file_that_is_not_what_its_name_says_is_refused(
    tmp_path: Path, name: str, content: bytes, says: str
) -> None:
    (tmp_path / name).write_bytes(content)
    with pytest.raises(InputError) as info:
        ingest(tmp_path, CFG, count)
    assert says in str(info.value) and name in str(info.value)


def test_a_pdf_named_txt_is_refused(tmp_path: Path) -> None:
    write_pdf(tmp_path / "manual.txt", [PAGE1])
    with pytest.raises(InputError, match="this is a PDF file named '.txt'"):
        ingest(tmp_path, CFG, count)


def test_a_scan_without_text_is_refused_with_the_reason(tmp_path: Path) -> None:
    from fpdf import FPDF

    pdf = FPDF()
    pdf.add_page()  # a page with no text on it
    pdf.output(str(tmp_path / "scan.pdf"))
    with pytest.raises(InputError, match="no text layer"):
        ingest(tmp_path, CFG, count)


def test_skip_mode_leaves_out_unreadable_files_and_lists_them(tmp_path: Path) -> None:
    write_pdf(tmp_path / "good.pdf", [PAGE1])
    (tmp_path / "bad.pdf").write_bytes(b"not a pdf")
    (tmp_path / "empty.md").write_text("   \n", "utf-8")
    strict = IngestConfig(max_tokens=40, overlap_tokens=0, min_tokens=1)
    with pytest.raises(InputError, match="bad.pdf"):
        ingest(tmp_path, strict, count)
    lenient = IngestConfig(max_tokens=40, overlap_tokens=0, min_tokens=1, on_error="skip")
    res = ingest(tmp_path, lenient, count)
    assert [p["doc_id"] for p in res.passages] == ["good.pdf"]
    assert res.stats["skipped_files"] == [
        {"file": "bad.pdf", "reason": "not a PDF file: it does not start with '%PDF-'"},
        {"file": "empty.md", "reason": "the document is empty"},
    ]
