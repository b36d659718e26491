"""Reading and writing the files between stages: atomic writes, strict JSONL, fingerprints."""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

from ballast.core.errors import InputError
from ballast.core.text import sha256_bytes


def _umask() -> int:
    old = os.umask(0o022)
    os.umask(old)
    return old


def _tmp_beside(path: Path) -> Path:
    """An empty temp file beside ``path``, with the permissions the user's umask gives a new
    file (mkstemp makes it 0600; a bundle is read by other users and services)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.fchmod(fd, 0o666 & ~_umask())
    os.close(fd)
    return Path(name)


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """A temp path beside ``path`` for a writer that wants a file name (``np.save``, a model
    assembler); renamed over ``path`` when the block succeeds, removed when it fails."""
    path = Path(path)
    tmp = _tmp_beside(path)
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


@contextlib.contextmanager
def atomic_file(path: str | Path) -> Iterator[Any]:
    """A binary file handle on a temp file beside ``path``; on a clean exit it is flushed,
    fsynced and renamed over ``path``; on any error it is removed and ``path`` is untouched."""
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        yield fh
        fh.flush()
        os.fsync(fh.fileno())


def write_bytes_atomic(path: str | Path, data: bytes) -> None:
    """Write to a temp file beside ``path``, fsync, then rename over it."""
    with atomic_file(path) as fh:
        fh.write(data)


def write_text_atomic(path: str | Path, text: str) -> None:
    write_bytes_atomic(path, text.encode("utf-8"))


def dumps(obj: Any) -> str:
    """The one JSON style of ballast's files: sorted keys, UTF-8, no NaN."""
    return json.dumps(obj, ensure_ascii=False, sort_keys=True, allow_nan=False)


def write_json(path: str | Path, obj: Any) -> None:
    write_text_atomic(path, json.dumps(obj, ensure_ascii=False, sort_keys=True, indent=2) + "\n")


def write_jsonl(path: str | Path, rows: Iterable[dict]) -> None:
    """One JSON object a line, streamed to a temp file beside ``path``, then renamed over it
    (rows may be a generator: memory stays one row deep)."""
    with atomic_file(path) as fh:
        for r in rows:
            fh.write((dumps(r) + "\n").encode("utf-8"))


@contextlib.contextmanager
def atomic_dir(path: str | Path) -> Iterator[Path]:
    """Build a folder under a temp name, then swap it into place; on error nothing changes."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent))
    os.chmod(tmp, 0o777 & ~_umask())  # mkdtemp makes it 0700
    try:
        yield tmp
        old = None
        if path.exists():
            old = path.with_name(f".{path.name}.old")
            if old.exists():
                shutil.rmtree(old)
            os.replace(path, old)
        os.replace(tmp, path)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def remove_stale_temps(folder: str | Path, name: str) -> int:
    """Remove the temp files and folders that a killed writer of ``name`` left in ``folder``
    (``.NAME.*.tmp`` from the atomic writers, ``.NAME.old`` from a folder swap)."""
    removed = 0
    folder = Path(folder)
    for p in [*folder.glob(f".{name}.*.tmp"), folder / f".{name}.old"]:
        if p.is_dir():
            shutil.rmtree(p, ignore_errors=True)
            removed += 1
        elif p.exists():
            p.unlink(missing_ok=True)
            removed += 1
    return removed


def read_text(path: str | Path) -> str:
    """Read UTF-8 text; a bad byte is an InputError naming the file, line and byte offset."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", path=path) from None
    except IsADirectoryError:
        raise InputError("expected a file, found a folder", path=path) from None
    except OSError as exc:  # no permission, an I/O error
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise InputError(
            f"not valid UTF-8 (byte 0x{data[exc.start]:02x} at offset {exc.start}); "
            "save the file as UTF-8",
            path=path,
            line=line,
        ) from None
    nul = data.find(b"\x00")
    if nul >= 0:  # valid UTF-8, but no text file holds NUL bytes: binary data or UTF-16
        raise InputError(
            f"binary data (a NUL byte at offset {nul}), not text; save it as UTF-8 text",
            path=path,
            line=data.count(b"\n", 0, nul) + 1,
        )
    return text.removeprefix("\ufeff")


