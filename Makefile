# The two commands a new user needs: `make demo` (set up, fetch models, build tools, answer the demo queue)
# and `make test`. Both create .venv and install everything from this project's own files.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
JW := $(BIN)/jigwright

.PHONY: install models test tools demo eval bench clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --disable-pip-version-check --upgrade pip
	CMAKE_BUILD_PARALLEL_LEVEL=$$(nproc) $(BIN)/python -m pip install --disable-pip-version-check -e '.[test,cluster]'
	touch $(STAMP)

install: $(STAMP)

models: install
	$(JW) models fetch

test: models
	$(BIN)/python -m pytest -q

FAMILIES := $(patsubst samples/%/examples.jsonl,%,$(wildcard samples/*/examples.jsonl))

# A tool for every demo family: two builds at a time, one llama.cpp thread each, each capped at DEMO_BUDGET CPU
# minutes (a build that verifies stops early; one that does not uses its whole budget). Each build's output
# goes to build-logs/FAMILY.log; a line per family says how it ended. Kept in the tool store: a second run is a
# cache hit, and a build that produced no tool is remembered too (`jigwright build --force` retries it).
DEMO_BUDGET ?= 4
BUILD_JOBS ?= 2
tools: models
	@mkdir -p build-logs
	@echo "== building tools for $(words $(FAMILIES)) demo families, $(BUILD_JOBS) at a time, at most $(DEMO_BUDGET) CPU min each (logs in build-logs/)"
	@printf '%s\n' $(FAMILIES) | JIGWRIGHT_THREADS=1 xargs -P $(BUILD_JOBS) -I{} sh -c \
	  '$(JW) build samples/{}/examples.jsonl --budget-cpu-min $(DEMO_BUDGET) > build-logs/{}.log 2>&1 \
	   && echo "   {}: verified" || echo "   {}: no verified tool (see build-logs/{}.log)"'
	$(JW) tools list

demo: models
	$(JW) models list
	$(JW) models try coder-1.5b "In one sentence: what does a harbour master do?"
	$(JW) models try coder-0.5b "In one sentence: what does a harbour master do?"
	$(MAKE) --no-print-directory tools
	rm -f demo-answers.jsonl
	$(JW) answer samples/queue.jsonl --out demo-answers.jsonl --fallback executor --expected samples/queue_expected.jsonl

# The full comparison (about an hour here; every task result is cached, so an interrupted run resumes).
eval: tools
	$(JW) eval $(dir $(wildcard samples/*/test.jsonl)) --n 20

bench: models
	$(BIN)/python bench/sandbox_bench.py
	$(BIN)/python bench/model_speed.py
	$(BIN)/python bench/runloop_bench.py

clean:
	rm -rf $(VENV) .pytest_cache demo-answers.jsonl eval-out build-logs
