"""A real question→answer set built from Debian documentation packages.

Each source is a FAQ (or help pages) written by people: the question is a heading, the answer is
the text under it. Packages are fetched with ``apt-get download`` and unpacked with
``dpkg-deb -x`` (never installed), so the set rebuilds on any Debian-like machine with access to
its package archive, and is cached afterwards:

    cache_dir/debs/NAME_VERSION_all.deb    downloaded once
    cache_dir/extract/NAME/...             unpacked once per .deb (re-unpacked if the .deb changes)
    cache_dir/faq/docs/faq.jsonl           {"id", "title", "text"}, one line per answer
    cache_dir/faq/questions.jsonl          {"id", "text", "doc_id", "quote"}, one line per question
    cache_dir/faq/sources.json             package, version, sha256 of the .deb and of each parsed
                                           file, number of pairs, per source

Security updates change the packages; ``sources.json`` records what a result was measured on.

    python -m bench.faqdata CACHE_DIR
"""

from __future__ import annotations

import hashlib
import html
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path

# Source packages, from /work/shared/REFERENCES.md, section "Real data for checks".
# short source name -> Debian binary package.
PACKAGES: dict[str, str] = {
    "perl": "perl-doc",
    "python": "python3.11-doc",
    "debian": "debian-faq",
    "django": "python-django-doc",
    "sqlite": "sqlite3-doc",
    "git": "git-doc",
    "gnome": "gnome-user-docs",
}

MIN_QUESTION_WORDS = 3
MIN_ANSWER_WORDS = 15
QUOTE_WORDS = 10  # the quote is the answer's first 10 words (the brief allows 8-12)
APT_TIMEOUT_S = 900
_MARKER = ".ballast-deb"


class FetchError(RuntimeError):
    """A package could not be downloaded (no apt-get, no network, no such package)."""


@dataclass
class Pair:
    slug: str
    question: str
    answer: str


# --------------------------------------------------------------------------- text helpers


def collapse(text: str) -> str:
    """Whitespace collapsed to single spaces, ends stripped (``str.split`` whitespace)."""
    return " ".join(text.split())


def _words(text: str) -> int:
    return len(text.split())


def _assemble(chunks: Iterable[tuple[str, str]]) -> str:
    """Join ("prose"|"code", text) chunks; code is dropped when it outweighs the prose."""
    chunks = [(k, collapse(t)) for k, t in chunks]
    chunks = [(k, t) for k, t in chunks if t]
    prose = sum(_words(t) for k, t in chunks if k == "prose")
    code = sum(_words(t) for k, t in chunks if k == "code")
    keep_code = code <= prose
    return collapse(" ".join(t for k, t in chunks if k == "prose" or keep_code))


def _slugify(text: str, limit: int = 60) -> str:
    slug = re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
    return slug[:limit].rstrip("-") or "x"


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# --------------------------------------------------------------------------- Perl FAQ (POD)


def _pod_code_span(s: str, i: int) -> tuple[str, str, int] | None:
    """At s[i] = 'X<...>' return (letter, inner text, index after the close), else None."""
    if not (i + 1 < len(s) and s[i].isupper() and s[i + 1] == "<"):
        return None
    j = i + 1
    n = 0
    while j < len(s) and s[j] == "<":
        n += 1
        j += 1
    if n > 1 and j < len(s) and s[j].isspace():  # C<< ... >> form
        close = re.compile(r"\s" + ">" * n + "(?!>)")
        m = close.search(s, j)
        if not m:
            return None
        return s[i], s[j:m.start()].strip(), m.end()
    depth = 1
    k = i + 2
    while k < len(s):
        if s[k] == ">":
            depth -= 1
            if depth == 0:
                return s[i], s[i + 2:k], k + 1
        elif s[k] == "<" and k > 0 and s[k - 1].isupper():
            depth += 1
        k += 1
    return None


_POD_ENTITIES = {"lt": "<", "gt": ">", "verbar": "|", "sol": "/", "quot": '"', "amp": "&"}


