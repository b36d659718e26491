"""Queries from any server that speaks the chat-completions wire protocol.

``POST {base_url}/chat/completions`` with ``{"model", "messages", "max_tokens", "temperature",
"seed"}``; the answer is ``choices[0].message.content``. A local inference server or a hosted
service both work.

The API key is read from the environment variable that ``synth.http_api_key_env`` names, at
call time, and goes only into the ``Authorization`` header: never into the config, the cache,
a done marker or an error message (any text shown from the server has it blanked out).

At most ``http_concurrency`` requests are in flight. A 429 or 5xx answer, a timeout or a
dropped connection is retried up to ``http_retries`` times, waiting ``http_backoff_s`` doubled
each time (or what the server's Retry-After asks, up to a minute). A refused connection, any
other 4xx, or an answer that is not a chat-completions JSON stops the stage with exit code 2;
what was already generated stays in the cache.
"""

from __future__ import annotations

import http.client
import json
import os
import threading
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Sequence
from concurrent.futures import CancelledError, Future, ThreadPoolExecutor, as_completed
from typing import Any

from ballast.config import SynthConfig
from ballast.core.errors import BallastError, ConfigError
from ballast.stages.synth.generate import Job, OnDone
from ballast.stages.synth.prompts import PromptTemplate

MAX_RETRY_AFTER_S = 60.0


class EndpointError(BallastError):
    """The chat endpoint refused, timed out, or answered something unusable (exit 2)."""


class _Stopped(Exception):
    """A request not made (or not retried) because the run is stopping."""


def shown_url(url: str) -> str:
    """The URL without user info, query or fragment: what may appear in messages."""
    parts = urllib.parse.urlsplit(url)
    host = parts.hostname or ""
    if parts.port:
        host = f"{host}:{parts.port}"
    return urllib.parse.urlunsplit((parts.scheme, host, parts.path, "", ""))


