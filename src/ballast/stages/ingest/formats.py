"""PDF and Word (.docx) documents, and the check that a file is what its name says.

- PDF (pypdf): each page is a section headed ``p. N``, so a passage never spans two pages and
  its title says where it came from ("manual.pdf — p. 12"); its ``meta.page`` holds the number.
  Words broken across a line end ("main-\\ntenance") are joined; lines of one paragraph are
  joined into one. A PDF without a text layer (a scan) has no text to read: it needs OCR first.
- Word (python-docx): the headings (styles "Title" and "Heading N") open sections; paragraphs
  and table rows (cells joined by " | ") are the text, in document order.

A file's type is decided by its content as well as its extension: a PDF starts with ``%PDF-``,
a .docx is a zip archive holding ``word/document.xml``; anything else under those names is a
clear error naming the file.
"""

from __future__ import annotations

import re
import zipfile
from pathlib import Path

from ballast.core.errors import InputError
from ballast.core.text import normalise

Sections = list[tuple[str, list[str]]]

_HYPHEN_BREAK = re.compile(r"(\w)-\n(?=[a-z])")
_BLANK = re.compile(r"\n\s*\n")


def _head(path: Path, n: int = 8) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read(n)
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None


def is_pdf(path: Path) -> bool:
    return _head(path).startswith(b"%PDF-")


def is_docx(path: Path) -> bool:
    if not _head(path).startswith(b"PK\x03\x04"):
        return False
    try:
        with zipfile.ZipFile(path) as z:
            return "word/document.xml" in z.namelist()
    except zipfile.BadZipFile:
        return False


def page_paragraphs(text: str) -> list[str]:
    """A page's extracted text as paragraphs: blank lines part them, a line end inside one is a
    space, a word hyphenated across a line end is joined."""
    text = _HYPHEN_BREAK.sub(r"\1", text.replace("\r\n", "\n").replace("\r", "\n"))
    out = []
    for block in _BLANK.split(text):
        para = normalise(" ".join(line.strip() for line in block.split("\n")))
        para = " ".join(para.split())
        if para:
            out.append(para)
    return out


def read_pdf(path: Path) -> tuple[str, Sections]:
    """(title, one section a page with text)."""
    if not is_pdf(path):
        raise InputError("not a PDF file: it does not start with '%PDF-'", path=path)
    import logging

    from pypdf import PdfReader
    from pypdf.errors import PdfReadError

    logging.getLogger("pypdf").setLevel(logging.ERROR)  # its warnings are not ours to print
    try:
        reader = PdfReader(path)
        if reader.is_encrypted:
            raise InputError("the PDF is encrypted; save an unprotected copy", path=path)
        title = ((reader.metadata or {}).get("/Title") or "").strip() or path.stem
        sections = []
        for n, page in enumerate(reader.pages, start=1):
            paras = page_paragraphs(page.extract_text() or "")
            if paras:
                sections.append((f"p. {n}", paras))
    except InputError:
        raise
    except (PdfReadError, ValueError, KeyError, TypeError, OSError) as exc:
        raise InputError(f"not a readable PDF: {str(exc)[:200]}", path=path) from None
    if not sections:
        raise InputError(
            "the PDF has no text layer (a scan?): run OCR on it first, or move it out",
            path=path,
        )
    return str(title), sections


def read_docx(path: Path) -> tuple[str, Sections]:
    """(title, sections opened by the document's headings)."""
    if not is_docx(path):
        raise InputError(
            "not a Word .docx file: it is not a zip archive holding word/document.xml "
            "(an old binary .doc must be saved as .docx first)",
            path=path,
        )
    import docx

    try:
        document = docx.Document(str(path))
    except Exception as exc:  # python-docx and lxml raise several types for a damaged file
        raise InputError(f"not a readable .docx: {str(exc)[:200]}", path=path) from None
    title = (document.core_properties.title or "").strip()
    sections: Sections = []
    heading, paras = "", []
    for block in document.iter_inner_content():
        if isinstance(block, docx.table.Table):
            for row in block.rows:
                cells = [" ".join(c.text.split()) for c in row.cells]
                line = " | ".join(c for i, c in enumerate(cells) if c and c not in cells[:i])
                if line:
                    paras.append(normalise(line))
            continue
        text = " ".join(block.text.split())
        if not text:
            continue
        style = (block.style.name if block.style is not None else "") or ""
        if style == "Title" or style.startswith("Heading"):
            if paras:
                sections.append((heading, paras))
            heading, paras = normalise(text), []
            title = title or heading
        else:
            paras.append(normalise(text))
    if paras:
        sections.append((heading, paras))
    return title or path.stem, sections