def pod_text(s: str) -> str:
    """POD formatting codes (C<>, L<>, I<>, B<>, F<>, S<>, E<>, X<>, Z<>) rendered as text."""
    out: list[str] = []
    i = 0
    while i < len(s):
        span = _pod_code_span(s, i)
        if span is None:
            out.append(s[i])
            i += 1
            continue
        letter, inner, i = span
        if letter == "E":
            if inner.isdigit():
                out.append(chr(int(inner)))
            elif inner.lower().startswith("0x"):
                out.append(chr(int(inner, 16)))
            else:
                out.append(_POD_ENTITIES.get(inner, html.unescape(f"&{inner};")))
        elif letter in "XZ":
            continue
        elif letter == "L":
            out.append(_pod_link(inner))
        else:
            out.append(pod_text(inner))
    return "".join(out)


def _pod_link(inner: str) -> str:
    if "|" in inner:
        return pod_text(inner.split("|", 1)[0])
    if re.match(r"\w+:[^:\s]\S*$", inner):  # a URL
        return inner
    name, _, section = inner.partition("/")
    section = section.strip('"')
    if section and name:
        return f'"{pod_text(section)}" in {pod_text(name)}'
    return pod_text(section or name)


def parse_pod_faq(path: Path) -> list[Pair]:
    """``=head2`` questions; the paragraphs up to the next ``=head`` are the answer."""
    paragraphs = re.split(r"\n[ \t]*\n", path.read_text("utf-8", errors="replace"))
    pairs: list[Pair] = []
    question: str | None = None
    chunks: list[tuple[str, str]] = []
    skipping_block = False

    def flush() -> None:
        if question is not None:
            pairs.append(Pair(f"{path.stem}/{_slugify(question)}", question, _assemble(chunks)))

    for para in paragraphs:
        if not para.strip():
            continue
        if skipping_block:
            if para.startswith("=end"):
                skipping_block = False
            continue
        if para.startswith("="):
            cmd, _, rest = para.partition(" ")
            cmd = cmd.split("\n", 1)[0]
            if cmd.startswith("=head"):
                flush()
                question, chunks = None, []
                if cmd == "=head2":
                    question = collapse(pod_text(rest))
            elif cmd == "=item":
                item = rest.strip()
                if item not in ("*", "") and not re.fullmatch(r"\d+\.?", item):
                    chunks.append(("prose", pod_text(item)))
            elif cmd == "=begin":
                skipping_block = True
            continue  # =over, =back, =for, =pod, =cut, =encoding
        if question is None:
            continue
        if para[0] in " \t":
            chunks.append(("code", para))
        elif re.fullmatch(r"\((contributed|answer(ed)?) by [^)]*\)", collapse(para), re.I):
            continue  # attribution line, not part of the answer
        else:
            chunks.append(("prose", pod_text(para)))
    flush()
    return pairs


# --------------------------------------------------------------------------- HTML (Sphinx, DocBook)

_VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
         "track", "wbr"}
_BLOCK = {"p", "div", "li", "ul", "ol", "dl", "dt", "dd", "table", "tr", "td", "th", "br",
          "blockquote", "section", "pre", "h1", "h2", "h3", "h4", "h5", "h6", "tbody", "thead"}
_HEADINGS = {"h1", "h2", "h3", "h4", "h5", "h6"}


class _Section:
    def __init__(self, sid: str, level: int) -> None:
        self.id = sid
        self.level = level
        self.title_parts: list[str] = []
        self.chunks: list[tuple[str, str]] = []
        self.has_children = False
        self.heading_seen = False


