"""The chat-completions generator against a real HTTP server on 127.0.0.1, started here.

The wire format (POST <base>/chat/completions, {"model", "messages"} in, choices[0].message
.content out, Bearer authorisation) is the widely used chat-completions protocol. Retrying on
429/5xx with backoff, bounded concurrency and a generation cache that survives an interrupted
run are common practice. Every server answer below is written by the test itself.
"""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable, Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest
from typer.testing import CliRunner

from ballast.cli import app
from ballast.config import load_config
from ballast.pipeline import run_stage
from ballast.stages import Run

runner = CliRunner()
KEY = "sk-test-7f3a9c-DO-NOT-LEAK-51e2"
ENV = "BALLAST_TEST_CHAT_KEY"

PASSAGES = [
    {"id": f"p{i}", "doc_id": f"d{i % 3}", "text": text}
    for i, text in enumerate(
        [
            "Forklift batteries are charged overnight in bay 3, away from the mill.",
            "Visitors sign the gate book and wear a blue vest at all times on site.",
            "Sample bottles are kept in the lab fridge for four weeks before disposal.",
            "The press hall is rinsed with cold water after every batch.",
            "A label printer that prints blank labels has its ribbon loaded backwards.",
            "Crates are stacked no more than five high in the dispatch bay.",
        ]
    )
]


def answer_for(body: dict) -> str:
    """A deterministic query for a request: depends on its passage and seed only."""
    passage = body["messages"][-1]["content"].split(": ", 1)[1]
    return f"what about {' '.join(passage.split()[:2]).lower()} (variant {body['seed'] % 97})"


def chat_json(content: str) -> bytes:
    return json.dumps(
        {"object": "chat.completion", "choices": [{"index": 0, "message": {
            "role": "assistant", "content": content}, "finish_reason": "stop"}]}
    ).encode()  # fmt: skip


Reply = tuple[int, dict[str, str], bytes, float]  # status, headers, body, delay in seconds


