"""The HTML report in a real browser (Debian's headless Chromium): it loads with no console
message at all, its screenshot is not blank, and document text is escaped, not run.

The report is built from a synthetic run folder (tests/runfolder.py; nothing is trained), one
of whose passages and queries holds ``<script>alert(1)</script>``. Two detectors of errors,
each shown to work on a page with planted errors first:
- Chromium's own console log (``--enable-logging=stderr``) on the report as shipped;
- a probe script (``window.onerror``, ``console.error``, ``alert``) written into the DOM and
  read back with ``--dump-dom``, on a copy of the report without its script-blocking
  Content-Security-Policy, so that text which escaped the escaping would run and be caught.
"""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
import zlib
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from ballast.cli import app
from tests.runfolder import SCRIPT, make_run

pytestmark = pytest.mark.slow

FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--hide-scrollbars",
]
PROBE = """<script>
window.__found = [];
function __note(m) { window.__found.push(String(m)); }
window.addEventListener("error", function (e) { __note("error: " + (e.message || e.type)); }, true);
window.addEventListener("unhandledrejection", function (e) { __note("rejection: " + e.reason); });
document.addEventListener("securitypolicyviolation",
  function (e) { __note("csp: " + e.violatedDirective); });
var __ce = console.error;
console.error = function () { __note("console.error: " + Array.from(arguments).join(" ")); };
window.alert = function (m) { __note("alert: " + m); };
window.addEventListener("load", function () {
  var p = document.createElement("pre");
  p.id = "probe";
  p.textContent = JSON.stringify({found: window.__found, scripts: document.scripts.length});
  document.body.appendChild(p);
});
</script>"""


def _find_chromium() -> str:
    """Debian's chromium, which `make test` installs where it can (the test-deps target)."""
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    pytest.skip("chromium is not installed (`make test-deps` installs Debian's chromium as root)")


@pytest.fixture(scope="module")
def chromium() -> str:
    return _find_chromium()


def browse(chromium: str, page: Path, tmp: Path, *extra: str) -> subprocess.CompletedProcess:
    profile = tmp / f"profile-{len(list(tmp.glob('profile-*')))}"
    return subprocess.run(
        [chromium, *FLAGS, f"--user-data-dir={profile}", *extra, page.resolve().as_uri()],
        capture_output=True,
        text=True,
        timeout=180,
    )


def console_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if ":CONSOLE" in line]


def probed(chromium: str, html: str, tmp: Path, name: str) -> dict:
    """Load ``html`` with the probe first in <head>, its CSP removed; what the probe saw."""
    html = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", html)
    html = html.replace("<head>", "<head>" + PROBE, 1)
    page = tmp / name
    page.write_text(html, "utf-8")
    proc = browse(chromium, page, tmp, "--dump-dom", "--virtual-time-budget=3000")
    m = re.search(r'<pre id="probe">(.*?)</pre>', proc.stdout, re.S)
    assert m, f"the probe did not report: {proc.stderr[-500:]}"
    text = m.group(1).replace("&quot;", '"').replace("&lt;", "<").replace("&gt;", ">")
    return json.loads(text.replace("&amp;", "&")) | {"dom": proc.stdout}


