# Two commands do all set-up on a fresh machine: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: run test install bench bench-quick clean

$(STAMP): pyproject.toml client/pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test]' -e client/
	touch $(STAMP)

install: $(STAMP)

run: $(STAMP)
	$(BIN)/stifflane up

test: $(STAMP)
	$(BIN)/stifflane warm
	$(BIN)/python -m pytest

BENCH_STAMP := $(VENV)/.installed-bench

$(BENCH_STAMP): $(STAMP)
	$(BIN)/pip install --quiet -e '.[test,bench]' -e client/ || echo "some peers failed to install; the suite reports them as unavailable"
	touch $(BENCH_STAMP)

bench: $(BENCH_STAMP)
	$(BIN)/python -m bench.run --full

bench-quick: $(BENCH_STAMP)
	$(BIN)/python -m bench.run --quick

clean:
	rm -rf $(VENV) var .pytest_cache
