# Two commands do all set-up on a fresh machine: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: run test install front bench bench-quick clean

$(STAMP): pyproject.toml client/pyproject.toml
	@echo "installing the Python packages into $(VENV) (about 30 s, once)"
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test]' -e client/
	touch $(STAMP)

install: $(STAMP)

# The front of the API (nginx, see cli/front.py): `stifflane up` and the test stack need it.
# Installed from Debian's packages when running as root; otherwise this says how.
front:
	@if ! command -v nginx >/dev/null 2>&1 && [ ! -x /usr/sbin/nginx ]; then \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    echo "installing Debian's nginx (the API's front)"; \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq nginx-light >/dev/null; \
	  else \
	    echo "The API runs behind nginx, which is missing. Install it with:"; \
	    echo "    sudo apt-get install nginx-light"; \
	    echo "or start without it (slow clients can then stall the API): $(BIN)/stifflane up --no-front"; \
	    exit 1; \
	  fi; \
	fi

run: $(STAMP) front
	$(BIN)/stifflane up

test: $(STAMP) front
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