def read_png(path: Path) -> np.ndarray:
    """Decode an 8-bit, non-interlaced RGB/RGBA PNG (what Chromium writes) to an array."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG"
    pos, idat = 8, b""
    while pos < len(data):
        (n,) = struct.unpack(">I", data[pos : pos + 4])
        kind, body = data[pos + 4 : pos + 8], data[pos + 8 : pos + 8 + n]
        pos += 12 + n
        if kind == b"IHDR":
            w, h, depth, ctype, _, _, interlace = struct.unpack(">IIBBBBB", body)
            assert depth == 8 and interlace == 0 and ctype in (2, 6), (depth, ctype, interlace)
        elif kind == b"IDAT":
            idat += body
    ch = 3 if ctype == 2 else 4
    raw, stride = zlib.decompress(idat), w * ch
    out = np.zeros((h, stride), dtype=np.uint8)
    prev = [0] * stride
    for y in range(h):
        f = raw[y * (stride + 1)]
        line = raw[y * (stride + 1) + 1 : (y + 1) * (stride + 1)]
        if f == 0:
            cur = list(line)
        elif f == 2:
            cur = [(a + b) & 255 for a, b in zip(line, prev, strict=True)]
        else:
            cur = [0] * stride
            for i in range(stride):
                a = cur[i - ch] if i >= ch else 0
                b, c = prev[i], (prev[i - ch] if i >= ch else 0)
                if f == 1:
                    p = a
                elif f == 3:
                    p = (a + b) >> 1
                else:  # Paeth (PNG specification, section 9.4)
                    pa, pb, pc = abs(b - c), abs(a - c), abs(a + b - 2 * c)
                    p = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
                cur[i] = (line[i] + p) & 255
        out[y] = cur
        prev = cur
    return out.reshape(h, w, ch)[:, :, :3]


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    run = make_run(tmp_path_factory.mktemp("report"), gate_passes=False)
    r = CliRunner().invoke(app, ["report", str(run), "-q"], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    return run / "report.html"


def test_detectors_catch_planted_errors(chromium: str, tmp_path: Path) -> None:
    # common practice: a detector is trusted only after it has been seen to fire
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><html><head></head><body><p>x</p><script>"
                   'console.error("planted-console"); throw new Error("planted-throw")'
                   "</script></body></html>", "utf-8")
    logged = console_lines(browse(chromium, bad, tmp_path, "--enable-logging=stderr",
                                  "--v=0", "--dump-dom").stderr)
    assert any("planted-console" in x for x in logged) and any("planted-throw" in x for x in logged)
    seen = probed(chromium, bad.read_text("utf-8"), tmp_path, "bad-probed.html")
    assert any("planted-throw" in x for x in seen["found"])
    assert any("planted-console" in x for x in seen["found"])
    # and an unescaped script in a page is both run (probe) and blocked by the CSP (log)
    raw = f'<!DOCTYPE html><html><head><meta http-equiv="Content-Security-Policy" ' \
          f"content=\"default-src 'none'\"></head><body>{SCRIPT}</body></html>"
    assert any("alert: 1" in x for x in probed(chromium, raw, tmp_path, "raw.html")["found"])
    page = tmp_path / "csp.html"
    page.write_text(raw, "utf-8")
    logged = console_lines(browse(chromium, page, tmp_path, "--enable-logging=stderr", "--v=0",
                                  "--dump-dom").stderr)
    assert any("Content Security Policy" in x for x in logged)


def test_report_loads_without_console_messages(chromium: str, report: Path, tmp_path: Path) -> None:
    proc = browse(chromium, report, tmp_path, "--enable-logging=stderr", "--v=0", "--dump-dom")
    assert proc.returncode == 0, proc.stderr[-800:]
    assert console_lines(proc.stderr) == []
    assert "ballast report: synthetic" in proc.stdout
    # self-contained: no script, nothing fetched from anywhere
    html = report.read_text("utf-8")
    assert "<script" not in html.lower()
    # nothing loads from anywhere; the only links are the navigation's, to the page's own ids
    assert not re.search(r"""\bsrc\s*=|\bhref\s*=\s*"(?!#s\d+")|url\(|@import""", html)


def test_document_text_is_escaped_not_run(chromium: str, report: Path, tmp_path: Path) -> None:
    seen = probed(chromium, report.read_text("utf-8"), tmp_path, "report-probed.html")
    assert seen["found"] == []  # no error, no console.error, and alert(1) never ran
    assert seen["scripts"] == 1  # the probe itself: the document's <script> became text
    # the passage and the query are shown as text, tags and all
    assert seen["dom"].count("&lt;script&gt;alert(1)&lt;/script&gt;") >= 2
    assert "&lt;b&gt;tags&lt;/b&gt;" in seen["dom"]


def test_screenshot_is_not_blank(chromium: str, report: Path, tmp_path: Path) -> None:
    shot = tmp_path / "report.png"
    proc = browse(chromium, report, tmp_path, f"--screenshot={shot}", "--window-size=1000,1400")
    assert shot.is_file(), proc.stderr[-800:]
    px = read_png(shot).astype(np.float64)
    assert px.shape[:2] == (1400, 1000)
    # a blank page has zero variance; this one has text, tables and coloured charts
    assert px.std() > 20
    background = np.all(px > 240, axis=2) | np.all(np.abs(px - [247, 250, 252]) < 4, axis=2)
    assert (~background).mean() > 0.03
    # the failed-gate banner is drawn in its colour (#fdecea) somewhere on screen
    assert np.any(np.all(np.abs(px - [253, 236, 234]) < 3, axis=2))