class SectionParser(HTMLParser):
    """Splits a page into sections (``<section>`` or ``<div class="section">``): heading + text.

    Text owned by a section is the text outside its subsections; ``<pre>`` counts as code;
    scripts, tables of contents and permalink marks are left out.
    """

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[tuple[str, str]] = []  # (tag, role): role section|skip|code|heading|""
        self.open: list[_Section] = []
        self.sections: list[_Section] = []

    def _role(self, tag: str, attrs: dict[str, str]) -> str:
        cls = attrs.get("class", "").split()
        if tag == "section" or (tag == "div" and "section" in cls):
            return "section"
        if tag in ("script", "style", "nav") or {"headerlink", "toc", "contents"} & set(cls):
            return "skip"
        if tag == "pre":
            return "code"
        if tag in _HEADINGS and self.open and not self.open[-1].heading_seen:
            return "heading"
        return ""

    def _in(self, role: str) -> bool:
        return any(r == role for _, r in self.stack)

    def handle_starttag(self, tag: str, attrs_list: list[tuple[str, str | None]]) -> None:
        attrs = {k: v or "" for k, v in attrs_list}
        if tag in _VOID:
            if tag == "br":
                self._data(" ")
            return
        role = self._role(tag, attrs)
        if role == "section":
            if self.open:
                self.open[-1].has_children = True
            sec = _Section(attrs.get("id", ""), len(self.open))
            self.open.append(sec)
            self.sections.append(sec)
        elif role == "heading":
            self.open[-1].heading_seen = True
        if self._in("heading") and tag == "a" and attrs.get("id") and not self.open[-1].id:
            self.open[-1].id = attrs["id"]
        self.stack.append((tag, role))
        if tag in _BLOCK:
            self._data(" ")

    def handle_endtag(self, tag: str) -> None:
        if tag in _VOID or not any(t == tag for t, _ in self.stack):
            return
        while self.stack:
            t, role = self.stack.pop()
            if role == "section":
                self.open.pop()
            if t == tag:
                break
        if tag in _BLOCK:
            self._data(" ")

    def handle_data(self, data: str) -> None:
        self._data(data)

    def _data(self, data: str) -> None:
        if not self.open or self._in("skip"):
            return
        sec = self.open[-1]
        if self._in("heading"):
            sec.title_parts.append(data)
        elif self._in("code"):
            sec.chunks.append(("code", data))
        else:
            sec.chunks.append(("prose", data))


def _merge_chunks(chunks: list[tuple[str, str]]) -> list[tuple[str, str]]:
    """Adjacent chunks of one kind joined (inline markup splits text into many data events)."""
    merged: list[tuple[str, str]] = []
    for kind, text in chunks:
        if merged and merged[-1][0] == kind:
            merged[-1] = (kind, merged[-1][1] + text)
        else:
            merged.append((kind, text))
    return merged


def parse_html_sections(path: Path, strip_number: bool = False,
                        id_prefix: str = "") -> list[Pair]:
    """Sections whose heading ends in '?', or that have no subsections, as question→answer."""
    parser = SectionParser()
    parser.feed(path.read_text("utf-8", errors="replace"))
    parser.close()
    pairs = []
    page = path.name.split(".")[0]
    for sec in parser.sections:
        title = collapse("".join(sec.title_parts)).rstrip("¶").strip()
        if strip_number:
            title = re.sub(r"^\d+(\.\d+)*\.?\s+", "", title)
        if not title or (sec.has_children and not title.endswith("?")):
            continue
        sid = sec.id.removeprefix(id_prefix) if sec.id else _slugify(title)
        pairs.append(Pair(f"{page}/{sid}", title, _assemble(_merge_chunks(sec.chunks))))
    return pairs


