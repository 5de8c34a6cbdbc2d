# Developer tasks for seamline. A fresh machine needs python3 (3.11 or newer), make and node (18 or
# newer, to build the JupyterLab extension; users of the wheel need no node).
#   make demo         set up, then open JupyterLab on demo_notebooks/ (prints the URL)
#   make demo HEADLESS=1  set up, then execute the demo notebooks and write HTML copies
#   make test         set up (Debian's chromium included), then the TypeScript unit tests and the
#                     test suite on two cores, real-browser tests included
#   make bench        set up, then run the benchmark scripts (not part of make test)
#   make validate     set up, then the Monte Carlo tests over 10 seeds and the larger Monte Carlo
#                     on the published designs (minutes)
#   make mutations    set up, then check that each deliberately broken engine variant fails a test
#   make check-names  scan the repository for names reserved by other software

PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.seamline-installed

CHROMIUM := /usr/bin/chromium
# The front end's sources: editing any of them rebuilds the extension on the next make.
EXTENSION_SOURCES := $(wildcard extension/package.json extension/yarn.lock extension/.yarnrc.yml \
	extension/tsconfig.json extension/src/*.ts extension/style/*)

.PHONY: venv demo test js-test chromium bench validate mutations check-names

venv: $(STAMP)

# The stamp makes a second run instant; editing pyproject.toml or the extension reinstalls. The
# install builds the JupyterLab extension (hatch-jupyter-builder runs jlpm in extension/) and puts
# it where JupyterLab finds it.
$(STAMP): pyproject.toml $(EXTENSION_SOURCES)
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -e ".[notebook,test,dask]"
	touch $(STAMP)

# Debian's chromium for the browser tests (never a browser download); needs root or sudo.
chromium:
	@if [ ! -x $(CHROMIUM) ]; then \
		if [ "$$(id -u)" = 0 ]; then SUDO=; else SUDO=sudo; fi; \
		echo "installing Debian's chromium for the browser tests"; \
		$$SUDO apt-get update && \
		DEBIAN_FRONTEND=noninteractive $$SUDO apt-get install -y chromium fonts-dejavu-core; \
	fi

# `make demo DEMO_PORT=8888` picks the port; by default a free one, with a fresh token.
demo: venv
ifeq ($(HEADLESS),1)
	$(PY) -m seamline.notebook.run_demos
else
	@port="$${DEMO_PORT:-$$($(PY) -c "import socket; s = socket.socket(); s.bind(('127.0.0.1', 0)); print(s.getsockname()[1])")}"; \
	token="$$($(PY) -c "import secrets; print(secrets.token_hex(16))")"; \
	echo "JupyterLab with the seamline extension, on demo_notebooks/ (Ctrl+C twice to stop):"; \
	echo "    http://127.0.0.1:$$port/lab?token=$$token"; \
	if [ "$$(id -u)" = 0 ]; then root=--allow-root; else root=; fi; \
	exec $(VENV)/bin/jupyter lab --ServerApp.ip=127.0.0.1 --ServerApp.port=$$port \
		--ServerApp.port_retries=0 --IdentityProvider.token=$$token \
		--ServerApp.root_dir=demo_notebooks --LabApp.news_url=None \
		--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate $$root
endif

# Unit tests of the extension's pure TypeScript helpers (node's test runner).
js-test: venv
	cd extension && export PATH="$(abspath $(VENV))/bin:$$PATH" && \
		{ [ -d node_modules ] || jlpm install; } && jlpm test

test: venv chromium js-test
	$(PY) -m pytest -q -n 2 --dist loadgroup tests --ignore=tests/benchmarks

bench: venv
	@found=no; \
	for script in tests/benchmarks/bench_*.py; do \
		[ -e "$$script" ] || continue; \
		found=yes; \
		echo "== $$script"; \
		$(PY) "$$script" || exit 1; \
	done; \
	if [ $$found = no ]; then echo "no tests/benchmarks/bench_*.py scripts found" >&2; exit 1; fi

validate: venv
	$(PY) tests/benchmarks/validate_monte_carlo.py sweep 10
	$(PY) tests/benchmarks/validate_monte_carlo.py table
	$(PY) tests/benchmarks/validate_monte_carlo.py intervals 1000 500 2000
	$(PY) tests/benchmarks/validate_clusters.py

mutations: venv
	$(PY) tests/benchmarks/mutations.py

check-names:
	../shared/tools/check-names --repo .