class ChatServer:
    """A ThreadingHTTPServer whose answer to the n-th request is ``behave(n, body, headers)``."""

    def __init__(self, behave: Callable[[int, dict, dict], Reply]) -> None:
        self.behave = behave
        self.lock = threading.Lock()
        self.hits = 0
        self.in_flight = 0
        self.max_in_flight = 0
        self.bodies: list[dict] = []
        self.auth: list[str | None] = []
        self.paths: list[str] = []
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - the http.server API
                length = int(self.headers.get("Content-Length", 0))
                body = json.loads(self.rfile.read(length))
                with outer.lock:
                    n = outer.hits
                    outer.hits += 1
                    outer.in_flight += 1
                    outer.max_in_flight = max(outer.max_in_flight, outer.in_flight)
                    outer.bodies.append(body)
                    outer.auth.append(self.headers.get("Authorization"))
                    outer.paths.append(self.path)
                try:
                    status, headers, data, delay = outer.behave(n, body, dict(self.headers))
                    if delay:
                        time.sleep(delay)
                    self.send_response(status)
                    for k, v in headers.items():
                        self.send_header(k, v)
                    self.send_header("Content-Type", "application/json")
                    self.send_header("Content-Length", str(len(data)))
                    self.end_headers()
                    self.wfile.write(data)
                except (BrokenPipeError, ConnectionResetError):
                    pass  # the client gave up (a timeout test)
                finally:
                    with outer.lock:
                        outer.in_flight -= 1

            def log_message(self, *args: Any) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.server.daemon_threads = True
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/v1"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)

    def wait_idle(self, timeout: float = 10.0) -> None:
        """Until the client's request threads have ended and nothing is in flight."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            busy = [t for t in threading.enumerate() if t.name.startswith("ballast-http")]
            if not busy and not self.in_flight:
                return
            time.sleep(0.01)
        raise AssertionError("the client's request threads did not end")


def good(n: int, body: dict, headers: dict) -> Reply:
    return 200, {}, chat_json(answer_for(body)), 0.0


@pytest.fixture
def serve() -> Iterator[Callable[[Callable[[int, dict, dict], Reply]], ChatServer]]:
    servers: list[ChatServer] = []

    def start(behave: Callable[[int, dict, dict], Reply]) -> ChatServer:
        s = ChatServer(behave)
        s.thread.start()
        servers.append(s)
        return s

    yield start
    for s in servers:
        s.server.shutdown()
        s.server.server_close()


def project(tmp_path: Path, url: str, *lines: str, key_env: str = ENV) -> Path:
    """A run folder with PASSAGES and a config for the http generator; ``lines`` are
    ``key = value`` lines of [synth] that replace the defaults here."""
    run = tmp_path / "run"
    run.mkdir(parents=True)
    (run / "passages.jsonl").write_text("".join(json.dumps(p) + "\n" for p in PASSAGES))
    synth = {
        "generators": '["http"]',
        "http_base_url": f'"{url}"',
        "http_model": '"test-model"',
        "http_api_key_env": f'"{key_env}"',
        "http_concurrency": "2",
        "http_timeout_s": "2.0",
        "http_retries": "2",
        "http_backoff_s": "0.0",
    }
    for line in lines:
        key, value = (x.strip() for x in line.split("=", 1))
        synth[key] = value
    body = "\n".join(f"{k} = {v}" for k, v in synth.items())
    cfg = tmp_path / "ballast.toml"
    cfg.write_text(f'name = "t"\nseed = 3\nrun_dir = "run"\n[synth]\n{body}\n')
    return cfg


def synth(cfg: Path, *sets: str):
    args = ["synth", str(cfg), "-q"]
    for s in sets:
        args += ["--set", s]
    return runner.invoke(app, args, catch_exceptions=False)


def read_queries(run: Path) -> list[dict]:
    return [json.loads(line) for line in (run / "queries.jsonl").read_text().splitlines()]


def assert_key_nowhere(folder: Path, *texts: str) -> None:
    for f in folder.rglob("*"):
        if f.is_file():
            assert KEY.encode() not in f.read_bytes(), f
    for t in texts:
        assert KEY not in t


# ---------------------------------------------------------------- good answers


def test_good_answers_become_queries(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    cfg = project(tmp_path, server.url, "llm_per_passage = 2")
    r = synth(cfg)
    assert r.exit_code == 0, r.output
    queries = read_queries(tmp_path / "run")
    assert len(queries) == 12 and server.hits == 12
    assert {q["origin"] for q in queries} == {"http"}
    assert {q["meta"]["style"] for q in queries} <= {"question", "keywords", "troubleshooting"}
    by_passage = {p["id"]: p for p in PASSAGES}
    for q in queries:
        words = by_passage[q["passage_id"]]["text"].split()[:2]
        assert q["text"].startswith(f"what about {' '.join(words).lower()} (variant")
    # the wire protocol: path, model, messages ending with the passage, the key as Bearer
    assert set(server.paths) == {"/v1/chat/completions"}
    assert set(server.auth) == {f"Bearer {KEY}"}
    body = server.bodies[0]
    assert body["model"] == "test-model"
    assert [m["role"] for m in body["messages"]][:2] == ["system", "user"]
    assert body["messages"][-1]["role"] == "user"
    assert body["max_tokens"] == 32 and body["temperature"] == 0.7
    assert server.max_in_flight <= 2  # http_concurrency
    done = json.loads((tmp_path / "run" / "synth.done.json").read_text())
    assert done["summary"]["http"] == 12
    assert done["summary"]["removed"] == {
        "length": 0, "chatter": 0, "example": 0, "copy": 0, "duplicate": 0
    }  # fmt: skip
    assert_key_nowhere(tmp_path, r.stdout, r.stderr)


def test_seeded_the_same_run_asks_the_same(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    a = project(tmp_path / "a", server.url)
    b = project(tmp_path / "b", server.url)
    assert synth(a).exit_code == 0 and synth(b).exit_code == 0
    assert server.hits == 12  # no shared cache between run folders
    first = (tmp_path / "a" / "run" / "queries.jsonl").read_bytes()
    assert first == (tmp_path / "b" / "run" / "queries.jsonl").read_bytes()
    assert synth(a, "seed=4").exit_code == 0
    assert server.hits == 18  # a new seed is a new sample for every passage
    assert (tmp_path / "a" / "run" / "queries.jsonl").read_bytes() != first


def test_filters_remove_chatter_and_copies_and_report_them(
    tmp_path: Path, serve, monkeypatch
) -> None:
    monkeypatch.setenv(ENV, KEY)

    def mixed(n: int, body: dict, headers: dict) -> Reply:
        passage = body["messages"][-1]["content"].split(": ", 1)[1]
        text = {"p0": "Sure! Here is a question you could ask.", "p1": passage}.get(
            next(p["id"] for p in PASSAGES if p["text"] == passage), answer_for(body)
        )
        return 200, {}, chat_json(text), 0.0

    server = serve(mixed)
    cfg = project(tmp_path, server.url)
    r = synth(cfg)
    assert r.exit_code == 0, r.output
    assert len(read_queries(tmp_path / "run")) == 4
    removed = [json.loads(x) for x in (tmp_path / "run" / "synth.removed.jsonl").read_text()
               .splitlines()]  # fmt: skip
    assert {(x["passage_id"], x["filter"]["rule"]) for x in removed} == {
        ("p0", "chatter"),
        ("p1", "copy"),
    }
    done = json.loads((tmp_path / "run" / "synth.done.json").read_text())
    assert done["summary"]["removed"]["chatter"] == 1 and done["summary"]["removed"]["copy"] == 1


# ---------------------------------------------------------------- failures: exit 2, clear words


def test_malformed_json_is_a_clear_error(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(lambda n, b, h: (200, {}, b'{"choices": [ {"message": oops', 0.0))
    cfg = project(tmp_path, server.url, "http_concurrency = 1")
    r = synth(cfg)
    assert r.exit_code == 2
    assert "malformed JSON" in r.stderr and "chat-completions" in r.stderr
    assert server.url in r.stderr
    assert server.hits == 1  # not retried: a broken answer will not mend itself
    assert not (tmp_path / "run" / "synth.done.json").exists()
    assert not (tmp_path / "run" / "queries.jsonl").exists()


def test_json_without_choices_is_a_clear_error(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    serve_ = serve(lambda n, b, h: (200, {}, b'{"error": "model not loaded"}', 0.0))
    r = synth(project(tmp_path, serve_.url))
    assert r.exit_code == 2 and "choices[0].message.content" in r.stderr


def test_429_then_success_is_retried(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)

    def busy_first(n: int, body: dict, headers: dict) -> Reply:
        if n < 2:
            return 429, {"Retry-After": "0"}, b'{"error": "slow down"}', 0.0
        if n == 2:
            return 503, {}, b'{"error": "warming up"}', 0.0
        return good(n, body, headers)

    server = serve(busy_first)
    cfg = project(tmp_path, server.url, "http_concurrency = 1", "http_retries = 3")
    r = synth(cfg)
    assert r.exit_code == 0, r.output
    assert len(read_queries(tmp_path / "run")) == 6
    assert server.hits == 9  # 3 refusals, then one answer per passage


def test_429_past_the_retries_is_a_clear_error(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(lambda n, b, h: (429, {}, b'{"error": "quota"}', 0.0))
    cfg = project(tmp_path, server.url, "http_concurrency = 1", "http_retries = 2")
    r = synth(cfg)
    assert r.exit_code == 2
    assert "gave up after 3 tries: HTTP 429" in r.stderr
    assert server.hits == 3


def test_timeout_is_a_clear_error(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(lambda n, b, h: (200, {}, chat_json("late"), 1.0))
    cfg = project(
        tmp_path, server.url, "http_concurrency = 1", "http_retries = 1", "http_timeout_s = 0.2"
    )
    started = time.monotonic()
    r = synth(cfg)
    assert r.exit_code == 2
    assert "no answer within 0.2 s" in r.stderr and "gave up after 2 tries" in r.stderr
    assert time.monotonic() - started < 3.0
    assert server.hits == 2


def test_refused_connection_is_a_clear_error(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    url = server.url
    server.server.shutdown()
    server.server.server_close()  # nothing listens on the port any more
    r = synth(project(tmp_path, url))
    assert r.exit_code == 2
    assert "refused the connection" in r.stderr and "synth.http_base_url" in r.stderr


def test_other_4xx_is_not_retried(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(lambda n, b, h: (404, {}, b'{"error": "no such model test-model"}', 0.0))
    r = synth(project(tmp_path, server.url, "http_concurrency = 1"))
    assert r.exit_code == 2
    assert "HTTP 404" in r.stderr and "no such model" in r.stderr
    assert "synth.http_model" in r.stderr
    assert server.hits == 1


# ---------------------------------------------------------------- the key


def test_key_is_redacted_from_a_failing_run(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)

    def echo_key(n: int, body: dict, headers: dict) -> Reply:
        # a careless server that echoes the credential it refused
        msg = {"error": f"invalid key {headers.get('Authorization')}"}
        return 401, {}, json.dumps(msg).encode(), 0.0

    server = serve(echo_key)
    r = synth(project(tmp_path, server.url))
    assert r.exit_code == 2
    assert "HTTP 401" in r.stderr and "[redacted]" in r.stderr and f"${ENV}" in r.stderr
    assert_key_nowhere(tmp_path, r.stdout, r.stderr)


def test_key_stays_out_of_every_file_of_a_good_run(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    r = synth(project(tmp_path, server.url))
    assert r.exit_code == 0
    config = json.loads((tmp_path / "run" / "config.json").read_text())
    assert config["synth"]["http_api_key_env"] == ENV  # the name is recorded, the key is not
    assert list((tmp_path / "run" / "cache" / "synth").glob("http-*.jsonl"))
    assert_key_nowhere(tmp_path, r.stdout, r.stderr)


def test_missing_key_variable_names_it(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.delenv(ENV, raising=False)
    server = serve(good)
    r = synth(project(tmp_path, server.url))
    assert r.exit_code == 2
    assert "synth.http_api_key_env" in r.stderr and ENV in r.stderr
    assert server.hits == 0


def test_a_key_put_where_its_variable_name_belongs_is_not_echoed(tmp_path: Path) -> None:
    cfg = project(tmp_path, "http://127.0.0.1:9/v1", key_env=KEY)
    r = synth(cfg)
    assert r.exit_code == 2
    assert "synth.http_api_key_env" in r.stderr and "NAME of an environment variable" in r.stderr
    assert_key_nowhere(tmp_path / "run", r.stdout, r.stderr)


def test_no_key_variable_sends_no_authorization(tmp_path: Path, serve) -> None:
    server = serve(good)
    cfg = project(tmp_path, server.url, key_env="")
    assert synth(cfg).exit_code == 0
    assert set(server.auth) == {None}


def test_http_config_needs_url_and_model(tmp_path: Path) -> None:
    cfg = tmp_path / "c.toml"
    cfg.write_text('[synth]\ngenerators = ["http"]\nhttp_model = "m"\n')
    r = synth(cfg)
    assert r.exit_code == 2 and "synth.http_base_url" in r.stderr
    cfg.write_text('[synth]\ngenerators = ["http"]\nhttp_base_url = "http://h/v1"\n')
    r = synth(cfg)
    assert r.exit_code == 2 and "synth.http_model" in r.stderr
    cfg.write_text('[synth]\nhttp_base_url = "http://user:secret@h/v1"\n')
    r = synth(cfg)
    assert r.exit_code == 2 and "synth.http_base_url" in r.stderr and "secret" not in r.stderr


# ---------------------------------------------------------------- the cache


class StopAfter:
    """Progress that interrupts the run (as Ctrl-C would) once ``n`` generations are done."""

    def __init__(self, n: int) -> None:
        self.n = n

    def step(self, label: str, done: int, total: int) -> None:
        if done >= self.n:
            raise KeyboardInterrupt

    def info(self, message: str) -> None:
        pass


def test_interrupted_run_resumes_without_regenerating(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    # a little latency, as any real model has, so the run is stopped with work in flight
    server = serve(lambda n, b, h: (200, {}, chat_json(answer_for(b)), 0.1))
    cfg_path = project(tmp_path / "a", server.url, "llm_per_passage = 2")
    total = 12

    run = Run(load_config(cfg_path), StopAfter(5))
    with pytest.raises(KeyboardInterrupt):
        run_stage(run, "synth")
    server.wait_idle()
    first = server.hits
    assert 5 <= first < total  # the 5 kept, and the few in flight when it stopped
    assert not (tmp_path / "a" / "run" / "synth.done.json").exists()
    cache_files = list((tmp_path / "a" / "run" / "cache" / "synth").glob("http-*.jsonl"))
    assert len(cache_files) == 1
    cached = len(cache_files[0].read_text().splitlines())
    assert cached == 5

    r = synth(cfg_path)
    assert r.exit_code == 0, r.output
    assert server.hits - first == total - cached  # only what the cache lacked
    resumed = (tmp_path / "a" / "run" / "queries.jsonl").read_bytes()

    r = synth(cfg_path)  # a third run regenerates nothing
    assert r.exit_code == 0 and server.hits - first == total - cached
    assert (tmp_path / "a" / "run" / "queries.jsonl").read_bytes() == resumed

    # an uninterrupted run elsewhere writes the very same queries
    other = project(tmp_path / "b", server.url, "llm_per_passage = 2")
    assert synth(other).exit_code == 0
    assert (tmp_path / "b" / "run" / "queries.jsonl").read_bytes() == resumed


def test_changing_a_prompt_regenerates_only_its_style(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    from ballast.stages.synth.prompts import default_prompts_dir

    prompts = tmp_path / "prompts"
    prompts.mkdir()
    for f in default_prompts_dir().glob("*.toml"):
        (prompts / f.name).write_text(f.read_text())
    cfg = project(tmp_path, server.url, f'prompts = "{prompts}"', "llm_per_passage = 2")
    assert synth(cfg).exit_code == 0
    assert server.hits == 12
    styles = [q["meta"]["style"] for q in read_queries(tmp_path / "run")]
    path = prompts / "keywords.toml"
    path.write_text(path.read_text().replace("Write only the keywords.", "Only keywords."))
    assert synth(cfg).exit_code == 0
    assert server.hits == 12 + styles.count("keywords")


# ---------------------------------------------------------------- real questions as examples

QUESTIONS = [
    {"id": "q-forklift", "text": "where are forklift batteries charged?", "passage_id": "p0"},
    {"id": "q-vest", "text": "do visitors need a vest?", "passage_id": "p1"},
    {"id": "q-bottles", "text": "how long are sample bottles kept?", "passage_id": "p2"},
    {"id": "q-crates", "text": "how high may crates be stacked?", "passage_id": "p5"},
]


def test_real_questions_become_the_prompt_examples_and_stop_judging(
    tmp_path: Path, serve, monkeypatch
) -> None:
    """synth.question_examples: the chosen real questions, with their passages, are the
    question prompt's worked examples (Promptagator, Dai et al., ICLR 2023); they leave
    queries.jsonl, so no question shown to the writer ever judges."""
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    questions = tmp_path / "questions.jsonl"
    questions.write_text("".join(json.dumps(q) + "\n" for q in QUESTIONS))
    cfg = project(tmp_path, server.url, f'questions = "{questions}"', 'styles = ["question"]',
                  "question_examples = 2")  # fmt: skip
    assert synth(cfg).exit_code == 0
    run = tmp_path / "run"
    shown = [json.loads(x) for x in (run / "synth.examples.jsonl").read_text().splitlines()]
    assert len(shown) == 2
    by_id = {p["id"]: p["text"] for p in PASSAGES}
    assert all(e["passage"] == by_id[e["passage_id"]] for e in shown)
    judging = [q["id"] for q in read_queries(run) if q["origin"] == "human"]
    assert sorted(judging + [e["id"] for e in shown]) == sorted(q["id"] for q in QUESTIONS)
    assert not set(judging) & {e["id"] for e in shown}
    assert server.hits == len(PASSAGES)
    for body in server.bodies:  # every prompt: the two real questions, no packaged example
        turns = body["messages"][1:-1]
        assert [t["content"] for t in turns if t["role"] == "assistant"] == [
            e["text"] for e in shown
        ]
        assert [t["content"] for t in turns if t["role"] == "user"] == [
            f"Passage: {e['passage']}" for e in shown
        ]
    # seeded: another seed shows other questions; 0 writes no examples file and judges all
    other = synth(cfg, "seed=11")
    assert other.exit_code == 0
    again = [json.loads(x)["id"] for x in (run / "synth.examples.jsonl").read_text().splitlines()]
    assert again != [e["id"] for e in shown]
    assert synth(cfg, "synth.question_examples=0").exit_code == 0
    assert not (run / "synth.examples.jsonl").exists()
    assert len([q for q in read_queries(run) if q["origin"] == "human"]) == len(QUESTIONS)


@pytest.mark.parametrize(
    ("lines", "expected"),
    [
        (["question_examples = 2"], "without synth.questions"),
        (['questions = "q.jsonl"', 'generators = ["ict"]', "question_examples = 2"],
         "'llm' or 'http'"),
        (['questions = "q.jsonl"', 'styles = ["keywords"]', "question_examples = 2"],
         "has 'question'"),
        (['questions = "q.jsonl"', "question_examples = 65"], "[0, 64]"),
    ],
)  # fmt: skip
def test_question_examples_refusals_name_the_key(
    tmp_path: Path, lines: list[str], expected: str
) -> None:
    from ballast.core.errors import ConfigError

    cfg = project(tmp_path, "http://127.0.0.1:9/v1", *lines)
    with pytest.raises(ConfigError) as info:
        load_config(cfg)
    assert info.value.key == "synth.question_examples" and expected in str(info.value)


# ---------------------------------------------------------------- round trip

WRITTEN = {  # a query per passage; p2's is about p0's passage, so its round trip fails
    "p0": "when do forklift batteries get charged",
    "p1": "what must visitors wear on site",
    "p2": "where are the forklift batteries charged at night",
    "p3": "how is the press hall cleaned",
    "p4": "printer labels come out blank",
    "p5": "how high can crates be stacked for dispatch",
}


def test_round_trip_drops_queries_the_base_model_cannot_place(
    tmp_path: Path, serve, monkeypatch
) -> None:
    monkeypatch.setenv(ENV, KEY)

    def written(n: int, body: dict, headers: dict) -> Reply:
        passage = body["messages"][-1]["content"].split(": ", 1)[1]
        pid = next(p["id"] for p in PASSAGES if p["text"] == passage)
        return 200, {}, chat_json(WRITTEN[pid]), 0.0

    server = serve(written)
    cfg = project(tmp_path, server.url, "round_trip_k = 1")
    r = synth(cfg)
    assert r.exit_code == 0, r.output
    assert sorted(q["passage_id"] for q in read_queries(tmp_path / "run")) == [
        "p0", "p1", "p3", "p4", "p5"
    ]  # fmt: skip
    done = json.loads((tmp_path / "run" / "synth.done.json").read_text())
    assert done["summary"]["removed"]["round_trip"] == 1
    assert "base_model" in done["inputs"]  # the base model now decides the stage's output


def test_round_trip_off_loads_no_model(tmp_path: Path, serve, monkeypatch) -> None:
    monkeypatch.setenv(ENV, KEY)
    server = serve(good)
    cfg = project(tmp_path, server.url)
    missing = str(tmp_path / "no-such-model")
    assert synth(cfg, f'base_model="{missing}"').exit_code == 0  # never looked at
    r = synth(cfg, f'base_model="{missing}"', "synth.round_trip_k=5")
    assert r.exit_code == 2 and "no-such-model" in r.stderr