class _TextParser(HTMLParser):
    """Plain text of an HTML fragment as prose/code chunks (``<pre>`` is code)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.chunks: list[tuple[str, str]] = []
        self.pre = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "pre":
            self.pre += 1
        if tag in _BLOCK:
            self.handle_data(" ")

    def handle_endtag(self, tag: str) -> None:
        if tag == "pre" and self.pre:
            self.pre -= 1
        if tag in _BLOCK:
            self.handle_data(" ")

    def handle_data(self, data: str) -> None:
        self.chunks.append(("code" if self.pre else "prose", data))


def html_text(fragment: str) -> str:
    p = _TextParser()
    p.feed(fragment)
    p.close()
    return _assemble(_merge_chunks(p.chunks))


def parse_sqlite_faq(path: Path) -> list[Pair]:
    """``<a name="qN">`` anchors, ``<p><b>(N) question</b></p>``, then a ``<blockquote>`` answer."""
    raw = path.read_text("utf-8", errors="replace")
    parts = re.split(r'<a name="(q\d+)"></a>', raw)
    pairs = []
    for name, chunk in zip(parts[1::2], parts[2::2], strict=True):
        m = re.match(r"\s*<p><b>\(\d+\)\s*(.*?)</b></p>", chunk, re.S)
        if not m:
            continue
        body = chunk[m.end():]
        end = body.rfind("</blockquote>")
        if end >= 0:
            body = body[:end]
        pairs.append(Pair(name, html_text(m.group(1)), html_text(body)))
    return pairs


# --------------------------------------------------------------------------- git FAQ (AsciiDoc)


def _asciidoc_inline(s: str) -> str:
    s = re.sub(r"linkgit:([\w.-]+)\[(\d+)\]", r"\1(\2)", s)
    s = re.sub(r"(?:link:)?(\S+)\[([^\]]+)\]", r"\2", s)
    return s.replace("`", "")


def parse_gitfaq_txt(path: Path) -> list[Pair]:
    """``[[anchor]]`` then ``Question?::``; the answer runs to the next anchor or section title."""
    lines = path.read_text("utf-8", errors="replace").splitlines()
    pairs: list[Pair] = []
    i = 0
    while i < len(lines):
        m = re.fullmatch(r"\[\[([\w-]+)\]\]", lines[i].strip())
        if not (m and i + 1 < len(lines) and lines[i + 1].rstrip().endswith("::")):
            i += 1
            continue
        anchor, question = m.group(1), _asciidoc_inline(lines[i + 1].rstrip()[:-2])
        chunks: list[tuple[str, str]] = []
        in_listing = False
        j = i + 2
        while j < len(lines):
            line = lines[j]
            if not in_listing and re.fullmatch(r"\[\[[\w-]+\]\]", line.strip()):
                break
            nxt = lines[j + 1] if j + 1 < len(lines) else ""
            if (not in_listing and line.strip() and line.strip() != "+"
                    and re.fullmatch(r"-{2,}", nxt) and len(nxt) == len(line)):
                break  # a section title
            if re.fullmatch(r"-{4,}", line):
                in_listing = not in_listing
            elif in_listing:
                chunks.append(("code", line + "\n"))
            elif line.strip() != "+":
                chunks.append(("prose", _asciidoc_inline(line) + "\n"))
            j += 1
        pairs.append(Pair(anchor, collapse(question), _assemble(chunks)))
        i = j
    return pairs


# --------------------------------------------------------------------------- GNOME help (Mallard)

_MAL = "{http://projectmallard.org/1.0/}"
_IF = "{http://projectmallard.org/if/1.0/}"


def _if_test(test: str) -> bool:
    """Mallard conditional test for a plain GNOME desktop: ',' is or, ' ' is and, '!' negates."""
    def token(t: str) -> bool:
        return t.startswith("!")  # no platform/target/action token holds by default
    return any(all(token(t) for t in alt.split()) for alt in test.split(","))


def _mallard_children(el: ET.Element) -> list[ET.Element]:
    """Children with Mallard conditionals resolved."""
    out: list[ET.Element] = []
    for child in el:
        if child.tag == _IF + "choose":
            whens = [w for w in child if w.tag == _IF + "when"]
            chosen = next((w for w in whens if _if_test(w.get("test", ""))), None)
            if chosen is not None:
                out.extend(_mallard_children(chosen))
            else:
                for c in child:
                    if c.tag == _IF + "else":
                        out.extend(_mallard_children(c))
                    elif c.tag != _IF + "when":
                        out.append(c)
        elif child.tag == _IF + "if":
            if _if_test(child.get("test", "")):
                out.extend(_mallard_children(child))
        elif child.get(_IF + "test") is None or _if_test(child.get(_IF + "test", "")):
            out.append(child)
    return out


def _mallard_inline(el: ET.Element) -> str:
    tag = el.tag.removeprefix(_MAL)
    if tag in ("keyseq", "guiseq"):
        sep = "+" if tag == "keyseq" else " ▸ "
        parts = [_mallard_inline(c) for c in _mallard_children(el)]
        return sep.join(p for p in parts if p.strip()) + (el.tail or "")
    text = el.text or ""
    for c in _mallard_children(el):
        text += _mallard_inline(c)
    return text + (el.tail or "")


def _mallard_text(el: ET.Element, chunks: list[tuple[str, str]]) -> None:
    for child in _mallard_children(el):
        tag = child.tag.removeprefix(_MAL)
        if tag in ("info", "title", "subtitle", "desc", "comment", "links", "media"):
            continue
        if tag == "p":
            inner = (child.text or "") + "".join(_mallard_inline(c)
                                                 for c in _mallard_children(child))
            chunks.append(("prose", inner + " "))
        elif tag in ("code", "screen"):
            chunks.append(("code", "".join(child.itertext()) + " "))
        else:
            _mallard_text(child, chunks)


def parse_mallard_page(path: Path) -> list[Pair]:
    """A topic page: its ``<title>`` → the text of its paragraphs (guide pages are link lists)."""
    root = ET.parse(path).getroot()
    if root.tag != _MAL + "page" or root.get("type", "topic") != "topic":
        return []
    title_el = next((c for c in root if c.tag == _MAL + "title"), None)
    if title_el is None:
        return []
    title = collapse("".join(title_el.itertext()))
    chunks: list[tuple[str, str]] = []
    _mallard_text(root, chunks)
    return [Pair(root.get("id") or path.stem, title, _assemble(chunks))]


# --------------------------------------------------------------------------- sources


@dataclass(frozen=True)
class Source:
    package: str
    root: str  # inside the package
    pattern: str
    parse: Callable[[Path], list[Pair]]
    exclude: tuple[str, ...] = ()
    need_qmark: bool = False  # headings without a '?' are topics there, not questions


SOURCES: dict[str, Source] = {
    "perl": Source("perl-doc", "usr/share/perl", "*/pod/perlfaq[1-9].pod", parse_pod_faq),
    "python": Source(
        "python3.11-doc", "usr/share/doc/python3.11/html/faq", "*.html",
        parse_html_sections, exclude=("index.html",),
    ),
    "debian": Source(
        "debian-faq", "usr/share/doc/debian/FAQ", "*.en.html",
        lambda p: parse_html_sections(p, strip_number=True), exclude=("index.en.html",),
        need_qmark=True,
    ),
    "django": Source(
        "python-django-doc", "usr/share/doc/python-django-doc/html/faq", "*.html",
        lambda p: parse_html_sections(p, id_prefix="s-"), exclude=("index.html",),
    ),
    "sqlite": Source("sqlite3-doc", "usr/share/doc/sqlite3", "faq.html", parse_sqlite_faq),
    "git": Source("git-doc", "usr/share/doc/git-doc", "gitfaq.txt", parse_gitfaq_txt),
    "gnome": Source("gnome-user-docs", "usr/share/help/C/gnome-help", "*.page",
                    parse_mallard_page),
}
assert {k: s.package for k, s in SOURCES.items()} == PACKAGES


# --------------------------------------------------------------------------- fetching


def _run_apt(args: list[str], cwd: Path) -> subprocess.CompletedProcess[str]:
    if shutil.which("apt-get") is None:
        raise FetchError("apt-get is not available (not a Debian-like system)")
    try:
        return subprocess.run(["apt-get", *args], cwd=cwd, capture_output=True, text=True,
                              timeout=APT_TIMEOUT_S, check=False)
    except (OSError, subprocess.TimeoutExpired) as e:
        raise FetchError(f"apt-get {' '.join(args)}: {e}") from e


def _deb_version(deb: Path) -> str:
    return subprocess.run(["dpkg-deb", "-f", str(deb), "Version"], capture_output=True,
                          text=True, check=True).stdout.strip()


def _newest(debs: list[Path]) -> Path:
    best = debs[0]
    for d in debs[1:]:
        newer = subprocess.run(["dpkg", "--compare-versions", _deb_version(d), "gt",
                                _deb_version(best)], check=False).returncode == 0
        if newer:
            best = d
    return best


def fetch(package: str, debs_dir: Path, state: dict[str, bool]) -> Path:
    """The cached .deb of ``package``, downloading it first if there is none."""
    debs_dir.mkdir(parents=True, exist_ok=True)
    found = sorted(debs_dir.glob(f"{package}_*.deb"))
    if not found:
        with tempfile.TemporaryDirectory(dir=debs_dir, prefix=".dl-") as tmp:
            res = _run_apt(["download", package], Path(tmp))
            if res.returncode != 0 and not state.get("updated"):
                state["updated"] = True
                upd = _run_apt(["update"], Path(tmp))
                if upd.returncode != 0:
                    raise FetchError(f"apt-get update failed: {upd.stderr.strip()[-400:]}")
                res = _run_apt(["download", package], Path(tmp))
            if res.returncode != 0:
                raise FetchError(f"apt-get download {package} failed: "
                                 f"{res.stderr.strip()[-400:]}")
            for deb in Path(tmp).glob(f"{package}_*.deb"):
                os.replace(deb, debs_dir / deb.name)
        found = sorted(debs_dir.glob(f"{package}_*.deb"))
        if not found:
            raise FetchError(f"apt-get download {package} left no .deb")
    return _newest(found) if len(found) > 1 else found[0]


def extract(deb: Path, digest: str, dest: Path) -> Path:
    """``dpkg-deb -x`` into ``dest`` unless it already holds this very .deb."""
    marker = dest / _MARKER
    stamp = f"{deb.name} {digest}\n"
    if marker.is_file() and marker.read_text("utf-8") == stamp:
        return dest
    dest.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(dir=dest.parent, prefix=f".{dest.name}-"))
    try:
        subprocess.run(["dpkg-deb", "-x", str(deb), str(tmp)], check=True,
                       capture_output=True, text=True)
        (tmp / _MARKER).write_text(stamp, "utf-8")
        if dest.exists():
            shutil.rmtree(dest)
        os.replace(tmp, dest)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)
    return dest


# --------------------------------------------------------------------------- build


def _write_atomic(path: Path, data: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}-")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as f:
            f.write(data)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _jsonl(rows: list[dict[str, str]]) -> str:
    return "".join(json.dumps(r, ensure_ascii=False) + "\n" for r in rows)


def build(cache_dir: Path) -> dict:
    """Fetch, unpack and parse every source into ``cache_dir/faq``; returns the sources dict."""
    cache_dir = Path(cache_dir).expanduser()
    state: dict[str, bool] = {}
    docs: list[dict[str, str]] = []
    questions: list[dict[str, str]] = []
    sources: dict[str, dict] = {}
    seen_q: set[str] = set()
    seen_a: set[str] = set()
    for name, src in SOURCES.items():
        deb = fetch(src.package, cache_dir / "debs", state)
        digest = _sha256(deb)
        root = extract(deb, digest, cache_dir / "extract" / src.package)
        base = root / src.root
        files = sorted(p for p in base.glob(src.pattern)
                       if p.is_file() and p.name not in src.exclude)
        if not files:
            raise RuntimeError(f"{src.package}: nothing matches {src.root}/{src.pattern}")
        ids: set[str] = set()
        n = 0
        for path in files:
            for pair in src.parse(path):
                q, a = collapse(pair.question), collapse(pair.answer)
                if _words(q) < MIN_QUESTION_WORDS or _words(a) < MIN_ANSWER_WORDS:
                    continue
                if (src.need_qmark and "?" not in q) or q in seen_q or a in seen_a:
                    continue
                seen_q.add(q)
                seen_a.add(a)
                doc_id = f"{name}:{pair.slug}"
                k = 2
                while doc_id in ids:
                    doc_id = f"{name}:{pair.slug}-{k}"
                    k += 1
                ids.add(doc_id)
                n += 1
                quote = " ".join(a.split()[:QUOTE_WORDS])
                docs.append({"id": doc_id, "title": q, "text": a})
                questions.append({"id": f"{name}-q{n}", "text": q, "doc_id": doc_id,
                                  "quote": quote})
        sources[name] = {
            "package": src.package,
            "version": _deb_version(deb),
            "deb": deb.name,
            "sha256": digest,
            "files": [{"path": str(p.relative_to(root)), "sha256": _sha256(p)} for p in files],
            "pairs": n,
        }
    out = cache_dir / "faq"
    _write_atomic(out / "docs" / "faq.jsonl", _jsonl(docs))
    _write_atomic(out / "questions.jsonl", _jsonl(questions))
    _write_atomic(out / "sources.json",
                  json.dumps(sources, indent=2, ensure_ascii=False, sort_keys=True) + "\n")
    return sources


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python -m bench.faqdata CACHE_DIR", file=sys.stderr)
        return 2
    t0 = time.perf_counter()
    try:
        sources = build(Path(argv[0]))
    except FetchError as e:
        print(f"error: {e}", file=sys.stderr)
        return 1
    for name, s in sources.items():
        print(f"{name:8} {s['package']:18} {s['version']:24} {s['pairs']:5d} pairs")
    total = sum(s["pairs"] for s in sources.values())
    print(f"{'total':8} {'':18} {'':24} {total:5d} pairs  ({time.perf_counter() - t0:.1f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