def _text_lines(path: Path) -> Iterator[str]:
    """The lines of a UTF-8 file as ``str.splitlines`` cuts them, read one line at a time; a bad
    byte is an InputError naming the file, line and byte offset (as ``read_text``'s)."""
    try:
        fh = open(path, "rb")  # noqa: SIM115 - closed below, the generator may stop early
    except FileNotFoundError:
        raise InputError("file not found", path=path) from None
    except IsADirectoryError:
        raise InputError("expected a file, found a folder", path=path) from None
    with fh:
        offset = 0
        for n, raw in enumerate(fh):
            try:
                text = raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                at = offset + exc.start
                raise InputError(
                    f"not valid UTF-8 (byte 0x{raw[exc.start]:02x} at offset {at}); "
                    "save the file as UTF-8",
                    path=path,
                    line=n + 1,
                ) from None
            offset += len(raw)
            if n == 0:
                text = text.removeprefix("\ufeff")
            yield from text.splitlines() or [""]


def read_jsonl(path: str | Path, *, allow_empty: bool = False) -> Iterator[tuple[int, dict]]:
    """Yield (line number, object) for each non-blank line; errors name file and line. The file
    is read as it is iterated, so a large file never sits in memory whole."""
    path = Path(path)
    seen = 0
    for lineno, line in enumerate(_text_lines(path), start=1):
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
        except json.JSONDecodeError as exc:
            raise InputError(
                f"not valid JSON ({exc.msg} at column {exc.colno}); "
                "expected one JSON object per line",
                path=path,
                line=lineno,
            ) from None
        if not isinstance(obj, dict):
            raise InputError(
                f"expected a JSON object, found {type(obj).__name__}", path=path, line=lineno
            )
        seen += 1
        yield lineno, obj
    if seen == 0 and not allow_empty:
        raise InputError("the file is empty; expected one JSON object per line", path=path)


def require_str(obj: dict, key: str, *, path: str | Path, line: int, optional: bool = False):
    """Fetch a non-empty string field or raise an InputError naming it."""
    if key not in obj or obj[key] is None:
        if optional:
            return None
        raise InputError("missing; expected a non-empty string", path=path, line=line, field=key)
    value = obj[key]
    if isinstance(value, (int, float)) and not isinstance(value, bool) and key.endswith("id"):
        value = str(value)
    if not isinstance(value, str) or not value.strip():
        raise InputError(
            f"expected a non-empty string, found {value!r:.60}", path=path, line=line, field=key
        )
    return value


def sha256_file(path: str | Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def fingerprint_tree(path: str | Path, *, skip_unreadable: bool = False) -> str:
    """A hash of every file under ``path`` (relative names and contents), or of one file. A
    file or folder that cannot be read is an InputError naming it (exit 2), not a traceback;
    with ``skip_unreadable`` such a file counts by its name alone (ingest.on_error = "skip")."""
    path = Path(path)

    def digest(f: Path) -> str:
        try:
            return sha256_file(f)
        except OSError as exc:
            if skip_unreadable:
                return "unreadable"
            raise InputError(f"cannot read the file: {exc.strerror or exc}", path=f) from None

    if path.is_file():
        return digest(path)
    h = hashlib.sha256()
    try:
        files = sorted(p for p in path.rglob("*") if p.is_file())
    except OSError as exc:
        raise InputError(f"cannot list the folder: {exc.strerror or exc}",
                         path=exc.filename or path) from None  # fmt: skip
    for f in files:
        rel = f.relative_to(path).as_posix()
        if any(part.startswith(".") for part in f.relative_to(path).parts):
            continue
        h.update(rel.encode() + b"\0" + digest(f).encode() + b"\n")
    return h.hexdigest()


def fingerprint_obj(obj: Any) -> str:
    return sha256_bytes(dumps(obj).encode("utf-8"))
