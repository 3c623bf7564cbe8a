# The two commands a new user needs: `make demo` (set up, fetch models, build tools, answer the demo queue)
# and `make test`. Both create .venv and install everything from this project's own files.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
JW := $(BIN)/jigwright

.PHONY: install models test demo eval bench clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --disable-pip-version-check --upgrade pip
	CMAKE_BUILD_PARALLEL_LEVEL=$$(nproc) $(BIN)/python -m pip install --disable-pip-version-check -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

models: install
	$(JW) models fetch

test: models
	$(BIN)/python -m pytest -q

demo: models
	$(JW) models list
	$(JW) models prompt coder-1.5b "In one sentence: what does a harbour master do?"
	$(JW) models prompt coder-0.5b "In one sentence: what does a harbour master do?"

eval: models
	$(JW) eval $(dir $(wildcard samples/*/test.jsonl)) --n 20

bench: models
	$(BIN)/python bench/sandbox_bench.py
	$(BIN)/python bench/model_speed.py

clean:
	rm -rf $(VENV) .pytest_cache
