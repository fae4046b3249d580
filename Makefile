# Two commands set everything up on a fresh Debian machine:
#   make demo   run the default demo problem
#   make test   run the test suite
# Each bootstraps what it needs (Debian packages as root, .venv, the package)
# and is quick when that is already done.

PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.topo-installed
DEBS   := libsuitesparse-dev libopenblas0-pthread

.PHONY: setup system-deps demo demo-3d test lint bench clean

setup: $(STAMP)

system-deps:
	@missing=""; for p in $(DEBS); do dpkg -s $$p >/dev/null 2>&1 || missing="$$missing $$p"; done; \
	if [ -n "$$missing" ]; then \
	  if [ "$$(id -u)" = 0 ]; then \
	    echo "installing Debian packages:$$missing"; \
	    log=$$(mktemp); \
	    { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends $$missing; } >$$log 2>&1 \
	      || { cat $$log; rm -f $$log; exit 1; }; rm -f $$log; \
	  else \
	    echo "warning: Debian packages missing:$$missing (run as root, or install them); continuing"; \
	  fi; \
	fi

$(STAMP): pyproject.toml
	@$(MAKE) --no-print-directory system-deps
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	@echo "installing topo and its Python packages into $(VENV) (log: $(VENV)/install.log)"
	@$(PY) -m pip install -q --upgrade pip >$(VENV)/install.log 2>&1 || { cat $(VENV)/install.log; exit 1; }
	@$(PY) -m pip install -q -e ".[test]" >>$(VENV)/install.log 2>&1 || { cat $(VENV)/install.log; exit 1; }
	@touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/topo run problems/bracket-2d.toml

demo-3d: $(STAMP)
	$(VENV)/bin/topo run problems/bracket-3d.toml

test: $(STAMP)
	$(PY) -m pytest -q

lint: $(STAMP)
	$(VENV)/bin/ruff check topo tests
	$(VENV)/bin/ruff format --check topo tests

bench: $(STAMP)
	$(VENV)/bin/topo bench --quick

clean:
	rm -rf $(VENV) build *.egg-info
