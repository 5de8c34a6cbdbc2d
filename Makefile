# Developer tasks for seamline. A fresh machine needs only python3 (3.11 or newer) and make.
#   make demo         set up, then run the invented demo scenarios
#   make test         set up, then run the test suite on two cores
#   make bench        set up, then run the benchmark scripts (not part of make test)
#   make check-names  scan the repository for names reserved by other software

PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.seamline-installed

.PHONY: venv demo test bench check-names

venv: $(STAMP)

# The stamp makes a second run instant; editing pyproject.toml triggers a reinstall.
$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -e ".[notebook,test]"
	touch $(STAMP)

demo: venv
	$(PY) -m seamline.demo

test: venv
	$(PY) -m pytest -q -n 2 tests --ignore=tests/benchmarks

bench: venv
	@found=no; \
	for script in tests/benchmarks/bench_*.py; do \
		[ -e "$$script" ] || continue; \
		found=yes; \
		echo "== $$script"; \
		$(PY) "$$script" || exit 1; \
	done; \
	if [ $$found = no ]; then echo "no tests/benchmarks/bench_*.py scripts found" >&2; exit 1; fi

check-names:
	../shared/tools/check-names --repo .
