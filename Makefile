# pacewire: `make demo`, `make test`, `make bench`; each creates .venv if missing.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: test bench demo venv clean schema

venv: $(STAMP)

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest $(PYTEST_ARGS)

bench: $(STAMP)
	$(PY) -m tests.bench.run $(if $(QUICK),--quick,)

demo: $(STAMP)
	$(PY) -m pacewire demo

schema: $(STAMP)
	$(PY) -m pacewire.wire.schema --out docs/schema

clean:
	rm -rf $(VENV) bench-results.json