class ChatEndpoint:
    kind = "http"

    def __init__(self, cfg: SynthConfig) -> None:
        self.cfg = cfg
        self.url = cfg.http_base_url.rstrip("/") + "/chat/completions"
        self.where = f"chat endpoint {shown_url(self.url)}"
        self._key = ""
        self._stop = threading.Event()

    def settings(self) -> dict[str, Any]:
        c = self.cfg
        return {
            "kind": "http",
            "base_url": shown_url(c.http_base_url),
            "model": c.http_model,
            "max_tokens": c.llm_max_new_tokens,
            "temperature": c.llm_temperature,
        }

    # ------------------------------------------------------------------ the key

    def _read_key(self) -> str:
        name = self.cfg.http_api_key_env
        if not name:
            return ""
        key = os.environ.get(name, "")
        if not key:
            raise ConfigError(
                f"the environment variable {name} is not set (or empty); set it to the API key",
                key="synth.http_api_key_env",
            )
        return key

    def _redact(self, text: str) -> str:
        if self._key:
            text = text.replace(self._key, "[redacted]")
        return text

    def _error(self, message: str) -> EndpointError:
        return EndpointError(self._redact(f"{self.where}: {message}"))

    # ------------------------------------------------------------------ one request

    def _body(self, job: Job, template: PromptTemplate) -> bytes:
        body = {
            "model": self.cfg.http_model,
            "messages": template.messages(job.passage["text"]),
            "max_tokens": self.cfg.llm_max_new_tokens,
            "temperature": self.cfg.llm_temperature,
            "seed": job.seed % 2**31,
        }
        return json.dumps(body, ensure_ascii=False).encode("utf-8")

    def _snippet(self, data: bytes) -> str:
        text = data[:200].decode("utf-8", errors="replace")
        return self._redact(" ".join(text.split()))

    def complete(self, job: Job, template: PromptTemplate) -> str:
        """One chat completion with retries; the answer's text."""
        headers = {"Content-Type": "application/json", "Accept": "application/json"}
        if self._key:
            headers["Authorization"] = f"Bearer {self._key}"
        data = self._body(job, template)
        tries = self.cfg.http_retries + 1
        last = ""
        for attempt in range(tries):
            if self._stop.is_set():
                raise _Stopped
            wait = self.cfg.http_backoff_s * 2**attempt
            req = urllib.request.Request(self.url, data=data, headers=headers, method="POST")
            try:
                with urllib.request.urlopen(req, timeout=self.cfg.http_timeout_s) as resp:
                    raw = resp.read()
            except urllib.error.HTTPError as exc:
                body = exc.read() if exc.fp is not None else b""
                if exc.code == 429 or exc.code >= 500:
                    last = f"HTTP {exc.code} {self._snippet(body)}".strip()
                    wait = _retry_after(exc.headers.get("Retry-After"), wait)
                elif exc.code in (401, 403):
                    env = self.cfg.http_api_key_env
                    hint = f"check the key in ${env}" if env else "set synth.http_api_key_env"
                    raise self._error(
                        f"refused the request (HTTP {exc.code}: {self._snippet(body)}); {hint}"
                    ) from None
                else:
                    raise self._error(
                        f"refused the request (HTTP {exc.code}: {self._snippet(body)}); check "
                        "synth.http_base_url and synth.http_model"
                    ) from None
            except urllib.error.URLError as exc:
                reason = exc.reason
                if isinstance(reason, TimeoutError):
                    last = f"no answer within {self.cfg.http_timeout_s:g} s"
                elif isinstance(reason, ConnectionRefusedError):
                    raise self._error(
                        "refused the connection; is the server running, and is "
                        "synth.http_base_url right?"
                    ) from None
                elif isinstance(reason, (ConnectionResetError, ConnectionAbortedError)):
                    last = "the connection was dropped"
                else:
                    raise self._error(f"cannot be reached ({self._redact(str(reason))})") from None
            except TimeoutError:
                last = f"no answer within {self.cfg.http_timeout_s:g} s"
            except (http.client.HTTPException, ConnectionError) as exc:
                last = f"the connection was dropped ({type(exc).__name__})"
            else:
                return self._parse(raw)
            if attempt + 1 < tries:
                if self._stop.wait(wait):
                    raise _Stopped

        raise self._error(
            f"gave up after {tries} tries: {last}; raise synth.http_timeout_s or "
            "synth.http_retries, or lower synth.http_concurrency"
        )

    def _parse(self, raw: bytes) -> str:
        try:
            data = json.loads(raw)
        except (ValueError, UnicodeDecodeError):
            raise self._error(
                f"answered malformed JSON ({self._snippet(raw)!r}); expected a "
                "chat-completions response"
            ) from None
        try:
            content = data["choices"][0]["message"]["content"]
        except (KeyError, IndexError, TypeError):
            content = None
        if not isinstance(content, str):
            raise self._error(
                f"answered JSON without choices[0].message.content ({self._snippet(raw)!r}); "
                "expected a chat-completions response"
            )
        return content

    # ------------------------------------------------------------------ many requests

    def _complete_or_stop(self, job: Job, template: PromptTemplate) -> str:
        try:
            return self.complete(job, template)
        except EndpointError:
            self._stop.set()  # before this worker takes the next job: no request after a failure
            raise

    def generate(
        self, jobs: Sequence[Job], templates: dict[str, PromptTemplate], on_done: OnDone
    ) -> None:
        self._key = self._read_key()
        self._stop.clear()
        pool = ThreadPoolExecutor(self.cfg.http_concurrency, thread_name_prefix="ballast-http")
        error: BaseException | None = None
        try:
            futures: dict[Future[str], Job] = {
                pool.submit(self._complete_or_stop, job, templates[job.style]): job for job in jobs
            }
            for fut in as_completed(futures):
                try:
                    raw = fut.result()
                except (CancelledError, _Stopped):
                    continue
                except EndpointError as exc:
                    if error is None:
                        error = exc
                        for other in futures:
                            other.cancel()
                    continue
                on_done(futures[fut], raw)  # answers finished before a failure are kept
        finally:
            self._stop.set()  # an interrupted run: requests in flight are not retried
            pool.shutdown(wait=error is not None, cancel_futures=True)
            self._key = ""
        if error is not None:
            raise error


def _retry_after(header: str | None, default: float) -> float:
    if header is None:
        return default
    try:
        return min(max(float(header), 0.0), MAX_RETRY_AFTER_S)
    except ValueError:
        return default
